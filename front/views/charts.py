"""The life chart of a unit, drawn on the server as SVG (no front-end build).

Two panels over one time axis: the worst positions' damage as a share of
their limits, and the unit's chance of a fault within the horizon given that
it works then.  Behind today the parts are taken to have aged evenly since
they went in; ahead of it they age at the projected rate of use (the shaded
part).  The figures come from ``scheduling.trajectory``.
"""

import datetime as dt
from html import escape

import numpy as np

from reports import formatting as fmt

WIDTH, HEIGHT = 960, 400
LEFT, RIGHT, TOP = 64, 200, 16
PANEL_H, GAP = 150, 44
#: The damage panel's top: shares of the limit above it run off the chart.
SHARE_TOP = 2.0
#: Line colours (with a dash pattern each, so they part in grey too).
COLOURS = ("#a8352a", "#25586e", "#a47b00", "#5a3d8a")
DASHES = ("", "6 3", "2 3", "9 3 2 3")


def _date(day):
    return dt.date(1970, 1, 1) + dt.timedelta(days=int(np.floor(day)))


def _path(xs, ys):
    points, out = [], []
    for x, y in zip(xs, ys):
        if np.isnan(y):
            if points:
                out.append(points)
            points = []
            continue
        points.append(f"{x:.1f},{y:.1f}")
    if points:
        out.append(points)
    return " ".join("M" + " L".join(p) for p in out if len(p) > 1)


def life_chart(curves, labels, *, risk_limit, horizon_days):
    """SVG text for a unit's ``curves`` (a ``scheduling.trajectory.Trajectory``)
    with one label per drawn position ("C4 pump flying")."""
    days = curves.days
    x0, x1 = float(days[0]), float(days[-1])
    plot_w = WIDTH - LEFT - RIGHT

    def x(day):
        return LEFT + (np.asarray(day, dtype=float) - x0) / (x1 - x0) * plot_w

    top1, top2 = TOP, TOP + PANEL_H + GAP
    with np.errstate(divide="ignore", invalid="ignore"):
        share = curves.damage / np.where(curves.limit > 0, curves.limit, np.nan)[:, None]
    risk_top = max(2 * risk_limit, float(np.nanmax(curves.risk)) if curves.risk.size else 0.0, 0.05)
    risk_top = min(1.0, np.ceil(risk_top * 20) / 20)

    def y_share(s):
        return top1 + PANEL_H - np.clip(s, 0, SHARE_TOP * 1.02) / SHARE_TOP * PANEL_H

    def y_risk(r):
        return top2 + PANEL_H - np.clip(r, 0, risk_top) / risk_top * PANEL_H

    today = curves.today_day
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" class="lifechart" '
             f'role="img" aria-labelledby="lifechart-title lifechart-desc">',
             '<title id="lifechart-title">Life chart</title>',
             f'<desc id="lifechart-desc">{escape(_description(curves, labels, share, horizon_days))}</desc>']
    # projected part, shaded
    parts.append(f'<rect x="{x(today):.1f}" y="{top1}" width="{x(x1) - x(today):.1f}" height="{PANEL_H}" '
                 f'class="ahead"/>')
    parts.append(f'<rect x="{x(today):.1f}" y="{top2}" width="{x(x1) - x(today):.1f}" height="{PANEL_H}" '
                 f'class="ahead"/>')
    # axes and grid
    for frac, text in ((0.0, "0 %"), (0.5, "100 %"), (1.0, "200 %")):
        yy = top1 + PANEL_H - frac * PANEL_H
        cls = "limit" if frac == 0.5 else "grid"
        parts.append(f'<line x1="{LEFT}" x2="{LEFT + plot_w}" y1="{yy:.1f}" y2="{yy:.1f}" class="{cls}"/>')
        parts.append(f'<text x="{LEFT - 6}" y="{yy + 4:.1f}" class="tick" text-anchor="end">{text}</text>')
    parts.append(f'<text x="{LEFT + 4}" y="{top1 + PANEL_H / 2 - 4:.1f}" class="note">limit</text>')
    for frac in (0.0, 0.5, 1.0):
        yy = top2 + PANEL_H - frac * PANEL_H
        parts.append(f'<line x1="{LEFT}" x2="{LEFT + plot_w}" y1="{yy:.1f}" y2="{yy:.1f}" class="grid"/>')
        parts.append(f'<text x="{LEFT - 6}" y="{yy + 4:.1f}" class="tick" text-anchor="end">'
                     f'{fmt.percent(frac * risk_top)}</text>')
    yl = y_risk(risk_limit)
    parts.append(f'<line x1="{LEFT}" x2="{LEFT + plot_w}" y1="{yl:.1f}" y2="{yl:.1f}" class="limit"/>')
    parts.append(f'<text x="{LEFT + 4}" y="{yl - 4:.1f}" class="note">house limit {fmt.percent(risk_limit)}</text>')
    parts.append(f'<text x="{LEFT}" y="{top1 - 4}" class="axis">Damage as a share of each part\'s limit</text>')
    parts.append(f'<text x="{LEFT}" y="{top2 - 6}" class="axis">If it works then, chance of a fault within '
                 f'{horizon_days:g} days</text>')
    # year ticks
    first, last = _date(x0).year, _date(x1).year
    step = max(1, int(np.ceil((last - first) / 10 / 5.0)) * 5) if last - first > 12 else \
        (2 if last - first > 6 else 1)
    for year in range((first // step + 1) * step, last + 1, step):
        xx = x(float((dt.date(year, 1, 1) - dt.date(1970, 1, 1)).days))
        parts.append(f'<line x1="{xx:.1f}" x2="{xx:.1f}" y1="{top2 + PANEL_H}" y2="{top2 + PANEL_H + 4}" '
                     f'class="grid"/>')
        parts.append(f'<text x="{xx:.1f}" y="{top2 + PANEL_H + 16}" class="tick" text-anchor="middle">{year}</text>')
    xt = x(today)
    parts.append(f'<line x1="{xt:.1f}" x2="{xt:.1f}" y1="{top1}" y2="{top2 + PANEL_H}" class="today"/>')
    parts.append(f'<text x="{xt + 4:.1f}" y="{top1 + 12}" class="note">today</text>')
    parts.append(f'<text x="{xt + 4:.1f}" y="{top1 + 24}" class="note muted">projected &#8594;</text>')
    # the curves
    xs = x(days)
    for i, label in enumerate(labels):
        colour, dash = COLOURS[i % len(COLOURS)], DASHES[i % len(DASHES)]
        d = _path(xs, y_share(share[i]))
        dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
        if d:
            parts.append(f'<path d="{d}" class="curve" stroke="{colour}"{dash_attr}/>')
        ly = top1 + 14 + i * 18
        parts.append(f'<line x1="{LEFT + plot_w + 12}" x2="{LEFT + plot_w + 36}" y1="{ly - 4}" y2="{ly - 4}" '
                     f'stroke="{colour}" class="curve"{dash_attr}/>')
        parts.append(f'<text x="{LEFT + plot_w + 40}" y="{ly}" class="legend">{escape(label)}</text>')
    parts.append(f'<path d="{_path(xs, y_risk(curves.risk))}" class="curve risk"/>')
    parts.append(f'<text x="{LEFT + plot_w + 12}" y="{top2 + 14}" class="legend">the whole unit</text>')
    parts.append("</svg>")
    return "\n".join(parts)


def _description(curves, labels, share, horizon_days):
    """The chart in words, for screen readers and as a check on what it shows."""
    today = curves.today_day
    i_today = int(np.argmin(np.abs(curves.days - today)))
    words = []
    for i, label in enumerate(labels):
        s = share[i, i_today]
        words.append(f"{label} at {fmt.percent(s) if s <= 2 else 'over 2x'} of its limit today")
    return ("; ".join(words) + f". If it works today, chance of a fault within {horizon_days:g} days: "
            f"{fmt.percent(float(curves.risk[i_today]))}.")
