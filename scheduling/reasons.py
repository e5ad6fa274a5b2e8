"""The reasons a forecast gives, in words a technician can act on."""

import functools
import math

import numpy as np

from .days import day_to_date
from .grouping import _first_per_unit
from .thresholds import ROLE_NAMES


ROLE_WORDS = {
    "general": "general", "supply_decoupling": "supply decoupling", "timing": "timing",
    "supply_reservoir": "supply reservoir", "pump_flying": "pump flying", "pump_reservoir": "pump reservoir",
    "signal_coupling": "signal coupling",
}


#: A date estimated backwards further than this many days is given as a year
#: only ("since about 1993"): the even-ageing estimate is not worth a month.
YEAR_ONLY_AFTER_DAYS = 730


@functools.lru_cache(maxsize=65536)
def _month(day):
    return f"{day_to_date(day):%b %Y}"


@functools.lru_cache(maxsize=65536)
def _year(day):
    return day_to_date(day).year


@functools.lru_cache(maxsize=4096)
def _month_of(month_index):
    """``Apr 2027`` for a month counted from January 1970."""
    year, m = divmod(int(month_index), 12)
    return f"{MONTH_NAMES[m]} {1970 + year}"


MONTH_NAMES = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def _since(day, today_day):
    """``since about 1993`` (long ago: the year) or ``since about Mar 2025``."""
    whole = math.floor(day)
    if today_day - day > YEAR_ONLY_AFTER_DAYS:
        return f"since about {_year(whole)}"
    return f"since about {_month(whole)}"


def _when(day, today_day):
    return _since(day, today_day) if day < today_day else f"by {_month(math.floor(day))}"


def _pct(p):
    """A chance as the pages write it: ``23 %``, ``under 1 %``."""
    return "under 1 %" if 0 < p < 0.005 else f"{p * 100:.0f} %"


def _each_distinct(codes, make):
    """``make(i)`` for every row ``i`` of ``codes`` (a 1-d integer array), as an
    object array: called once per distinct code, with the first row having it."""
    _, first, inverse = np.unique(codes, return_index=True, return_inverse=True)
    return np.array([make(i) for i in first.tolist()], dtype=object)[inverse]


def _month_index(days):
    """Months from January 1970 of each of ``days`` (finite float days)."""
    return np.floor(days).astype("int64").astype("datetime64[D]").astype("datetime64[M]").astype("int64")


def _when_codes(days, today_day):
    """A code for each of ``days`` (finite), the same for two days exactly when
    ``_when`` gives them the same words: a past day long ago by its year, any
    other past day by its month, a day to come by its month."""
    month = _month_index(days)
    long_ago = today_day - days > YEAR_ONLY_AFTER_DAYS
    month = np.where(long_ago, month - month % 12, month)
    kind = np.where(long_ago, 0, np.where(days < today_day, 1, 2))
    return month * 3 + kind


def _position_name(fa, pos):
    """``C12 (supply reservoir)`` for position ``pos``."""
    return f"{fa.pos_designator[pos]} ({ROLE_WORDS[ROLE_NAMES[int(fa.pos_role[pos])]]})"


def _risk_words(fa, policy, today_day, risk, risk_day, driver_pos):
    """The risk sentence of each unit (a row of the arguments) that gives one."""
    horizon, limit = f"{policy.horizon_days:g}", _pct(policy.risk_limit)
    head = f"If it works today, chance of a fault within {horizon} days: "
    pct = np.array([_pct(p) for p in risk.tolist()], dtype=object)
    past = risk_day <= today_day
    month = _month_index(np.where(past, 0.0, risk_day))
    tail = np.where(past, f" (house limit {limit})", _each_distinct(
        month, lambda i: f", reaching the house limit of {limit} by {_month_of(month[i])}"))

    def mostly(i):
        names = [_position_name(fa, pos) for pos in driver_pos[i].tolist() if pos >= 0]
        return ", mostly from " + " and ".join(names) if names else ""

    pair = (driver_pos[:, 0] + 1) * (len(fa.pos_designator) + 1) + driver_pos[:, 1] + 1
    return head + pct + tail + _each_distinct(pair, mostly)


def _position_words(fa, today_day, pos, reach_day, threshold_is_zero):
    """The sentence of each capacitor (a row of the arguments) reaching its
    limit: the units of one gear model share their positions' words, so each
    distinct (position, when, new part fails?) is worded once."""
    code = (_when_codes(reach_day, today_day) * len(fa.pos_designator) + pos) * 2 + threshold_is_zero
    return _each_distinct(code, lambda i: _position_reason_template(
        fa, int(pos[i]), float(reach_day[i]), today_day, bool(threshold_is_zero[i])))


def _age_words(policy, today_day, age_day):
    """The calendar-age sentence of each unit (a row of ``age_day``) that gives one."""
    years = f"{policy.calendar_age_years:g}"

    def words(i):
        day = float(age_day[i])
        if day < today_day:
            return f"Original capacitors over {years} years old {_since(day, today_day)}"
        return f"Original capacitors reach {years} years of age by {_month_of(_month_index(day))}"

    return _each_distinct(_when_codes(age_day, today_day), words)


def _position_reason_template(fa, pos, reach_day, today_day, threshold_is_zero):
    des = fa.pos_designator[pos].replace("{", "{{").replace("}", "}}")
    role = ROLE_NAMES[int(fa.pos_role[pos])]
    c = fa.pos_circuit
    if threshold_is_zero:
        return (f"{des} {ROLE_WORDS[role]}: the circuit requirement is not met even by a new part; "
                "check this position's circuit figures")
    if role in ("pump_flying", "pump_reservoir") and not np.isnan(c["pump_min_rail_v"][pos]):
        what = f"negative rail would sag below {c['pump_min_rail_v'][pos]:g} V"
    elif role == "supply_reservoir" and not np.isnan(c["reservoir_ripple_limit_v"][pos]):
        what = f"supply ripple would exceed {c['reservoir_ripple_limit_v'][pos]:g} V p-p"
    elif role == "signal_coupling" and not np.isnan(c["coupling_max_corner_hz"][pos]):
        what = f"bass roll-off would rise above {c['coupling_max_corner_hz'][pos]:g} Hz"
    else:
        what = "reaches end-of-life drift (ESR doubled, capacitance down 20 %)"
    if reach_day < today_day:
        what = what.replace("would rise", "has risen").replace("would exceed", "exceeds").replace(
            "would sag", "sags").replace("reaches", "past")
    return f"{des} {ROLE_WORDS[role]}: {what} {_when(reach_day, today_day)}"


def _reasons(fa, policy, today_day, damage, threshold, reaches, risk, risk_day, age_day, has_original,
             storage_reform, unpowered_months, drivers):
    """Each unit's reasons, a list of sentences in the order of the days they
    speak of (the reform last); an empty list for a unit with nothing to say."""
    nu = fa.n_units
    key = np.where(np.isnan(reaches), np.inf, reaches)
    first = _first_per_unit(fa.unit_index, key, nu, k=2) if fa.n_caps else np.full((nu, 2), -1)
    horizon_end = today_day + max(policy.watch_days, policy.horizon_days)
    # Every sentence a unit can give is made on whole arrays, as a column of
    # `words` (None where the unit does not give it) with the day it speaks
    # of in `days`: risk, first and second position to reach its limit,
    # calendar age, and the reform last.  Only the rows' putting in order is
    # left to do per unit.
    words = np.full((nu, 5), None, dtype=object)
    days = np.full((nu, 5), np.nan)  # NaN: not given, sorts last

    gives = risk_day <= horizon_end  # NaN compares False
    driver_pos = (np.where(drivers >= 0, fa.position_index[np.maximum(drivers, 0)], -1) if fa.n_caps
                  else np.full_like(drivers, -1))
    words[gives, 0] = _risk_words(fa, policy, today_day, risk[gives], risk_day[gives], driver_pos[gives])
    days[gives, 0] = risk_day[gives]

    first_key = np.full((nu, 2), np.inf)
    first_key[first >= 0] = key[first[first >= 0]]
    gives = np.isfinite(first_key) & (first_key <= horizon_end)
    rows = first[gives]  # unit by unit, its first position before its second
    words[:, 1:3][gives] = _position_words(fa, today_day, fa.position_index[rows], first_key[gives],
                                           threshold[rows] <= 0)
    days[:, 1:3][gives] = first_key[gives]

    gives = has_original & (age_day <= horizon_end)
    words[gives, 3] = _age_words(policy, today_day, age_day[gives])
    days[gives, 3] = age_day[gives]

    words[storage_reform, 4] = [f"Unpowered for {months:.0f} months: reform the capacitors (bring the unit up "
                                "slowly on a current-limited supply) before it goes out"
                                for months in unpowered_months[storage_reform].tolist()]
    days[storage_reform, 4] = np.inf

    # A stable sort keeps the columns' order among sentences of the same day.
    order = np.argsort(days, axis=1, kind="stable")
    out = np.take_along_axis(words, order, axis=1).tolist()
    for unit_words, n in zip(out, (~np.isnan(days)).sum(axis=1).tolist()):
        del unit_words[n:]
    return out


def action_words(action, why, role, *, share=None, age_years=None, age_limit_years=None, min_rail_v=None,
                 ripple_limit_v=None, max_corner_hz=None):
    """One short line saying what to do with a position and why.

    ``action`` and ``why`` are the codes of :mod:`scheduling.triage`; ``share``
    is damage over its limit (1 = at the limit); the circuit figures are the
    position's own (``None`` when the role has none).
    """
    from .triage import ACTION_NAMES, WHY_AGE, WHY_NEAR_LIMIT, WHY_NEW_FAILS, WHY_PAST_LIMIT, WHY_RISK_SHARE

    verb = ACTION_NAMES[int(action)]
    why = int(why)
    if why == WHY_NEW_FAILS:
        return f"{verb}: the circuit figures say even a new part falls short; check them"
    if why == WHY_PAST_LIMIT:
        if role in ("pump_flying", "pump_reservoir") and min_rail_v is not None:
            return f"{verb}: negative rail below {min_rail_v:g} V at today's predicted ESR"
        if role == "supply_reservoir" and ripple_limit_v is not None:
            return f"{verb}: supply ripple above {ripple_limit_v:g} V p-p at today's predicted ESR and capacitance"
        if role == "signal_coupling" and max_corner_hz is not None:
            return f"{verb}: bass corner above {max_corner_hz:g} Hz at today's predicted capacitance"
        return f"{verb}: past end-of-life drift (ESR doubled, capacitance down 20 %)"
    if why == WHY_AGE:
        return f"{verb}: original part {age_years:.0f} years old (house limit {age_limit_years:g} years)"
    if why == WHY_NEAR_LIMIT:
        return f"{verb}: at {_pct(min(share, 1.0))} of its limit; read its ESR and capacitance"
    if why == WHY_RISK_SHARE:
        return f"{verb}: carries much of the unit's risk for its next hire; read its ESR and capacitance"
    if share is None:
        return verb
    return f"{verb}: {_pct(min(share, 1.0))} of its limit"
