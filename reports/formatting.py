"""Numbers, values, dates and words as people read them.

The pages (``front``) and the printed sheets (``reports``) both show what the
life engine worked out; they share this module so that a capacitance, a date
or a chance reads the same everywhere.  Pure Python, no Django: templates
reach these through the ``recap`` template filters (front/templatetags).

House style:

- one date format everywhere: ``2 Dec 2026``; a moment adds the local time,
  ``2 Dec 2026 14:30``; an estimated month ``Dec 2026``, an estimated date long
  past only its year (``about 1993``);
- SI symbols with a space before them: ``4.7 µF``, ``0.38 Ω``, ``85 °C``,
  ``16 V``, ``2,000 h``, ``7 %``;
- figures the model cannot vouch for are words: life used past the range the
  drift laws are calibrated for is "over 2x rated life", never ``999 %``; a
  date beyond ``FAR_YEARS`` is "not within 20 years";
- a chance says what it assumes: "if it works today, chance of a fault within
  90 days: 7 %".
"""

from __future__ import annotations

import datetime as dt
import math
import re

from fleet import values

MICRO = "\u00b5"
OHM = "\u03a9"
DEGREE_C = "\u00b0C"

#: Dates further ahead than this many years are "not within 20 years": the
#: projection of use that far out is not worth a calendar date.
FAR_YEARS = 20
#: Damage (in units of rated life) past which the drift laws are outside the
#: range they are calibrated for (``scheduling.thresholds.DAMAGE_THRESHOLD_CAP``).
MODEL_RANGE_DAMAGE = 2.0
#: A share of the limit shown as a percentage up to this; beyond it in words.
LIFE_SHARE_SHOWN_MAX = 2.0


def plain_number(value, significant=3):
    """``value`` to ``significant`` figures, no exponent, no trailing zeros;
    thousands separated by commas from 10,000 up (``2,000`` too, for hours)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if value == 0:
        return "0"
    digits = significant - 1 - math.floor(math.log10(abs(value)))
    rounded = round(value, digits)
    if digits <= 0:
        return f"{int(rounded):,}"
    text = f"{rounded:,.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text


# --- quantities --------------------------------------------------------------


def capacitance(uf):
    """A capacitance stored in µF, written the way parts are marked:
    ``4.7 µF``, ``470 nF``, ``47 pF``, ``2200 µF`` (no separator in a part value)."""
    if uf is None:
        return ""
    try:
        text = values.format_capacitance(float(f"{uf:.3g}"))
    except ValueError:
        return f"{uf:g} {MICRO}F"
    return text.replace("uF", f"{MICRO}F")


def resistance(ohm):
    """An ESR or a resistor: ``0.378 Ω``, ``3.5 Ω``, ``10 kΩ``, ``1 MΩ``."""
    if ohm is None:
        return ""
    if abs(ohm) >= 1e6:
        return f"{plain_number(ohm / 1e6)} M{OHM}"
    if abs(ohm) >= 1e3:
        return f"{plain_number(ohm / 1e3)} k{OHM}"
    return f"{plain_number(ohm)} {OHM}"


def volts(v):
    return "" if v is None else f"{plain_number(v)} V"


def temperature(c):
    return "" if c is None else f"{plain_number(c)} {DEGREE_C}"


def hours(h):
    """Hours: ``9.5 h``, ``2,000 h``, ``12,345 h`` (whole hours from 100 up)."""
    if h is None:
        return ""
    if abs(h) >= 100:
        return f"{round(h):,} h"
    return f"{plain_number(h)} h"


def meter(h):
    """An hour-meter reading as the meter shows it, to a tenth: ``1,234.5 h``."""
    if h is None:
        return ""
    text = f"{h:,.1f}"
    return (text[:-2] if text.endswith(".0") else text) + " h"


def energy(joules):
    """``12.5 J``, ``0.08 J``, ``0.002 J``."""
    return "" if joules is None else f"{plain_number(joules, 2 if joules < 10 else 3)} J"


def seconds(s):
    """A short time: ``under 0.1 s``, ``1.9 s``, ``45 s``, ``2 min 5 s``, ``1 h 3 min``."""
    if s is None:
        return ""
    if s < 0.1:
        return "under 0.1 s"
    if s < 10:
        return f"{plain_number(s, 2)} s"
    if s < 60:
        return f"{round(s)} s"
    if s < 3600:
        m, r = divmod(round(s), 60)
        return f"{m} min {r} s" if r else f"{m} min"
    h, r = divmod(round(s / 60), 60)
    return f"{h} h {r} min" if r else f"{h} h"


def percent(p):
    """A share or chance (0..1): whole percent from 10 % up, one decimal
    below it: ``23 %``, ``7.4 %``, ``0.3 %``, ``under 0.1 %``, ``over 99 %``."""
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return ""
    if p <= 0:
        return "0 %"
    if p < 0.0005:
        return "under 0.1 %"
    if p < 0.0995:
        return f"{p * 100:.1f} %".replace(".0 %", " %")
    if 0.995 <= p < 1:
        return "over 99 %"
    return f"{round(p * 100):.0f} %"


def duration(hours_):
    """How long something took, in the largest sensible units:
    ``45 min``, ``5 h``, ``3 days 4 h``, ``12 days``, ``about 7 weeks``."""
    if hours_ is None:
        return ""
    if hours_ < 1:
        return f"{max(round(hours_ * 60), 1)} min"
    if hours_ < 24:
        h = round(hours_)
        return f"{h} h"
    days, h = divmod(round(hours_), 24)
    if days < 7:
        word = "day" if days == 1 else "days"
        return f"{days} {word} {h} h" if h else f"{days} {word}"
    if days < 28:
        return f"{days} days"
    return f"about {round(days / 7)} weeks"


# --- dates -----------------------------------------------------------------------


def date(d):
    """``2 Dec 2026``: the one date format of the app."""
    if d is None:
        return ""
    return f"{d.day} {d:%b %Y}"


def moment(t):
    """``2 Dec 2026 14:30`` (give a local time)."""
    if t is None:
        return ""
    return f"{t.day} {t:%b %Y %H:%M}"


def month(d):
    """``Dec 2026`` for a date only known to the month."""
    return "" if d is None else f"{d:%b %Y}"


def is_far(d, today, years=FAR_YEARS):
    return d is not None and d > _add_years(today, years)


def _add_years(d, years):
    try:
        return d.replace(year=d.year + years)
    except ValueError:  # 29 February
        return d.replace(year=d.year + years, day=28)


def date_ahead(d, today, *, none="not within 20 years"):
    """A date ahead of ``today``: the date, or ``not within 20 years`` when it
    is further out than ``FAR_YEARS`` (or unknown: nothing reaches it)."""
    if d is None or is_far(d, today):
        return none
    return date(d)


def estimated_past(d, today):
    """A date estimated backwards (even ageing since the part went in): the
    month within the last two years, else only the year: ``about Mar 2025``,
    ``about 1993``."""
    if d is None:
        return "at an unknown date"
    if (today - d).days <= 2 * 365:
        return f"about {month(d)}"
    return f"about {d.year}"


# --- the engine's figures in words --------------------------------------------------


def life_used(damage, limit):
    """How much of what a position can take is used, capped and in words past
    the model's range: ``45 %``, ``130 %``, ``over 2x its limit``,
    ``over 2x rated life``.

    ``damage`` is in units of rated life (1 = the endurance test's limits);
    ``limit`` the damage at which the position is due (its circuit's need,
    times the policy's damage limit); ``limit <= 0`` means even a new part
    falls short.
    """
    if damage is None:
        return ""
    if damage > MODEL_RANGE_DAMAGE:
        return "over 2x rated life"
    if limit is None or not limit > 0:
        return "no margin"
    share = damage / limit
    if share > LIFE_SHARE_SHOWN_MAX:
        return "over 2x its limit"
    return f"{round(share * 100):.0f} %"


def risk_sentence(risk, horizon_days):
    """``if it works today, chance of a fault within 90 days: 7 %``."""
    return f"if it works today, chance of a fault within {horizon_days:g} days: {percent(risk)}"


def hire_risk_sentence(risk):
    """``if it works today, chance of a fault during its next hire: 2 %``."""
    return f"if it works today, chance of a fault during its next hire: {percent(risk)}"


def today_or_date(d, today):
    """An act-by date: ``now`` for today (work already due), else the date."""
    if d is None:
        return "nothing due"
    if d <= today:
        return "now"
    return date_ahead(d, today, none="nothing due")


def age_years(installed_on, today):
    """Whole years since ``installed_on``."""
    return int((today - installed_on).days // 365.25) if installed_on else None


def first_of_next_month(d):
    return (d.replace(day=1) + dt.timedelta(days=32)).replace(day=1)


# --- printed output ------------------------------------------------------------------


def frequency(hz):
    """``120 Hz``, ``5 kHz``."""
    if hz is None:
        return ""
    if abs(hz) >= 1e3:
        return f"{plain_number(hz / 1e3)} kHz"
    return f"{plain_number(hz)} Hz"


def millimetres(mm):
    return "" if mm is None else f"{plain_number(mm)} mm"


def can_size(diameter_mm, length_mm):
    """A can as the trade writes it, diameter by length: ``10 × 20 mm``."""
    if diameter_mm is None:
        return ""
    if length_mm is None:
        return f"{plain_number(diameter_mm)} mm dia."
    return f"{plain_number(diameter_mm)} \u00d7 {plain_number(length_mm)} mm"


def designator_key(designator):
    """Sort key for reference designators: C2 before C10, then any suffix."""
    match = re.match(r"([A-Za-z]*)(\d*)(.*)", designator)
    prefix, number, rest = match.groups()
    return (prefix.upper(), int(number) if number else -1, rest)


def decimal_year(d):
    """A date as a year and its fraction, for chart axes: 2 Jul 2026 -> 2026.5."""
    start = dt.date(d.year, 1, 1)
    return d.year + (d - start).days / (dt.date(d.year + 1, 1, 1) - start).days
