"""The service sheet: what it prints is what the register and the stored
forecast hold, the safety figures reproduce the worked values of
references.md §7, the pump check follows the data sheet's model (§6), the
font carries µ, Ω and °, and 120 positions stay readable."""

import math
import re

import pytest
from reportlab.pdfbase.pdfmetrics import getFont

from fleet.models import UnitCapacitor
from reports import formatting as fmt
from reports.pdf.base import FONT, NEEDED_GLYPHS, register_fonts
from reports.services import sheet_pdf
from reports.sheets import unit_sheet
from scheduling.models import UnitForecast
from scheduling.services import stored_positions
from scheduling.triage import ACTION_NAMES

from .factories import N_POSITIONS, TODAY, make_bench_model, make_bench_unit
from .pdftext import drawn_text, page_texts, reader, rows_by_first_cell


@pytest.fixture
def sheet_and_pdf(bench_unit):
    return sheet_pdf(asset_tag="FT-0120", today=TODAY)


def test_every_page_carries_the_header_with_page_n_of_m(sheet_and_pdf):
    _, data = sheet_and_pdf
    texts = page_texts(data)
    m = len(texts)
    assert m >= 2
    for n, text in enumerate(texts, start=1):
        assert "FT-0120 · Fennick Audio Works Tallow 120 · serial FA-85-0042 · Loft store" in text
        assert f"Service sheet · printed 1 Jun 2026 · page {n} of {m}" in text


def test_each_row_prints_the_register_and_the_stored_forecast(sheet_and_pdf, bench_unit):
    _, data = sheet_and_pdf
    lines = "\n".join(page_texts(data)).splitlines()
    caps = {c.position.designator: c for c in UnitCapacitor.objects.filter(unit=bench_unit.unit)
            .select_related("position")}
    assert len(caps) == N_POSITIONS
    rows = rows_by_first_cell(lines, caps)
    assert set(rows) == set(caps), "every position has its row"
    stored = {int(r["capacitor_id"]): r for r in stored_positions(UnitForecast.objects.get(unit=bench_unit.unit))}
    counts = {"replace": 0, "measure": 0, "leave": 0}
    for des, c in caps.items():
        row = " ".join(rows[des])
        rec = stored[c.pk]
        action = ACTION_NAMES[int(rec["action"])]
        counts[action] += 1
        assert fmt.capacitance(c.capacitance_uf) in row, des
        assert f"{c.rated_voltage_v:g} V" in row, des
        assert f"{c.rated_temp_c:g} °C" in row, des
        assert (action.upper() if action == "replace" else action) in rows[des], des
        if float(rec["damage"]) <= 2.0:
            assert fmt.resistance(float(rec["esr_ohm"])) in row, des
        assert ("SMD" if c.mount == "smd" else c.mount) in rows[des], des
    text = "\n".join(lines)
    assert f"replace {counts['replace']} · measure {counts['measure']} · leave {counts['leave']} (of 120)" in text


def test_the_replacement_follows_common_practice(sheet_and_pdf):
    sheet, data = sheet_and_pdf
    c1 = next(r for r in sheet.rows if r.designator == "C1")
    # 350 V working x 1.25 = 437.5 V, above the original 400 V: the next usual rating up is 450 V;
    # 105 degC; no wider can.
    assert (c1.replacement.rated_voltage_v, c1.replacement.rated_temp_c, c1.replacement.max_diameter_mm) == \
        (450.0, 105.0, 30.0)
    assert c1.replacement.rated_life_h >= 2000
    text = "\n".join(page_texts(data))
    assert "100 µF 450 V 105 °C" in text and "≤ 30 mm dia." in text
    pump = next(r for r in sheet.rows if r.designator == "C3")
    assert pump.replacement.low_esr and "low ESR" in text


def test_the_safety_box_reproduces_the_worked_values(sheet_and_pdf):
    """references.md §7 [C]: 100 uF at 400 V holds 8.0 J and falls to 60 V
    through 10 kohm after 1.897 s (parts taken charged to their rating)."""
    sheet, data = sheet_and_pdf
    box = sheet.safety
    assert box.largest.designator == "C1" and box.largest.voltage_v == 400.0
    assert box.largest.energy_j == pytest.approx(8.0, rel=1e-12)
    assert box.resistor_ohm == 10e3
    assert box.slowest.designator == "C1"
    assert box.slowest.discharge_s == pytest.approx(1.897, abs=5e-4)
    assert box.above_safe == ["C1", "C2"]
    first = page_texts(data)[0]
    flat = " ".join(first.split())
    assert "SAFETY FIRST" in first
    assert "C1, 100 µF at 400 V (its rated voltage, the most it may hold): E = ½CV² = 8 J" in flat
    assert "through a 10 kΩ resistor, C1 falls below 60 V in 1.9 s" in flat


def test_the_second_worked_value_through_a_stated_resistor(db):
    """references.md §7 [C]: 220 uF at 350 V through 2 kohm reaches 60 V after
    0.776 s, with 61 W at the start (a pulse-rated resistor)."""
    gm = make_bench_model(maker="Fennick Audio Works", model_name="Tallow 220")
    from fleet.models import Position

    Position.objects.filter(gear_model=gm, designator="C1").update(capacitance_uf=220, rated_voltage_v=350,
                                                                   operating_voltage_v=300)
    Position.objects.filter(gear_model=gm, designator="C2").update(rated_voltage_v=250, operating_voltage_v=200)
    make_bench_unit(gm, tag="FT-0220")
    sheet = unit_sheet(asset_tag="FT-0220", today=TODAY, resistor_ohm=2000.0)
    assert sheet.safety.slowest.designator == "C1"
    assert sheet.safety.slowest.discharge_s == pytest.approx(0.776, abs=5e-4)
    assert sheet.safety.peak_power_w == pytest.approx(61.0, abs=0.5)


def test_the_cautions_cover_the_unit_and_defer_to_codes(sheet_and_pdf):
    sheet, data = sheet_and_pdf
    headings = [h for h, _ in sheet.safety.cautions]
    for expected in ("Isolate", "Discharge", "Verify", "High voltage", "This model", "Polarity and rating",
                     "Bring up slowly", "Surface mount", "ESD", "Not a substitute"):
        assert expected in headings
    flat = " ".join(page_texts(data)[0].split())
    assert "B+ about 380 V: the filter cans hold a lethal charge after unplugging." in flat
    assert "does not replace local electrical codes, the maker's service information or licensed practice" in flat


def test_the_pump_check_comes_in_order_with_the_model_values(sheet_and_pdf, bench_unit):
    """references.md §6, the data sheet's instance: 46 ohm switches, 10 uF at a
    5 kHz pump (20 ohm), ESRs 0.1 ohm: Rout = 46 + 20 + 4(0.1) + 0.1 = 66.5
    ohm, so 5 V in at 10 mA gives -(5 - 0.665) = -4.335 V with new parts."""
    sheet, data = sheet_and_pdf
    (pc,) = sheet.pumps
    assert (pc.flying.designator, pc.reservoir.designator) == ("C3", "C4")
    assert pc.rail_new_v == pytest.approx(-4.335, abs=1e-9)
    # today's rail from the stored predicted ESR and capacitance, by the data sheet's formula written out
    stored = {int(r["capacitor_id"]): r for r in stored_positions(UnitForecast.objects.get(unit=bench_unit.unit))}
    caps = {c.position.designator: c.pk for c in UnitCapacitor.objects.filter(unit=bench_unit.unit)
            .select_related("position")}
    fly, res = stored[caps["C3"]], stored[caps["C4"]]
    rout = 46.0 + 1.0 / (5000.0 * float(fly["capacitance_f"])) + 4 * float(fly["esr_ohm"]) + float(res["esr_ohm"])
    assert pc.rail_today_v == pytest.approx(-(5.0 - 0.01 * rout), rel=1e-5)
    assert pc.pump_hz == 5000.0 and pc.oscillator_hz == 10000.0
    flat = " ".join(" ".join(page_texts(data)).split())
    first, second, third = (flat.index(s) for s in ("1. Negative rail", "2. Input rail", "3. Switching waveform"))
    assert first < second < third
    assert f"about {fmt.volts(pc.rail_new_v)} with new parts; the model predicts {fmt.volts(pc.rail_today_v)} today" \
        in flat
    assert "square wave of about 5 V peak-to-peak at 5 kHz (oscillator 10 kHz)" in flat


def test_a_unit_without_a_pump_has_no_bench_check(db):
    gm = make_bench_model(model_name="Tallow 121")
    from fleet.models import Position, Role

    Position.objects.filter(gear_model=gm, designator__in=["C3", "C4"]).update(role=Role.GENERAL, pump_partner="")
    make_bench_unit(gm, tag="FT-0121")
    sheet, data = sheet_pdf(asset_tag="FT-0121", today=TODAY)
    assert sheet.pumps == []
    assert "Bench check" not in " ".join(page_texts(data))


def test_the_embedded_font_holds_every_character_printed(sheet_and_pdf):
    _, data = sheet_and_pdf
    register_fonts()
    cmap = getFont(FONT).face.charToGlyph
    assert all(ord(ch) in cmap for ch in NEEDED_GLYPHS), "µ Ω ° × ≤ and the rest"
    text = "".join(page_texts(data))
    for symbol in ("µF", "Ω", "°C"):
        assert symbol in text
    missing = sorted({ch for ch in text if ord(ch) > 127 and ord(ch) not in cmap})
    assert not missing, f"printed without a glyph: {missing}"
    fonts = {font for _, _, font, _ in drawn_text(data)}
    assert fonts and all("BitstreamVeraSans" in f for f in fonts), fonts
    # embedded, not referenced
    page = reader(data).pages[0]
    truetype = [f.get_object() for f in page["/Resources"]["/Font"].values()
                if f.get_object()["/Subtype"] == "/TrueType"]
    assert truetype and all("/FontFile2" in f["/FontDescriptor"].get_object() for f in truetype)


def test_120_positions_stay_readable(sheet_and_pdf):
    """Every position on the sheet, table text at 7 pt or more, the header
    row repeated on every page the table runs over."""
    _, data = sheet_and_pdf
    pieces = drawn_text(data)
    designators = {f"C{k}" for k in range(1, N_POSITIONS + 1)}
    sizes = [size for _, text, _, size in pieces if text.strip() in designators]
    assert len(sizes) >= N_POSITIONS
    assert min(sizes) >= 7.0
    assert min(size for *_, size in pieces) >= 6.0
    table_pages = {n for n, text, _, _ in pieces if text.strip() in designators}
    header_pages = {n for n, text, _, _ in pieces if text.strip() == "Ref"}
    assert table_pages <= header_pages
    rows_per_page = N_POSITIONS / len(table_pages)
    assert rows_per_page >= 12, "no page spends its height on a handful of rows"
    assert "\u2026" not in "".join(page_texts(data)), "no text cut off with an ellipsis"


def test_the_sheet_reads_the_exposure_and_the_forecast(sheet_and_pdf, bench_unit):
    sheet, data = sheet_and_pdf
    fc = UnitForecast.objects.get(unit=bench_unit.unit)
    flat = " ".join(page_texts(data)[0].split())
    assert f"act by {fmt.today_or_date(fc.act_by, TODAY)}" in flat
    assert f"within 90 days {fmt.percent(fc.risk)}" in flat
    for reason in fc.reasons[:2]:
        assert " ".join(reason.split()) in flat
    assert "Loft store, monthly means 6 °C–27 °C, warmest in July" in flat
    assert re.search(r"Powered hours: [\d,]+ h counted; 0 h of them on 0 hires", flat)
    assert sheet.exposure.powered_total_h > 0


def test_the_damage_chart_draws_the_worst_positions(sheet_and_pdf):
    sheet, _ = sheet_and_pdf
    assert 1 <= len(sheet.chart) <= 5
    worst = max(r.damage / (r.threshold * r.damage_limit) for r in sheet.rows if r.threshold and r.threshold > 0)
    today_year = sheet.chart_today_year
    first = sheet.chart[0]
    at_today = first.life_used[min(range(len(first.years)), key=lambda i: abs(first.years[i] - today_year))]
    assert at_today == pytest.approx(worst, rel=1e-3)
    assert all(v >= 0 and math.isfinite(v) for s in sheet.chart for v in s.life_used)


def test_each_read_position_prints_its_latest_bench_reading(bench_unit):
    """Under a read position's row: its latest reading of the part fitted now (measured ESR and/or
    capacitance, the forecast's figure then, the date and who took it); an earlier reading, a
    reading of a part since removed and a position never read print nothing of theirs."""
    import datetime as dt

    from django.contrib.auth import get_user_model
    from django.utils import timezone

    from fleet.models import Position, Reading

    unit = bench_unit.unit
    pos = {p.designator: p for p in Position.objects.filter(gear_model=bench_unit.gear_model)}
    tamsin = get_user_model().objects.create_user("tvale", first_name="Tamsin", last_name="Vale")
    nameless = get_user_model().objects.create_user("jbench")

    def at(day, hour):
        return timezone.make_aware(dt.datetime(2026, 5, day, hour))

    def read(des, when, **fields):
        Reading.objects.create(unit=unit, kind=Reading.Kind.CAPACITOR, position=pos[des], taken_at=when, **fields)

    read("C1", at(20, 10), taken_by=tamsin, esr_ohm=7.77, esr_freq_hz=100.0)          # older: not shown
    read("C1", at(28, 11), taken_by=tamsin, esr_ohm=2.46, esr_freq_hz=100.0, capacitance_uf=88.0,
         predicted_esr_ohm=1.9, predicted_capacitance_uf=93.0)
    read("C2", at(27, 9), taken_by=nameless, capacitance_uf=39.5)
    read("C3", at(26, 9), esr_ohm=0.55, esr_freq_hz=10000.0)                             # no one recorded
    read("C6", at(29, 9), taken_by=tamsin, esr_ohm=6.66, part_removed=True)             # a finding, not shown
    sheet, data = sheet_pdf(asset_tag=unit.asset_tag, today=TODAY)
    by_des = {r.designator: r.last_reading for r in sheet.rows}
    assert by_des["C1"].esr_ohm == 2.46 and by_des["C1"].by == "Tamsin Vale"
    assert by_des["C5"] is None and by_des["C6"] is None
    text = " ".join(" ".join(page_texts(data)).split())
    assert ("Last reading 28 May 2026 by Tamsin Vale: ESR 2.46 Ω at 100 Hz (forecast then 1.9 Ω) · "
            "C 88 µF (forecast then 93 µF)") in text
    assert "Last reading 27 May 2026 by jbench: C 39.5 µF" in text
    assert "Last reading 26 May 2026 (by: not recorded): ESR 0.55 Ω at 10 kHz" in text
    assert "7.77" not in text and "6.66" not in text
    assert text.count("Last reading") == 3


def test_the_sheet_prints_each_rails_latest_reading(bench_unit):
    import datetime as dt

    from django.contrib.auth import get_user_model
    from django.utils import timezone

    from fleet.models import Reading

    unit = bench_unit.unit
    tamsin = get_user_model().objects.create_user("tvale", first_name="Tamsin", last_name="Vale")
    for day, volts in ((25, -2.2), (28, -3.9)):
        Reading.objects.create(unit=unit, kind=Reading.Kind.RAIL, rail_name="-5V", rail_measured_v=volts,
                               rail_expected_v=-5.0, rail_load_ma=10.0, predicted_rail_v=-4.1, taken_by=tamsin,
                               taken_at=timezone.make_aware(dt.datetime(2026, 5, day, 10)))
    sheet, data = sheet_pdf(asset_tag=unit.asset_tag, today=TODAY)
    assert [(r.name, r.measured_v) for r in sheet.rails] == [("-5V", -3.9)]
    text = " ".join(" ".join(page_texts(data)).split())
    assert re.search(r"Last rail reading: -5V [-\u2212]3\.9 V at 10 mA \(expected [-\u2212]5 V, forecast then "
                     r"[-\u2212]4\.1 V\), 28 May 2026 by Tamsin Vale\.", text), text[:1500]
    assert "2.2 V" not in text


def test_the_table_note_stays_on_one_page_and_the_chart_legend_fits(sheet_and_pdf):
    from reportlab.graphics.charts.legends import Legend
    from reportlab.pdfbase.pdfmetrics import stringWidth

    from reports.pdf.chart import damage_chart
    from reports.sheets import ChartSeries

    _, data = sheet_and_pdf
    pages = [" ".join(t.split()) for t in page_texts(data)]
    start = [n for n, t in enumerate(pages) if "Life used: damage so far" in t]
    assert len(start) == 1 and "can no wider than the original (common practice)." in pages[start[0]]
    long = [ChartSeries("C101, C102, C103 +47", "Supply decoupling", [1990.0, 2026.0, 2030.0], [0.0, 0.8, 1.0])]
    drawing = damage_chart(long, 2026.0, width=440, height=190)
    legend = next(item for item in drawing.contents if isinstance(item, Legend))
    for _, label in legend.colorNamePairs:
        for line in label.split("\n"):
            assert legend.x + legend.dx + stringWidth(line, FONT, legend.fontSize) <= 440, line
    assert "supply decoupling" in " ".join(label.replace("\n", " ") for _, label in legend.colorNamePairs)
