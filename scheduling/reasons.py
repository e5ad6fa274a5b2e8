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


def _months(days):
    """``Apr 2027`` for each of ``days`` (float days since 1970-01-01; NaN and
    infinities give ``''``)."""
    days = np.asarray(days, dtype=float)
    ok = np.isfinite(days)
    index = np.floor(np.where(ok, days, 0.0)).astype("int64").astype("datetime64[D]").astype("datetime64[M]")
    index = index.astype("int64").reshape(-1).tolist()
    return [_month_of(i) if good else "" for i, good in zip(index, ok.reshape(-1).tolist())]


def _position_name(fa, cache, pos):
    """``C12 (supply reservoir)`` for position ``pos``."""
    if pos not in cache:
        cache[pos] = f"{fa.pos_designator[pos]} ({ROLE_WORDS[ROLE_NAMES[int(fa.pos_role[pos])]]})"
    return cache[pos]


def _position_reason(fa, cache, pos, past, month, reach_day, today_day, damage, threshold):
    """Words for a capacitor at position ``pos``.  The wording is kept in
    ``cache`` (one per forecast run) per (position, when, crossed?), since
    the units of one gear model share their positions' words."""
    when = _since(reach_day, today_day) if past else month
    key = (pos, when, threshold <= 0)
    text = cache.get(key)
    if text is None:
        text = cache[key] = _position_reason_template(fa, pos, reach_day, today_day, threshold <= 0)
    return text


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
    nu = fa.n_units
    key = np.where(np.isnan(reaches), np.inf, reaches)
    first = _first_per_unit(fa.unit_index, key, nu, k=2) if fa.n_caps else np.full((nu, 2), -1)
    horizon_end = today_day + max(policy.watch_days, policy.horizon_days)
    # Which units say anything at all, and every figure the words need, are
    # found on whole arrays; the loop below only puts the words together.
    # Plain lists: no numpy scalars in the loop.
    taken = np.maximum(first, 0)
    first_key = np.where(first >= 0, key[taken], np.inf)
    pos_says_a = np.isfinite(first_key) & (first_key <= horizon_end)
    risk_says_a = risk_day <= horizon_end  # NaN compares False
    age_says_a = has_original & (age_day <= horizon_end)
    says = (risk_says_a | pos_says_a.any(axis=1) | age_says_a | storage_reform).tolist() if nu else []
    risk_says, pos_says, age_says = risk_says_a.tolist(), pos_says_a.tolist(), age_says_a.tolist()
    reform = storage_reform.tolist()
    risk_l, risk_day_l, age_l = risk.tolist(), risk_day.tolist(), age_day.tolist()
    first_key_l = first_key.tolist()
    first_pos = (fa.position_index[taken] if fa.n_caps else taken).tolist()
    first_damage, first_threshold = (damage[taken].tolist(), threshold[taken].tolist()) if fa.n_caps else ([], [])
    first_month = _months(first_key.reshape(-1))
    risk_month, age_month = _months(risk_day), _months(age_day)
    driver_pos = np.where(drivers >= 0, fa.position_index[np.maximum(drivers, 0)] if fa.n_caps else -1, -1).tolist()
    months_l = unpowered_months.tolist()
    horizon, limit = f"{policy.horizon_days:g}", _pct(policy.risk_limit)
    years = f"{policy.calendar_age_years:g}"
    cache, names_cache = {}, {}
    out = []
    for u in range(nu):
        if not says[u]:
            out.append([])
            continue
        items = []
        if risk_says[u]:
            when = risk_day_l[u]
            if when <= today_day:
                text = (f"If it works today, chance of a fault within {horizon} days: {_pct(risk_l[u])} "
                        f"(house limit {limit})")
            else:
                text = (f"If it works today, chance of a fault within {horizon} days: {_pct(risk_l[u])}, "
                        f"reaching the house limit of {limit} by {risk_month[u]}")
            names = [_position_name(fa, names_cache, pos) for pos in driver_pos[u] if pos >= 0]
            if names:
                text += ", mostly from " + " and ".join(names)
            items.append((when, text))
        for j in (0, 1):
            if pos_says[u][j]:
                when = first_key_l[u][j]
                items.append((when, _position_reason(fa, cache, first_pos[u][j], when < today_day,
                                                     first_month[2 * u + j], when, today_day,
                                                     first_damage[u][j], first_threshold[u][j])))
        if age_says[u]:
            when = age_l[u]
            items.append((when, f"Original capacitors over {years} years old {_since(when, today_day)}"
                                if when < today_day else f"Original capacitors reach {years} years of age by "
                                f"{age_month[u]}"))
        if len(items) > 1:
            items.sort(key=lambda x: x[0])
        words = [w for _, w in items]
        if reform[u]:
            words.append(f"Unpowered for {months_l[u]:.0f} months: reform the capacitors "
                         "(bring the unit up slowly on a current-limited supply) before it goes out")
        out.append(words)
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
