"""Bench findings: what a measured ESR, capacitance or supply rail says about
a part's damage, how sure that is, and what it tells about the rest of the
unit (design brief "Readings from the bench"; refs §2, §6).
"""

import numpy as np

from scheduling import parameters as P
from scheduling import roots

from .circuits import inverter_output_resistance_ohm
from .drift import capacitance_at_damage, damage_from_capacitance, damage_from_esr, esr_at_damage
from .validation import _check, _check_range, _out


def damage_from_readings(esr0_ohm, esr_ohm, c0_f, c_f,
                         esr_log_sd=P.READING_ESR_LOG_SD,
                         capacitance_rel_sd=P.READING_CAPACITANCE_REL_SD,
                         esr_ratio_at_end=P.ESR_RATIO_AT_END,
                         capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END):
    """Damage of a part from a measured ESR, a measured capacitance, or both,
    with its standard error.

    Parameters
    ----------
    esr0_ohm, c0_f : float or array-like
        The part's initial ESR [ohm] and capacitance [F], > 0.
    esr_ohm, c_f : float or array-like
        Measured ESR [ohm] and capacitance [F], > 0; NaN where not measured.
    esr_log_sd : float, default 0.2
        Error of an ESR reading as the log-sd of measured / true ESR.
    capacitance_rel_sd : float, default 0.10
        Error of a capacitance reading as a fraction of C0.

    Returns
    -------
    (damage, damage_sd) : floats or ndarrays
        Damage [-] (>= 0) and its standard error [-]; NaN where neither
        quantity was measured.

    Notes
    -----
    Each reading inverts its drift law (:func:`damage_from_esr`,
    :func:`damage_from_capacitance`).  The errors carry through the laws'
    slopes: ``sd_esr = esr_log_sd / ln r`` and ``sd_cap = capacitance_rel_sd /
    l``.  Both given: the inverse-variance weighted mean, the standard way of
    combining two independent estimates of one quantity,

    .. math:: D = \\frac{D_{esr}/s_{esr}^2 + D_{cap}/s_{cap}^2}{1/s_{esr}^2 + 1/s_{cap}^2},
              \\quad s = (1/s_{esr}^2 + 1/s_{cap}^2)^{-1/2}

    With the defaults an ESR reading (sd 0.29 in damage) weighs about three
    times a capacitance reading (sd 0.5): a part's capacitance tolerance is
    wide against its drift.

    References
    ----------
    Drift laws of :func:`esr_at_damage` and :func:`capacitance_at_damage`;
    inverse-variance weighting, e.g. J. R. Taylor, "An Introduction to Error
    Analysis", 2nd ed., University Science Books, 1997, ch. 7 (from memory).

    Examples
    --------
    >>> d, s = damage_from_readings(0.5, 1.0, 100e-6, float("nan"))
    >>> round(d, 6)
    1.0
    """
    e0 = _check("esr0_ohm", esr0_ohm, "positive")
    c0 = _check("c0_f", c0_f, "positive")
    e = np.asarray(esr_ohm, dtype=float)
    c = np.asarray(c_f, dtype=float)
    if np.any(e[~np.isnan(e)] <= 0) if e.ndim else (not np.isnan(e) and e <= 0):
        raise ValueError("esr_ohm must be > 0 where given")
    if np.any(c[~np.isnan(c)] <= 0) if c.ndim else (not np.isnan(c) and c <= 0):
        raise ValueError("c_f must be > 0 where given")
    s_e = float(_check("esr_log_sd", esr_log_sd, "positive")) / np.log(esr_ratio_at_end)
    s_c = float(_check("capacitance_rel_sd", capacitance_rel_sd, "positive")) / capacitance_loss_at_end
    shape = np.broadcast_shapes(e0.shape, c0.shape, e.shape, c.shape)
    e0, c0, e, c = (np.broadcast_to(a, shape) for a in (e0, c0, e, c))
    has_e, has_c = ~np.isnan(e), ~np.isnan(c)
    d_e = np.where(has_e, damage_from_esr(e0, np.where(has_e, e, e0), esr_ratio_at_end), 0.0)
    d_c = np.where(has_c, damage_from_capacitance(c0, np.where(has_c, c, c0), capacitance_loss_at_end), 0.0)
    w_e, w_c = has_e / s_e**2, has_c / s_c**2
    w = w_e + w_c
    with np.errstate(invalid="ignore", divide="ignore"):
        damage = np.where(w > 0, (w_e * d_e + w_c * d_c) / w, np.nan)
        sd = np.where(w > 0, 1.0 / np.sqrt(w), np.nan)
    return _out(damage), _out(sd)


def pump_damage_from_rail(vin_v, rail_v, load_a, pump_hz, c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm,
                          switch_ohm, damage_fly_predicted, damage_res_predicted,
                          flying_esr_factor=P.FLYING_ESR_FACTOR):
    """Damage of both capacitors of a charge pump from its measured negative rail.

    Parameters
    ----------
    vin_v : float or array-like
        Input rail [V], > 0.
    rail_v : float or array-like
        Measured output rail [V], <= 0 (its magnitude at most ``vin_v``).
    load_a : float or array-like
        Load current at the reading [A], > 0.
    pump_hz, c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm, switch_ohm
        As in :func:`inverter_output_v`, with the parts' initial (D = 0) values.
    damage_fly_predicted, damage_res_predicted : float or array-like
        The two parts' predicted damage at the reading [-], >= 0.

    Returns
    -------
    (damage_fly, damage_res) : floats or ndarrays
        Damage of each part [-].

    Notes
    -----
    The rail gives the converter's output resistance,
    ``Rout = (Vin - |Vout|) / I``.  One number cannot tell the two parts
    apart, so both are taken to have aged by one factor q against their
    predictions (the unit's parts share one life multiplier, see
    :func:`unit_conditional_hazard`): solve
    ``Rout(q D_fly, q D_res) = (Vin - |Vout|) / I`` for q with
    :func:`inverter_output_resistance_ohm` and the drift laws (Rout rises
    with q, so the root is unique; ``roots.first_crossing``).  A pair
    predicted new is scaled from ``parameters.PUMP_PAIR_DAMAGE_FLOOR`` each.
    A rail at or above what new parts give reads as q = 0; a collapsed rail
    (0 V) only bounds Rout from below and gives the damage at which the rail
    just reaches 0 V; q is capped where a damage reaches
    ``parameters.DAMAGE_MAX``.  At the predicted rail q = 1: the predicted
    damages come back.

    References
    ----------
    refs §6 (classic converter data sheet); checked against
    ``scipy.optimize.brentq`` in the tests.

    Examples
    --------
    >>> d_f, d_r = pump_damage_from_rail(5.0, -3.0, 0.02, 5e3, 10e-6, 47e-6, 3.5, 1.2, 46.0, 1.0, 1.0)
    >>> round(d_f, 3), round(d_r, 3)
    (0.948, 0.948)
    """
    vin = _check("vin_v", vin_v, "positive")
    rail = _check("rail_v", rail_v)
    if np.any(rail > 0):
        raise ValueError("rail_v must be <= 0 (a negative rail)")
    if np.any(-rail > vin):
        raise ValueError("the rail's magnitude cannot exceed the input")
    load = _check("load_a", load_a, "positive")
    d_fp = _check("damage_fly_predicted", damage_fly_predicted, "nonnegative")
    d_rp = _check("damage_res_predicted", damage_res_predicted, "nonnegative")
    parts = (pump_hz, c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm, switch_ohm)
    inverter_output_resistance_ohm(pump_hz, c_fly_f, esr_fly0_ohm, esr_res0_ohm, switch_ohm)  # validate
    shape = np.broadcast_shapes(vin.shape, rail.shape, load.shape, d_fp.shape, d_rp.shape,
                                *(np.shape(a) for a in parts))
    f, c1, c2, e1, e2, rsw = (np.broadcast_to(np.asarray(a, dtype=float), shape).reshape(-1) for a in parts)
    r_meas = ((vin - np.abs(rail)) / load) * np.ones(shape)
    r_meas = r_meas.reshape(-1)
    scale_f = np.broadcast_to(np.maximum(d_fp, P.PUMP_PAIR_DAMAGE_FLOOR), shape).reshape(-1)
    scale_r = np.broadcast_to(np.maximum(d_rp, P.PUMP_PAIR_DAMAGE_FLOOR), shape).reshape(-1)
    q_max = P.DAMAGE_MAX / np.maximum(scale_f, scale_r)

    def rout(k, q):
        d1, d2 = q * scale_f[k], q * scale_r[k]
        return inverter_output_resistance_ohm(
            f[k], capacitance_at_damage(c1[k], d1), esr_at_damage(e1[k], d1), esr_at_damage(e2[k], d2), rsw[k],
            flying_esr_factor)

    every = np.arange(r_meas.size)
    lo, hi = np.zeros(r_meas.size), q_max.copy()
    r_lo, r_hi = rout(every, lo), rout(every, hi)
    q = np.where(r_meas <= r_lo, 0.0, q_max)
    solve = np.flatnonzero((r_meas > r_lo) & (r_meas < r_hi))
    if solve.size:
        _, q_hi = roots.first_crossing(
            lambda k, x: rout(solve[k], x), lo[solve], hi[solve], r_lo[solve], r_hi[solve], r_meas[solve],
            tol=P.ROOT_TOLERANCE_DAMAGE, bisections=2, max_steps=P.BISECTION_ITERATIONS)
        q[solve] = q_hi
    return _out((q * scale_f).reshape(shape)), _out((q * scale_r).reshape(shape))


def frailty_posterior(unit_index, log_ratio, log_ratio_sd, prior_sigma, n_units):
    """A unit's shared life multiplier Z after bench readings (conjugate update).

    Parameters
    ----------
    unit_index : array-like of int
        The unit (0 .. n_units-1) of each reading.
    log_ratio : array-like
        ``ln(D_measured / D_predicted)`` of each reading [-].
    log_ratio_sd : array-like
        Its standard error [-], > 0 (measurement and the part's own scatter).
    prior_sigma : float
        Log-sd of Z before any reading [-], >= 0 (``parameters.FRAILTY_SIGMA``).
    n_units : int

    Returns
    -------
    (mean, sd) : ndarrays (n_units,)
        Posterior mean and standard deviation of ln Z per unit; (0,
        prior_sigma) for a unit without readings, (0, 0) when prior_sigma is 0.

    Notes
    -----
    Each reading is ``y = ln Z + e``, e normal with the given sd; ln Z is
    normal with mean 0 and sd ``prior_sigma``.  Normal prior and normal
    likelihood are conjugate: the posterior is normal with

    .. math:: \\tau = 1/\\sigma_0^2 + \\sum_j 1/s_j^2, \\quad
              \\mu = \\frac{\\sum_j y_j / s_j^2}{\\tau}, \\quad \\sigma = \\tau^{-1/2}

    References
    ----------
    The normal-normal conjugate update, e.g. A. Gelman et al., "Bayesian
    Data Analysis", 3rd ed., CRC Press, 2013, section 2.5 (from memory);
    checked in the tests by integrating prior times likelihood with
    ``scipy.integrate.quad``.

    Examples
    --------
    >>> m, s = frailty_posterior([0], [0.5], [0.4], 0.4, 1)
    >>> round(float(m[0]), 6), round(float(s[0]), 6)
    (0.25, 0.282843)
    """
    ui = np.asarray(unit_index, dtype=np.int64)
    y = _check("log_ratio", log_ratio)
    s = _check("log_ratio_sd", log_ratio_sd, "positive")
    s0 = float(_check_range("prior_sigma", prior_sigma, 0.0, np.inf))
    if s0 == 0:
        return np.zeros(n_units), np.zeros(n_units)
    w = np.broadcast_to(1.0 / s**2, ui.shape)
    precision = 1.0 / s0**2 + np.bincount(ui, weights=w, minlength=n_units)
    mean = np.bincount(ui, weights=np.broadcast_to(y, ui.shape) * w, minlength=n_units) / precision
    return mean, 1.0 / np.sqrt(precision)


def rate_factor(damage_measured, damage_predicted, resolution,
                low=P.RATE_FACTOR_MIN, high=P.RATE_FACTOR_MAX):
    """Multiplier of a read part's future rate of damage.

    Parameters
    ----------
    damage_measured, damage_predicted : float or array-like
        Damage at the reading, measured and as predicted [-], >= 0.
    resolution : float or array-like
        The reading's standard error in damage [-], > 0.
    low, high : float
        The clip (``parameters.RATE_FACTOR_MIN``/``MAX``).

    Returns
    -------
    float or ndarray
        ``clip(measured / predicted, low, high)``: a part that aged faster than
        predicted keeps doing so; 1 where the predicted damage is below the
        reading's resolution (a part too young to tell its rate).

    Examples
    --------
    >>> rate_factor(2.0, 1.0, 0.3)
    2.0
    """
    dm = _check("damage_measured", damage_measured, "nonnegative")
    dp = _check("damage_predicted", damage_predicted, "nonnegative")
    res = _check("resolution", resolution, "positive")
    with np.errstate(divide="ignore", invalid="ignore"):
        k = np.clip(dm / np.where(dp > 0, dp, 1.0), low, high)
    return _out(np.where(dp >= res, k, 1.0))


def leakage_limit_ua(capacitance_uf, rated_voltage_v):
    """Leakage current a new part may draw by the data-sheet convention.

    Parameters
    ----------
    capacitance_uf : float or array-like
        Rated capacitance [uF], > 0.
    rated_voltage_v : float or array-like
        Rated voltage [V], > 0.

    Returns
    -------
    float or ndarray
        Limit [uA] after 2 minutes at rated voltage and 20 degC.

    Notes
    -----
    .. math:: I \\le \\max(0.01\\,C\\,U, 3\\,\\mu A)

    References
    ----------
    refs §2 (the convention of aluminium electrolytic series data sheets).

    Examples
    --------
    >>> leakage_limit_ua(47, 450)
    211.5
    """
    c = _check("capacitance_uf", capacitance_uf, "positive")
    u = _check("rated_voltage_v", rated_voltage_v, "positive")
    return _out(np.maximum(P.LEAKAGE_LIMIT_UA_PER_UF_V * c * u, P.LEAKAGE_LIMIT_FLOOR_UA))
