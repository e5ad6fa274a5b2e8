"""CSV import and export of the fleet register (fleet/csvio.py, import_fleet, export_fleet).

All makers, models and parts here are invented.  Outside sources named beside the checks:
- IEC 60062 letter-and-digit code for capacitance (references.md section 8 [V]).
- RFC 4180 (CSV): fields with commas, quotes or line breaks are enclosed in double quotes and
  a double quote inside is written twice (section 2, rules 6 and 7).
- ISO 8601 date-times and the IANA time-zone database for Europe/London (UK summer time
  ends on the last Sunday of October at 02:00 BST, so 01:00-02:00 local happens twice).
"""

import csv
import datetime as dt
import io
from pathlib import Path

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.core.management import CommandError, call_command

from fleet import csvio
from fleet.csvio import CsvImportError, export_csv
from front.workflows import import_csv
from fleet.models import GearModel, Location, Position, TemperatureSample, Unit, UnitCapacitor
from scheduling.models import ThermalHistory

LOCATIONS = """\
name,kind,profile,constant_temp_c,monthly_temps_c,notes
Main Store,store,constant,18,,Racks A-F
Studio B,studio,monthly,,4;5;8;11;15;18;21;20;16;12;8;5,"Warm in summer, cold in winter"
Logger Room,store,samples,19 °C,,
"""

SAMPLES = """\
location,taken_at,temp_c
Logger Room,2024-01-15T08:00:00Z,12.5
Logger Room,2024-07-15T08:00:00+01:00,24
Logger Room,2024-07-16 09:00,23.5 degC
"""

GEAR_MODELS = """\
maker,model_name,category,year_from,year_to,internal_rise_k,powered_hours_per_day,mains_voltage_v,\
hazard_mains,hazard_tube_hv,hazard_smps,notes
Brindle Acoustics,Nimbus 4,effects,1979,1984,12,8,230,yes,no,no,Stereo spring-free reverb
Orrery Instruments,Tidewell 12,mixer,1975,1980,8 K,10,230 V,yes,no,no,
"""

POSITIONS_HEADER = (
    "maker,model_name,designator,role,capacitance,rated_voltage_v,rated_temp_c,rated_life_h,esr_ohm,tan_delta,"
    "diameter_mm,length_mm,mount,ripple_current_a,ripple_freq_hz,operating_voltage_v,pump_partner,pump_input_v,"
    "pump_load_a,pump_freq_hz,pump_switch_ohm,pump_min_rail_v,coupling_load_ohm,coupling_max_corner_hz,"
    "reservoir_load_a,reservoir_ripple_freq_hz,reservoir_ripple_limit_v"
)
POSITIONS = POSITIONS_HEADER + """
Brindle Acoustics,Nimbus 4,C1,supply_reservoir,2200 uF,35,85,2000,0.05,,16,31.5,radial,1.2,100,24,,,,,,,,,0.8,100,1.5
Brindle Acoustics,Nimbus 4,C7,pump_flying,10u,16,85,1000,,0.2,5,11,radial,,,,C8,5,0.01,5000,80,4,,,,,
Brindle Acoustics,Nimbus 4,C8,pump_reservoir,10u,16,85 °C,1000,,0.2,5,11,radial,,,,C7,5,0.01,5000,80,4,,,,,
Brindle Acoustics,Nimbus 4,C20,signal_coupling,4u7,50,105,2000,,0.15,5,11,radial,,,,,,,,,,10k,20,,,
Orrery Instruments,Tidewell 12,C3,general,47 µF,25,85,1000,0.9,,6.3,11,axial,,,12,,,,,,,,,,,
"""

UNITS = """\
asset_tag,serial,maker,model_name,year_made,joined_on,home_location,status,hour_meter_h,\
prior_powered_h_per_year,prior_ambient_c,prior_storage_c,notes
NB-0001,N4-10233,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,available,,300,25,20,
NB-0002,N4-10577,Brindle Acoustics,Nimbus 4,1982,2020-06-15,Studio B,bench,1520.5,200,27,18,Crackles on left input
OT-0001,,Orrery Instruments,Tidewell 12,1977,2018-11-20,Logger Room,,,,,,
"""

FLEET = {
    "locations.csv": LOCATIONS,
    "temperature_samples.csv": SAMPLES,
    "gear_models.csv": GEAR_MODELS,
    "positions.csv": POSITIONS,
    "units.csv": UNITS,
}
FLEET_MODELS = (Location, TemperatureSample, GearModel, Position, Unit, UnitCapacitor, ThermalHistory)


def write(tmp_path, name, text, encoding="utf-8"):
    path = Path(tmp_path) / name
    path.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return path


def counts():
    return {m.__name__: m.objects.count() for m in FLEET_MODELS}


def import_fleet_files(tmp_path, files=FLEET):
    return [import_csv(write(tmp_path, name, text)) for name, text in files.items()]


@pytest.fixture
def fleet(db, tmp_path):
    """A small invented fleet: three locations, two gear models, five positions, three units."""
    return import_fleet_files(tmp_path)


def refused(path_or_file, *fragments, **kwargs):
    """Import, expect a refusal, check every fragment appears in one message; return the errors."""
    with pytest.raises(CsvImportError) as info:
        import_csv(path_or_file, **kwargs)
    text = "\n".join(info.value.errors)
    for fragment in fragments:
        assert fragment in text, f"{fragment!r} not in:\n{text}"
    return info.value


# --- a good import ----------------------------------------------------------------------

def test_imports_a_small_fleet(fleet):
    kinds = [r.kind for r in fleet]
    assert kinds == ["locations", "temperature_samples", "gear_models", "positions", "units"]
    assert [(r.rows, r.created, r.updated, r.unchanged) for r in fleet] == [
        (3, 3, 0, 0), (3, 3, 0, 0), (2, 2, 0, 0), (5, 5, 0, 0), (3, 3, 0, 0),
    ]
    assert counts() == {"Location": 3, "TemperatureSample": 3, "GearModel": 2, "Position": 5, "Unit": 3,
                        "UnitCapacitor": 4 + 4 + 1, "ThermalHistory": 3}
    units = fleet[-1]
    assert units.capacitors_fitted == 9 and units.histories_started == 3
    assert units.summary() == ("units.csv (units): 3 rows: 3 created, 0 updated, 0 unchanged; "
                               "9 capacitor rows fitted, 3 thermal histories started.")


def test_values_are_read_as_written(fleet):
    studio = Location.objects.get(name="Studio B")
    assert studio.monthly_temps_c == [4, 5, 8, 11, 15, 18, 21, 20, 16, 12, 8, 5]
    assert studio.notes == "Warm in summer, cold in winter"
    assert Location.objects.get(name="Logger Room").constant_temp_c == 19.0
    c1 = Position.objects.get(designator="C1")
    # IEC 60062 / engineering notation: 2200 uF, 10u = 10 uF, 4u7 = 4.7 uF, 47 µF = 47 uF.
    assert c1.capacitance_uf == 2200.0
    assert {p.designator: p.capacitance_uf for p in Position.objects.all()} == {
        "C1": 2200.0, "C7": 10.0, "C8": 10.0, "C20": 4.7, "C3": 47.0,
    }
    assert Position.objects.get(designator="C20").coupling_load_ohm == 10_000.0
    assert Position.objects.get(designator="C7").pump_partner == "C8"
    tidewell = GearModel.objects.get(model_name="Tidewell 12")
    assert (tidewell.internal_rise_k, tidewell.mains_voltage_v, tidewell.hazard_mains) == (8.0, 230.0, True)
    ot = Unit.objects.get(asset_tag="OT-0001")
    # Empty cells take the model's defaults.
    assert (ot.status, ot.serial, ot.hour_meter_h, ot.prior_powered_h_per_year, ot.prior_ambient_c) == (
        "available", "", None, 300.0, 25.0)
    nb2 = Unit.objects.get(asset_tag="NB-0002")
    assert (nb2.status, nb2.hour_meter_h, nb2.home_location.name) == ("bench", 1520.5, "Studio B")
    assert nb2.joined_on == dt.date(2020, 6, 15)
    fitted = UnitCapacitor.objects.get(unit=nb2, position__designator="C1")
    assert (fitted.capacitance_uf, fitted.rated_life_h, fitted.is_original) == (2200.0, 2000.0, True)


def test_sample_times_follow_iso_8601_and_local_time_for_naive_ones(fleet):
    times = sorted(TemperatureSample.objects.values_list("taken_at", flat=True))
    utc = dt.timezone.utc
    # ISO 8601: 'Z' is UTC, '+01:00' one hour ahead of UTC.  A time with no offset is local time
    # (TIME_ZONE Europe/London): in July the IANA tz database gives BST = UTC+1.
    assert times == [
        dt.datetime(2024, 1, 15, 8, 0, tzinfo=utc),
        dt.datetime(2024, 7, 15, 7, 0, tzinfo=utc),
        dt.datetime(2024, 7, 16, 8, 0, tzinfo=utc),
    ]


def test_naive_time_in_the_autumn_clock_change_is_refused(db, tmp_path):
    import_csv(write(tmp_path, "locations.csv", LOCATIONS))
    # IANA tz database, Europe/London: BST ends 2024-10-27 02:00 BST -> 01:00 GMT, so 01:30 happens twice.
    path = write(tmp_path, "s.csv", "location,taken_at,temp_c\nLogger Room,2024-10-27 01:30,12\n")
    refused(path, "s.csv, row 2, column taken_at: '2024-10-27 01:30' falls in a clock change in Europe/London: "
                  "add the UTC offset")
    # Spring: BST starts 2024-03-31 01:00 GMT -> 02:00 BST, so 01:30 local never happens.
    path = write(tmp_path, "s.csv", "location,taken_at,temp_c\nLogger Room,2024-03-31 01:30,12\n")
    refused(path, "s.csv, row 2, column taken_at: '2024-03-31 01:30' falls in a clock change")
    path = write(tmp_path, "s.csv", "location,taken_at,temp_c\nLogger Room,2024-10-27T01:30+01:00,12\n")
    import_csv(path)
    assert TemperatureSample.objects.get().taken_at == dt.datetime(2024, 10, 27, 0, 30, tzinfo=dt.timezone.utc)


def test_columns_may_come_in_any_order_with_a_byte_order_mark(db, tmp_path):
    text = "\ufeffnotes,constant_temp_c,name,profile,monthly_temps_c,kind\r\n,21,Van,constant,,bench\r\n"
    report = import_csv(write(tmp_path, "loc.csv", text))
    assert report.kind == "locations"
    assert Location.objects.get(name="Van").constant_temp_c == 21.0


def test_blank_rows_are_skipped(db, tmp_path):
    text = LOCATIONS.replace("\nStudio B", "\n,,,,,\n\nStudio B") + "\n,,,,,\n"
    report = import_csv(write(tmp_path, "locations.csv", text))
    assert (report.rows, report.created) == (3, 3)


def test_an_uploaded_file_object_is_imported(db):
    upload = SimpleUploadedFile("my locations.csv", LOCATIONS.encode("utf-8"), content_type="text/csv")
    report = import_csv(upload, name=upload.name)
    assert report.name == "my locations.csv" and report.created == 3
    report = import_csv(io.StringIO(LOCATIONS), name="pasted")
    assert (report.name, report.unchanged) == ("pasted", 3)


def test_dry_run_counts_but_writes_nothing(db, tmp_path):
    report = import_csv(write(tmp_path, "locations.csv", LOCATIONS), dry_run=True)
    assert (report.created, report.dry_run) == (3, True)
    assert report.summary().endswith("(dry run: nothing was saved).")
    assert Location.objects.count() == 0


# --- upserts ------------------------------------------------------------------------------

def test_importing_the_same_files_again_changes_nothing(fleet, tmp_path):
    before = {m.__name__: list(m.objects.order_by("pk").values()) for m in FLEET_MODELS
              if m is not ThermalHistory}
    histories = list(ThermalHistory.objects.order_by("pk").values_list("unit_id", "powered", "unpowered",
                                                                        "accounted_until"))
    (tmp_path / "again").mkdir()
    again = import_fleet_files(tmp_path / "again")
    assert [(r.created, r.updated, r.unchanged) for r in again] == [
        (0, 0, 3), (0, 0, 3), (0, 0, 2), (0, 0, 5), (0, 0, 3),
    ]
    assert again[-1].summary() == "units.csv (units): 3 rows: 0 created, 0 updated, 3 unchanged."
    after = {m.__name__: list(m.objects.order_by("pk").values()) for m in FLEET_MODELS if m is not ThermalHistory}
    assert after == before
    assert list(ThermalHistory.objects.order_by("pk").values_list(
        "unit_id", "powered", "unpowered", "accounted_until")) == histories


def test_a_changed_row_is_updated_in_place(fleet, tmp_path):
    text = UNITS.replace("NB-0001,N4-10233,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,available,,",
                         "NB-0001,N4-10233,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Studio B,hold,12,")
    pk = Unit.objects.get(asset_tag="NB-0001").pk
    report = import_csv(write(tmp_path, "units.csv", text))
    assert (report.created, report.updated, report.unchanged) == (0, 1, 2)
    unit = Unit.objects.get(asset_tag="NB-0001")
    # The status belongs to the desk and stays; a first meter reading is taken.
    assert (unit.pk, unit.home_location.name, unit.status, unit.hour_meter_h) == (pk, "Studio B", "available", 12.0)
    assert report.histories_rebuilt == 0  # storage place and meter are not prior use
    assert UnitCapacitor.objects.filter(unit=unit).count() == 4


def test_changing_a_positions_ratings_leaves_fitted_capacitors_alone(fleet, tmp_path):
    text = POSITIONS.replace("C1,supply_reservoir,2200 uF,35,85,2000", "C1,supply_reservoir,3300 uF,35,105,5000")
    text += "Brindle Acoustics,Nimbus 4,C21,general,1u,50,85,1000,2.5,,5,11,radial,,,,,,,,,,,,,,\n"
    report = import_csv(write(tmp_path, "positions.csv", text))
    assert (report.created, report.updated, report.unchanged) == (1, 1, 4)
    assert "capacitors already fitted in units keep their ratings" in report.summary()
    assert "those units were not given the new positions" in report.summary()
    c1 = Position.objects.get(designator="C1")
    assert (c1.capacitance_uf, c1.rated_temp_c, c1.rated_life_h) == (3300.0, 105.0, 5000.0)
    fitted = set(UnitCapacitor.objects.filter(position=c1).values_list("capacitance_uf", "rated_temp_c",
                                                                       "rated_life_h"))
    assert fitted == {(2200.0, 85.0, 2000.0)}
    assert not UnitCapacitor.objects.filter(position__designator="C21").exists()


def test_a_change_of_prior_use_rebuilds_that_units_thermal_history(fleet, tmp_path):
    before = dict(ThermalHistory.objects.values_list("unit__asset_tag", "unpowered"))
    text = UNITS.replace("Main Store,available,,300,25,20", "Main Store,available,,300,25,30")
    report = import_csv(write(tmp_path, "units.csv", text))
    assert (report.updated, report.histories_rebuilt) == (1, 1)
    after = dict(ThermalHistory.objects.values_list("unit__asset_tag", "unpowered"))
    assert after["NB-0001"] != before["NB-0001"]
    assert after["NB-0002"] == before["NB-0002"]


def test_a_change_of_internal_rise_rebuilds_the_models_units(fleet, tmp_path):
    text = GEAR_MODELS.replace("effects,1979,1984,12,", "effects,1979,1984,15,")
    report = import_csv(write(tmp_path, "gear_models.csv", text))
    assert (report.updated, report.unchanged, report.histories_rebuilt) == (1, 1, 2)


# --- export and round trip ------------------------------------------------------------------

def export_all():
    out = {}
    for kind in csvio.IMPORT_ORDER:
        buf = io.StringIO()
        export_csv(kind, buf)
        out[kind] = buf.getvalue()
    return out


def wipe():
    Unit.objects.all().delete()  # with their capacitors and thermal histories
    Position.objects.all().delete()
    GearModel.objects.all().delete()
    TemperatureSample.objects.all().delete()
    Location.objects.all().delete()


AWKWARD_POSITION = ("Brindle Acoustics,Nimbus 4,C30,general,0.1 uF,63,85,1000,1234.56789,,5,11,smd,"
                    "0.001,1.5 kHz,6.25,,,,,,,,,,,\n"
                    "Brindle Acoustics,Nimbus 4,C31,timing,470n,50,125,4000,,0.3333333333333333,4,7,axial,"
                    ",,,,,,,,,,,,,\n")
AWKWARD_LOCATION = '"Cold ""Annex"", North",bench,constant,-12.25,,"Line one\nline two, with µ and é"\n'


def test_export_then_import_into_an_empty_register_gives_the_same_records(fleet, tmp_path):
    import_csv(write(tmp_path, "positions.csv", POSITIONS + AWKWARD_POSITION))
    import_csv(write(tmp_path, "locations.csv", LOCATIONS + AWKWARD_LOCATION))
    first = export_all()
    values = {m.__name__: sorted(tuple(v for k, v in row.items() if not k.endswith("id"))
                                 for row in m.objects.values()) for m in (Location, TemperatureSample,
                                                                          GearModel, Position)}
    unit_values = sorted(Unit.objects.values_list("asset_tag", "serial", "year_made", "joined_on", "status",
                                                  "hour_meter_h", "prior_powered_h_per_year", "prior_ambient_c",
                                                  "prior_storage_c", "notes", "gear_model__model_name",
                                                  "home_location__name"))
    assert ",470n," in first["positions"] and ",2200u," in first["positions"]  # IEC 60062 codes
    wipe()
    assert sum(counts().values()) == 0
    for kind in csvio.IMPORT_ORDER:
        report = import_csv(write(tmp_path, f"{kind}.csv", first[kind]))
        assert report.created == report.rows
    again = {m.__name__: sorted(tuple(v for k, v in row.items() if not k.endswith("id"))
                                for row in m.objects.values()) for m in (Location, TemperatureSample,
                                                                         GearModel, Position)}
    assert again == values  # floats compared exactly
    assert sorted(Unit.objects.values_list("asset_tag", "serial", "year_made", "joined_on", "status",
                                           "hour_meter_h", "prior_powered_h_per_year", "prior_ambient_c",
                                           "prior_storage_c", "notes", "gear_model__model_name",
                                           "home_location__name")) == unit_values
    assert export_all() == first
    # Capacitor rows are re-created from the templates: two Nimbus 4 units x 6 positions + one Tidewell 12 x 1.
    assert counts()["UnitCapacitor"] == 2 * 6 + 1


def test_export_is_rfc_4180_csv(fleet, tmp_path):
    import_csv(write(tmp_path, "locations.csv", LOCATIONS + AWKWARD_LOCATION))
    buf = io.StringIO()
    assert export_csv("locations", buf) == 4
    text = buf.getvalue()
    # RFC 4180 section 2, rules 6-7: a field with a comma, quote or line break is quoted, and a quote
    # inside it is written twice.
    assert '\n"Cold ""Annex"", North",bench,constant,-12.25,,"Line one\nline two, with µ and é"\n' in text
    assert text.splitlines()[0] == ",".join(csvio.KINDS["locations"])
    assert "Studio B,studio,monthly,,4;5;8;11;15;18;21;20;16;12;8;5," in text


def test_export_writes_to_binary_files_and_paths(fleet, tmp_path):
    raw = io.BytesIO()
    export_csv("units", raw)
    assert raw.getvalue().decode("utf-8").startswith("asset_tag,serial,maker")
    export_csv("units", tmp_path / "u.csv")
    assert (tmp_path / "u.csv").read_bytes() == raw.getvalue()
    with pytest.raises(ValueError, match="Unknown kind 'rentals'"):
        export_csv("rentals", io.StringIO())


# --- refusals: each names file, row and column, and writes nothing ----------------------------

@pytest.fixture
def base(db, tmp_path):
    """Locations and gear models in place, nothing else."""
    import_fleet_files(tmp_path, {k: FLEET[k] for k in ("locations.csv", "gear_models.csv")})
    return counts()


def test_five_good_rows_and_one_bad_write_nothing(base, tmp_path):
    rows = [f"NB-{i:04d},S{i},Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,available,,,,," for i in range(5)]
    rows.insert(3, "NB-0999,S9,Brindle Acoustics,Nimbus 4,19x1,2019-03-01,Main Store,available,,,,,")
    path = write(tmp_path, "units.csv", UNITS.splitlines()[0] + "\n" + "\n".join(rows) + "\n")
    error = refused(path, "units.csv, row 5, column year_made: '19x1' is not a whole number.")
    assert error.total == 1
    assert counts() == base


def test_a_bad_row_in_a_later_batch_rolls_back_the_batches_already_written(base, tmp_path, monkeypatch):
    monkeypatch.setattr(csvio.importer, "BATCH_SIZE", 2)
    rows = [f"NB-{i:04d},,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,,,,,," for i in range(7)]
    rows.append("NB-0100,,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Nowhere,,,,,,")
    path = write(tmp_path, "units.csv", UNITS.splitlines()[0] + "\n" + "\n".join(rows) + "\n")
    import_csv(write(tmp_path, "positions.csv", POSITIONS))
    base = counts()
    refused(path, "units.csv, row 9, column home_location: unknown location 'Nowhere'")
    assert counts() == base


def test_not_utf8_names_the_file_line_and_byte_offset(base, tmp_path):
    text = LOCATIONS.encode("utf-8") + "Caf\u00e9 Store,store,constant,18,,\n".encode("latin-1")
    offset = len(LOCATIONS.encode("utf-8")) + len(b"Caf")
    refused(write(tmp_path, "latin.csv", text),
            f"latin.csv, line 5, byte offset {offset}: byte 0xE9 is not UTF-8 text; save the file as UTF-8")
    assert counts() == base


@pytest.mark.parametrize("content", [b"", b"\xef\xbb\xbf"])
def test_an_empty_file_is_refused(base, tmp_path, content):
    refused(write(tmp_path, "empty.csv", content), "empty.csv: the file is empty")


def test_a_header_only_file_imports_nothing(base, tmp_path):
    report = import_csv(write(tmp_path, "units.csv", UNITS.splitlines()[0] + "\n"))
    assert (report.kind, report.rows, report.created) == ("units", 0, 0)


@pytest.mark.parametrize("header, message", [
    ("asset_tag,serial,maker,model_name,year_made,joined_on,home_location,status,hour_meter_h,"
     "prior_powered_h_per_year,prior_ambient_c,notes",
     "h.csv, row 1: the header looks like a units file, but missing column: prior_storage_c."),
    ("name,kind,profile,constant_temp_c,monthly_temps_c,notes,colour,size",
     "h.csv, row 1: the header looks like a locations file, but unknown columns: colour, size."),
    ("location,taken_at,temperature",
     "the header looks like a temperature_samples file, but missing column: temp_c; unknown column: temperature."),
    ("name,name,kind,profile,constant_temp_c,monthly_temps_c,notes",
     "h.csv, row 1: column name appears more than once in the header."),
    ("Brindle,Nimbus,1979", "h.csv, row 1: the header names none of the known columns"),
    (",,", "h.csv, row 1: the first row must be the header naming the columns, but it is empty."),
])
def test_a_header_that_matches_no_kind_names_the_missing_and_extra_columns(base, tmp_path, header, message):
    refused(write(tmp_path, "h.csv", header + "\nx,y,z\n"), message)
    with pytest.raises(CsvImportError, match="row 1"):
        csvio.detect_kind(write(tmp_path, "h.csv", header + "\nx,y,z\n"))


def positions_row(**changes):
    cells = dict(zip(POSITIONS_HEADER.split(","),
                     "Brindle Acoustics,Nimbus 4,C40,general,47u,25,85,1000,0.5,,6.3,11,radial,,,,,,,,,,,,,,"
                     .split(",")))
    cells.update(changes)
    return ",".join(cells.values())


@pytest.mark.parametrize("changes, message", [
    ({"capacitance": "0u"}, "column capacitance: Capacitance must be above zero (got '0u')."),
    ({"capacitance": "-47u"}, "column capacitance: Capacitance must be above zero (got '-47u')."),
    ({"capacitance": "47x"}, "column capacitance: '47x' is not a capacitance: write 47u, 4u7, 470n or 47 uF."),
    ({"capacitance": "47"}, "column capacitance: '47' has no unit: write 47u, 4u7, 470n or 47 uF."),
    ({"capacitance": ""}, "column capacitance: no value given; the capacitance is required."),
    ({"rated_voltage_v": "abc"}, "column rated_voltage_v: 'abc' is not a number"),
    ({"rated_voltage_v": "0"}, "column rated_voltage_v: Rated voltage must be above zero."),
    ({"rated_temp_c": "175"}, "column rated_temp_c: Rated temperature must lie in -55..150 degC (got '175')."),
    ({"rated_temp_c": "-60"}, "column rated_temp_c: Rated temperature must lie in -55..150 degC"),
    ({"rated_temp_c": "358 K"}, "column rated_temp_c: '358 K' is in kelvin"),
    ({"esr_ohm": ""}, "column esr_ohm: Give the initial ESR or the tan delta at 120 Hz."),
    ({"role": "tank"}, "column role: 'tank' is not one of: supply_reservoir, supply_decoupling"),
    ({"role": "signal_coupling"}, "column coupling_load_ohm: A signal coupling position needs its coupling load "
                                  "resistance."),
    ({"operating_voltage_v": "30"}, "column operating_voltage_v: Operating voltage is above the part's rated"),
    ({"designator": "cap 1"}, "column designator: A reference designator is a letter prefix and a number"),
    ({"model_name": "Nimbus 5"}, "column model_name: unknown gear model 'Brindle Acoustics Nimbus 5'"),
    ({"pump_partner": "C99", "role": "general"}, "column pump_partner: 'Brindle Acoustics Nimbus 4' has no "
                                                 "position C99"),
    ({"mount": "glued"}, "column mount: 'glued' is not one of: radial, axial, smd."),
])
def test_bad_position_cells(base, tmp_path, changes, message):
    path = write(tmp_path, "positions.csv", POSITIONS + positions_row(**changes) + "\n")
    refused(path, f"positions.csv, row 7, {message}")
    assert counts() == base


def test_duplicate_designator_within_a_model(base, tmp_path):
    path = write(tmp_path, "positions.csv", POSITIONS + positions_row(designator="C7") + "\n")
    refused(path, "positions.csv, row 7, column designator: position C7 of 'Brindle Acoustics Nimbus 4' appears "
                  "twice in the file (first on row 3).")
    # The same designator in another model is fine.
    ok = POSITIONS + positions_row(maker="Orrery Instruments", model_name="Tidewell 12", designator="C7") + "\n"
    assert import_csv(write(tmp_path, "positions.csv", ok)).created == 6


def units_row(**changes):
    cells = dict(zip(UNITS.splitlines()[0].split(","),
                     "NB-0009,,Brindle Acoustics,Nimbus 4,1981,2019-03-01,Main Store,,,,,,".split(",")))
    cells.update(changes)
    return ",".join(cells.values())


@pytest.mark.parametrize("changes, message", [
    ({"model_name": "Nimbus 9"}, "row 5, column model_name: unknown gear model 'Brindle Acoustics Nimbus 9' "
                                 "(maker 'Brindle Acoustics', model_name 'Nimbus 9')"),
    ({"home_location": "Attic"}, "row 5, column home_location: unknown location 'Attic'"),
    ({"asset_tag": "NB-0001"},
     "row 5, column asset_tag: asset tag NB-0001 appears twice in the file (first on row 2)."),
    ({"asset_tag": "nb-9"}, "row 5, column asset_tag: Asset tags use capital letters"),
    ({"joined_on": "2019-02-30"}, "row 5, column joined_on: '2019-02-30' is not a date: write YYYY-MM-DD"),
    ({"joined_on": "1975-01-01"}, "row 5, column joined_on: A unit cannot join the fleet before it was made."),
    ({"year_made": "1850"}, "row 5, column year_made: Ensure this value is greater than or equal to 1930."),
    ({"status": "out"}, "row 5, column status: a new unit cannot be 'out'"),
    ({"status": "lost"}, "row 5, column status: 'lost' is not one of: available, out, bench, hold, retired."),
    ({"prior_ambient_c": "95"}, "row 5, column prior_ambient_c: Ambient above 85.0 degC is outside the model."),
    ({"hour_meter_h": "-5"}, "row 5, column hour_meter_h: hour meter cannot be negative (got '-5')."),
    ({"asset_tag": ""}, "row 5, column asset_tag: no value given; the asset tag is required."),
])
def test_bad_unit_cells(base, tmp_path, changes, message):
    import_csv(write(tmp_path, "positions.csv", POSITIONS))
    before = counts()
    refused(write(tmp_path, "units.csv", UNITS + units_row(**changes) + "\n"), f"units.csv, {message}")
    assert counts() == before


@pytest.mark.parametrize("text, message", [
    ("Brindle Acoustics,Nimbus 4,effects,1985,1984,12,8,230,yes,no,no,",
     "row 2, column year_to: The last year cannot come before the first."),
    ("Brindle Acoustics,Nimbus 4,effects,1979,1984,-2,8,230,yes,no,no,",
     "row 2, column internal_rise_k: internal temperature rise cannot be negative (got '-2')."),
    ("Brindle Acoustics,Nimbus 4,effects,1979,1984,12,25,230,yes,no,no,",
     "row 2, column powered_hours_per_day: Ensure this value is less than or equal to 24."),
    ("Brindle Acoustics,Nimbus 4,effects,1979,1984,12,8,230,maybe,no,no,",
     "row 2, column hazard_mains: 'maybe' is not yes or no"),
    ("Brindle Acoustics,Nimbus 4,effects,1979,1984,12,8,230,yes,no,no,\n"
     "Brindle Acoustics,Nimbus 4,effects,1979,1984,12,8,230,yes,no,no,",
     "row 3, column model_name: gear model 'Brindle Acoustics Nimbus 4' appears twice in the file (first on row 2)."),
    ("Brindle Acoustics,Nimbus 4,effects,1979,1984,12,8,230,yes,no",
     "row 2: the row has 10 cells, but the header has 12 columns: a separating comma is missing"),
])
def test_bad_gear_model_rows(db, tmp_path, text, message):
    refused(write(tmp_path, "gm.csv", GEAR_MODELS.splitlines()[0] + "\n" + text + "\n"), f"gm.csv, {message}")
    assert GearModel.objects.count() == 0


@pytest.mark.parametrize("text, message", [
    ("Shed,store,constant,,,", "row 2, column constant_temp_c: A constant profile needs a temperature."),
    ("Shed,store,monthly,,1;2;3,", "row 2, column monthly_temps_c: give twelve monthly means in degC separated by "
                                   "';', January first (found 3)."),
    ("Shed,store,monthly,,1;2;3;4;5;6;7;8;9;10;11;x,", "row 2, column monthly_temps_c: month 12: 'x' is not a "
                                                       "temperature"),
    ("Shed,store,monthly,,,", "row 2, column monthly_temps_c: Give exactly twelve monthly means, January first."),
    ("Shed,loft,constant,18,,", "row 2, column kind: 'loft' is not one of: store, studio, bench."),
    ("Shed,store,constant,64 °F,,", "row 2, column constant_temp_c: '64 °F' is in Fahrenheit"),
    ("Shed,store,constant,90,,", "row 2, column constant_temp_c: Ambient above 85.0 degC is outside the model."),
])
def test_bad_location_rows(db, tmp_path, text, message):
    refused(write(tmp_path, "loc.csv", LOCATIONS.splitlines()[0] + "\n" + text + "\n"), f"loc.csv, {message}")
    assert Location.objects.count() == 0


@pytest.mark.parametrize("text, message", [
    ("Attic,2024-01-15T08:00:00Z,12", "row 2, column location: unknown location 'Attic'"),
    ("Logger Room,2024-01-15,12", "row 2, column taken_at: '2024-01-15' is not a date and time"),
    ("Logger Room,15/01/2024 08:00,12", "row 2, column taken_at: '15/01/2024 08:00' is not a date and time"),
    ("Logger Room,2024-01-15T08:00:00Z,\n", "row 2, column temp_c: no value given; the temperature is required."),
    ("Logger Room,2024-01-15T08:00:00Z,12\nLogger Room,2024-01-15T09:00:00+01:00,13",
     "row 3, column taken_at: a sample of 'Logger Room' at 2024-01-15T08:00:00+00:00 appears twice in the file "
     "(first on row 2)."),
])
def test_bad_sample_rows(base, tmp_path, text, message):
    refused(write(tmp_path, "s.csv", "location,taken_at,temp_c\n" + text + "\n"), f"s.csv, {message}")
    assert counts() == base


def test_many_errors_are_collected_and_capped(db, tmp_path):
    rows = "".join(f"Shed {i},store,constant,hot,,\n" for i in range(1500))
    error = refused(write(tmp_path, "loc.csv", LOCATIONS.splitlines()[0] + "\n" + rows))
    assert error.total == 1500 and len(error.errors) == csvio.MAX_ERRORS_KEPT
    assert error.errors[0] == ("loc.csv, row 2, column constant_temp_c: 'hot' is not a temperature: "
                               "write 85, 85C, 85 °C or 85 degC.")
    text = str(error).splitlines()
    assert len(text) == 21 and text[-1] == "... and 1480 more"
    assert Location.objects.count() == 0


def test_one_row_may_have_several_errors(db, tmp_path):
    row = ",Nimbus 4,x,19z9,1984,12,8,230,yes,no,no,"
    error = refused(write(tmp_path, "gm.csv", GEAR_MODELS.splitlines()[0] + "\n" + row + "\n"))
    assert error.errors == [
        "gm.csv, row 2, column maker: no value given; the maker is required.",
        "gm.csv, row 2, column category: 'x' is not one of: effects, synth, drum, mixer, amp, tape, outboard, other.",
        "gm.csv, row 2, column year_from: '19z9' is not a whole number.",
    ]


def test_an_import_cannot_change_what_other_services_own(fleet, tmp_path):
    text = UNITS.replace("NB-0001,N4-10233,Brindle Acoustics,Nimbus 4,1981", "NB-0001,N4-10233,Orrery Instruments,"
                         "Tidewell 12,1980")
    before = counts()
    refused(write(tmp_path, "units.csv", text),
            "units.csv, row 2, column model_name: NB-0001 is a Brindle Acoustics Nimbus 4; an import cannot change "
            "a unit's gear model",
            "units.csv, row 2, column year_made: NB-0001 was made in 1981; an import cannot change the year")
    assert counts() == before


def test_an_import_leaves_the_status_and_hour_meter_of_existing_units_alone(fleet, tmp_path):
    """Re-importing an older export must not release a unit the desk held for a fault, put a unit
    back on the shelf that is out, or wind an hour meter back."""
    Unit.objects.filter(asset_tag="NB-0001").update(status=Unit.Status.HOLD)
    Unit.objects.filter(asset_tag="NB-0002").update(hour_meter_h=1600.0)
    text = UNITS.replace("Studio B,bench,1520.5", "Studio B,out,1520.5")
    report = import_csv(write(tmp_path, "units.csv", text))
    assert Unit.objects.get(asset_tag="NB-0001").status == Unit.Status.HOLD
    nb2 = Unit.objects.get(asset_tag="NB-0002")
    assert (nb2.status, nb2.hour_meter_h) == (Unit.Status.BENCH, 1600.0)
    assert (report.updated, report.unchanged) == (0, 3)
    assert "The status in the file differs for 2 existing units; it was left as the rental desk" in report.summary()
    assert "The hour meter in the file differs for 1 existing unit;" in report.summary()
    # A new unit may still be imported held, but never out.
    extra = UNITS + "NB-0003,N4-1,Brindle Acoustics,Nimbus 4,1982,2020-06-15,Studio B,hold,,,,,\n"
    import_csv(write(tmp_path, "units.csv", extra))
    assert Unit.objects.get(asset_tag="NB-0003").status == Unit.Status.HOLD
    refused(write(tmp_path, "units.csv", extra.replace("NB-0003", "NB-0004").replace("Studio B,hold", "Studio B,out")),
            "units.csv, row 5, column status: a new unit cannot be 'out'")


# --- management commands --------------------------------------------------------------------

def write_fleet(tmp_path, files=FLEET):
    return {name: str(write(tmp_path, name, text)) for name, text in files.items()}


def test_import_fleet_imports_files_in_dependency_order(db, tmp_path):
    paths = write_fleet(tmp_path)
    out, err = io.StringIO(), io.StringIO()
    call_command("import_fleet", paths["units.csv"], paths["positions.csv"], paths["temperature_samples.csv"],
                 paths["gear_models.csv"], paths["locations.csv"], stdout=out, stderr=err)
    lines = out.getvalue().splitlines()
    assert [line.split(" ")[0] for line in lines] == ["locations.csv", "temperature_samples.csv", "gear_models.csv",
                                                      "positions.csv", "units.csv"]
    assert lines[-1].startswith("units.csv (units): 3 rows: 3 created")
    assert err.getvalue() == ""
    assert counts()["UnitCapacitor"] == 9


def test_import_fleet_stops_at_a_refused_file(db, tmp_path):
    bad = dict(FLEET, **{"positions.csv": POSITIONS + positions_row(capacitance="0u") + "\n"})
    paths = write_fleet(tmp_path, bad)
    err = io.StringIO()
    with pytest.raises(CommandError) as info:
        call_command("import_fleet", *paths.values(), stdout=io.StringIO(), stderr=err)
    assert str(info.value) == ("positions.csv was not imported (1 problem); not imported either: units.csv; "
                               "already imported: locations.csv, temperature_samples.csv, gear_models.csv.")
    assert "positions.csv, row 7, column capacitance: Capacitance must be above zero" in err.getvalue()
    assert (GearModel.objects.count(), Position.objects.count(), Unit.objects.count()) == (2, 0, 0)


def test_import_fleet_imports_nothing_when_a_file_is_not_recognised(db, tmp_path):
    paths = write_fleet(tmp_path)
    strange = write(tmp_path, "strange.csv", "colour,size\nred,3\n")
    err = io.StringIO()
    with pytest.raises(CommandError, match="No file was imported"):
        call_command("import_fleet", *paths.values(), str(strange), str(tmp_path / "missing.csv"),
                     stdout=io.StringIO(), stderr=err)
    assert "strange.csv, row 1: the header names none of the known columns" in err.getvalue()
    assert "missing.csv: no such file." in err.getvalue()
    assert sum(counts().values()) == 0


def test_export_fleet_writes_files_that_import_fleet_reads_back_unchanged(fleet, tmp_path):
    out = io.StringIO()
    call_command("export_fleet", str(tmp_path / "export"), stdout=out)
    names = sorted(p.name for p in (tmp_path / "export").iterdir())
    assert names == ["gear_models.csv", "locations.csv", "positions.csv", "temperature_samples.csv", "units.csv"]
    assert f"{tmp_path / 'export' / 'units.csv'}: 3 rows." in out.getvalue()
    with open(tmp_path / "export" / "positions.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert [r["capacitance"] for r in rows] == ["2200u", "4u7", "10u", "10u", "47u"]  # IEC 60062 codes
    out = io.StringIO()
    call_command("import_fleet", *[str(p) for p in (tmp_path / "export").iterdir()], stdout=out)
    assert all(" 0 created, 0 updated," in line for line in out.getvalue().splitlines())


def test_the_examples_in_the_format_document_import(db, tmp_path):
    doc = (Path(__file__).resolve().parent.parent / "docs" / "csv-format.md").read_text(encoding="utf-8")
    examples = {}
    for block in doc.split("## Examples (invented)")[1].split("\n`")[1:]:
        name, _, body = block.partition("`\n\n")
        examples[name] = "\n".join(line[4:] for line in body.splitlines() if line.startswith("    ")) + "\n"
    assert list(examples) == [f"{kind}.csv" for kind in csvio.IMPORT_ORDER]
    reports = import_fleet_files(tmp_path, examples)
    assert [r.created for r in reports] == [3, 3, 2, 5, 3]
