"""The due list and the parts list drawn as PDF tables."""

import functools
from xml.sax.saxutils import escape

from reportlab.lib.units import mm
from reportlab.lib.utils import simpleSplit
from reportlab.platypus import KeepTogether, Paragraph, Spacer, Table, TableStyle

from .. import formatting as fmt
from .base import (FONT, FONT_BOLD, MARGIN, MEASURE_TINT, MUTED, PAGE, REPLACE_TINT, SheetStart, build, style,
                   styles, wrap)
from .sheet import CELL_SIZE, _grid_style

WIDTH = PAGE[0] - 2 * MARGIN
FOOTER = ("Recap Scheduler \u00b7 figures from the stored forecasts (the life model's predictions) \u00b7 "
          "chances assume the unit works today")

DUE_COLUMNS = (("Pri.", 26), ("Asset tag", 54), ("Model", 110), ("Location", 66), ("Unit", 52), ("Forecast", 44),
               ("Act by", 50), ("Next hire", 42), ("Horizon", 42), ("Repl.", 30), ("Meas.", 30), ("Main reason", 228))


def _p(text, style="body"):
    return Paragraph(text, styles()[style])


def due_list_pdf_bytes(dl, *, title="Due list"):
    """The due list (reports.duelist.DueList) as PDF bytes."""
    left = f"{title}: the units that need work, then those due within {dl.within_days} days"
    right = f"printed {fmt.date(dl.today)}"
    story = [SheetStart("due", left, right), _p(f"{escape(title)}", "title"), Spacer(1, 2 * mm)]
    summary = (f"{dl.need_work} units need work (priority 1 first: the chance of a fault during the next hire, "
               f"weighted by what the failing parts do to it); {dl.due_only} more are due within "
               f"{dl.within_days} days.")
    if dl.cannot_forecast:
        summary += (f" {dl.cannot_forecast} cannot be forecast until their figures are corrected; they come "
                    f"first.")
    if dl.total > len(dl.rows):
        summary += f" The first {len(dl.rows)} of {dl.total} are printed; the app lists them all."
    if dl.computed_at:
        summary += f" Forecasts worked out {fmt.moment(dl.computed_at)} or later."
    story.append(_p(escape(summary)))
    story.append(Spacer(1, 2 * mm))
    if not dl.rows:
        story.append(_p("Nothing is due."))
        return build(story, title=title, footer=FOOTER)
    widths = [w for _, w in DUE_COLUMNS]
    data, style = [[wrap(h, w - 5, CELL_SIZE, FONT_BOLD) for h, w in DUE_COLUMNS]], _grid_style()
    for i, r in enumerate(dl.rows, start=1):
        if r.status == "invalid":
            data.append(["", r.asset_tag, wrap(r.model, widths[2] - 5, CELL_SIZE),
                         wrap(r.location, widths[3] - 5, CELL_SIZE),
                         r.unit_status.replace("Out on hire", "out"),
                         wrap(r.status_label, widths[5] - 5, CELL_SIZE), "fix figures", "", "", "", "",
                         wrap(r.reason, widths[11] - 5, CELL_SIZE)])
            continue
        data.append([
            str(r.priority or ""), r.asset_tag, wrap(r.model, widths[2] - 5, CELL_SIZE),
            wrap(r.location, widths[3] - 5, CELL_SIZE), r.unit_status.replace("Out on hire", "out"),
            r.status_label, fmt.today_or_date(r.act_by, dl.today), fmt.percent(r.hire_risk), fmt.percent(r.risk),
            str(r.replace or ""), str(r.measure or ""), wrap(r.reason, widths[11] - 5, CELL_SIZE)])
        if r.status == "overdue":
            style.append(("BACKGROUND", (5, i), (5, i), REPLACE_TINT))
        elif r.status == "due":
            style.append(("BACKGROUND", (5, i), (5, i), MEASURE_TINT))
    style += [("FONTNAME", (1, 1), (1, -1), FONT_BOLD), ("ALIGN", (7, 1), (10, -1), "RIGHT")]
    t = Table(data, colWidths=widths, repeatRows=1)
    t.setStyle(TableStyle(style))
    story.append(t)
    story.append(_p(f"Next hire: if it works today, the chance of a fault during its next typical hire. Horizon: "
                    f"the chance within the policy horizon ({dl.rows[0].horizon_days} days). Repl. and Meas.: "
                    "positions to replace and to read first.", "small"))
    return build(story, title=title, footer=FOOTER)


#: Lines of positions one table row holds at most; a longer list goes on in the rows after it,
#: so no row is taller than a page.
POSITION_LINES_PER_ROW = 30


def _position_chunks(text, width):
    """The positions of one parts line as Paragraphs (wrapped in the cell,
    nothing cut off), at most ``POSITION_LINES_PER_ROW`` lines each."""
    lines = simpleSplit(text or "", FONT, CELL_SIZE, width)
    if not lines:
        return [""]
    groups = [lines[k:k + POSITION_LINES_PER_ROW] for k in range(0, len(lines), POSITION_LINES_PER_ROW)]
    return [Paragraph(escape(" ".join(group)), _cell_style()) for group in groups]


@functools.cache
def _cell_style():
    return style("positions", CELL_SIZE, leading=CELL_SIZE * 1.2)


PART_COLUMNS = (("Value", 52), ("Series", 34), ("Rated V", 40), ("Temp.", 38), ("Endurance", 56),
                ("Can (max dia. \u00d7 length)", 90), ("Mount", 40), ("Low ESR", 38), ("To fit", 36),
                ("Spares", 36), ("Order", 36), ("To measure", 44), ("Units", 34), ("Positions", 220))


def parts_list_pdf_bytes(pl, *, title="Parts list"):
    """The parts list (reports.duelist.PartsList) as PDF bytes."""
    left = f"{title}: parts for the top {len(pl.unit_tags)} units of the due list"
    story = [SheetStart("parts", left, f"printed {fmt.date(pl.today)}"), _p(escape(title), "title"),
             Spacer(1, 2 * mm)]
    story.append(_p(escape(
        f"Replacement parts for the positions to replace in the first {len(pl.unit_tags)} units that need work "
        f"({', '.join(pl.unit_tags[:30])}{' ...' if len(pl.unit_tags) > 30 else ''}): {pl.to_fit} to fit, "
        f"{pl.to_order} to order with spares. Same capacitance (an IEC 60063 value), the smallest usual rated "
        "voltage at least the original's and 1.25 times the working voltage (a can rated 160 V or more at most one "
        "usual rating above its original's), 105 \u00b0C, endurance at least the original's and 2,000 h, "
        "a can no wider than the original, the same mount; low ESR only for pump parts (common practice). Spares: "
        "10 % rounded up, at least one a line.")))
    story.append(Spacer(1, 2 * mm))
    if not pl.lines:
        story.append(_p("No part needs replacing in these units."))
        return build(story, title=title, footer=FOOTER)
    widths = [w for _, w in PART_COLUMNS]
    data = [[wrap(h, w - 5, CELL_SIZE, FONT_BOLD) for h, w in PART_COLUMNS]]
    continued = []
    for ln in pl.lines:
        chunks = _position_chunks(ln.where_text(), widths[13] - 5)
        data.append([fmt.capacitance(ln.capacitance_uf), ln.series, fmt.volts(ln.rated_voltage_v),
                     fmt.temperature(ln.rated_temp_c), "\u2265 " + fmt.hours(ln.rated_life_h),
                     f"\u2264 {fmt.can_size(ln.max_diameter_mm, ln.length_mm)}", ln.mount,
                     "yes" if ln.low_esr else "", str(ln.to_fit or ""), str(ln.spares or ""), str(ln.order or ""),
                     str(ln.to_measure or ""), str(len(ln.units)), chunks[0]])
        for chunk in chunks[1:]:   # a very long list goes on in rows of its own, never cut off
            continued.append(len(data))
            data.append([f"{fmt.capacitance(ln.capacitance_uf)} {fmt.volts(ln.rated_voltage_v)} (cont.)"]
                        + [""] * 12 + [chunk])
    style = _grid_style() + [("ALIGN", (8, 1), (12, -1), "RIGHT"), ("FONTNAME", (10, 1), (10, -1), FONT_BOLD)]
    for i in continued:
        style += [("SPAN", (0, i), (12, i)), ("TEXTCOLOR", (0, i), (12, i), MUTED)]
    data.append(["Total", "", "", "", "", "", "", "", str(pl.to_fit), str(pl.to_order - pl.to_fit), str(pl.to_order),
                 str(sum(ln.to_measure for ln in pl.lines)), "", ""])
    style += [("FONTNAME", (0, -1), (-1, -1), FONT_BOLD), ("LINEABOVE", (0, -1), (-1, -1), 1.0, "#1d232b")]
    t = Table(data, colWidths=widths, repeatRows=1)
    t.setStyle(TableStyle(style))
    story.append(t)
    story.append(_p("To measure: positions to read first (listed after \u201cmeasure first\u201d); they may need a "
                    "part if the reading is poor (not in the order).", "small"))
    hazards = {}
    for ln in pl.lines:
        for name, (words, tags) in ln.hazards.items():
            if words:
                seen = hazards.setdefault(name, (words, []))[1]
                seen.extend(t for t in tags if t not in seen)
    if hazards:
        block = [Spacer(1, 2 * mm), _p("Hazards of the units these parts go into (their models' notes: read the "
                                       "service sheet's safety box before opening one)", "h3")]
        block += [Paragraph(f"<b>{escape(name)}</b> ({escape(', '.join(tags))}): {escape(words)}", styles()["bullet"],
                            bulletText="\u2022") for name, (words, tags) in hazards.items()]
        story.append(KeepTogether(block))
    return build(story, title=title, footer=FOOTER)
