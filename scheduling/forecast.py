"""The forecast: damage now, thresholds, risk and due dates for a whole fleet.

Pure numpy over the arrays of :class:`scheduling.loader.FleetArrays` (duck
typed; no Django import here).  Every physical step calls
:mod:`scheduling.physics`; this module only gathers, groups and schedules.

Times are in days since 1970-01-01 (float), damage is the Palmgren-Miner sum
(1 = the end-of-life limits of the endurance test), rates are damage per day.

The model, in order:

1. Damage counted so far, per capacitor: its unit's powered and unpowered
   temperature-time histograms (minus the snapshot taken when the part went
   in), through the life law, with the capacitor's ripple rise added to the
   powered bins.
2. Use since the last count (the unit is out, or storage not yet counted) is
   projected at the unit's rate of use, like the future.
3. Future use: the unit's last twelve months of hires (powered hours, hours
   out, mean venue ambient); units with less than ``min_history_days`` in the
   fleet take the mean of their gear model, else a documented default.
   Storage between hires at the home location's monthly temperatures.  The
   yearly damage is spread evenly over the year (the seasons are not resolved
   in the projection; they are in the history).
4. Threshold D* per capacitor from its role (physics.threshold_*), capped at
   ``DAMAGE_THRESHOLD_CAP``.
5. Scatter: damage-to-failure is Weibull with its median at D*; the unit's
   risk over the horizon is the probability that any position fails within the
   horizon given that the unit works now.
6. Due date: the earliest of the date the risk crosses the policy limit, the
   date any position reaches ``damage_limit * D*``, and the calendar-age limit
   of original capacitors.  Status: overdue (date passed), due (within the
   horizon), watch (within ``watch_days``), ok.
"""

import datetime as dt
import functools
from dataclasses import dataclass

import numpy as np

from . import histogram as H
from . import parameters as P
from . import physics, roots

DAYS_PER_YEAR = 365.25
HOURS_PER_YEAR = 8766.0
#: Hours in each calendar month of an average year (February 28.25 days).
MONTH_HOURS = np.array([31, 28.25, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float) * 24.0

#: Largest damage threshold a role may give [-].  Our choice: the drift laws
#: are calibrated at D = 1 (endurance-test limits); beyond about twice that
#: the extrapolation is not trusted, and parts that far gone may vent or open.
DAMAGE_THRESHOLD_CAP = 2.0
#: Use assumed for a gear model with no unit having twelve months of history:
#: hire days per year and venue ambient.  Our assumption, not a published value.
DEFAULT_HIRE_DAYS_PER_YEAR = 60.0
DEFAULT_HIRE_LENGTH_DAYS = 2.0
DEFAULT_VENUE_AMBIENT_C = 25.0
#: Search range of the due-date solver, days from today.
SEARCH_PAST_DAYS = 21915.0  # 60 years
SEARCH_FUTURE_DAYS = 36525.0
#: The risk-crossing solver (numerical): stop when the bracket is under half
#: a day; halve the bracket this many times before the secant steps start;
#: give up after this many steps (bisection alone needs 17 for 60 + 100 years).
DUE_DATE_TOLERANCE_DAYS = 0.5
#: Days ahead at which the risk is looked at before the crossing is solved
#: (the risk given survival can peak and fall back).  Our choice.
RISK_LOOKAHEAD_DAYS = (90.0, 365.0, 1095.0, 3652.0, 10957.0)
DUE_DATE_BISECTIONS = 3
DUE_DATE_MAX_STEPS = 40
#: Tolerance of the pump pair's failure time [days] (numerical): about 1 s,
#: so that the thresholds reproduce the minimum rail to better than 1e-6.
PUMP_TOLERANCE_DAYS = 1e-5
#: Chunk of capacitors for the Arrhenius histogram path (memory bound).
CHUNK = 20_000

STATUS_OK, STATUS_WATCH, STATUS_DUE, STATUS_OVERDUE = "ok", "watch", "due", "overdue"

#: Capacitor roles as small integers in the arrays (names as in fleet.models.Role).
ROLE_CODES = {
    "general": 0, "supply_decoupling": 1, "timing": 2, "supply_reservoir": 3,
    "pump_flying": 4, "pump_reservoir": 5, "signal_coupling": 6,
}
ROLE_NAMES = {v: k for k, v in ROLE_CODES.items()}


@dataclass
class Policy:
    risk_limit: float = 0.10
    horizon_days: float = 90.0
    damage_limit: float = 1.0
    calendar_age_years: float = 30.0
    storage_reform_months: float = 24.0
    watch_days: float = 180.0

    @classmethod
    def from_model(cls, policy):
        return cls(risk_limit=policy.risk_limit, horizon_days=float(policy.horizon_days),
                   damage_limit=policy.damage_limit, calendar_age_years=policy.calendar_age_years,
                   storage_reform_months=policy.storage_reform_months, watch_days=float(policy.watch_days))


@dataclass
class EngineOptions:
    law: str = P.DEFAULT_LAW
    activation_energy_ev: float = None
    weibull_shape: float = P.WEIBULL_SHAPE
    frailty_sigma: float = P.FRAILTY_SIGMA
    esr_feedback: bool = False
    min_history_days: float = 180.0

    def __post_init__(self):
        if self.law not in ("10k", "arrhenius"):
            raise ValueError(f"law must be '10k' or 'arrhenius', not {self.law!r}")
        if self.law == "arrhenius" and (self.activation_energy_ev is None or not self.activation_energy_ev > 0):
            raise ValueError("activation_energy_ev must be above zero for the Arrhenius law")
        if not self.weibull_shape > 0:
            raise ValueError("weibull_shape must be above zero")
        if not self.frailty_sigma >= 0:
            raise ValueError("frailty_sigma must be zero or above")
        if self.weibull_shape * self.frailty_sigma > P.FRAILTY_HAZARD_SIGMA_MAX:
            raise ValueError(f"weibull_shape x frailty_sigma must not exceed {P.FRAILTY_HAZARD_SIGMA_MAX:g} "
                             f"(got {self.weibull_shape * self.frailty_sigma:g})")


@dataclass
class FleetForecast:
    today_day: float
    # per capacitor
    damage: np.ndarray
    esr_ohm: np.ndarray
    capacitance_f: np.ndarray
    threshold: np.ndarray
    rate_per_day: np.ndarray
    reaches_day: np.ndarray      # NaN: never at the current rate of use
    # per unit
    risk: np.ndarray
    due_day: np.ndarray          # NaN: nothing due within the search range
    status: list
    storage_reform: np.ndarray
    max_damage_ratio: np.ndarray
    reasons: list


def day_to_date(day):
    return dt.date(1970, 1, 1) + dt.timedelta(days=int(np.floor(day)))


def date_to_day(date):
    return float((date - dt.date(1970, 1, 1)).days)


def _inverse_life(fa_rated_life_h, rated_temp_c, temp_c, opts):
    """1 / life [1/h] at ``temp_c`` under the chosen law."""
    if opts.law == "10k":
        return 1.0 / physics.life_hours_10k(fa_rated_life_h, rated_temp_c, temp_c)
    return 1.0 / physics.life_hours_arrhenius(fa_rated_life_h, rated_temp_c, temp_c, opts.activation_energy_ev)


def _histogram_damage(fa, rise_ripple_k, opts):
    """Damage counted in the histories, per capacitor (step 1)."""
    base = fa.baseline_index
    has_base = base >= 0
    L0, T0 = fa.rated_life_h, fa.rated_temp_c
    if opts.law == "10k":
        # Exact factorisation of the 10 K rule: sum_b h_b / L(T_b + r)
        #   = (sum_b h_b 2**(T_b/10)) * 2**((r - T0)/10) / L0
        w = 1.0 / physics.life_hours_10k(1.0, 0.0, H.BIN_CENTRES_C)
        sp_u, su_u = fa.hist_powered @ w, fa.hist_unpowered @ w
        sp_s = fa.snap_powered @ w if fa.snap_powered.size else np.zeros(0)
        su_s = fa.snap_unpowered @ w if fa.snap_unpowered.size else np.zeros(0)
        sp = sp_u[fa.unit_index] - np.where(has_base, sp_s[np.maximum(base, 0)] if sp_s.size else 0.0, 0.0)
        su = su_u[fa.unit_index] - np.where(has_base, su_s[np.maximum(base, 0)] if su_s.size else 0.0, 0.0)
        powered = sp / physics.life_hours_10k(L0, T0, rise_ripple_k)
        unpowered = su / physics.life_hours_10k(L0, T0, 0.0)
        return np.maximum(powered, 0.0), np.maximum(unpowered, 0.0)
    powered = np.empty(fa.n_caps)
    unpowered = np.empty(fa.n_caps)
    for start in range(0, fa.n_caps, CHUNK):
        sl = slice(start, start + CHUNK)
        hp = fa.hist_powered[fa.unit_index[sl]]
        hu = fa.hist_unpowered[fa.unit_index[sl]]
        b = base[sl]
        if fa.snap_powered.size and np.any(b >= 0):
            hp = hp - np.where((b >= 0)[:, None], fa.snap_powered[np.maximum(b, 0)], 0.0)
            hu = hu - np.where((b >= 0)[:, None], fa.snap_unpowered[np.maximum(b, 0)], 0.0)
        hp, hu = np.maximum(hp, 0.0), np.maximum(hu, 0.0)
        kw = dict(law="arrhenius", activation_energy_ev=opts.activation_energy_ev)
        powered[sl] = physics.damage_from_histogram(hp, H.BIN_CENTRES_C, L0[sl], T0[sl], rise_ripple_k[sl], **kw)
        unpowered[sl] = physics.damage_from_histogram(hu, H.BIN_CENTRES_C, L0[sl], T0[sl], 0.0, **kw)
    return powered, unpowered


def _equivalent_temp_c(life_h, L0, T0, opts):
    """The constant core temperature at which the part's life is ``life_h``:
    the inverse of the life law (10 K rule or Arrhenius)."""
    if opts.law == "10k":
        return T0 - P.TEN_K_RULE_STEP_K * np.log2(life_h / L0)
    inv_t = 1.0 / (T0 + P.ZERO_CELSIUS_K) + P.BOLTZMANN_EV_PER_K / opts.activation_energy_ev * np.log(life_h / L0)
    return 1.0 / inv_t - P.ZERO_CELSIUS_K


def _with_feedback(fa, powered_damage, powered_hours, ripple_a, opts):
    """Powered damage with ESR feedback: the same hours at the equivalent
    constant ambient (the one giving ``powered_damage`` without feedback),
    integrated with the ripple rise growing as ESR drifts."""
    out = powered_damage.copy()
    use = (powered_hours > 0) & (powered_damage > 0) & (ripple_a > 0)
    if not np.any(use):
        return out
    rise0 = physics.ripple_rise_k(ripple_a[use], fa.esr0_ohm[use], fa.diameter_mm[use], fa.length_mm[use])
    life_eq = powered_hours[use] / powered_damage[use]
    core_eq = _equivalent_temp_c(life_eq, fa.rated_life_h[use], fa.rated_temp_c[use], opts)
    out[use] = physics.damage_with_esr_feedback(
        powered_hours[use], core_eq - rise0, fa.rated_life_h[use], fa.rated_temp_c[use], ripple_a[use],
        fa.esr0_ohm[use], fa.diameter_mm[use], fa.length_mm[use], law=opts.law,
        activation_energy_ev=opts.activation_energy_ev,
    )
    return out


def projected_use(fa):
    """Per unit: powered hours per year, hours out per year, venue ambient [degC]
    (step 3); fills units without enough history from their gear model."""
    p = fa.use_powered_h_per_year.copy()
    o = fa.use_out_h_per_year.copy()
    a = fa.use_ambient_c.copy()
    known = ~np.isnan(p)
    n_models = fa.model_id.size
    count = np.bincount(fa.unit_model[known], minlength=n_models).astype(float)
    mean_p = np.bincount(fa.unit_model[known], weights=p[known], minlength=n_models)
    mean_o = np.bincount(fa.unit_model[known], weights=o[known], minlength=n_models)
    has_a = known & ~np.isnan(a)
    wa = np.bincount(fa.unit_model[has_a], weights=(a * p)[has_a], minlength=n_models)
    wp = np.bincount(fa.unit_model[has_a], weights=p[has_a], minlength=n_models)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_p = np.where(count > 0, mean_p / np.maximum(count, 1), np.nan)
        mean_o = np.where(count > 0, mean_o / np.maximum(count, 1), np.nan)
        mean_a = np.where(wp > 0, wa / np.where(wp > 0, wp, 1), np.nan)
    default_p = fa.model_hours_per_day * DEFAULT_HIRE_DAYS_PER_YEAR
    default_o = np.full(n_models, DEFAULT_HIRE_DAYS_PER_YEAR * 24.0)
    model_p = np.where(np.isnan(mean_p), default_p, mean_p)
    model_o = np.where(np.isnan(mean_o), default_o, mean_o)
    model_a = np.where(np.isnan(mean_a), DEFAULT_VENUE_AMBIENT_C, mean_a)
    p = np.where(known, p, model_p[fa.unit_model])
    o = np.where(known, o, model_o[fa.unit_model])
    a = np.where(np.isnan(a), model_a[fa.unit_model], a)
    o = np.clip(o, p, HOURS_PER_YEAR)
    return p, o, a


def _unpowered_per_year(fa, out_unpowered_h, venue_c, store_frac, opts, factorise=True):
    """Damage per year [1/year] from unpowered time, per capacitor: hours out on
    hire but off (at the venue ambient) and storage at the home location's
    monthly temperatures (``store_frac`` of each month).

    With the 10 K rule the sum over a unit's temperatures factorises exactly,
    ``sum_k h_k / L(T_k) = (sum_k h_k 2**(T_k/10)) / L(0 degC)``, so it is
    taken per unit and then scaled per part; otherwise (or with
    ``factorise=False``) it is summed per part and month.
    """
    ui, L0, T0 = fa.unit_index, fa.rated_life_h, fa.rated_temp_c
    store_weights = MONTH_HOURS[None, :] * store_frac[:, None]    # (units, 12) hours per year
    if opts.law == "10k" and factorise:
        per_unit = (out_unpowered_h / physics.life_hours_10k(1.0, 0.0, venue_c)
                    + (store_weights / physics.life_hours_10k(1.0, 0.0, fa.monthly_store_c)).sum(axis=1))
        return per_unit[ui] / physics.life_hours_10k(L0, T0, 0.0)
    per_year = out_unpowered_h[ui] * _inverse_life(L0, T0, venue_c[ui], opts)
    for m in range(12):
        per_year += store_weights[ui, m] * _inverse_life(L0, T0, fa.monthly_store_c[ui, m], opts)
    return per_year


def _unit_bounds(unit_index, n_units):
    """``(starts, ends)`` of each unit's rows when the rows are grouped by unit
    (``unit_index`` non-decreasing, as the loader reads them), else None."""
    if np.any(unit_index[1:] < unit_index[:-1]):
        return None
    units = np.arange(n_units)
    return np.searchsorted(unit_index, units, side="left"), np.searchsorted(unit_index, units, side="right")


def _per_unit(ufunc, unit_index, values, n_units, empty):
    """``ufunc`` (np.minimum or np.maximum) of ``values`` over each unit's rows,
    with ``empty`` folded in (and given to units without rows).  Rows grouped
    by unit (as the loader reads them) take one ``reduceat``; otherwise ``at``."""
    out = np.full(n_units, empty, dtype=float)
    if not unit_index.size:
        return out
    bounds = _unit_bounds(unit_index, n_units)
    if bounds is None:
        ufunc.at(out, unit_index, values)
        return out
    starts, ends = bounds
    has = starts < ends
    out[has] = ufunc(ufunc.reduceat(values, starts[has]), empty)
    return out


def _first_per_unit(unit_index, key, n_units, k=1):
    """Capacitor row indices of the ``k`` smallest ``key`` per unit (-1 where none);
    ties go to the earlier row."""
    out = np.full((n_units, k), -1, dtype=np.int64)
    if not unit_index.size:
        return out
    bounds = _unit_bounds(unit_index, n_units)
    if bounds is None:  # not grouped by unit: sort
        order = np.lexsort((key, unit_index))
        sorted_units = unit_index[order]
        starts = np.searchsorted(sorted_units, np.arange(n_units), side="left")
        ends = np.searchsorted(sorted_units, np.arange(n_units), side="right")
        for j in range(k):
            pos = starts + j
            ok = pos < ends
            out[ok, j] = order[pos[ok]]
        return out
    # Rows grouped by unit: k passes of a per-unit minimum, each removing the
    # row it found.
    starts, ends = bounds
    has = np.flatnonzero(ends > starts)
    work = key.astype(float).copy()
    rows = np.arange(work.size)
    sizes = ends[has] - starts[has]
    for j in range(k):
        # fmin skips NaN, the mark of a row already taken.
        least = np.fmin.reduceat(work, starts[has])
        hit = work == np.repeat(least, sizes)
        first = np.minimum.reduceat(np.where(hit, rows, work.size), starts[has])
        ok = first < work.size
        out[has[ok], j] = first[ok]
        work[first[ok]] = np.nan
    return out


def compute(fa, *, today, policy=None, options=None):
    """Forecast every unit in ``fa`` as of ``today`` (a date)."""
    policy = policy or Policy()
    opts = options or EngineOptions()
    today_day = date_to_day(today)
    nu, nc = fa.n_units, fa.n_caps
    ui = fa.unit_index

    rise_int = fa.model_rise_k[fa.unit_model]                       # K, per unit
    ripple_a = np.nan_to_num(fa.pos_ripple_a[fa.position_index])    # A, per capacitor
    rise_ripple = physics.ripple_rise_k(ripple_a, fa.esr0_ohm, fa.diameter_mm, fa.length_mm)

    # 1. damage counted in the histories
    d_pow, d_unp = _histogram_damage(fa, rise_ripple, opts)
    if opts.esr_feedback and nc:
        hours_p = fa.hist_powered.sum(axis=1)[ui]
        if fa.snap_powered.size:
            base = fa.baseline_index
            hours_p = hours_p - np.where(base >= 0, fa.snap_powered.sum(axis=1)[np.maximum(base, 0)], 0.0)
        d_pow = _with_feedback(fa, d_pow, np.maximum(hours_p, 0.0), ripple_a, opts)
    d_hist = d_pow + d_unp

    # 3. rate of damage per day at the projected use
    p_h, o_h, amb_c = projected_use(fa)
    store_frac = np.maximum(1.0 - o_h / HOURS_PER_YEAR, 0.0)
    esr_now_for_rate = fa.esr0_ohm
    if opts.esr_feedback:
        esr_now_for_rate = physics.esr_at_damage(fa.esr0_ohm, d_hist)
    rise_now = physics.ripple_rise_k(ripple_a, esr_now_for_rate, fa.diameter_mm, fa.length_mm)
    L0, T0 = fa.rated_life_h, fa.rated_temp_c
    per_year = p_h[ui] * _inverse_life(L0, T0, amb_c[ui] + rise_int[ui] + rise_now, opts)
    per_year += _unpowered_per_year(fa, (o_h - p_h), amb_c, store_frac, opts)
    rate = per_year / DAYS_PER_YEAR

    # 2. use since the last count, projected
    since = np.maximum(today_day - np.maximum(fa.accounted_day[ui], fa.installed_day), 0.0)
    damage = d_hist + rate * since

    # 4. role thresholds
    threshold = _thresholds(fa, damage, rate)

    # per-capacitor state and crossing dates
    esr = physics.esr_at_damage(fa.esr0_ohm, damage)
    cap = physics.capacitance_at_damage(fa.capacitance_f, damage)
    limit = policy.damage_limit * threshold
    with np.errstate(divide="ignore", invalid="ignore"):
        # Ahead: at the projected rate of use.  Already past: assume the part
        # aged evenly since it went in, so the crossing is that share of its life.
        ahead = today_day + np.where(rate > 0, (limit - damage) / rate, np.inf)
        age_days = np.maximum(today_day - fa.installed_day, 0.0)
        behind = fa.installed_day + np.where(damage > 0, limit / damage, 0.0) * age_days
        reaches = np.where(damage >= limit, behind, ahead)
    # A part cannot have crossed before it went in (a threshold of 0 means the
    # requirement fails even for a new part: it crossed on the day it went in).
    reaches = np.where(np.isfinite(reaches), np.maximum(reaches, fa.installed_day), np.nan)

    # 5. risk over the horizon, now and as a function of time
    beta = opts.weibull_shape

    # Damage as a fraction of the threshold, and its rate: the hazard of each
    # position over [t, t + horizon] is H(x1) - H(x0) with H the Weibull
    # cumulative hazard (median at x = 1); the unit survives the horizon with
    # probability exp(-sum of those) given it works at t.
    failed = threshold <= 0
    safe_threshold = np.where(failed, 1.0, threshold)
    x_now = damage / safe_threshold
    x_rate = rate / safe_threshold
    # Looking back, each part is taken to have aged evenly since it went in.
    age_days = np.maximum(today_day - fa.installed_day, 1.0)
    x_rate_past = x_now / age_days

    def risk_function(rows, unit_of_row, n, subset=None, log_hazard=False):
        """Risk over the horizon for ``n`` units made of capacitor ``rows``
        (only the units ``subset``, renumbered 0.., when given); with
        ``log_hazard`` the log of the summed hazard instead (what the
        crossing solver works on: far closer to linear in time than the risk)."""
        if subset is not None:
            local = np.full(n, -1, dtype=np.int64)
            local[subset] = np.arange(subset.size)
            keep = local[unit_of_row] >= 0
            rows, unit_of_row, n = rows[keep], local[unit_of_row[keep]], subset.size
        xn, xr, xp = x_now[rows], x_rate[rows], x_rate_past[rows]

        def x_at(t):
            return np.maximum(xn + np.where(t < 0, xp, xr) * t, 0.0)
        dead = np.bincount(unit_of_row, weights=failed[rows].astype(float), minlength=n) > 0

        def risk_at(t_days):
            """Unit risk over the horizon starting ``t_days`` (per unit) from today."""
            t = t_days[unit_of_row]
            x0, x1 = x_at(t), x_at(t + policy.horizon_days)
            h0 = np.bincount(unit_of_row, weights=physics.cumulative_hazard(x0, 1.0, beta), minlength=n)
            h1 = np.bincount(unit_of_row, weights=physics.cumulative_hazard(x1, 1.0, beta), minlength=n)
            total = physics.unit_conditional_hazard(h0, h1, beta, opts.frailty_sigma)
            if log_hazard:
                return np.where(dead, np.inf, np.log(np.maximum(total, 1e-300)))
            return np.where(dead, 1.0, -np.expm1(-total))

        return risk_at

    # 6. the dates that do not depend on the risk: a position reaching its
    # limit, the calendar-age limit of original parts
    pos_day = np.full(nu, np.nan)
    if nc:
        key = np.where(np.isnan(reaches), np.inf, reaches)
        earliest = _per_unit(np.minimum, ui, key, nu, np.inf)
        pos_day = np.where(np.isfinite(earliest), earliest, np.nan)
    has_original = np.zeros(nu, dtype=bool)
    if nc:
        has_original[ui[fa.is_original]] = True
    age_day = np.where(has_original, fa.manufactured_day + policy.calendar_age_years * DAYS_PER_YEAR, np.nan)
    other_day = np.fmin(pos_day, age_day)

    risk_at = risk_function(np.arange(nc), ui, nu)
    risk = risk_at(np.zeros(nu)) if nc else np.zeros(nu)
    risk_day = _risk_crossing_day(risk_function, risk_at, risk, fa, today_day, policy, other_day, failed) \
        if nc else np.full(nu, np.nan)

    due_day = np.fmin(np.fmin(risk_day, pos_day), age_day)

    with np.errstate(invalid="ignore"):  # NaN (nothing due) compares False: ok
        status = np.select(
            [due_day < today_day, due_day <= today_day + policy.horizon_days,
             due_day <= today_day + policy.watch_days],
            [STATUS_OVERDUE, STATUS_DUE, STATUS_WATCH], STATUS_OK).tolist()

    last_on = np.where(np.isnan(fa.last_powered_day), fa.joined_day, fa.last_powered_day)
    unpowered_months = (today_day - last_on) / (DAYS_PER_YEAR / 12)
    storage_reform = unpowered_months > policy.storage_reform_months

    ratio = np.zeros(nu)
    if nc:
        share = np.divide(damage, threshold, out=np.full(nc, 1e6), where=threshold > 0)
        ratio = _per_unit(np.maximum, ui, share, nu, 0.0)

    # Which positions carry most of each unit's risk over the next horizon:
    # their share of the summed nominal hazard (the frailty scales all alike).
    drivers = np.full((nu, 2), -1, dtype=np.int64)
    if nc:
        x_then = x_now + x_rate * policy.horizon_days
        share = np.where(failed, np.inf, physics.cumulative_hazard(x_then, 1.0, beta)
                         - physics.cumulative_hazard(x_now, 1.0, beta))
        drivers = _first_per_unit(ui, -share, nu, k=2)
        drivers[(drivers >= 0) & ~(share[np.maximum(drivers, 0)] > 0)] = -1
    reasons = _reasons(fa, policy, today_day, damage, threshold, reaches, risk, risk_day, age_day, has_original,
                       storage_reform, unpowered_months, drivers)
    return FleetForecast(today_day=today_day, damage=damage, esr_ohm=esr, capacitance_f=cap, threshold=threshold,
                         rate_per_day=rate, reaches_day=reaches, risk=risk, due_day=due_day, status=status,
                         storage_reform=storage_reform, max_damage_ratio=ratio, reasons=reasons)


def _risk_crossing_day(risk_function, risk_at, risk_now, fa, today_day, policy, other_day, threshold_failed):
    """Day the unit's risk over the horizon reaches the policy limit, where it
    matters: before ``other_day`` (the earliest other due date) for the due
    date, or within the watch window for the reasons.

    Units whose crossing cannot matter are not solved: a crossing already
    passed but after ``other_day`` is given as today (it only says "now" in
    the reasons), one beyond both ``other_day`` and the watch window as NaN.
    A unit with a part that fails its requirement even when new is at risk
    from its oldest part's fitting.
    """
    nu, ui = fa.n_units, fa.unit_index
    limit = policy.risk_limit
    oldest = _per_unit(np.minimum, ui, fa.installed_day, nu, today_day)
    lo = np.maximum(oldest - today_day, -SEARCH_PAST_DAYS)
    # Before its oldest part went in every x is 0 and so is the risk, unless a
    # part fails its requirement even when new (threshold 0: risk 1 always).
    dead = np.bincount(ui, weights=threshold_failed.astype(float), minlength=nu) > 0
    now_above = risk_now >= limit
    other = other_day - today_day  # NaN: no other date
    window = max(policy.watch_days, policy.horizon_days)
    # The far end of the bracket that matters: the other date when the
    # crossing is already past; later of the other date and the watch window ahead.
    ahead = np.clip(np.where(np.isnan(other), SEARCH_FUTURE_DAYS, np.fmax(other, window)), 0.0, SEARCH_FUTURE_DAYS)
    t_end = np.where(now_above, np.where(other < 0, np.maximum(other, lo), 0.0), ahead)
    t_start = np.where(now_above, lo, 0.0)
    # Given that the unit works, the risk need not rise for ever (a unit far
    # past its predicted life is evidence that it ages slower): it can rise
    # through the limit and fall back.  Look ahead at a few dates first, so
    # that a crossing before the end of the bracket is not missed.
    all_rows = np.arange(fa.n_caps)
    ahead_units = np.flatnonzero(~now_above & ~dead)
    for t_look in RISK_LOOKAHEAD_DAYS:
        ahead_units = ahead_units[t_end[ahead_units] > t_look]
        if not ahead_units.size:
            break
        above = risk_function(all_rows, ui, nu, subset=ahead_units)(
            np.full(ahead_units.size, t_look)) >= limit
        t_end[ahead_units[above]] = t_look
        ahead_units = ahead_units[~above]
    r_end = risk_at(t_end)
    solve = ~dead & (r_end >= limit) & (t_end > t_start)
    day = np.where(dead, today_day + lo, np.where(now_above, today_day, np.nan))
    day[solve] = today_day + t_end[solve]
    open_units = np.flatnonzero(solve & (t_end - t_start > DUE_DATE_TOLERANCE_DAYS))
    if not open_units.size:
        return day
    r_start = np.where(now_above, 0.0, risk_now)  # at lo the risk is 0 (not dead)

    def log_h(r):
        # The risk reaches the limit where the summed hazard reaches -ln(1 - limit).
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(-np.log1p(-np.minimum(r, 1.0)), 1e-300))

    crossing = _first_crossing(
        _Shrinking(lambda subset: risk_function(all_rows, ui, nu, subset=open_units[subset], log_hazard=True)),
        t_start[open_units], t_end[open_units], log_h(r_start[open_units]), log_h(r_end[open_units]),
        np.log(-np.log1p(-limit)))
    day[open_units] = today_day + crossing
    return day


class _Shrinking:
    """``value_of(units, t)`` for :func:`_first_crossing` from a factory of
    evaluators over a subset of units; the evaluator is rebuilt on the smaller
    subset only when the units asked for fall to half of those it holds."""

    def __init__(self, factory):
        self.factory, self.units, self.evaluate = factory, None, None

    def __call__(self, units, t):
        if self.units is None or units.size * 2 <= self.units.size:
            self.units, self.evaluate = units, self.factory(units)
        if units.size == self.units.size:
            return self.evaluate(t)
        t_all = np.zeros(self.units.size)
        where = np.searchsorted(self.units, units)
        t_all[where] = t
        return self.evaluate(t_all)[where]


def _first_crossing(value_of, lo, hi, value_lo, value_hi, limit, tol_days=DUE_DATE_TOLERANCE_DAYS):
    """Per unit, the time t in (lo, hi] [days] where an increasing
    ``value_of(units, t)`` reaches ``limit`` (``roots.first_crossing``, to within
    ``tol_days``); returns the upper end of each final bracket."""
    return roots.first_crossing(value_of, lo, hi, value_lo, value_hi, limit, tol=tol_days,
                                bisections=DUE_DATE_BISECTIONS, max_steps=DUE_DATE_MAX_STEPS)[1]


def _circuit(fa, name, rows):
    return fa.pos_circuit[name][fa.position_index[rows]]


def _thresholds(fa, damage, rate):
    """Role-aware damage threshold D* per capacitor (step 4)."""
    nc = fa.n_caps
    threshold = np.full(nc, P.GENERAL_DAMAGE_THRESHOLD)
    role = fa.pos_role[fa.position_index]

    # Signal coupling: the high-pass corner must stay below its limit.
    rows = np.flatnonzero(role == ROLE_CODES["signal_coupling"])
    if rows.size:
        r, fmax = _circuit(fa, "coupling_load_ohm", rows), _circuit(fa, "coupling_max_corner_hz", rows)
        ok = ~np.isnan(r) & ~np.isnan(fmax)
        if np.any(ok):
            threshold[rows[ok]] = physics.threshold_coupling(r[ok], fa.capacitance_f[rows[ok]], fmax[ok])

    # Supply reservoir: ripple must stay below its limit.
    rows = np.flatnonzero(role == ROLE_CODES["supply_reservoir"])
    if rows.size:
        load = _circuit(fa, "reservoir_load_a", rows)
        f = _circuit(fa, "reservoir_ripple_freq_hz", rows)
        lim = _circuit(fa, "reservoir_ripple_limit_v", rows)
        ok = ~np.isnan(load) & ~np.isnan(f) & ~np.isnan(lim)
        if np.any(ok):
            k = rows[ok]
            threshold[k] = physics.threshold_reservoir(load[ok], f[ok], fa.capacitance_f[k], fa.esr0_ohm[k], lim[ok])

    # Charge pump: the negative rail must stay beyond its minimum magnitude.
    _pump_thresholds(fa, damage, rate, threshold, role)
    return np.clip(threshold, 0.0, DAMAGE_THRESHOLD_CAP)


def _pump_thresholds(fa, damage, rate, threshold, role):
    """Thresholds of the two capacitors of each switched-capacitor inverter.

    Both capacitors age at once, so the rail fails at one moment for the pair:
    find the time t (days from today) at which ``physics.inverter_output_v``
    with both parts drifted (damage + rate * t) reaches the minimum rail
    magnitude, by vectorised bisection; each part's threshold is its damage at
    that moment.  A pair whose rail fails even with new parts gets 0.
    """
    pump = np.flatnonzero((role == ROLE_CODES["pump_flying"]) | (role == ROLE_CODES["pump_reservoir"]))
    if not pump.size:
        return
    fly = pump[role[pump] == ROLE_CODES["pump_flying"]]
    if not fly.size:
        return
    # Each flying part's partner: the row of the same unit at the partner
    # position, found by a sorted (unit, position) key.
    n_pos = max(int(fa.pos_id.size), 1)
    keys = fa.unit_index[pump] * n_pos + fa.position_index[pump]
    order = np.argsort(keys, kind="stable")
    partner = fa.pos_partner[fa.position_index[fly]]
    wanted = fa.unit_index[fly] * n_pos + np.maximum(partner, 0)
    at = np.clip(np.searchsorted(keys[order], wanted), 0, keys.size - 1)
    res = np.where((partner >= 0) & (keys[order][at] == wanted), pump[order][at], -1)
    names = ("pump_input_v", "pump_load_a", "pump_freq_hz", "pump_switch_ohm", "pump_min_rail_v")
    vin, load, f, rsw, vmin = (_circuit(fa, n, fly) for n in names)
    ok = (res >= 0) & ~np.isnan(vin) & ~np.isnan(load) & ~np.isnan(f) & ~np.isnan(vmin)
    fly, res, vin, load, f, rsw, vmin = (a[ok] for a in (fly, res, vin, load, f, rsw, vmin))
    if not fly.size:
        return
    rsw = np.nan_to_num(rsw)

    def margin_of(units, t):
        a, b = fly[units], res[units]
        d_f = np.maximum(damage[a] + rate[a] * t, 0.0)
        d_r = np.maximum(damage[b] + rate[b] * t, 0.0)
        v = physics.inverter_output_v(
            vin[units], load[units], f[units], physics.capacitance_at_damage(fa.capacitance_f[a], d_f),
            physics.capacitance_at_damage(fa.capacitance_f[b], d_r),
            physics.esr_at_damage(fa.esr0_ohm[a], d_f), physics.esr_at_damage(fa.esr0_ohm[b], d_r), rsw[units])
        return -v - vmin[units]  # >= 0 while the rail is deep enough

    with np.errstate(divide="ignore", invalid="ignore"):
        back = np.minimum(np.where(rate[fly] > 0, damage[fly] / rate[fly], 0.0),
                          np.where(rate[res] > 0, damage[res] / rate[res], 0.0))
    every = np.arange(fly.size)
    lo = -back                                   # the younger part is new here
    hi = np.full(fly.size, SEARCH_FUTURE_DAYS)
    m_lo, m_hi = margin_of(every, lo), margin_of(every, hi)
    fails_new = m_lo < 0
    never = m_hi >= 0
    solve = np.flatnonzero(~fails_new & ~never)
    if solve.size:
        # The rail's shortfall (-margin) rises through 0 at the failure time.
        hi[solve] = _first_crossing(
            lambda units, t: -margin_of(solve[units], t), lo[solve], hi[solve], -m_lo[solve], -m_hi[solve], 0.0,
            tol_days=PUMP_TOLERANCE_DAYS)
    t_fail = np.where(fails_new, -back, hi)
    for rows in (fly, res):
        at_fail = np.maximum(damage[rows] + rate[rows] * t_fail, 0.0)
        threshold[rows] = np.where(never, DAMAGE_THRESHOLD_CAP, np.where(fails_new, 0.0, at_fail))


ROLE_WORDS = {
    "general": "general", "supply_decoupling": "supply decoupling", "timing": "timing",
    "supply_reservoir": "supply reservoir", "pump_flying": "pump flying", "pump_reservoir": "pump reservoir",
    "signal_coupling": "signal coupling",
}


@functools.lru_cache(maxsize=4096)
def _month(day):
    return f"{day_to_date(day):%Y-%m}"


def _when(day, today_day):
    month = _month(int(np.floor(day)))
    return f"since about {month}" if day < today_day else f"by {month}"


def _months(days):
    """``YYYY-MM`` of each of ``days`` (float days since 1970-01-01; NaN and
    infinities give ``''``), in one array step."""
    days = np.asarray(days, dtype=float)
    ok = np.isfinite(days)
    out = np.floor(np.where(ok, days, 0.0)).astype("int64").astype("datetime64[D]").astype("datetime64[M]")
    return np.where(ok, out.astype(str), "").tolist()


def _position_name(fa, cache, pos):
    """``C12 (supply reservoir)`` for position ``pos``."""
    if pos not in cache:
        cache[pos] = f"{fa.pos_designator[pos]} ({ROLE_WORDS[ROLE_NAMES[int(fa.pos_role[pos])]]})"
    return cache[pos]


def _position_reason(fa, cache, pos, past, month, reach_day, today_day, damage, threshold):
    """Words for a capacitor at position ``pos``.  The wording is kept in
    ``cache`` (one per forecast run) per (position, month, crossed?) as a
    template, since the units of one gear model share their positions' words;
    only the damage figures differ between units."""
    key = (pos, None if past else month, threshold <= 0)
    template = cache.get(key)
    if template is None:
        template = cache[key] = _position_reason_template(fa, pos, reach_day, today_day, threshold <= 0)
    return template.format(damage=damage, threshold=threshold) if past else template


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
        what = "reaches end-of-life drift (ESR doubled, capacitance down 20%)"
    if reach_day < today_day:
        what = what.replace("would rise", "has already risen").replace("would exceed", "already exceeds").replace(
            "would sag", "already sags").replace("reaches", "past")
        return f"{des} {ROLE_WORDS[role]}: {what}; damage {{damage:.1f}} against a limit of {{threshold:.2f}}"
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
    horizon, limit = f"{policy.horizon_days:g}", f"{policy.risk_limit:.0%}"
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
                text = f"Chance of a capacitor fault within {horizon} days is {risk_l[u]:.0%} now (house limit {limit})"
            else:
                text = (f"Chance of a capacitor fault within {horizon} days reaches {limit} by {risk_month[u]} "
                        f"(now {risk_l[u]:.0%})")
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
            items.append((when, f"Original capacitors pass {years} years of age "
                                f"{'since about' if when < today_day else 'by'} {age_month[u]}"))
        if len(items) > 1:
            items.sort(key=lambda x: x[0])
        words = [w for _, w in items]
        if reform[u]:
            words.append(f"Unpowered for {months_l[u]:.0f} months: reform the capacitors "
                         "(bring the unit up slowly on a current-limited supply) before it goes out")
        out.append(words)
    return out
