"""Role-aware damage thresholds D* for a whole fleet (pure numpy).

Each role turns a circuit requirement into the damage at which the part stops
meeting it (``scheduling.physics`` holds the circuit formulas); the two parts of
a switched-capacitor inverter fail together, at one moment.
"""

import numpy as np

from . import parameters as P
from . import physics
from .crossing import SEARCH_FUTURE_DAYS, _first_crossing
from .physics.circuits import _inverter_rout, _inverter_v
from .physics.drift import _capacitance_at, _esr_at

#: Largest damage threshold a role may give [-].  Our choice: the drift laws
#: are calibrated at D = 1 (endurance-test limits); beyond about twice that
#: the extrapolation is not trusted, and parts that far gone may vent or open.
DAMAGE_THRESHOLD_CAP = 2.0
#: Tolerance of the pump pair's failure time [days] (numerical): about 1 s,
#: so that the thresholds reproduce the minimum rail to better than 1e-6.
PUMP_TOLERANCE_DAYS = 1e-5

#: Capacitor roles as small integers in the arrays (names as in fleet.models.Role).
ROLE_CODES = {
    "general": 0, "supply_decoupling": 1, "timing": 2, "supply_reservoir": 3,
    "pump_flying": 4, "pump_reservoir": 5, "signal_coupling": 6,
}
ROLE_NAMES = {v: k for k, v in ROLE_CODES.items()}


def _circuit(fa, name, rows):
    return fa.pos_circuit[name][fa.position_index[rows]]


def _thresholds(fa, damage, rate, today_day):
    """Role-aware damage threshold D* per capacitor (step 4); ``today_day``
    (days since 1970) dates the damage, for a pump pair that failed before it."""
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
    _pump_thresholds(fa, damage, rate, threshold, role, today_day)
    return np.clip(threshold, 0.0, DAMAGE_THRESHOLD_CAP)


def pump_partner_rows(fa, fly, pump=None):
    """Capacitor row of each flying part's partner (the same unit's row at the
    partner position; -1 where none), found by a sorted (unit, position) key."""
    if pump is None:
        role = fa.pos_role[fa.position_index]
        pump = np.flatnonzero((role == ROLE_CODES["pump_flying"]) | (role == ROLE_CODES["pump_reservoir"]))
    if not pump.size:
        return np.full(fly.size, -1, dtype=np.int64)
    n_pos = max(int(fa.pos_id.size), 1)
    keys = fa.unit_index[pump] * n_pos + fa.position_index[pump]
    order = np.argsort(keys, kind="stable")
    partner = fa.pos_partner[fa.position_index[fly]]
    wanted = fa.unit_index[fly] * n_pos + np.maximum(partner, 0)
    at = np.clip(np.searchsorted(keys[order], wanted), 0, keys.size - 1)
    return np.where((partner >= 0) & (keys[order][at] == wanted), pump[order][at], -1)


def _pump_thresholds(fa, damage, rate, threshold, role, today_day):
    """Thresholds of the two capacitors of each switched-capacitor inverter.

    Both capacitors age at once, so the rail fails at one moment for the pair:
    find the time t (days from today) at which ``physics.inverter_output_v``
    with both parts drifted reaches the minimum rail magnitude; each part's
    threshold is its damage at that moment.  Ahead of today each part drifts at
    its projected rate (damage + rate * t); before today each is taken to have
    aged evenly since it went in (damage * (age + t) / age), the assumption
    every other date already passed uses, so a pair whose rail failed in the
    past gets one failure date for both parts.  A pair whose rail fails even
    with the younger part new gets 0.
    """
    pump = np.flatnonzero((role == ROLE_CODES["pump_flying"]) | (role == ROLE_CODES["pump_reservoir"]))
    if not pump.size:
        return
    fly = pump[role[pump] == ROLE_CODES["pump_flying"]]
    if not fly.size:
        return
    res = pump_partner_rows(fa, fly, pump)
    names = ("pump_input_v", "pump_load_a", "pump_freq_hz", "pump_switch_ohm", "pump_min_rail_v")
    vin, load, f, rsw, vmin = (_circuit(fa, n, fly) for n in names)
    ok = (res >= 0) & ~np.isnan(vin) & ~np.isnan(load) & ~np.isnan(f) & ~np.isnan(vmin)
    fly, res, vin, load, f, rsw, vmin = (a[ok] for a in (fly, res, vin, load, f, rsw, vmin))
    if not fly.size:
        return
    rsw = np.nan_to_num(rsw)
    age_fly = np.maximum(today_day - fa.installed_day[fly], 0.0)   # days since each part went in
    age_res = np.maximum(today_day - fa.installed_day[res], 0.0)

    def drifted(rows, ages, units, t):
        """Damage of ``rows`` (one per pair in ``units``) at t days from today."""
        d, r, a = damage[rows[units]], rate[rows[units]], ages[units]
        with np.errstate(divide="ignore", invalid="ignore"):
            back = np.where(a > 0, d * np.maximum(a + t, 0.0) / a, 0.0)
        return np.maximum(np.where(t < 0, back, d + r * t), 0.0)

    # The figures checked once here (a bad one raises as the public functions
    # do); the search's many steps below use their unchecked kernels on them.
    c_fly, c_res, e_fly, e_res = fa.capacitance_f[fly], fa.capacitance_f[res], fa.esr0_ohm[fly], fa.esr0_ohm[res]
    physics.inverter_output_v(vin, load, f, c_fly, c_res, e_fly, e_res, rsw)
    loss, ratio, k_fly = (np.float64(x) for x in (P.CAPACITANCE_LOSS_AT_END, P.ESR_RATIO_AT_END, P.FLYING_ESR_FACTOR))

    def margin_of(units, t):
        d_f, d_r = drifted(fly, age_fly, units, t), drifted(res, age_res, units, t)
        # physics.inverter_output_v with both parts drifted (capacitance_at_damage, esr_at_damage).
        rout = _inverter_rout(f[units], _capacitance_at(c_fly[units], d_f, loss), _esr_at(e_fly[units], d_f, ratio),
                              _esr_at(e_res[units], d_r, ratio), rsw[units], k_fly)
        return -_inverter_v(vin[units], load[units], rout) - vmin[units]  # >= 0 while the rail is deep enough

    every = np.arange(fly.size)
    lo = -np.minimum(age_fly, age_res)           # the younger part is new here
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
    t_fail = np.where(fails_new, lo, hi)
    for rows, ages in ((fly, age_fly), (res, age_res)):
        at_fail = drifted(rows, ages, every, t_fail)
        threshold[rows] = np.where(never, DAMAGE_THRESHOLD_CAP, np.where(fails_new, 0.0, at_fail))
