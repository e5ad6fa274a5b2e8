"""The CSV reader is total: whatever the bytes, a file is imported or refused
with a message naming the file, the row and the column (or the line), and
nothing of a refused file is written.

Outside sources named beside the checks:
- RFC 4180 (CSV), section 2: a field holding a line break, a comma or a double
  quote is enclosed in double quotes, and a double quote inside it is doubled;
  records end in CRLF (LF is accepted by common practice).
- The Unicode standard: U+FEFF is the byte-order mark (ZERO WIDTH NO-BREAK
  SPACE), a format character (general category Cf) with no visible glyph.
- IEEE 754 double precision reaches about 1.8e308 (``sys.float_info.max``).
"""

import sys

import pytest

from fleet.csvio import CsvImportError, detect_kind
from fleet.models import GearModel, Location, Unit
from front.workflows import import_csv
from fleet import values as V
from tests.test_csv_import import GEAR_MODELS, LOCATIONS, POSITIONS, UNITS, counts, import_fleet_files, write


@pytest.fixture
def fleet(db, tmp_path):
    return import_fleet_files(tmp_path)


def refused(path, *fragments):
    with pytest.raises(CsvImportError) as info:
        import_csv(path)
    text = "\n".join(info.value.errors)
    for fragment in fragments:
        assert fragment in text, f"{fragment!r} not in:\n{text}"
    return info.value


# --- numbers beyond any float --------------------------------------------------------------

@pytest.mark.parametrize("text", ["1e999999999", "1e1000000", "1e400", "-1e999999999", "9" * 400])
def test_whole_numbers_far_beyond_any_float_are_refused_at_once(text):
    with pytest.raises(ValueError) as info:
        V.parse_whole_number(text, "year made")
    assert str(info.value) in (f"year made: '{text}' is out of range.",
                               f"year made: '{V.excerpt(text)}' is too long to be a whole number.")


def test_numbers_beyond_any_float_give_a_message_not_an_overflow():
    assert sys.float_info.max < 1e309  # IEEE 754 double: about 1.8e308
    with pytest.raises(ValueError, match=r"rated voltage: '1e999999 M' is out of range"):
        V.parse_number("1e999999 M", "rated voltage", "V")
    with pytest.raises(ValueError, match=r"'1e999999F' is out of range for a capacitance"):
        V.parse_capacitance_uf("1e999999F")
    with pytest.raises(ValueError, match=r"'1e-999999p' is out of range for a capacitance"):
        V.parse_capacitance_uf("1e-999999p")
    with pytest.raises(ValueError, match=r"'1e999999999' is out of range for a temperature"):
        V.parse_temperature_c("1e999999999")
    with pytest.raises(ValueError, match=r"ripple: '1e309' is out of range"):
        V.parse_number("1e309", "ripple")  # within the decimal guard, beyond a float
    # Ordinary values are untouched by the guards.
    assert V.parse_number("1e3", "x") == 1000.0 and V.parse_whole_number("1978.0", "y") == 1978


def test_cells_out_of_range_name_the_row_and_column(db, tmp_path):
    import_csv(write(tmp_path, "locations.csv", LOCATIONS))
    text = GEAR_MODELS.replace(",1979,1984,12,", ",1e999999999,1984,1e999999 M,")
    refused(write(tmp_path, "gm.csv", text),
            "gm.csv, row 2, column year_from: '1e999999999' is out of range.",
            "gm.csv, row 2, column internal_rise_k: '1e999999 M' is out of range.")
    samples = "location,taken_at,temp_c\nLogger Room,9999-12-31T23:59:59-05:00,12\nLogger Room,0001-01-01 00:00,12\n"
    refused(write(tmp_path, "s.csv", samples),
            "s.csv, row 2, column taken_at: '9999-12-31T23:59:59-05:00' is outside the years 1900-2100",
            "s.csv, row 3, column taken_at: '0001-01-01 00:00' is outside the years 1900-2100")
    assert GearModel.objects.count() == 0


def test_a_capacitance_beyond_any_float_is_refused_in_its_row(db, tmp_path):
    import_csv(write(tmp_path, "locations.csv", LOCATIONS))
    import_csv(write(tmp_path, "gear_models.csv", GEAR_MODELS))
    text = POSITIONS.replace(",C20,signal_coupling,4u7,", ",C20,signal_coupling,1e999999F,")
    refused(write(tmp_path, "p.csv", text), "p.csv, row 5, column capacitance: '1e999999F' is out of range")


def test_a_date_at_the_ends_of_the_calendar_is_refused(fleet, tmp_path):
    text = UNITS.replace("1981,2019-03-01", "1981,9999-12-31").replace("1982,2020-06-15", "1982,0001-01-01")
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 2, column joined_on: '9999-12-31' is outside the years 1900-2100",
            "units.csv, row 3, column joined_on: '0001-01-01' is outside the years 1900-2100")


def test_a_value_cell_longer_than_any_value_is_refused(fleet, tmp_path):
    text = UNITS.replace("N4-10233", "7" * 5000)
    refused(write(tmp_path, "units.csv", text), "units.csv, row 2, column serial: the cell holds 5,000 characters")


# --- characters that are not text ----------------------------------------------------------

def test_a_nul_byte_in_any_cell_is_refused_with_its_row_and_column(fleet, tmp_path):
    before = counts()
    text = UNITS.replace("N4-10233", "N4-\x0010233").replace("Crackles on left input", "Crackles\x00")
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 2, column serial: the cell holds a NUL character (a zero byte)",
            "units.csv, row 3, column notes: the cell holds a NUL character")
    text = LOCATIONS.replace("Main Store", "Main\x00Store")
    refused(write(tmp_path, "locations.csv", text), "locations.csv, row 2, column name: the cell holds a NUL")
    assert counts() == before


def test_a_byte_order_mark_inside_the_header_is_named(db, tmp_path):
    # The Unicode standard: U+FEFF is a format character (Cf) with no visible glyph.  One at the very start
    # of the file is a byte-order mark and is allowed; one inside the header is part of a column name.
    text = "name,\ufeffkind,profile,constant_temp_c,monthly_temps_c,notes\nVan,bench,constant,21,,\n"
    refused(write(tmp_path, "loc.csv", text),
            "loc.csv, row 1: column 2 of the header ('?kind') holds a byte-order mark, U+FEFF, which cannot be "
            "seen but is part of the name")
    # Two files joined: the second one's mark ends up before its first column name on a later line.
    text = "\ufeff\ufeffname,kind,profile,constant_temp_c,monthly_temps_c,notes\nVan,bench,constant,21,,\n"
    refused(write(tmp_path, "loc.csv", text), "column 1 of the header ('?name') holds a byte-order mark")
    with pytest.raises(CsvImportError, match="holds a byte-order mark"):
        detect_kind(write(tmp_path, "loc.csv", text))
    assert Location.objects.count() == 0


# --- quotes ---------------------------------------------------------------------------------

def test_a_stray_opening_quote_in_the_last_column_is_refused_where_it_opened(fleet, tmp_path):
    """RFC 4180: a double quote opens a quoted field that runs to the next lone double quote.  A quote
    that is never closed made the rest of the file one unit's notes and reported '1 row: 1 updated'."""
    before = counts()
    more = "".join(f"NB-01{k:02d},N4-2{k:04d},Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,,,,,,\n"
                   for k in range(5))
    text = UNITS.replace(",Crackles on left input", ',"Crackles on left input') + more
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 3, column notes: a double quote opens this cell on line 3 and is never closed, "
            "so lines 4-9 (the rest of the file) were read into this one cell.")
    assert counts() == before
    assert Unit.objects.get(asset_tag="NB-0002").notes == "Crackles on left input"


def test_a_stray_quote_closed_by_a_later_one_is_refused_naming_the_swallowed_rows(fleet, tmp_path):
    text = UNITS.replace(",Crackles on left input", ',"Crackles on left input')
    text += 'NB-0100,N4-1,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,,,,,,"Hums, a little"\n'
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 3, column notes: a double quote opens this cell on line 3 and closes only on line 5, "
            "so lines 4-5, which look like rows of their own, became part of this cell.")


def test_an_unbalanced_quote_in_the_middle_of_a_row_says_where_it_opened(fleet, tmp_path):
    text = UNITS.replace("NB-0002,N4-10577,", 'NB-0002,"N4-10577,')
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 3, column serial: a double quote opens this cell on line 3")


def test_a_quoted_note_over_several_lines_is_still_read(fleet, tmp_path):
    """RFC 4180 section 2, rule 6: a quoted field may hold line breaks."""
    text = UNITS.replace(",Crackles on left input", ',"Crackles on left input,\nhums when warm, ""bad"""')
    report = import_csv(write(tmp_path, "units.csv", text))
    assert report.updated == 1
    assert Unit.objects.get(asset_tag="NB-0002").notes == 'Crackles on left input,\nhums when warm, "bad"'


def test_a_row_with_a_comma_too_many_says_to_quote_the_cell(fleet, tmp_path):
    text = UNITS.replace("Crackles on left input", "Crackles, left input")
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 3: the row has 14 cells, but the header has 13 columns: a cell that holds a comma "
            'must be put in double quotes ("Cold Annex, North")')


# --- line endings -----------------------------------------------------------------------------

def test_bare_carriage_return_line_endings_are_named_in_plain_words(db, tmp_path):
    text = LOCATIONS.replace("\n", "\r")
    message = "the lines of this file end in a bare carriage return (CR), as some old spreadsheets save them"
    refused(write(tmp_path, "loc.csv", text), "loc.csv, line 1: " + message)
    with pytest.raises(CsvImportError, match=r"bare carriage return"):
        detect_kind(write(tmp_path, "loc.csv", text))
    # A file too long to be one line says the same.
    big = ("name,kind,profile,constant_temp_c,monthly_temps_c,notes\r"
           + "".join(f"Store {k},store,constant,18,,\r" for k in range(40000)))
    refused(write(tmp_path, "big.csv", big), "big.csv, line 1: " + message)
    assert Location.objects.count() == 0


def test_a_lone_carriage_return_inside_a_cell_is_named(db, tmp_path):
    text = LOCATIONS.replace("Racks A-F", "Racks\rA-F")
    refused(write(tmp_path, "loc.csv", text),
            "loc.csv, line 2: a carriage return (CR) stands alone inside a cell that is not in double quotes")


# --- spreadsheet formulas -----------------------------------------------------------------------

FORMULAS = ["=HYPERLINK(\"http://example.invalid\")", "+1+1", "-2+3+cmd|' /C calc'!A0", "@SUM(A1)",
            "\tTabbed", "'=already quoted", "''+twice", "'plain quote", "a=b"]


def test_export_neutralises_formulas_and_import_reads_them_back_exactly(fleet, tmp_path):
    """OWASP "CSV Injection": a cell beginning with =, +, -, @, tab or CR may run as a formula in a
    spreadsheet; a leading single quote makes it text.  Export then import must still round-trip."""
    import csv
    import io

    from fleet.csvio import export_csv

    units = list(Unit.objects.order_by("asset_tag"))
    for unit, note in zip(units, FORMULAS):
        unit.notes = note
        unit.save(update_fields=["notes"])
    Location.objects.filter(name="Main Store").update(name="=Main Store", notes="@home")
    out = io.StringIO()
    export_csv("units", out)
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    exported = {r["asset_tag"]: (r["notes"], r["home_location"]) for r in rows}
    for unit, note in zip(units, FORMULAS):
        cell = exported[unit.asset_tag][0]
        dangerous = cell[:1] in ("=", "+", "-", "@", "\t", "\r")
        assert not dangerous, cell
        assert cell == ("'" + note if note.lstrip("'")[:1] in "=+-@\t" else note)
    assert "'=Main Store" in {v[1] for v in exported.values()}
    out_loc = io.StringIO()
    export_csv("locations", out_loc)
    assert "'@home" in out_loc.getvalue() and "'=Main Store" in out_loc.getvalue()
    # Read back: nothing changes.
    write(tmp_path, "locations.csv", out_loc.getvalue())
    write(tmp_path, "units.csv", out.getvalue())
    assert import_csv(tmp_path / "locations.csv").unchanged == 3
    assert import_csv(tmp_path / "units.csv").unchanged == 3
    assert [u.notes for u in Unit.objects.order_by("asset_tag")] == FORMULAS[:3]
    assert Location.objects.filter(name="=Main Store", notes="@home").exists()


def test_the_due_list_csv_neutralises_formulas(fleet, capsys):
    from django.core.management import call_command

    Location.objects.filter(name="Main Store").update(name="=cmd|' /C calc'!A0")
    Unit.objects.update(year_made=1960)  # original parts past the age limit: every unit is due
    call_command("due_list", "--csv", "--within", "36500")
    text = capsys.readouterr().out
    assert "'=cmd|" in text
    assert ",=cmd" not in text
