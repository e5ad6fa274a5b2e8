"""The damage chart of a service sheet: the worst positions' life used over
time, past (solid, even ageing since the part went in) and projected (dashed,
at the projected rate of use), with the limit at 100 % and today marked."""

from reportlab.graphics.charts.legends import Legend
from reportlab.graphics.charts.lineplots import LinePlot
from reportlab.graphics.shapes import Drawing, Line, String
from reportlab.lib import colors
from reportlab.lib.utils import simpleSplit

from .base import DANGER, FONT, INK, MUTED

PALETTE = [colors.HexColor(c) for c in ("#1f5fa8", "#c2410c", "#15803d", "#7e22ce", "#a16207")]
#: Life used above this share of the limit is drawn at the top edge.
Y_MAX = 3.0


def damage_chart(series, today_year, *, width=440, height=190):
    """A Drawing of ``series`` (reports.sheets.ChartSeries, life used as a
    share of the limit) against decimal years."""
    d = Drawing(width, height)
    if not series:
        d.add(String(4, height / 2, "No forecast to draw yet.", fontName=FONT, fontSize=8, fillColor=MUTED))
        return d
    plot = LinePlot()
    plot.x, plot.y = 38, 30
    plot.width, plot.height = width - 200, height - 48
    data, styles = [], []
    top = min(max(max(max(s.life_used) for s in series) * 1.05, 1.2), Y_MAX)
    for k, s in enumerate(series):
        past = [(x, min(y, top)) for x, y in zip(s.years, s.life_used) if x <= today_year + 1e-9]
        ahead = [(x, min(y, top)) for x, y in zip(s.years, s.life_used) if x >= today_year - 1e-9]
        for part, dashed in ((past, False), (ahead, True)):
            if len(part) >= 2:
                data.append(part)
                styles.append((PALETTE[k % len(PALETTE)], dashed))
    plot.data = data
    for i, (colour, dashed) in enumerate(styles):
        plot.lines[i].strokeColor = colour
        plot.lines[i].strokeWidth = 1.3
        if dashed:
            plot.lines[i].strokeDashArray = (3, 2)
    x0 = min(min(s.years) for s in series)
    x1 = max(max(s.years) for s in series)
    plot.xValueAxis.valueMin, plot.xValueAxis.valueMax = x0, x1
    span = x1 - x0
    step = next(st for st in (1, 2, 5, 10, 20, 50) if span / st <= 9)
    first = int(x0 // step + 1) * step
    plot.xValueAxis.valueSteps = list(range(first, int(x1) + 1, step))
    plot.xValueAxis.labelTextFormat = "%d"
    plot.yValueAxis.valueMin, plot.yValueAxis.valueMax = 0.0, top
    ystep = 0.25 if top <= 1.5 else 0.5
    plot.yValueAxis.valueSteps = [i * ystep for i in range(int(top / ystep) + 1)]
    plot.yValueAxis.labelTextFormat = lambda v: f"{100 * v:.0f} %"
    for axis in (plot.xValueAxis, plot.yValueAxis):
        axis.labels.fontName, axis.labels.fontSize = FONT, 6.5
        axis.strokeColor = INK
    d.add(plot)
    # the limit and today
    y_limit = plot.y + plot.height * (1.0 / top)
    d.add(Line(plot.x, y_limit, plot.x + plot.width, y_limit, strokeColor=DANGER, strokeWidth=0.8,
               strokeDashArray=(1, 1.5)))
    d.add(String(plot.x + 2, y_limit + 2, "limit", fontName=FONT, fontSize=6.5, fillColor=DANGER))
    x_today = plot.x + plot.width * (today_year - x0) / (x1 - x0)
    d.add(Line(x_today, plot.y, x_today, plot.y + plot.height, strokeColor=MUTED, strokeWidth=0.6))
    d.add(String(x_today + 2, plot.y + plot.height - 7, "today", fontName=FONT, fontSize=6.5, fillColor=MUTED))
    d.add(String(plot.x - 34, plot.y + plot.height + 8, "Life used (share of each part's limit)", fontName=FONT,
                 fontSize=7, fillColor=INK))
    legend = Legend()
    legend.x, legend.y = plot.x + plot.width + 14, plot.y + plot.height
    legend.fontName, legend.fontSize = FONT, 7
    legend.dx, legend.dy, legend.deltay = 8, 6, 10
    legend.alignment = "right"
    legend.columnMaximum = 10
    # labels wrapped to the room right of the plot: nothing runs into what sits beside the chart
    room = width - legend.x - legend.dx - 6
    legend.colorNamePairs = [(PALETTE[k % len(PALETTE)],
                              "\n".join(simpleSplit(f"{s.designator} {s.role.lower()}".strip(), FONT, 7, room)))
                             for k, s in enumerate(series)]
    d.add(legend)
    d.add(String(legend.x, plot.y, "solid: so far (even ageing)", fontName=FONT, fontSize=6.2, fillColor=MUTED))
    d.add(String(legend.x, plot.y - 8, "dashed: at its projected use", fontName=FONT, fontSize=6.2, fillColor=MUTED))
    if any(max(s.life_used) > top for s in series):
        d.add(String(legend.x, plot.y - 16, f"drawn at {100 * top:.0f} % when above", fontName=FONT, fontSize=6.2,
                     fillColor=MUTED))
    return d
