"""Which units the engine can forecast, and why not the others (pure numpy).

One unit whose figures are broken (a capacitor typed as 1 pF, a hire of a
million hours, a circuit figure of zero) must not stop the forecast of the
whole fleet: the physics refuses a NaN or an infinity anywhere in an array,
and one unit's part is enough.  ``compute_sound`` therefore

1. finds the units whose inputs the engine cannot use (``input_problems``:
   figures that are not finite, not above zero, or no real part's; ripple
   heating no part survives; a circuit figure the formulas divide by),
2. forecasts the others (``forecast.compute`` on the fleet without them),
3. if the arithmetic still refuses something no check foresaw, finds the
   units it refuses by halving the fleet, and forecasts the rest,
4. drops the units whose results are not finite (``result_problems``),

and returns each unit it could not forecast with the reason in words, for a
technician to put right.  When every unit is sound it costs a few passes over
the arrays and one call of ``compute``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from . import parameters as P
from . import physics
from .forecast import compute
from .reasons import ROLE_WORDS
from .thresholds import ROLE_CODES, ROLE_NAMES

#: Arrays of ``loader.FleetArrays`` indexed by unit row, by capacitor row, and
#: those shared by all (gear models, positions, snapshots).  A new field must
#: be added to one of them (a test holds this).
UNIT_FIELDS = (
    "unit_id", "asset_tag", "unit_model", "manufactured_day", "joined_day", "hist_powered", "hist_unpowered",
    "accounted_day", "last_powered_day", "monthly_store_c", "use_powered_h_per_year", "use_out_h_per_year",
    "use_ambient_c", "use_hires_per_year",
)
CAPACITOR_FIELDS = (
    "cap_id", "unit_index", "position_index", "capacitance_f", "rated_voltage_v", "rated_temp_c", "rated_life_h",
    "esr0_ohm", "diameter_mm", "length_mm", "installed_day", "is_original", "baseline_index",
)
#: Bench readings (``scheduling.readings``): one entry per reading, the first
#: of each tuple the capacitor row it is about (renumbered with the subset).
READING_FIELDS = (
    ("reading_cap", "reading_day", "reading_snap", "reading_esr_ohm", "reading_capacitance_f"),
    ("rail_fly", "rail_day", "rail_snap", "rail_measured_v", "rail_input_v", "rail_load_a"),
)
SHARED_FIELDS = (
    "model_id", "model_rise_k", "model_hours_per_day", "pos_id", "pos_designator", "pos_role", "pos_ripple_a",
    "pos_partner", "pos_circuit", "snap_powered", "snap_unpowered", "model_means",
)

#: What the arithmetic raises when it meets a figure it cannot use.
ARITHMETIC_ERRORS = (ValueError, ArithmeticError, IndexError)

#: Circuit figures by role: those the formulas divide by (above zero) and
#: those they only add or scale (zero or more).  NaN means "not given".
CIRCUIT_RULES = {
    "pump_flying": (("pump_freq_hz", "pump_min_rail_v"), ("pump_input_v", "pump_load_a", "pump_switch_ohm")),
    "signal_coupling": (("coupling_load_ohm", "coupling_max_corner_hz"), ()),
    "supply_reservoir": (("reservoir_ripple_freq_hz", "reservoir_ripple_limit_v"), ("reservoir_load_a",)),
}
CIRCUIT_RULES["pump_reservoir"] = CIRCUIT_RULES["pump_flying"]
CIRCUIT_WORDS = {
    "pump_freq_hz": ("pump switching frequency", "Hz"), "pump_min_rail_v": ("minimum rail magnitude", "V"),
    "pump_input_v": ("pump input voltage", "V"), "pump_load_a": ("pump load current", "A"),
    "pump_switch_ohm": ("pump switch resistance", "ohm"), "coupling_load_ohm": ("coupling load resistance", "ohm"),
    "coupling_max_corner_hz": ("highest allowed corner frequency", "Hz"),
    "reservoir_ripple_freq_hz": ("reservoir ripple frequency", "Hz"),
    "reservoir_ripple_limit_v": ("ripple limit", "V"), "reservoir_load_a": ("reservoir load current", "A"),
}
#: Most reasons given for one unit.
MAX_REASONS = 3


@dataclass
class Unforecastable:
    """A unit the engine could not forecast, and why, in words."""

    unit_id: int
    asset_tag: str
    reasons: list = field(default_factory=list)


# --- the fleet without some units ------------------------------------------------------

def fleet_subset(fa, rows):
    """The fleet ``fa`` restricted to the unit rows ``rows`` (ascending), with
    their capacitors; gear models, positions and snapshots are shared."""
    rows = np.asarray(rows, dtype=np.int64)
    new_index = np.full(fa.n_units, -1, dtype=np.int64)
    new_index[rows] = np.arange(rows.size)
    keep = new_index[fa.unit_index] >= 0
    changes = {}
    for f in dataclasses.fields(fa):
        value = getattr(fa, f.name)
        if f.name in UNIT_FIELDS and value is not None:
            changes[f.name] = [value[k] for k in rows.tolist()] if isinstance(value, list) else value[rows]
        elif f.name in CAPACITOR_FIELDS and value is not None:
            changes[f.name] = value[keep]
    changes["unit_index"] = new_index[fa.unit_index[keep]]
    new_cap = np.full(fa.n_caps, -1, dtype=np.int64)
    new_cap[keep] = np.arange(int(keep.sum()))
    for names in READING_FIELDS:
        about = getattr(fa, names[0])
        if about is None:
            continue
        kept = new_cap[about] >= 0
        for name in names[1:]:
            changes[name] = getattr(fa, name)[kept]
        changes[names[0]] = new_cap[about[kept]]
    return dataclasses.replace(fa, **changes)


# --- inputs ------------------------------------------------------------------------------

class _Found:
    """Reasons gathered per unit row."""

    def __init__(self, fa):
        self.fa = fa
        self.by_unit = {}
        self.names = {}

    def part(self, pos):
        if pos not in self.names:
            role = ROLE_NAMES.get(int(self.fa.pos_role[pos]), "general")
            self.names[pos] = f"{self.fa.pos_designator[pos]} ({ROLE_WORDS.get(role, role)})"
        return self.names[pos]

    def units(self, rows, words):
        for u in np.unique(np.asarray(rows, dtype=np.int64)).tolist():
            reasons = self.by_unit.setdefault(u, [])
            if words not in reasons and len(reasons) < MAX_REASONS:
                reasons.append(words)

    def capacitors(self, mask, words_of):
        """``words_of(i)`` for the first flagged capacitor of each unit."""
        rows = np.flatnonzero(mask)
        if not rows.size:
            return
        units, first = np.unique(self.fa.unit_index[rows], return_index=True)
        for u, i in zip(units.tolist(), rows[first].tolist()):
            self.units([u], words_of(i))


def _not_positive(x):
    return ~(np.isfinite(x) & (x > 0))


def input_problems(fa):
    """{unit row: [reasons]} for units whose inputs the engine cannot use."""
    found = _Found(fa)
    ui = fa.unit_index
    if fa.n_units == 0:
        return {}
    # Unit figures: dates, histories, storage and recent use.
    for name, words in (("manufactured_day", "its year of manufacture"), ("joined_day", "the date it joined the fleet"),
                        ("accounted_day", "the date its thermal history was counted to")):
        found.units(np.flatnonzero(~np.isfinite(getattr(fa, name))), f"{words} is not a date the engine can use")
    for name in ("hist_powered", "hist_unpowered"):
        hist = getattr(fa, name)
        if hist.size:
            bad = ~np.isfinite(hist).all(axis=1) | (hist.min(axis=1) < 0)
            found.units(np.flatnonzero(bad), "its thermal history holds hours that are not finite or below zero; "
                                             "it is rebuilt from the records when they change")
    if fa.monthly_store_c.size:
        bad = ~(np.isfinite(fa.monthly_store_c).all(axis=1) & (fa.monthly_store_c.min(axis=1) > P.ABSOLUTE_ZERO_C))
        found.units(np.flatnonzero(bad), "its home location's storage temperatures are not usable")
    for name in ("use_powered_h_per_year", "use_out_h_per_year", "use_ambient_c"):
        value = getattr(fa, name)
        found.units(np.flatnonzero(np.isinf(value) | (value < P.ABSOLUTE_ZERO_C)),
                    "its hires of the last twelve months give no finite figures")
    model_bad = ~np.isfinite(fa.model_rise_k) | (fa.model_rise_k < 0) | ~np.isfinite(fa.model_hours_per_day)
    if model_bad.any():
        found.units(np.flatnonzero(model_bad[fa.unit_model]),
                    "its gear model's internal rise or powered hours per day is not a usable figure")
    if fa.n_caps == 0:
        return found.by_unit

    # Capacitor figures, each named by its position.
    def figure(label):
        return lambda i: f"{found.part(int(fa.position_index[i]))}: its {label} is missing, not finite or not above zero"

    for name, label in (("capacitance_f", "capacitance"), ("esr0_ohm", "ESR (or tan delta)"),
                        ("rated_life_h", "rated endurance"), ("diameter_mm", "can diameter"),
                        ("length_mm", "can length"), ("rated_voltage_v", "rated voltage")):
        found.capacitors(_not_positive(getattr(fa, name)), figure(label))
    found.capacitors(~np.isfinite(fa.rated_temp_c) | (fa.rated_temp_c <= P.ABSOLUTE_ZERO_C),
                     figure("rated temperature"))
    found.capacitors(~np.isfinite(fa.installed_day), figure("date of fitting"))
    sound = ~(_not_positive(fa.capacitance_f) | _not_positive(fa.esr0_ohm) | _not_positive(fa.diameter_mm)
              | _not_positive(fa.length_mm) | _not_positive(fa.rated_voltage_v))
    ripple = fa.pos_ripple_a[fa.position_index]
    found.capacitors(np.isinf(ripple) | (ripple < 0), lambda i: f"{found.part(int(fa.position_index[i]))}: "
                                                                  f"its ripple current is not a usable figure")
    if sound.any():
        k = np.flatnonzero(sound)
        bad = physics.implausible_parts(fa.capacitance_f[k], fa.rated_voltage_v[k], fa.esr0_ohm[k],
                                        fa.diameter_mm[k], fa.length_mm[k],
                                        np.clip(np.nan_to_num(ripple[k], posinf=0.0), 0.0, None))
        _implausible(found, fa, k, bad)
    _circuits(found, fa)
    return found.by_unit


def _capacitance_words(farads):
    """``1 pF``, ``470 nF``, ``2200 µF``: up to four figures, in the unit parts are marked in."""
    for scale, unit in ((1e-9, "pF"), (1e-6, "nF")):
        if farads < scale:
            return f"{farads / scale * 1e3:.4g} {unit}"
    return f"{farads * 1e6:.4g} \u00b5F"


def _implausible(found, fa, k, bad):
    """Reasons for parts no real capacitor could be: the first of charge, ESR
    and ripple heating that is wrong, per capacitor."""
    charge, esr = bad["charge"], bad["esr"] & ~bad["charge"]
    ripple = bad["ripple"] & ~bad["charge"] & ~bad["esr"]
    if not (charge.any() or esr.any() or ripple.any()):
        return  # the usual case: no lookup table over every part needed
    flagged_rows = k[charge | esr | ripple]
    j = dict(zip(flagged_rows.tolist(), np.flatnonzero(charge | esr | ripple).tolist()))

    def name(i):
        return found.part(int(fa.position_index[i]))

    def flagged(which):
        mask = np.zeros(fa.n_caps, dtype=bool)
        mask[k[which]] = True
        return mask

    found.capacitors(flagged(charge), lambda i: (
        f"{name(i)}: {_capacitance_words(fa.capacitance_f[i])} at {fa.rated_voltage_v[i]:g} V in a "
        f"{fa.diameter_mm[i]:g} x {fa.length_mm[i]:g} mm can is no real part's capacitance"))
    found.capacitors(flagged(esr), lambda i: (
        f"{name(i)}: an ESR of {fa.esr0_ohm[i]:.3g} \u03a9 with {_capacitance_words(fa.capacitance_f[i])} means "
        f"tan delta {bad['tan_delta'][j[i]]:.2g} at 120 Hz, no real part's figure"))
    found.capacitors(flagged(ripple), lambda i: (
        f"{name(i)}: its ripple current would heat it {bad['ripple_rise_k'][j[i]]:.3g} K above the air around "
        f"it, which no part survives (check its ripple current, ESR and capacitance)"))


def _circuits(found, fa):
    """Circuit figures of the positions the fleet's capacitors sit in."""
    role = fa.pos_role
    for role_name, (positive, nonnegative) in CIRCUIT_RULES.items():
        at = role == ROLE_CODES[role_name]
        if not at.any():
            continue
        for name in positive + nonnegative:
            value = fa.pos_circuit[name]
            given = ~np.isnan(value)
            wrong = given & (_not_positive(value) if name in positive else ~(np.isfinite(value) & (value >= 0)))
            bad_pos = np.flatnonzero(at & wrong)
            if not bad_pos.size:
                continue
            label, unit = CIRCUIT_WORDS[name]
            need = "above zero" if name in positive else "zero or more"
            for pos in bad_pos.tolist():
                rows = fa.unit_index[fa.position_index == pos]
                found.units(rows, f"{found.part(pos)}: the gear model's {label} is {value[pos]:g} {unit}; "
                                  f"it must be {need}")


# --- results --------------------------------------------------------------------------------

#: Results that must be finite for every capacitor, and for every unit.
CAPACITOR_RESULTS = ("damage", "rate_per_day", "threshold")
UNIT_RESULTS = ("risk", "hire_risk", "score")


def result_problems(fa, result):
    """{unit row: [reasons]} for units whose results are not finite."""
    found = _Found(fa)
    for name in CAPACITOR_RESULTS:
        value = getattr(result, name, None)
        if value is not None and value.size:
            found.capacitors(~np.isfinite(value), lambda i, name=name: (
                f"{found.part(int(fa.position_index[i]))}: the forecast gave no finite {name.replace('_', ' ')}; "
                f"check its figures and the unit's hires"))
    for name in UNIT_RESULTS:
        value = getattr(result, name, None)
        if value is not None and np.size(value):
            found.units(np.flatnonzero(~np.isfinite(np.asarray(value, dtype=float))),
                        f"the forecast gave no finite {name.replace('_', ' ')}; check the unit's figures and hires")
    return found.by_unit


# --- the forecast of the sound units ------------------------------------------------------------

def _failing(fa, rows, run):
    """{unit row: [reasons]} for the units among ``rows`` whose forecast the
    arithmetic refuses, found by halving."""
    try:
        run(fleet_subset(fa, rows))
        return {}
    except ARITHMETIC_ERRORS as exc:
        if rows.size == 1:
            return {int(rows[0]): [f"the life engine could not work it out ({exc}); check its capacitor figures "
                                   f"and hires"]}
    mid = rows.size // 2
    return {**_failing(fa, rows[:mid], run), **_failing(fa, rows[mid:], run)}


def compute_sound(fa, *, today, policy=None, options=None):
    """Forecast every unit of ``fa`` that can be forecast.

    Returns ``(fleet, result, unforecastable)``: the fleet of the units
    forecast (``fa`` itself when all are), their ``forecast.FleetForecast``,
    and a list of :class:`Unforecastable`, one per unit left out.
    """
    def run(sub):
        return compute(sub, today=today, policy=policy, options=options)

    problems = input_problems(fa)
    result = None
    for _ in range(3):  # inputs, then arithmetic, then results; each pass only removes units
        sub = fa if not problems else fleet_subset(fa, _rows_without(fa, problems))
        try:
            result = run(sub)
        except ARITHMETIC_ERRORS:
            rows = _rows_without(fa, problems)
            found = _failing(fa, rows, run)
            if not found:
                raise  # the fleet fails only as a whole: nothing to set aside
            problems.update(found)
            continue
        found = result_problems(sub, result)
        if not found:
            break
        kept = _rows_without(fa, problems)
        problems.update({int(kept[u]): words for u, words in found.items()})
    else:
        sub = fleet_subset(fa, _rows_without(fa, problems))
        result = run(sub)
    unforecastable = [Unforecastable(int(fa.unit_id[u]), fa.asset_tag[u], words)
                      for u, words in sorted(problems.items())]
    return sub, result, unforecastable


def _rows_without(fa, problems):
    keep = np.ones(fa.n_units, dtype=bool)
    keep[list(problems)] = False
    return np.flatnonzero(keep)
