"""The due list PDF (the triage order) and the parts list (CSV and PDF) for
the top of it: grouped, counted with a spares margin, values from the IEC
60063 series."""

import csv
import io
import math

import pytest
from django.core.management import CommandError, call_command

from fleet.models import Position, Unit, UnitCapacitor
from reports.duelist import due_list, parts_list
from reports.services import due_list_pdf, parts_list_csv, parts_list_pdf
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh, stored_positions
from scheduling.triage import REPLACE

from .factories import TODAY, make_bench_model, make_bench_unit
from .pdftext import page_texts

# IEC 60063 (references.md §8 [V]): the values per decade, written out here.
E6 = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]
E12 = E6 + [1.2, 1.8, 2.7, 3.9, 5.6, 8.2]
E24 = E12 + [1.1, 1.3, 1.6, 2.0, 2.4, 3.0, 3.6, 4.3, 5.1, 6.2, 7.5, 9.1]


def mantissa(value):
    return round(value / 10 ** math.floor(math.log10(value) + 1e-12), 6)


@pytest.fixture
def small_fleet(db):
    """Four units of the bench model of different ages, one with an unusual 250 uF part."""
    gm = make_bench_model()
    Position.objects.filter(gear_model=gm, designator="C5").update(capacitance_uf=250.0)
    for k, year in enumerate((1979, 1984, 1990, 2012), start=1):
        make_bench_unit(gm, tag=f"FT-{k:04d}", year_made=year, serial=f"FA-{k}")
    forecast_refresh(today=TODAY)
    return gm


def test_the_due_list_is_in_triage_order(small_fleet):
    dl, data = due_list_pdf(today=TODAY)
    expected = list(UnitForecast.objects.filter(priority__isnull=False).order_by("priority")
                    .values_list("unit__asset_tag", flat=True))
    assert expected, "the fleet has units that need work"
    assert [r.asset_tag for r in dl.rows if r.priority] == expected
    text = "\n".join(page_texts(data))
    at = [text.index(tag) for tag in expected]
    assert at == sorted(at)
    pages = page_texts(data)
    for n, page in enumerate(pages, start=1):
        assert f"page {n} of {len(pages)}" in page
    assert f"{dl.need_work} units need work" in text


def test_the_due_list_counts_each_units_actions_from_the_stored_forecast(small_fleet):
    dl = due_list(today=TODAY)
    for row in dl.rows:
        rec = stored_positions(UnitForecast.objects.get(unit__asset_tag=row.asset_tag))
        assert row.replace == int((rec["action"] == REPLACE).sum())


def test_a_limit_keeps_the_top_and_says_so(small_fleet):
    dl, data = due_list_pdf(today=TODAY, limit=1)
    assert len(dl.rows) == 1 and dl.rows[0].priority == 1
    assert f"The first 1 of {dl.total} are printed" in " ".join(" ".join(page_texts(data)).split())


def test_retired_units_are_left_off(small_fleet):
    top = UnitForecast.objects.get(priority=1).unit
    Unit.objects.filter(pk=top.pk).update(status=Unit.Status.RETIRED)
    assert top.asset_tag not in [r.asset_tag for r in due_list(today=TODAY).rows]


def test_the_parts_list_groups_counts_and_adds_spares(small_fleet):
    pl = parts_list(units=3, today=TODAY)
    top = list(UnitForecast.objects.filter(priority__isnull=False).order_by("priority")[:3])
    assert pl.unit_tags == [f.unit.asset_tag for f in top]
    replace_ids = {int(r["capacitor_id"]) for f in top for r in stored_positions(f) if r["action"] == REPLACE}
    assert pl.to_fit == len(replace_ids) > 0
    keys = [ln.key for ln in pl.lines]
    assert len(keys) == len(set(keys)), "one line per kind of part"
    fitted = {(c.unit.asset_tag, c.position.designator): c for c in UnitCapacitor.objects.filter(pk__in=replace_ids)
              .select_related("unit", "position")}
    for ln in pl.lines:
        assert ln.spares == (max(1, math.ceil(0.1 * ln.to_fit)) if ln.to_fit else 0)
        assert ln.order == ln.to_fit + ln.spares
        assert ln.rated_temp_c == 105.0
        for tag, des in ln.positions:
            part = fitted[(tag, des)]
            assert ln.rated_voltage_v >= part.rated_voltage_v
            assert ln.max_diameter_mm <= part.position.diameter_mm
            assert ln.mount == part.position.mount
    assert sum(len(ln.positions) for ln in pl.lines) == pl.to_fit


def test_every_value_is_a_preferred_number(small_fleet):
    pl = parts_list(units=4, today=TODAY)
    series = {"E6": E6, "E12": E12, "E24": E24}
    for ln in pl.lines:
        m = mantissa(ln.capacitance_uf)
        assert any(abs(m - v) < 1e-6 for v in E24 + [10.0]), ln.capacitance_uf
        first = next(name for name in ("E6", "E12", "E24") if any(abs(m - v) < 1e-6 for v in series[name]))
        assert ln.series == first
    values = {ln.capacitance_uf for ln in pl.lines}
    assert 250.0 not in values and 270.0 in values, "the unusual 250 uF goes to the nearest E12 value"


def test_the_csv_and_the_pdf_carry_the_same_lines(small_fleet):
    pl, text = parts_list_csv(units=3, today=TODAY)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == len(pl.lines)
    assert sum(int(r["to_fit"]) for r in rows) == pl.to_fit
    assert sum(int(r["order"]) for r in rows) == pl.to_order
    assert {float(r["capacitance_uf"]) for r in rows} == {ln.capacitance_uf for ln in pl.lines}
    _, data = parts_list_pdf(units=3, today=TODAY)
    flat = " ".join(" ".join(page_texts(data)).split())
    assert f"{pl.to_fit} to fit, {pl.to_order} to order with spares" in flat
    assert "µF" in flat and "°C" in flat


def test_the_commands_write_files_and_refuse_bad_input(small_fleet, tmp_path):
    out = io.StringIO()
    call_command("due_list_pdf", "--out", str(tmp_path / "due.pdf"), stdout=out)
    assert (tmp_path / "due.pdf").read_bytes().startswith(b"%PDF") and "units need work" in out.getvalue()
    with pytest.raises(CommandError, match="^cannot write "):
        call_command("due_list_pdf", "--out", str(tmp_path / "nowhere" / "due.pdf"))
    with pytest.raises(CommandError, match="^the limit must be at least 1$"):
        call_command("due_list_pdf", "--out", str(tmp_path / "x.pdf"), "--limit", "0")
    out = io.StringIO()
    call_command("parts_list", "--csv", "--units", "2", stdout=out)
    header = out.getvalue().splitlines()[0]
    assert header.startswith("capacitance_uf,capacitance,series,rated_voltage_v")
    out = io.StringIO()
    call_command("parts_list", "--units", "2", stdout=out)
    assert "total for 2 units" in out.getvalue()
    call_command("parts_list", "--out", str(tmp_path / "parts.pdf"), stdout=io.StringIO())
    assert (tmp_path / "parts.pdf").read_bytes().startswith(b"%PDF")
    with pytest.raises(CommandError, match="^the parts list needs at least one unit$"):
        call_command("parts_list", "--units", "0")


def test_the_workshop_page_links_the_lists(client, users, small_fleet):
    from django.urls import reverse

    client.force_login(users.technician)
    page = client.get(reverse("workshop")).content.decode()
    for url in (reverse("due_list_pdf"), reverse("parts_list", args=["pdf"]), reverse("parts_list", args=["csv"])):
        assert f'href="{url}"' in page
    pdf = client.get(reverse("due_list_pdf"))
    assert pdf.status_code == 200 and pdf.content.startswith(b"%PDF")
    got = client.get(reverse("parts_list", args=["csv"]) + "?units=2")
    assert got["Content-Type"].startswith("text/csv")
    assert got.content.decode().splitlines()[0].startswith("capacitance_uf,")
    assert client.get(reverse("parts_list", args=["xls"])).status_code == 404
    client.force_login(users.desk)
    assert client.get(reverse("due_list_pdf")).status_code == 403


def _printed_positions(data):
    """(asset tag, designator) pairs in the parts list PDF's text, each designator
    taken with the asset tag written before it (a wrapped or continued list included)."""
    import re

    flat = " ".join(" ".join(page_texts(data)).split())
    pairs, tag = [], None
    for m in re.finditer(r"\b(FT-\d{4}):|\b(C\d+)\b", flat):
        if m.group(1):
            tag = m.group(1)
        elif tag is not None:
            pairs.append((tag, m.group(2)))
    return pairs, flat


def test_the_parts_list_pdf_prints_every_position(small_fleet):
    pl, data = parts_list_pdf(units=4, today=TODAY)
    expected = [pos for ln in pl.lines for pos in ln.positions + ln.measure_positions]
    assert sum(ln.to_measure for ln in pl.lines) == sum(len(ln.measure_positions) for ln in pl.lines)
    assert len(expected) > 60, "a long list of positions to wrap"
    assert max(len(ln.positions_text()) for ln in pl.lines) > 400, "at least one line far wider than its cell"
    printed, flat = _printed_positions(data)
    assert sorted(printed) == sorted(expected)
    assert "\u2026" not in flat and "..." not in flat


def test_a_list_longer_than_a_row_goes_on_in_rows_of_its_own(small_fleet, monkeypatch):
    from reports.pdf import lists

    monkeypatch.setattr(lists, "POSITION_LINES_PER_ROW", 2)
    pl, data = parts_list_pdf(units=4, today=TODAY)
    printed, flat = _printed_positions(data)
    assert sorted(printed) == sorted(pos for ln in pl.lines for pos in ln.positions + ln.measure_positions)
    assert "(cont.)" in flat


def test_the_parts_list_csv_carries_the_units_hazard_notes(small_fleet):
    """The bench model's hazard notes (a valve preamp's B+) reach every line, in its own column,
    and a note a spreadsheet would run as a formula is guarded as the export guards it."""
    pl, text = parts_list_csv(units=4, today=TODAY)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert rows and all("B+ about 380 V: the filter cans hold a lethal charge" in r["hazard_notes"] for r in rows)
    assert all(r["hazard_notes"].startswith("Fennick Audio Works Tallow 120 (FT-") for r in rows)
    _, data = parts_list_pdf(units=4, today=TODAY)
    assert "B+ about 380 V" in " ".join(" ".join(page_texts(data)).split())

    from fleet.models import GearModel

    GearModel.objects.update(maker="=HYPERLINK(\"http://x.example\")")
    _, text = parts_list_csv(units=4, today=TODAY)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert all(r["hazard_notes"].startswith("'=HYPERLINK(") for r in rows)
    GearModel.objects.update(maker="Fennick Audio Works", hazard_notes="", hazard_tube_hv=True)
    _, text = parts_list_csv(units=4, today=TODAY)
    assert all(r["hazard_notes"].endswith(": tube high voltage") for r in csv.DictReader(io.StringIO(text)))


def test_positions_to_read_first_are_named_in_the_pdf_and_the_csv():
    """A line with positions to read first says which (a line may have nothing to fit)."""
    from reports.duelist import PartLine, PartsList, parts_csv_rows
    from reports.pdf.lists import parts_list_pdf_bytes

    both = PartLine(10.0, 25.0, 105.0, 5.0, 11.0, "radial", False, rated_life_h=2000.0, to_fit=1, to_measure=2,
                    positions=[("FT-0001", "C7")], measure_positions=[("FT-0001", "C9"), ("FT-0002", "C8")],
                    units={"FT-0001", "FT-0002"})
    only = PartLine(47.0, 16.0, 105.0, 5.0, 11.0, "radial", False, rated_life_h=2000.0, to_measure=1,
                    measure_positions=[("FT-0003", "C12")], units={"FT-0003"})
    pl = PartsList(lines=[both, only], unit_tags=["FT-0001", "FT-0002", "FT-0003"], today=TODAY, units_asked=3)
    flat = " ".join(" ".join(page_texts(parts_list_pdf_bytes(pl))).split())
    assert "FT-0001: C7 · measure first: FT-0001: C9; FT-0002: C8" in flat
    assert "measure first: FT-0003: C12" in flat
    rows = list(parts_csv_rows(pl))
    at = rows[0].index("measure_positions")
    assert [r[at] for r in rows[1:]] == ["FT-0001: C9; FT-0002: C8", "FT-0003: C12"]
    assert [r[rows[0].index("positions")] for r in rows[1:]] == ["FT-0001: C7", ""]


def test_the_due_list_prints_each_main_reason_whole(small_fleet):
    dl, data = due_list_pdf(today=TODAY)
    flat = " ".join(" ".join(page_texts(data)).split())
    assert dl.rows and all(r.reason for r in dl.rows)
    for r in dl.rows:
        assert " ".join(r.reason.split()) in flat, r.reason
    assert "\u2026" not in flat
