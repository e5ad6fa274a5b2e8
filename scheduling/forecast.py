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
   Bench readings (:mod:`scheduling.readings`) then set a measured part's
   damage and rate, and update the unit's shared frailty.
4. Threshold D* per capacitor from its role (physics.threshold_*), capped at
   ``DAMAGE_THRESHOLD_CAP``.
5. Scatter: damage-to-failure is Weibull with its median at D*; the unit's
   risk over the horizon is the probability that any position fails within the
   horizon given that the unit works now.
6. Due date: the earliest of the date the risk crosses the policy limit, the
   date any position reaches ``damage_limit * D*``, and the calendar-age limit
   of original capacitors.  Status: overdue (date passed), due (within the
   horizon), watch (within ``watch_days``), ok.
7. Triage (:mod:`scheduling.triage`): the chance of a fault during the next
   typical hire given that the unit works now, weighted by what the failing
   roles do to a hire; the priority among units that need work; an act-by
   date never before today; per position replace, measure or leave.
"""

from dataclasses import dataclass

import numpy as np

from . import histogram as H
from . import parameters as P
from . import physics
from .crossing import (  # noqa: F401  (the solver's settings, read by tests and the bench)
    DUE_DATE_BISECTIONS,
    DUE_DATE_MAX_STEPS,
    DUE_DATE_TOLERANCE_DAYS,
    RISK_LOOKAHEAD_DAYS,
    SEARCH_FUTURE_DAYS,
    SEARCH_PAST_DAYS,
    _first_crossing,
    _risk_crossing_day,
    _Shrinking,
)
from .days import DAYS_PER_YEAR, HOURS_PER_YEAR, MONTH_HOURS, date_to_day, day_to_date  # noqa: F401
from .grouping import _first_per_unit, _per_unit, _unit_bounds  # noqa: F401
from .readings import ReadingsResult, apply_readings, unit_hazard
from .reasons import _reasons
from .thresholds import DAMAGE_THRESHOLD_CAP, ROLE_CODES, ROLE_NAMES, _thresholds  # noqa: F401
from .triage import triage

#: Use assumed for a gear model with no unit having twelve months of history:
#: hire days per year and venue ambient.  Our assumption, not a published value.
DEFAULT_HIRE_DAYS_PER_YEAR = 60.0
DEFAULT_HIRE_LENGTH_DAYS = 2.0
DEFAULT_VENUE_AMBIENT_C = 25.0
#: Chunk of capacitors for the Arrhenius histogram path (memory bound).
CHUNK = 20_000

STATUS_OK, STATUS_WATCH, STATUS_DUE, STATUS_OVERDUE = "ok", "watch", "due", "overdue"


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
    # triage (scheduling/triage.py)
    hire_damage: np.ndarray = None   # per capacitor: damage one typical hire adds
    hire_risk: np.ndarray = None     # per unit: P(fault during the next hire | works now)
    score: np.ndarray = None         # per unit: hire risk x what the failing roles do to a hire
    priority: np.ndarray = None      # per unit: 1 first among units that need work, 0 none needed
    act_by_day: np.ndarray = None    # per unit: never before today; NaN nothing due
    action: np.ndarray = None        # per capacitor: triage.LEAVE / MEASURE / REPLACE
    why: np.ndarray = None           # per capacitor: triage.WHY_*
    # bench readings (scheduling/readings.py): measured values, rate factors, the units' frailty
    readings: ReadingsResult = None


def _inverse_life(fa_rated_life_h, rated_temp_c, temp_c, opts):
    """1 / life [1/h] at ``temp_c`` under the chosen law."""
    if opts.law == "10k":
        return 1.0 / physics.life_hours_10k(fa_rated_life_h, rated_temp_c, temp_c)
    return 1.0 / physics.life_hours_arrhenius(fa_rated_life_h, rated_temp_c, temp_c, opts.activation_energy_ev)


def _histogram_damage(fa, rise_ripple_k, opts, rows=None, baseline=None):
    """Damage counted in the histories, per capacitor (step 1): since each
    part went in; or for the capacitor ``rows`` only, since the snapshots
    ``baseline`` (index into the snapshots, -1: since manufacture)."""
    rows = np.arange(fa.n_caps) if rows is None else rows
    base = fa.baseline_index[rows] if baseline is None else baseline
    n, ui = rows.size, fa.unit_index[rows]
    has_base = base >= 0
    L0, T0, rise = fa.rated_life_h[rows], fa.rated_temp_c[rows], rise_ripple_k[rows]
    if opts.law == "10k":
        # Exact factorisation of the 10 K rule: sum_b h_b / L(T_b + r)
        #   = (sum_b h_b 2**(T_b/10)) * 2**((r - T0)/10) / L0
        w = 1.0 / physics.life_hours_10k(1.0, 0.0, H.BIN_CENTRES_C)
        sp_u, su_u = fa.hist_powered @ w, fa.hist_unpowered @ w
        sp_s = fa.snap_powered @ w if fa.snap_powered.size else np.zeros(0)
        su_s = fa.snap_unpowered @ w if fa.snap_unpowered.size else np.zeros(0)
        sp = sp_u[ui] - np.where(has_base, sp_s[np.maximum(base, 0)] if sp_s.size else 0.0, 0.0)
        su = su_u[ui] - np.where(has_base, su_s[np.maximum(base, 0)] if su_s.size else 0.0, 0.0)
        powered = sp / physics.life_hours_10k(L0, T0, rise)
        unpowered = su / physics.life_hours_10k(L0, T0, 0.0)
        return np.maximum(powered, 0.0), np.maximum(unpowered, 0.0)
    powered = np.empty(n)
    unpowered = np.empty(n)
    for start in range(0, n, CHUNK):
        sl = slice(start, start + CHUNK)
        hp = fa.hist_powered[ui[sl]]
        hu = fa.hist_unpowered[ui[sl]]
        b = base[sl]
        if fa.snap_powered.size and np.any(b >= 0):
            hp = hp - np.where((b >= 0)[:, None], fa.snap_powered[np.maximum(b, 0)], 0.0)
            hu = hu - np.where((b >= 0)[:, None], fa.snap_unpowered[np.maximum(b, 0)], 0.0)
        hp, hu = np.maximum(hp, 0.0), np.maximum(hu, 0.0)
        kw = dict(law="arrhenius", activation_energy_ev=opts.activation_energy_ev)
        powered[sl] = physics.damage_from_histogram(hp, H.BIN_CENTRES_C, L0[sl], T0[sl], rise[sl], **kw)
        unpowered[sl] = physics.damage_from_histogram(hu, H.BIN_CENTRES_C, L0[sl], T0[sl], 0.0, **kw)
    return powered, unpowered


def _equivalent_temp_c(life_h, L0, T0, opts):
    """The constant core temperature at which the part's life is ``life_h``:
    the inverse of the life law (10 K rule or Arrhenius)."""
    if opts.law == "10k":
        return T0 - P.TEN_K_RULE_STEP_K * np.log2(life_h / L0)
    inv_t = 1.0 / (T0 + P.ZERO_CELSIUS_K) + P.BOLTZMANN_EV_PER_K / opts.activation_energy_ev * np.log(life_h / L0)
    return 1.0 / inv_t - P.ZERO_CELSIUS_K


def _with_feedback(fa, powered_damage, powered_hours, ripple_a, opts, unpowered_damage):
    """Powered damage with ESR feedback: the same hours at the equivalent
    constant ambient (the one giving ``powered_damage`` without feedback),
    integrated with the ripple rise growing as ESR drifts.  The unpowered
    damage is spread evenly over the powered hours (shelf ageing raises the
    ESR that heats the part too); returned is the total less that unpowered
    damage, so that powered + unpowered stays the part's damage."""
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
        extra_rate_per_h=unpowered_damage[use] / powered_hours[use],
    ) - unpowered_damage[use]
    return out


USE_SUM_NAMES = ("units", "powered", "out", "ambient_weighted", "ambient_weight", "hire_units", "hire_powered",
                 "hire_out")


def model_use_sums(unit_model, n_models, powered_h, out_h, ambient_c, hires):
    """Per gear model, the sums behind its mean recent use (step 3), over the
    units with enough history (``powered_h`` not NaN): a dict of arrays over
    models, keys ``USE_SUM_NAMES``.  Sums of several batches of units add up
    to the sums of the fleet (``model_use_means`` turns them into means)."""
    p, o, a, n = (np.asarray(x, dtype=float) for x in (powered_h, out_h, ambient_c, hires))
    m = np.asarray(unit_model, dtype=np.int64)
    known = ~np.isnan(p)
    has_a = known & ~np.isnan(a)
    o_kept = np.clip(np.where(known, o, 0.0), np.where(known, p, 0.0), HOURS_PER_YEAR)
    hired = known & ~np.isnan(n) & (n > 0)
    safe_n = np.where(hired, n, 1.0)

    def by_model(which, weights=None):
        return np.bincount(m[which], weights=None if weights is None else weights[which],
                           minlength=n_models).astype(float)

    return {
        "units": by_model(known), "powered": by_model(known, p), "out": by_model(known, o),
        "ambient_weighted": by_model(has_a, a * p), "ambient_weight": by_model(has_a, p),
        "hire_units": by_model(hired), "hire_powered": by_model(hired, p / safe_n),
        "hire_out": by_model(hired, o_kept / safe_n),
    }


def model_use_means(sums):
    """Means per gear model from ``model_use_sums`` (NaN where no unit has
    the history): powered and out hours per year, venue ambient [degC], and
    powered and out hours of one hire."""
    def ratio(a, b):
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(b > 0, a / np.where(b > 0, b, 1.0), np.nan)

    return {
        "powered_h_per_year": ratio(sums["powered"], sums["units"]),
        "out_h_per_year": ratio(sums["out"], sums["units"]),
        "ambient_c": ratio(sums["ambient_weighted"], sums["ambient_weight"]),
        "hire_powered_h": ratio(sums["hire_powered"], sums["hire_units"]),
        "hire_out_h": ratio(sums["hire_out"], sums["hire_units"]),
    }


def _model_means(fa):
    """The gear models' means: the fleet's (``fa.model_means``, from a first
    pass or the last fleet refresh) when given, else those of ``fa``'s units."""
    if fa.model_means is not None:
        return fa.model_means
    return model_use_means(model_use_sums(fa.unit_model, fa.model_id.size, fa.use_powered_h_per_year,
                                          fa.use_out_h_per_year, fa.use_ambient_c, fa.use_hires_per_year))


def projected_use(fa, means=None):
    """Per unit: powered hours per year, hours out per year, venue ambient [degC]
    (step 3); fills units without enough history from their gear model."""
    means = means or _model_means(fa)
    p = fa.use_powered_h_per_year.copy()
    o = fa.use_out_h_per_year.copy()
    a = fa.use_ambient_c.copy()
    known = ~np.isnan(p)
    n_models = fa.model_id.size
    default_p = fa.model_hours_per_day * DEFAULT_HIRE_DAYS_PER_YEAR
    default_o = np.full(n_models, DEFAULT_HIRE_DAYS_PER_YEAR * 24.0)
    mean_p, mean_o, mean_a = means["powered_h_per_year"], means["out_h_per_year"], means["ambient_c"]
    model_p = np.where(np.isnan(mean_p), default_p, mean_p)
    model_o = np.where(np.isnan(mean_o), default_o, mean_o)
    model_a = np.where(np.isnan(mean_a), DEFAULT_VENUE_AMBIENT_C, mean_a)
    p = np.where(known, p, model_p[fa.unit_model])
    o = np.where(known, o, model_o[fa.unit_model])
    a = np.where(np.isnan(a), model_a[fa.unit_model], a)
    o = np.clip(o, p, HOURS_PER_YEAR)
    return p, o, a


def projected_hire(fa, powered_h_per_year, out_h_per_year, means=None):
    """Per unit: powered hours and hours out of one typical hire, from its
    last twelve months (hours over hires), else its gear model's units, else
    ``DEFAULT_HIRE_LENGTH_DAYS`` at the model's powered hours per day."""
    means = means or _model_means(fa)
    n = fa.use_hires_per_year
    known = ~np.isnan(n) & (n > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        per_p = np.where(known, powered_h_per_year / np.where(known, n, 1.0), np.nan)
        per_o = np.where(known, out_h_per_year / np.where(known, n, 1.0), np.nan)
    mean_p, mean_o = means["hire_powered_h"], means["hire_out_h"]
    model_p = np.where(np.isnan(mean_p), fa.model_hours_per_day * DEFAULT_HIRE_LENGTH_DAYS, mean_p)
    model_o = np.where(np.isnan(mean_o), DEFAULT_HIRE_LENGTH_DAYS * 24.0, mean_o)
    hire_p = np.where(known, per_p, model_p[fa.unit_model])
    hire_o = np.where(known, per_o, model_o[fa.unit_model])
    return hire_p, np.maximum(hire_o, hire_p)


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
        d_pow = _with_feedback(fa, d_pow, np.maximum(hours_p, 0.0), ripple_a, opts, d_unp)
    d_hist = d_pow + d_unp

    # 3. rate of damage per day at the projected use
    means = _model_means(fa)
    p_h, o_h, amb_c = projected_use(fa, means)
    store_frac = np.maximum(1.0 - o_h / HOURS_PER_YEAR, 0.0)
    esr_now_for_rate = fa.esr0_ohm
    if opts.esr_feedback:
        esr_now_for_rate = physics.esr_at_damage(fa.esr0_ohm, d_hist)
    rise_now = physics.ripple_rise_k(ripple_a, esr_now_for_rate, fa.diameter_mm, fa.length_mm)
    L0, T0 = fa.rated_life_h, fa.rated_temp_c
    powered_per_h = _inverse_life(L0, T0, amb_c[ui] + rise_int[ui] + rise_now, opts)  # damage per powered hour
    per_year = p_h[ui] * powered_per_h
    per_year += _unpowered_per_year(fa, (o_h - p_h), amb_c, store_frac, opts)
    rate = per_year / DAYS_PER_YEAR
    # What one typical hire adds: its powered hours hot, the rest of it off at the venue.
    hire_p, hire_o = projected_hire(fa, p_h, o_h, means)
    hire_damage = hire_p[ui] * powered_per_h + (hire_o - hire_p)[ui] * _inverse_life(L0, T0, amb_c[ui], opts)

    # 2. use since the last count, projected
    since = np.maximum(today_day - np.maximum(fa.accounted_day[ui], fa.installed_day), 0.0)
    damage = d_hist + rate * since

    # 2b. bench readings: measured damage, rate factors, the unit's frailty
    found = apply_readings(fa, damage=damage, rate=rate, today_day=today_day, frailty_sigma=opts.frailty_sigma,
                           damage_since=lambda rows, snaps: _histogram_damage(fa, rise_ripple, opts, rows, snaps))
    damage, rate = found.damage, found.rate

    # 4. role thresholds
    threshold = _thresholds(fa, damage, rate, today_day)

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
        units = np.arange(n)
        if subset is not None:
            local = np.full(n, -1, dtype=np.int64)
            local[subset] = np.arange(subset.size)
            keep = local[unit_of_row] >= 0
            rows, unit_of_row, n, units = rows[keep], local[unit_of_row[keep]], subset.size, subset
        xn, xr, xp = x_now[rows], x_rate[rows], x_rate_past[rows]
        # Readings: the measured rows' hazard leaves the unit's (updated) frailty.
        frail = None if not found.any else (~found.measured[rows], np.exp(beta * found.frailty_mean[units]),
                                            found.frailty_sd[units])

        def x_at(t):
            return np.maximum(xn + np.where(t < 0, xp, xr) * t, 0.0)
        dead = np.bincount(unit_of_row, weights=failed[rows].astype(float), minlength=n) > 0

        def risk_at(t_days):
            """Unit risk over the horizon starting ``t_days`` (per unit) from today."""
            t = t_days[unit_of_row]
            x0, x1 = x_at(t), x_at(t + policy.horizon_days)
            total = unit_hazard(physics.cumulative_hazard(x0, 1.0, beta), physics.cumulative_hazard(x1, 1.0, beta),
                                unit_of_row, n, beta, opts.frailty_sigma, frail)
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
    # 7. triage: the next hire's risk, what the failing roles do to it, actions
    tri = triage(unit_index=ui, n_units=nu, role_code=fa.pos_role[fa.position_index], damage=damage,
                 threshold=threshold, hire_damage=hire_damage, installed_day=fa.installed_day,
                 is_original=fa.is_original, status=status, due_day=due_day, today_day=today_day, policy=policy,
                 weibull_shape=beta, frailty_sigma=opts.frailty_sigma)
    return FleetForecast(today_day=today_day, damage=damage, esr_ohm=esr, capacitance_f=cap, threshold=threshold,
                         rate_per_day=rate, reaches_day=reaches, risk=risk, due_day=due_day, status=status,
                         storage_reform=storage_reform, max_damage_ratio=ratio, reasons=reasons,
                         hire_damage=hire_damage, hire_risk=tri.hire_risk, score=tri.score, priority=tri.priority,
                         act_by_day=tri.act_by_day, action=tri.action, why=tri.why, readings=found)
