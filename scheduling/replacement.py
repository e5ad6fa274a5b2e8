"""The part to fit in place of a worn one (pure; common practice).

What a technician buys for a recap follows common practice (no single
published source):

- the same capacitance; where the original value is not in the IEC 60063 E24
  series (an unusual value), the nearest E12 value;
- a rated voltage (:func:`replacement_voltage`): the smallest of the usual
  rated voltages of aluminium electrolytics (``RATED_VOLTAGES_V``) that is at
  least the original's and, where the working voltage is known, at least
  ``VOLTAGE_MARGIN`` times it; but for a high-voltage can (an original rated
  ``HIGH_VOLTAGE_V`` or more) never past the next usual rating above the
  original's (a 450 V filter can gets at most 500 V: 550 V and 600 V cans are
  scarce and larger, and may not fit), and never below the working voltage
  itself;
- rated at 105 degC (``REPLACEMENT_TEMP_C``);
- an endurance at least the original's and at least ``MIN_ENDURANCE_H``,
  rounded up to the usual endurance steps (``ENDURANCE_STEPS_H``);
- a can no wider than the original's, so that it fits; the same mount;
- a low-ESR type only where the original was chosen for it: the two parts of a
  switched-capacitor inverter (elsewhere a much lower ESR can change how a
  circuit behaves); polarity as fitted.

The IEC 60063 tables are the standard's rounded values, not ``10**(i/n)``.
"""

import math
from dataclasses import dataclass

#: IEC 60063 preferred numbers per decade (E6, E12, E24).
E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8,
       7.5, 8.2, 9.1)
SERIES = {"E6": E6, "E12": E12, "E24": E24}

#: Rated voltages aluminium electrolytics are commonly made in [V d.c.] (common practice).
RATED_VOLTAGES_V = (4.0, 6.3, 10.0, 16.0, 25.0, 35.0, 50.0, 63.0, 80.0, 100.0, 160.0, 200.0, 250.0, 315.0, 350.0,
                    400.0, 450.0, 500.0, 550.0, 600.0)
#: Endurance ratings series are commonly offered in [h at the rated temperature] (common practice).
ENDURANCE_STEPS_H = (1000.0, 2000.0, 3000.0, 4000.0, 5000.0, 6000.0, 7000.0, 8000.0, 10000.0, 12000.0, 15000.0,
                     20000.0)
#: Rated voltage over the working voltage a replacement should have (common practice).
VOLTAGE_MARGIN = 1.25
#: From this rated voltage up a can counts as high-voltage: the margin stops at the
#: next usual rating above the original's (common practice; such cans are scarce and
#: grow quickly with their rating).
HIGH_VOLTAGE_V = 160.0
REPLACEMENT_TEMP_C = 105.0
MIN_ENDURANCE_H = 2000.0
LOW_ESR_ROLES = ("pump_flying", "pump_reservoir")
#: How close a value must be to a series value to count as one (relative).
SERIES_TOLERANCE = 0.005


def _decade(value):
    return 10.0 ** math.floor(math.log10(value) + 1e-12)


def in_series(value, series="E24"):
    """True if ``value`` (any unit, > 0) is a value of the IEC 60063 series."""
    if not value > 0:
        raise ValueError("value must be above zero")
    d = _decade(value)
    mantissa = value / d
    return any(abs(mantissa - m) <= SERIES_TOLERANCE * m for m in SERIES[series] + (10.0,))


def nearest_in_series(value, series="E12"):
    """The value of the IEC 60063 series nearest to ``value`` (on a log scale)."""
    if not value > 0:
        raise ValueError("value must be above zero")
    d = _decade(value)
    candidates = [m * d for m in SERIES[series]] + [10.0 * d, SERIES[series][-1] * d / 10.0]
    return min(candidates, key=lambda c: abs(math.log(c / value)))


def _round_up(value, steps):
    for step in steps:
        if step >= value - 1e-9:
            return step
    return value  # beyond the table: keep the exact figure


def _next_above(value, steps):
    """The first step strictly above ``value`` (``value`` itself beyond the table)."""
    for step in steps:
        if step > value + 1e-9:
            return step
    return value


def replacement_voltage(rated_voltage_v, operating_voltage_v=0.0):
    """The rated voltage to buy in place of a part rated ``rated_voltage_v``
    working at ``operating_voltage_v`` (0 or None: not known).  Common practice:

    - the smallest usual rating (``RATED_VOLTAGES_V``) at least the original's
      and at least ``VOLTAGE_MARGIN`` times the working voltage;
    - for a high-voltage can (original rated ``HIGH_VOLTAGE_V`` or more) at most
      the next usual rating above the original's: 450 V gives 450 V, or 500 V
      when the margin asks for more, never 550 V or 600 V;
    - never below the working voltage itself (rounded up to a usual rating),
      even where that passes the cap (a can run above its own rating).
    """
    working = max(operating_voltage_v or 0.0, 0.0)
    wanted = _round_up(max(rated_voltage_v, VOLTAGE_MARGIN * working), RATED_VOLTAGES_V)
    if rated_voltage_v < HIGH_VOLTAGE_V:
        return wanted
    floor = _round_up(max(rated_voltage_v, working), RATED_VOLTAGES_V)
    return max(floor, min(wanted, _next_above(rated_voltage_v, RATED_VOLTAGES_V)))


@dataclass(frozen=True)
class Replacement:
    capacitance_uf: float
    rated_voltage_v: float
    rated_temp_c: float
    rated_life_h: float
    max_diameter_mm: float
    mount: str
    low_esr: bool

    def as_ratings(self):
        """The new part's ratings as the register stores them (fleet.services.RATING_FIELDS)."""
        return {"capacitance_uf": self.capacitance_uf, "rated_voltage_v": self.rated_voltage_v,
                "rated_temp_c": self.rated_temp_c, "rated_life_h": self.rated_life_h,
                "diameter_mm": self.max_diameter_mm, "mount": self.mount}


def recommend(*, capacitance_uf, rated_voltage_v, rated_life_h, diameter_mm, mount, role, operating_voltage_v=0.0):
    """The replacement for one fitted part, by the rules in the module notes."""
    if not capacitance_uf > 0 or not rated_voltage_v > 0 or not rated_life_h > 0 or not diameter_mm > 0:
        raise ValueError("capacitance, rated voltage, endurance and can diameter must be above zero")
    value = capacitance_uf if in_series(capacitance_uf, "E24") else nearest_in_series(capacitance_uf, "E12")
    volts = replacement_voltage(rated_voltage_v, operating_voltage_v)
    life = _round_up(max(rated_life_h, MIN_ENDURANCE_H), ENDURANCE_STEPS_H)
    return Replacement(capacitance_uf=float(f"{value:.6g}"), rated_voltage_v=volts, rated_temp_c=REPLACEMENT_TEMP_C,
                       rated_life_h=life, max_diameter_mm=float(diameter_mm), mount=mount,
                       low_esr=role in LOW_ESR_ROLES)


def group_parts(items):
    """Parts to order: ``items`` are ``(Replacement, where)`` pairs (``where``
    says which unit and position, e.g. "CB-0008 C4"); the same part is counted
    once with its quantity and every place it goes.  Sorted by mount, then
    capacitance, then voltage.  Returns ``[(Replacement, quantity, [where...])]``."""
    groups = {}
    for part, where in items:
        groups.setdefault(part, []).append(where)
    order = sorted(groups, key=lambda p: (p.mount, p.capacitance_uf, p.rated_voltage_v, p.rated_life_h,
                                          p.max_diameter_mm, p.low_esr))
    return [(p, len(groups[p]), groups[p]) for p in order]
