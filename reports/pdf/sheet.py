"""The service sheet drawn: page 1 carries the summary and the safety box,
then the bench check of a pump rail, the capacitor table (its header repeated
on every page), the damage chart and the sign-off boxes."""

from xml.sax.saxutils import escape

from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, KeepTogether, PageBreak, Paragraph, Spacer, Table, TableStyle

from .. import formatting as fmt
from .base import (DANGER, DANGER_TINT, FONT, FONT_BOLD, HEAD_TINT, INK, MEASURE_TINT, MUTED, PAGE, MARGIN,
                   REPLACE_TINT, RULE, SheetStart, TickBox, build, styles, wrap)
from .chart import damage_chart

WIDTH = PAGE[0] - 2 * MARGIN
FOOTER = ("Recap Scheduler service sheet \u00b7 predicted figures come from the life model, not from measurement "
          "\u00b7 this sheet does not replace local electrical codes, the maker's service information or licensed "
          "practice")
#: The capacitor table: (heading, width in points).
COLUMNS = (("Ref", 30), ("Role", 56), ("Value", 42), ("Rated V", 30), ("Temp.", 33), ("Can D \u00d7 L", 52),
           ("Mount", 32), ("Fitted", 48), ("Life used", 40), ("ESR now", 42), ("Action", 40), ("Why", 100),
           ("Replacement (common practice)", 125), ("ESR read", 40), ("C read", 40), ("Done", 24))
CELL_SIZE = 7.2


def _p(text, style="body"):
    return Paragraph(text, styles()[style])


def _e(text):
    return escape(str(text))


def header_texts(sheet):
    left = f"{sheet.asset_tag} \u00b7 {sheet.maker} {sheet.model_name}"
    if sheet.serial:
        left += f" \u00b7 serial {sheet.serial}"
    left += f" \u00b7 {sheet.location}"
    return left, f"Service sheet \u00b7 printed {fmt.date(sheet.printed_on)}"


def _summary(sheet):
    f, ex = sheet.forecast, sheet.exposure
    out = [_p("Forecast and exposure", "h2")]
    if f is None:
        out.append(_p("Not yet forecast: the figures below fill in after the next refresh."))
    elif f["status"] == "invalid":
        out.append(_p(f"<b>{_e(f['status_label'])}</b>: the life engine cannot use this unit's figures, so there is "
                      f"no risk, due date or action for its parts; correct the figures first."))
        out.extend(Paragraph(_e(r), styles()["bullet"], bulletText="\u2013") for r in f["reasons"][:6])
        out.append(_p(f"Worked out {_e(fmt.moment(f['computed_at']))}.", "small"))
    else:
        first = f"<b>{_e(f['status_label'])}</b> \u00b7 act by <b>{_e(f['act_by_words'])}</b>"
        if f["priority"]:
            first += f" \u00b7 priority {f['priority']} among the units that need work"
        out.append(_p(first))
        out.append(_p(f"If it works today: chance of a fault during its next typical hire "
                      f"<b>{_e(fmt.percent(f['hire_risk']))}</b>, within {f['horizon_days']} days "
                      f"{_e(fmt.percent(f['risk']))}."))
        if f["past_limit_since"] is not None:
            out.append(_p(f"Due since about {_e(fmt.month(f['past_limit_since']))}."))
        if f["reasons"]:
            out.extend(Paragraph(_e(r), styles()["bullet"], bulletText="\u2013") for r in f["reasons"][:6])
        out.append(_p(f"Worked out {_e(fmt.moment(f['computed_at']))}.", "small"))
    counts = sheet.action_counts()
    out.append(_p(f"Capacitors: <b>replace {counts['replace']}</b> \u00b7 measure {counts['measure']} \u00b7 "
                  f"leave {counts['leave']} (of {len(sheet.rows)})."))
    for rail in sheet.rails:
        out.append(_p(rail_reading_text(rail)))
    powered = "not counted yet" if ex.powered_total_h is None else fmt.hours(ex.powered_total_h) + " counted"
    out.append(_p(f"<b>Powered hours:</b> {_e(powered)}; {_e(fmt.hours(ex.fleet_powered_h))} of them on "
                  f"{ex.hires} hires since it joined, the rest estimated from the prior-use assumption."))
    if ex.hottest:
        venues = "; ".join(f"{fmt.temperature(t)} ({job}, {fmt.date(d)})" for t, job, d in ex.hottest)
        out.append(_p(f"<b>Hottest venues:</b> {_e(venues)}."))
    storage = f"<b>Storage:</b> {_e(ex.home)}, {_e(ex.home_profile)}"
    if ex.storage_median_c is not None and ex.storage_p95_c > ex.storage_median_c:
        storage += (f"; unpowered, half the hours at or below {_e(fmt.temperature(ex.storage_median_c))}, "
                    f"one in twenty above {_e(fmt.temperature(ex.storage_p95_c))}")
    elif ex.storage_median_c is not None:
        storage += f"; unpowered, nearly all the hours at about {_e(fmt.temperature(ex.storage_median_c))}"
    out.append(_p(storage + "."))
    out.append(_p(f"Made {sheet.year_made} \u00b7 now: {_e(sheet.unit_status.lower())}.", "small"))
    return out


def _safety(sheet, width):
    box = sheet.safety
    inner = [_p("SAFETY FIRST", "danger")]
    if box.largest is not None:
        big = box.largest
        basis = "its rated voltage, the most it may hold"
        inner.append(_p(
            f"<b>Largest stored energy:</b> {_e(big.designator)}, {_e(fmt.capacitance(big.capacitance_uf))} at "
            f"{_e(fmt.volts(big.voltage_v))} ({basis}): E = \u00bdCV\u00b2 = <b>{_e(fmt.energy(big.energy_j))}</b>."))
        slow = box.slowest
        if slow.discharge_s > 0:
            text = (f"<b>Discharge:</b> through a {_e(fmt.resistance(box.resistor_ohm))} resistor, {_e(slow.designator)} "
                    f"falls below {_e(fmt.volts(box.safe_v))} in <b>{_e(fmt.seconds(slow.discharge_s))}</b> "
                    "(" + "t = RC ln(V<sub>0</sub> / ".replace(" ", "\u00a0")
                    + _e(fmt.volts(box.safe_v)).replace(" ", "\u00a0") + "))")  # the formula never breaks
            if slow.designator != big.designator and big.discharge_s > 0:
                text += f"; {_e(big.designator)} in {_e(fmt.seconds(big.discharge_s))}"
            text += (f". It starts at {_e(fmt.plain_number(1000 * box.peak_current_a))} mA and "
                     f"{_e(fmt.plain_number(box.peak_power_w))} W: use a resistor rated for that pulse, wait, "
                     "then measure.")
            inner.append(_p(text))
    elif box.largest_low is not None:
        des, uf, v, j = box.largest_low
        inner.append(_p(f"<b>Largest stored energy:</b> {_e(des)}, {_e(fmt.capacitance(uf))} at {_e(fmt.volts(v))} "
                        f"(its rated voltage): E = \u00bdCV\u00b2 = <b>{_e(fmt.energy(j))}</b>. No listed capacitor "
                        f"is rated above {_e(fmt.volts(box.safe_v))} d.c., so none needs time to fall below it; a "
                        "short across a reservoir still burns."))
    for heading, words in box.cautions:
        inner.append(Paragraph(f"<b>{_e(heading)}.</b> {_e(words)}", styles()["bullet"], bulletText="\u2022"))
    t = Table([[inner]], colWidths=[width])
    t.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.6, DANGER), ("BACKGROUND", (0, 0), (-1, -1), DANGER_TINT),
                           ("LEFTPADDING", (0, 0), (-1, -1), 6), ("RIGHTPADDING", (0, 0), (-1, -1), 6),
                           ("TOPPADDING", (0, 0), (-1, -1), 4), ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
    return t


def _pump_checks(sheet):
    out = []
    for pc in sheet.pumps:
        out.append(_p(f"Bench check: negative rail from the pump {pc.flying.designator} / {pc.reservoir.designator} "
                      "(in this order)", "h2"))
        rows = [["Step", "Where", "Expect (from the inverter model)", "Read"]]
        for step, where, expect in pc.steps():
            rows.append([wrap(step, 82, CELL_SIZE, FONT_BOLD), wrap(where, 205, CELL_SIZE),
                         wrap(expect, 392, CELL_SIZE), ""])
        t = Table(rows, colWidths=[90, 212, 400, 72], repeatRows=1)
        t.setStyle(_grid_style() + [("FONTNAME", (0, 1), (0, -1), FONT_BOLD)])
        note = (f"Model: {fmt.volts(pc.input_v)} in, {fmt.plain_number(1000 * pc.load_a)} mA load, pump "
                f"{fmt.frequency(pc.pump_hz)}, switches {fmt.resistance(pc.switch_ohm)}; today's figures use the predicted "
                f"ESR {fmt.resistance(pc.flying.esr_now_ohm)} ({pc.flying.designator}) and "
                f"{fmt.resistance(pc.reservoir.esr_now_ohm)} ({pc.reservoir.designator}); new parts "
                f"{fmt.resistance(pc.flying.esr0_ohm)} and {fmt.resistance(pc.reservoir.esr0_ohm)}.")
        if pc.today_short:
            note += " The model expects the rail to be too shallow today."
        out.append(KeepTogether([t, _p(_e(note), "small")]))
    return out


def _grid_style():
    return [("FONTNAME", (0, 0), (-1, -1), FONT), ("FONTSIZE", (0, 0), (-1, -1), CELL_SIZE),
            ("LEADING", (0, 0), (-1, -1), CELL_SIZE * 1.2), ("TEXTCOLOR", (0, 0), (-1, -1), INK),
            ("FONTNAME", (0, 0), (-1, 0), FONT_BOLD), ("BACKGROUND", (0, 0), (-1, 0), HEAD_TINT),
            ("GRID", (0, 0), (-1, -1), 0.4, RULE), ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
            ("LEFTPADDING", (0, 0), (-1, -1), 2.5), ("RIGHTPADDING", (0, 0), (-1, -1), 2.5)]


def _replacement_text(r):
    rep = r.replacement
    first = f"{fmt.capacitance(rep.capacitance_uf)} {fmt.volts(rep.rated_voltage_v)} {fmt.temperature(rep.rated_temp_c)}"
    second = f"{fmt.hours(rep.rated_life_h)}, \u2264 {fmt.millimetres(rep.max_diameter_mm)} dia."
    if rep.low_esr:
        second += ", low ESR"
    width = dict(COLUMNS)["Replacement (common practice)"] - 5
    return wrap(first, width, CELL_SIZE) + "\n" + wrap(second, width, CELL_SIZE)


def rail_reading_text(rail):
    """ "<b>Last rail reading:</b> B+ 452 V at 250 mA (expected 470 V), 3 Dec 2026 by Idris." (markup)"""
    text = f"<b>Last rail reading:</b> {_e(rail.name)} {_e(fmt.volts(rail.measured_v))}"
    if rail.load_ma:
        text += f" at {_e(fmt.plain_number(rail.load_ma))} mA"
    said = []
    if rail.expected_v is not None:
        said.append(f"expected {fmt.volts(rail.expected_v)}")
    if rail.predicted_v is not None:
        said.append(f"forecast then {fmt.volts(rail.predicted_v)}")
    if said:
        text += f" ({_e(', '.join(said))})"
    who = f" by {rail.by}" if rail.by else " (by: not recorded)"
    return text + f", {_e(fmt.date(rail.taken_on))}{_e(who)}."


def last_reading_text(reading, width):
    """ "Last reading 3 Dec 2026 by Idris: ESR 9.72 Ω at 100 Hz (forecast then 3.74 Ω) · C 84 µF ..." """
    parts = []
    if reading.esr_ohm is not None:
        text = f"ESR {fmt.resistance(reading.esr_ohm)}"
        if reading.esr_freq_hz:
            text += f" at {fmt.frequency(reading.esr_freq_hz)}"
        if reading.predicted_esr_ohm:
            text += f" (forecast then {fmt.resistance(reading.predicted_esr_ohm)})"
        parts.append(text)
    if reading.capacitance_uf is not None:
        text = f"C {fmt.capacitance(reading.capacitance_uf)}"
        if reading.predicted_capacitance_uf:
            text += f" (forecast then {fmt.capacitance(reading.predicted_capacitance_uf)})"
        parts.append(text)
    if reading.leakage_ua is not None:
        text = f"leakage {fmt.plain_number(reading.leakage_ua)} {fmt.MICRO}A"
        parts.append(text)
    who = f" by {reading.by}" if reading.by else " (by: not recorded)"
    return wrap(f"Last reading {fmt.date(reading.taken_on)}{who}: " + " \u00b7 ".join(parts), width, CELL_SIZE)


def _capacitor_table(sheet):
    widths = [w for _, w in COLUMNS]
    why_w = widths[11] - 5
    head = [wrap(h, w - 5, CELL_SIZE, FONT_BOLD) for h, w in COLUMNS]
    head[3], head[13], head[14] = "Rated\nV", f"ESR read\n({fmt.OHM})", f"C read\n({fmt.MICRO}F)"
    data, style = [head], _grid_style()
    for r in sheet.rows:
        i = len(data)
        fitted = ("orig. " if r.original else "new ") + f"{r.installed_on.year}"
        if r.esr_now_ohm is None:
            esr = ""
        elif r.beyond_model:
            esr = "dried out"
        else:
            esr = fmt.resistance(r.esr_now_ohm)
        # a part to leave says no more than its life used; the others say why
        why = r.action_line.split(": ", 1)[1] if ": " in r.action_line and r.action != "leave" else ""
        cells = [r.designator, r.role, fmt.capacitance(r.capacitance_uf), fmt.volts(r.rated_voltage_v),
                 fmt.temperature(r.rated_temp_c), fmt.can_size(r.diameter_mm, r.length_mm), r.mount, fitted,
                 r.life_used if r.damage is not None else ""]
        row = [wrap(text, w - 5, CELL_SIZE) for text, w in zip(cells, widths)]
        row += [esr, r.action.upper() if r.action == "replace" else r.action, wrap(why, why_w, CELL_SIZE),
                _replacement_text(r), "", "", TickBox()]
        data.append(row)
        last = i
        if r.last_reading is not None:
            # the latest bench reading on a line of its own under the row, the reference spanning
            # both (a page never splits them)
            last = i + 1
            data.append(["", last_reading_text(r.last_reading, sum(widths[1:]) - 5)] + [""] * (len(widths) - 2))
            style += [("SPAN", (0, i), (0, last)), ("SPAN", (1, last), (-1, last)), ("LINEABOVE", (1, last),
                      (-1, last), 0.3, "#c8ced5"), ("TOPPADDING", (1, last), (-1, last), 1)]
        if r.action == "replace":
            style += [("BACKGROUND", (0, i), (-2, last), REPLACE_TINT), ("FONTNAME", (10, i), (10, i), FONT_BOLD)]
        elif r.action == "measure":
            style += [("BACKGROUND", (0, i), (-2, last), MEASURE_TINT)]
    style += [("BACKGROUND", (13, 1), (14, -1), "#ffffff"), ("ALIGN", (15, 0), (15, -1), "CENTER"),
              ("VALIGN", (15, 1), (15, -1), "MIDDLE"), ("FONTNAME", (0, 1), (0, -1), FONT_BOLD)]
    t = Table(data, colWidths=widths, repeatRows=1)
    t.setStyle(TableStyle(style))
    return t


def _signoff(width):
    rows = [["Work done by", "", "Date", ""],
            ["Parts fitted (count)", "", "Rails after work", ""],
            ["Second check by", "", "Date", ""],
            ["Released to hire (yes / no)", "", "Signature", ""],
            ["Notes", "", "", ""]]
    label, short = 112, 76
    rest = (width - label - short) / 2
    t = Table(rows, colWidths=[label, rest, short, rest], rowHeights=[24, 24, 24, 24, 110])
    t.setStyle(TableStyle([("FONTNAME", (0, 0), (-1, -1), FONT), ("FONTSIZE", (0, 0), (-1, -1), 7.6),
                           ("TEXTCOLOR", (0, 0), (-1, -1), INK), ("GRID", (0, 0), (-1, -1), 0.6, INK),
                           ("BACKGROUND", (0, 0), (0, -1), HEAD_TINT), ("BACKGROUND", (2, 0), (2, 3), HEAD_TINT),
                           ("SPAN", (1, 4), (3, 4)), ("VALIGN", (0, 0), (-1, -1), "TOP")]))
    return t


def sheet_story(sheet, *, key=0, on_draw=None):
    """The flowables of one sheet, starting with the marker that sets its header."""
    left, right = header_texts(sheet)
    story = [SheetStart(key, left, right, on_draw)]
    title = (f"<b>{_e(sheet.asset_tag)}</b> \u00b7 {_e(sheet.maker)} {_e(sheet.model_name)}"
             f"<font size=9 color='#5b6470'>  serial {_e(sheet.serial or 'not recorded')} \u00b7 "
             f"{_e(sheet.location)}</font>")
    story.append(_p(title, "title"))
    story.append(Spacer(1, 3 * mm))
    left_w, gap = WIDTH * 0.54, 8
    top = Table([[_summary(sheet), _safety(sheet, WIDTH - left_w - gap - 12)]],
                colWidths=[left_w + gap, WIDTH - left_w - gap])
    top.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 0),
                             ("RIGHTPADDING", (0, 0), (0, 0), gap), ("RIGHTPADDING", (1, 0), (1, 0), 0)]))
    story.append(top)
    story.extend(_pump_checks(sheet))
    story.append(CondPageBreak(40 * mm))
    story.append(_p(f"Capacitors ({len(sheet.rows)}), by reference designator", "h2"))
    if sheet.rows:
        story.append(_capacitor_table(sheet))
        read = ("the line under a row is the latest bench reading of the part fitted now, with the forecast's "
                "figure when it was taken. " if any(r.last_reading is not None for r in sheet.rows) else "")
        # one piece, never split over two pages
        story.append(KeepTogether([_p(
            "Life used: damage so far against the damage this position can take in its circuit. "
            "ESR now: predicted, not measured; " + read + "\u201cdried out\u201d past twice the endurance-test "
            "drift, beyond the range the drift law is calibrated for. Replacement: same capacitance, the smallest "
            "usual rated voltage at least the original's and 1.25 times the working voltage (a can rated 160 V or "
            "more at most one usual rating above its original's, never below the working voltage), 105 \u00b0C, "
            "endurance at least the original's and at least 2,000 h, can no wider than the original "
            "(common practice).", "small")]))
    else:
        story.append(_p("No capacitor positions are recorded for this unit."))
    chart = damage_chart(sheet.chart, sheet.chart_today_year, width=WIDTH * 0.56, height=215)
    bottom = Table([[[_p("Damage over time: the worst positions", "h3"), chart],
                     [_p("Sign-off", "h3"), _signoff(WIDTH * 0.42)]]], colWidths=[WIDTH * 0.57, WIDTH * 0.43])
    bottom.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 0),
                                ("RIGHTPADDING", (0, 0), (-1, -1), 0)]))
    story.append(Spacer(1, 3 * mm))
    story.append(KeepTogether([bottom]))
    return story


def sheet_pdf_bytes(sheet):
    """One unit's sheet as PDF bytes."""
    return build(sheet_story(sheet), title=f"Service sheet {sheet.asset_tag}", footer=FOOTER,
                 subject=f"{sheet.maker} {sheet.model_name}")


def batch_pdf_bytes(sheets, *, on_draw=None):
    """Many sheets in one PDF, each starting on a new page with its own page count."""
    story = []
    for k, sheet in enumerate(sheets):
        if k:
            story.append(PageBreak())
        story.extend(sheet_story(sheet, key=k + 1, on_draw=on_draw))
    return build(story, title="Service sheets", footer=FOOTER)


__all__ = ["sheet_pdf_bytes", "batch_pdf_bytes", "sheet_story", "header_texts", "MUTED"]
