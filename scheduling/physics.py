"""Capacitor life, drift, circuit and risk formulas (pure, vectorised numpy).

No Django, no I/O, no logging.  Every function takes scalars or numpy arrays
that broadcast against each other and returns a ``float`` (all inputs scalar)
or an ``ndarray``.  Invalid arguments raise ``ValueError`` naming the
argument.  Units: hours [h], degC, kelvin differences [K], ohm, farad [F],
hertz [Hz], volt [V], ampere [A], millimetre [mm].

"Damage" D is Palmgren-Miner damage in units of rated-condition life: D = 1
is the end-of-life limit of the endurance test (ESR 2x, capacitance -20 %).
Sources are those of the shared ``docs/references.md`` (section numbers
quoted as "refs §n"); "from memory" marks what that file marks [M].
"""

import functools

import numpy as np
import scipy.interpolate
import scipy.special

from scheduling import parameters as P
from scheduling import roots

__all__ = [
    "life_hours_10k", "life_hours_arrhenius", "can_area_cm2", "esr_from_tan_delta_ohm",
    "ripple_rise_k", "miner_damage", "damage_from_histogram", "esr_at_damage",
    "capacitance_at_damage", "damage_from_esr", "damage_from_capacitance",
    "damage_with_esr_feedback", "inverter_output_resistance_ohm", "inverter_output_v",
    "inverter_ripple_vpp", "charge_share_fraction", "coupling_corner_hz",
    "reservoir_ripple_vpp", "stored_energy_j", "discharge_time_s", "failure_probability",
    "conditional_failure_probability", "unit_failure_probability", "threshold_pump",
    "threshold_coupling", "threshold_reservoir",
]

_LN2 = np.log(2.0)
_CHUNK_ROWS = 8192  # rows per block in the general Arrhenius histogram path


# --- validation helpers ----------------------------------------------------

def _check(name, value, kind="finite", allow_inf=False):
    """Return ``value`` as a float64 array, or raise ValueError naming it.

    ``kind``: ``'finite'`` (any real), ``'positive'`` (> 0), ``'nonnegative'``
    (>= 0), ``'temperature'`` (> -273.15 degC), ``'probability'`` ([0, 1]).
    NaN is always rejected; +-inf unless ``allow_inf``.  Uses min/max only, so
    it needs no temporary array the size of ``value``.
    """
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers") from None
    if arr.size == 0:
        return arr
    if arr.ndim == 0:
        lo = hi = float(arr)
    else:  # the ufunc reductions directly: no per-call wrapper overhead
        lo, hi = float(np.minimum.reduce(arr, axis=None)), float(np.maximum.reduce(arr, axis=None))
    if lo != lo or hi != hi:  # NaN propagates through min/max
        raise ValueError(f"{name} must not be NaN")
    if not allow_inf and (lo in (np.inf, -np.inf) or hi in (np.inf, -np.inf)):
        raise ValueError(f"{name} must be finite")
    if kind == "positive" and lo <= 0:
        raise ValueError(f"{name} must be > 0 (got {lo:g})")
    if kind == "nonnegative" and lo < 0:
        raise ValueError(f"{name} must be >= 0 (got {lo:g})")
    if kind == "temperature" and lo <= P.ABSOLUTE_ZERO_C:
        raise ValueError(f"{name} must be above absolute zero, -273.15 degC (got {lo:g})")
    if kind == "probability" and (lo < 0 or hi > 1):
        raise ValueError(f"{name} must lie in [0, 1]")
    return arr


def _check_range(name, value, low, high, low_open=False):
    """Scalar-or-array check ``low <(=) value <= high``."""
    arr = _check(name, value)
    if arr.size:
        lo, hi = float(np.minimum.reduce(arr, axis=None)), float(np.maximum.reduce(arr, axis=None))
    if arr.size and (lo < low or (low_open and lo == low) or hi > high):
        raise ValueError(f"{name} must lie in {'(' if low_open else '['}{low:g}, {high:g}]")
    return arr


def _out(x):
    """float for 0-d results, else the ndarray."""
    x = np.asarray(x, dtype=np.float64)
    return float(x) if x.ndim == 0 else x


def _law(law, activation_energy_ev):
    """Validate a life-law choice; return the activation energy array or None."""
    if law == "10k":
        return None
    if law == "arrhenius":
        if activation_energy_ev is None:
            raise ValueError("activation_energy_ev is required when law='arrhenius'")
        return _check("activation_energy_ev", activation_energy_ev, "nonnegative")
    raise ValueError(f"law must be '10k' or 'arrhenius' (got {law!r})")


def _inverse_life(core_temp_c, rated_life_h, rated_temp_c, ea_ev):
    """1/L [1/h] at ``core_temp_c`` (10 K rule if ``ea_ev`` is None)."""
    if ea_ev is None:
        return np.exp2((core_temp_c - rated_temp_c) / P.TEN_K_RULE_STEP_K) / rated_life_h
    t_k = core_temp_c + P.ZERO_CELSIUS_K
    t0_k = rated_temp_c + P.ZERO_CELSIUS_K
    return np.exp(-ea_ev / P.BOLTZMANN_EV_PER_K * (1.0 / t_k - 1.0 / t0_k)) / rated_life_h


# --- 1. temperature life -------------------------------------------------

def life_hours_10k(rated_life_h, rated_temp_c, core_temp_c):
    """Life at a core temperature by the 10 K rule.

    Parameters
    ----------
    rated_life_h : float or array-like
        Rated endurance at the rated temperature [h], > 0.
    rated_temp_c : float or array-like
        Rated (endurance-test) temperature [degC].
    core_temp_c : float or array-like
        Core (hot-spot) temperature in use [degC].

    Returns
    -------
    float or ndarray
        Expected life [h].

    Notes
    -----
    .. math:: L = L_0 \\, 2^{(T_0 - T)/10}

    References
    ----------
    refs §1: a capacitor manufacturer's primer, "for every rise in usage
    temperature by 10 degrees centigrade, the service life is shortened to one
    half".

    Examples
    --------
    >>> round(life_hours_10k(2000, 105, 65), 1)
    32000.0
    """
    l0 = _check("rated_life_h", rated_life_h, "positive")
    t0 = _check("rated_temp_c", rated_temp_c, "temperature")
    t = _check("core_temp_c", core_temp_c, "temperature")
    return _out(l0 * np.exp2((t0 - t) / P.TEN_K_RULE_STEP_K))


def life_hours_arrhenius(rated_life_h, rated_temp_c, core_temp_c, activation_energy_ev):
    """Life at a core temperature by a single-activation-energy Arrhenius law.

    Parameters
    ----------
    rated_life_h : float or array-like
        Rated endurance [h], > 0.
    rated_temp_c, core_temp_c : float or array-like
        Rated and in-use core temperatures [degC].
    activation_energy_ev : float or array-like
        Activation energy Ea [eV], >= 0.

    Returns
    -------
    float or ndarray
        Expected life [h].

    Notes
    -----
    .. math:: L = L_0 \\exp\\left[\\frac{E_a}{k}\\left(\\frac{1}{T} - \\frac{1}{T_0}\\right)\\right]

    with T in kelvin (degC + 273.15) and k the Boltzmann constant in eV/K
    (CODATA, exact since 2019: 8.617333262e-5).  The 10 K rule is *not* one
    Arrhenius law: the equivalent Ea is ``k*ln2*T1*T2/(T2 - T1)``, 0.8315 eV
    for 95->105 degC but 0.567 eV for 30->40 degC.

    References
    ----------
    refs §1; k from ``scipy.constants.physical_constants``.

    Examples
    --------
    >>> round(life_hours_arrhenius(1.0, 105, 65, 0.70), 3)  # acceleration factor
    12.693
    """
    l0 = _check("rated_life_h", rated_life_h, "positive")
    t0 = _check("rated_temp_c", rated_temp_c, "temperature")
    t = _check("core_temp_c", core_temp_c, "temperature")
    ea = _check("activation_energy_ev", activation_energy_ev, "nonnegative")
    return _out(1.0 / _inverse_life(t, l0, t0, ea))


# --- 2. ripple self-heating ----------------------------------------------

def can_area_cm2(diameter_mm, length_mm):
    """Whole outer surface of a cylindrical can (side, top and bottom).

    Parameters
    ----------
    diameter_mm, length_mm : float or array-like
        Can diameter and length [mm], > 0.

    Returns
    -------
    float or ndarray
        Area [cm^2].

    Notes
    -----
    .. math:: A = \\pi D L + \\pi D^2 / 2

    References
    ----------
    refs §4 (computed from the formula).

    Examples
    --------
    >>> round(can_area_cm2(16, 35), 2)
    21.61
    """
    d = _check("diameter_mm", diameter_mm, "positive")
    length = _check("length_mm", length_mm, "positive")
    return _out((np.pi * d * length + np.pi * d**2 / 2.0) / 100.0)


def esr_from_tan_delta_ohm(tan_delta, capacitance_f, freq_hz=P.TAN_DELTA_FREQ_HZ):
    """ESR from a data-sheet dissipation factor.

    Parameters
    ----------
    tan_delta : float or array-like
        Dissipation factor [-], >= 0.
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    freq_hz : float or array-like, default 120
        Frequency at which tan delta is stated [Hz], > 0.

    Returns
    -------
    float or ndarray
        ESR [ohm].

    Notes
    -----
    .. math:: ESR = \\tan\\delta / (2 \\pi f C)

    References
    ----------
    refs §4.

    Examples
    --------
    >>> round(esr_from_tan_delta_ohm(0.10, 1000e-6), 4)
    0.1326
    """
    td = _check("tan_delta", tan_delta, "nonnegative")
    c = _check("capacitance_f", capacitance_f, "positive")
    f = _check("freq_hz", freq_hz, "positive")
    return _out(td / (2.0 * np.pi * f * c))


def ripple_rise_k(ripple_current_a, esr_ohm, diameter_mm, length_mm,
                  h_w_per_cm2_k=P.HEAT_TRANSFER_W_PER_CM2_K):
    """Core temperature rise from ripple current.

    Parameters
    ----------
    ripple_current_a : float or array-like
        RMS ripple current [A], >= 0.
    esr_ohm : float or array-like
        ESR at the ripple frequency [ohm], >= 0.
    diameter_mm, length_mm : float or array-like
        Can size [mm].
    h_w_per_cm2_k : float or array-like, default 1.5e-3
        Heat-transfer coefficient [W/(cm^2 K)], > 0.

    Returns
    -------
    float or ndarray
        Temperature rise of the core over the surrounding air [K].

    Notes
    -----
    .. math:: \\Delta T = I^2 \\, ESR / (h A)

    with A from :func:`can_area_cm2`.

    References
    ----------
    refs §4; h: application guides quote 1.5-2.5e-3 W/(cm^2 K) (from memory).

    Examples
    --------
    >>> round(ripple_rise_k(1.0, 0.1, 16, 35), 2)
    3.08
    """
    i = _check("ripple_current_a", ripple_current_a, "nonnegative")
    esr = _check("esr_ohm", esr_ohm, "nonnegative")
    h = _check("h_w_per_cm2_k", h_w_per_cm2_k, "positive")
    return _out(i**2 * esr / (h * can_area_cm2(diameter_mm, length_mm)))


# --- 3. damage accumulation ------------------------------------------------

def miner_damage(hours, life_h):
    """Palmgren-Miner damage: the sum of hours/life along the last axis.

    Parameters
    ----------
    hours : float or array-like
        Hours spent in each condition [h], >= 0.
    life_h : float or array-like
        Life in each condition [h], > 0 (``inf`` allowed: no damage).

    Returns
    -------
    float or ndarray
        Damage [-] (1 = rated end of life); the broadcast shape minus its last axis.

    Notes
    -----
    .. math:: D = \\sum_i t_i / L_i

    References
    ----------
    refs §5 (Palmgren-Miner linear damage).

    Examples
    --------
    >>> round(miner_damage([500, 300, 200], [128000, 32000, 8000]) * 1e3, 4)
    38.2812
    """
    h = _check("hours", hours, "nonnegative")
    life = _check("life_h", life_h, "positive", allow_inf=True)
    h, life = np.broadcast_arrays(np.atleast_1d(h), np.atleast_1d(life))
    return _out(np.sum(h / life, axis=-1))


def damage_from_histogram(hours_per_bin, bin_temps_c, rated_life_h, rated_temp_c,
                          extra_rise_k=0.0, law=P.DEFAULT_LAW, activation_energy_ev=None):
    """Damage of a temperature-time histogram (hours per temperature bin).

    Parameters
    ----------
    hours_per_bin : array-like, shape (..., n_bins)
        Hours spent in each bin [h], >= 0.
    bin_temps_c : array-like, shape (n_bins,)
        Bin temperatures [degC] (ambient seen by the capacitor).
    rated_life_h, rated_temp_c : float or array-like
        Rating [h], [degC]; broadcast over the leading axes of ``hours_per_bin``.
    extra_rise_k : float or array-like, default 0
        Rise added to every bin, e.g. the ripple self-heating [K].
    law : {'10k', 'arrhenius'}
        Life law; ``activation_energy_ev`` [eV] is required for 'arrhenius'.

    Returns
    -------
    float or ndarray
        Damage [-], shape of the broadcast leading axes.

    Notes
    -----
    .. math:: D = \\sum_b h_b / L(T_b + \\Delta T)

    For the 10 K rule the sum factorises exactly,
    ``2**((T_b + rise - T0)/10)/L0 = 2**(T_b/10) * 2**((rise - T0)/10)/L0``,
    so it is one matrix-vector product ``hours @ 2**(bins/10)`` times a
    per-position factor: no temporary of the size of ``hours_per_bin``.  The
    Arrhenius law factorises the same way when the rise and Ea are single
    values; otherwise it is summed in blocks of rows.  The caller still holds
    ``hours_per_bin`` itself (500 000 positions x 191 bins is 760 MB in
    float64): fleet recomputes should pass it in chunks of positions.

    References
    ----------
    refs §1, §5; design brief §3.

    Examples
    --------
    >>> round(damage_from_histogram([1000.0, 1000.0], [95.0, 105.0], 2000, 105), 3)
    0.75
    """
    ea = _law(law, activation_energy_ev)
    hours = _check("hours_per_bin", hours_per_bin, "nonnegative")
    bins = _check("bin_temps_c", bin_temps_c, "temperature")
    if hours.ndim < 1 or bins.ndim != 1 or bins.shape[0] != hours.shape[-1]:
        raise ValueError("bin_temps_c must be 1-D with one temperature per bin of hours_per_bin")
    l0 = _check("rated_life_h", rated_life_h, "positive")
    t0 = _check("rated_temp_c", rated_temp_c, "temperature")
    rise = _check("extra_rise_k", extra_rise_k)
    step = P.TEN_K_RULE_STEP_K
    if ea is None:
        return _out((hours @ np.exp2(bins / step)) * (np.exp2((rise - t0) / step) / l0))
    if np.min(bins) + np.min(rise) <= P.ABSOLUTE_ZERO_C:
        raise ValueError("bin_temps_c + extra_rise_k must be above absolute zero")
    a = ea / P.BOLTZMANN_EV_PER_K  # [K]
    t0_k = t0 + P.ZERO_CELSIUS_K
    if rise.size == 1 and ea.size == 1:
        w = np.exp(-a.ravel()[0] / (bins + rise.ravel()[0] + P.ZERO_CELSIUS_K))
        return _out((hours @ w) * (np.exp(a / t0_k) / l0))
    lead = np.broadcast_shapes(hours.shape[:-1], l0.shape, t0.shape, rise.shape, ea.shape)
    n = bins.shape[0]
    hb = np.broadcast_to(hours, lead + (n,))
    pars = [np.broadcast_to(np.asarray(p)[..., None], lead + (1,)) for p in (l0, t0, rise, ea)]
    if not lead:
        return _out(np.sum(hb * _inverse_life(bins + pars[2], pars[0], pars[1], pars[3]), -1))
    out = np.empty(lead)
    for i in range(0, lead[0], _CHUNK_ROWS):
        s = slice(i, i + _CHUNK_ROWS)
        inv = _inverse_life(bins + pars[2][s], pars[0][s], pars[1][s], pars[3][s])
        out[s] = np.sum(hb[s] * inv, axis=-1)
    return _out(out)


# --- 4. drift with damage --------------------------------------------------

def esr_at_damage(esr0_ohm, damage, esr_ratio_at_end=P.ESR_RATIO_AT_END):
    """ESR after damage D.

    Parameters
    ----------
    esr0_ohm : float or array-like
        Initial ESR [ohm], >= 0.
    damage : float or array-like
        Damage [-], >= 0.
    esr_ratio_at_end : float or array-like, default 2.0
        ESR at D = 1 as a multiple of ESR0, >= 1.

    Returns
    -------
    float or ndarray
        ESR [ohm].

    Notes
    -----
    .. math:: ESR(D) = ESR_0 \\, r^D

    Exponential in damage (the empirical ``ESR0*exp(c*t)`` form of the
    prognostics literature, from memory), calibrated so that D = 1 sits at the
    endurance limit "ESR 2x initial".

    References
    ----------
    refs §2 (IEC 60384-4 endurance limits as quoted in series data sheets), §5.

    Examples
    --------
    >>> esr_at_damage(0.5, 1.0)
    1.0
    """
    e0 = _check("esr0_ohm", esr0_ohm, "nonnegative")
    d = _check("damage", damage, "nonnegative")
    r = _check_range("esr_ratio_at_end", esr_ratio_at_end, 1.0, np.inf)
    return _out(e0 * r**d)


def capacitance_at_damage(c0_f, damage, capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END):
    """Capacitance after damage D.

    Parameters
    ----------
    c0_f : float or array-like
        Initial capacitance [F], > 0.
    damage : float or array-like
        Damage [-], >= 0.
    capacitance_loss_at_end : float or array-like, default 0.2
        Fractional loss at D = 1, in [0, 1].

    Returns
    -------
    float or ndarray
        Capacitance [F].

    Notes
    -----
    .. math:: C(D) = C_0 \\max(1 - \\ell D, \\, 10^{-3})

    Linear in damage (capacitance falls about linearly with electrolyte
    volume, from memory), calibrated so that D = 1 is -20 %.  The floor of
    0.1 % of C0 (``parameters.CAPACITANCE_FLOOR_FRACTION``) is a numerical
    guard against division by zero; it lies far past any requirement.

    References
    ----------
    refs §2 (IEC 60384-4 endurance limits as quoted), §5.

    Examples
    --------
    >>> round(capacitance_at_damage(100e-6, 1.0) * 1e6, 6)
    80.0
    """
    c0 = _check("c0_f", c0_f, "positive")
    d = _check("damage", damage, "nonnegative")
    loss = _check_range("capacitance_loss_at_end", capacitance_loss_at_end, 0.0, 1.0)
    return _out(c0 * np.maximum(1.0 - loss * d, P.CAPACITANCE_FLOOR_FRACTION))


def damage_from_esr(esr0_ohm, esr_ohm, esr_ratio_at_end=P.ESR_RATIO_AT_END):
    """Damage implied by a measured ESR (bench finding); inverse of :func:`esr_at_damage`.

    Parameters
    ----------
    esr0_ohm, esr_ohm : float or array-like
        Initial and measured ESR [ohm], > 0, measured at the same frequency
        and temperature.
    esr_ratio_at_end : float or array-like, default 2.0
        ESR multiple at D = 1, > 1.

    Returns
    -------
    float or ndarray
        Damage [-]; 0 when the measured ESR is at or below the initial value.

    Notes
    -----
    .. math:: D = \\max(0, \\log(ESR/ESR_0) / \\log r)

    References
    ----------
    Design brief §9; drift law of :func:`esr_at_damage`.

    Examples
    --------
    >>> damage_from_esr(0.5, 2.0)
    2.0
    """
    e0 = _check("esr0_ohm", esr0_ohm, "positive")
    e = _check("esr_ohm", esr_ohm, "positive")
    r = _check_range("esr_ratio_at_end", esr_ratio_at_end, 1.0, np.inf, low_open=True)
    return _out(np.maximum(np.log(e / e0) / np.log(r), 0.0))


def damage_from_capacitance(c0_f, c_f, capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END):
    """Damage implied by a measured capacitance (bench finding); inverse of the drift law.

    Parameters
    ----------
    c0_f, c_f : float or array-like
        Initial and measured capacitance [F], > 0.
    capacitance_loss_at_end : float or array-like, default 0.2
        Fractional loss at D = 1, in (0, 1].

    Returns
    -------
    float or ndarray
        Damage [-]; 0 when the measured value is at or above C0.

    Notes
    -----
    .. math:: D = \\max(0, (1 - C/C_0) / \\ell)

    References
    ----------
    Design brief §9; drift law of :func:`capacitance_at_damage`.

    Examples
    --------
    >>> round(damage_from_capacitance(100e-6, 80e-6), 9)
    1.0
    """
    c0 = _check("c0_f", c0_f, "positive")
    c = _check("c_f", c_f, "positive")
    loss = _check_range("capacitance_loss_at_end", capacitance_loss_at_end, 0.0, 1.0, low_open=True)
    return _out(np.maximum((1.0 - c / c0) / loss, 0.0))


def damage_with_esr_feedback(hours, ambient_c, rated_life_h, rated_temp_c, ripple_current_a,
                             esr0_ohm, diameter_mm, length_mm,
                             h_w_per_cm2_k=P.HEAT_TRANSFER_W_PER_CM2_K, law=P.DEFAULT_LAW,
                             activation_energy_ev=None, steps=P.RK4_STEPS, damage0=0.0,
                             esr_ratio_at_end=P.ESR_RATIO_AT_END):
    """Damage after a constant-ambient interval, with ESR drift fed back into ripple heating.

    Parameters
    ----------
    hours : float or array-like
        Interval length [h], >= 0.
    ambient_c : float or array-like
        Air temperature around the capacitor [degC].
    rated_life_h, rated_temp_c : float or array-like
        Rating [h], [degC].
    ripple_current_a, esr0_ohm, diameter_mm, length_mm, h_w_per_cm2_k
        As in :func:`ripple_rise_k` (``esr0_ohm`` is the ESR at D = 0).
    law, activation_energy_ev
        Life law, as in :func:`damage_from_histogram`.
    steps : int, default 200
        Fixed RK4 steps over the interval.
    damage0 : float or array-like, default 0
        Damage at the start of the interval [-].
    esr_ratio_at_end : float, default 2.0
        As in :func:`esr_at_damage`.

    Returns
    -------
    float or ndarray
        Damage at the end of the interval [-] (``damage0`` included), capped
        at ``parameters.DAMAGE_MAX`` (thermal runaway).

    Notes
    -----
    .. math:: \\frac{dD}{dt} = \\frac{1}{L\\left(T_a + \\frac{I^2 ESR_0 r^D}{h A}\\right)}

    Classic fixed-step Runge-Kutta (4th order) on all positions at once.  The
    right-hand side grows super-exponentially in D, so D is capped at
    ``DAMAGE_MAX`` (ESR 2**20 x): beyond it the part is long dead.

    References
    ----------
    Design brief §4; refs §1, §4; checked against ``scipy.integrate.solve_ivp``.

    Examples
    --------
    >>> round(damage_with_esr_feedback(1000, 105, 2000, 105, 0.0, 0.1, 10, 20), 6)
    0.5
    """
    ea = _law(law, activation_energy_ev)
    t = _check("hours", hours, "nonnegative")
    amb = _check("ambient_c", ambient_c, "temperature")
    l0 = _check("rated_life_h", rated_life_h, "positive")
    t0 = _check("rated_temp_c", rated_temp_c, "temperature")
    r = _check_range("esr_ratio_at_end", esr_ratio_at_end, 1.0, np.inf)
    d0 = _check("damage0", damage0, "nonnegative")
    if int(steps) != steps or steps < 1:
        raise ValueError("steps must be a positive integer")
    rise0 = np.asarray(ripple_rise_k(ripple_current_a, esr0_ohm, diameter_mm, length_mm,
                                     h_w_per_cm2_k))
    shape = np.broadcast_shapes(t.shape, amb.shape, l0.shape, t0.shape, rise0.shape, d0.shape)
    dmax = P.DAMAGE_MAX

    def rate(d):
        return _inverse_life(amb + rise0 * r ** np.minimum(d, dmax), l0, t0, ea)

    dt = t / int(steps)
    d = np.broadcast_to(d0, shape).astype(np.float64)
    with np.errstate(over="ignore", invalid="ignore"):
        for _ in range(int(steps)):
            k1 = rate(d)
            k2 = rate(d + 0.5 * dt * k1)
            k3 = rate(d + 0.5 * dt * k2)
            k4 = rate(d + dt * k3)
            d = d + dt / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
            d = np.where(np.isnan(d) | (d > dmax), dmax, d)
    return _out(np.maximum(d, d0))


# --- 5. circuits -----------------------------------------------------------

def inverter_output_resistance_ohm(pump_hz, c_fly_f, esr_fly_ohm, esr_res_ohm, switch_ohm,
                                   flying_esr_factor=P.FLYING_ESR_FACTOR):
    """Output resistance of a switched-capacitor voltage inverter.

    Parameters
    ----------
    pump_hz : float or array-like
        Pump frequency [Hz] (half the oscillator frequency), > 0.
    c_fly_f : float or array-like
        Flying (pump) capacitance C1 [F], > 0.
    esr_fly_ohm, esr_res_ohm : float or array-like
        ESR of the flying and reservoir (C2) capacitors [ohm], >= 0.
    switch_ohm : float or array-like
        Total switch resistance, ``2*(Rsw1 + Rsw3) + 2*(Rsw2 + Rsw4)`` [ohm].
    flying_esr_factor : float, default 4
        Weight of the flying capacitor's ESR.

    Returns
    -------
    float or ndarray
        Rout [ohm].

    Notes
    -----
    .. math:: R_{out} = R_{sw} + \\frac{1}{f_{pump} C_1} + 4\\,ESR_1 + ESR_2

    The data sheet's instance (f_osc 10 kHz, C1 = C2 = 10 uF, switches
    2*23 ohm) reads ``46 + 20 + 5*ESR_C``: with equal ESRs 4*ESR1 + ESR2 is
    5*ESR_C, so the factor 4 reproduces its 66.5 ohm (0.1 ohm ESRs) and
    116 ohm (10 ohm ESRs).

    References
    ----------
    refs §6: classic charge-pump converter data sheet (ICL7660 family).

    Examples
    --------
    >>> round(inverter_output_resistance_ohm(5e3, 10e-6, 0.1, 0.1, 46.0), 6)
    66.5
    """
    f = _check("pump_hz", pump_hz, "positive")
    c1 = _check("c_fly_f", c_fly_f, "positive")
    e1 = _check("esr_fly_ohm", esr_fly_ohm, "nonnegative")
    e2 = _check("esr_res_ohm", esr_res_ohm, "nonnegative")
    rsw = _check("switch_ohm", switch_ohm, "nonnegative")
    k = _check("flying_esr_factor", flying_esr_factor, "nonnegative")
    return _out(rsw + 1.0 / (f * c1) + k * e1 + e2)


def inverter_output_v(vin_v, load_a, pump_hz, c_fly_f, c_res_f, esr_fly_ohm, esr_res_ohm,
                      switch_ohm, flying_esr_factor=P.FLYING_ESR_FACTOR):
    """Negative rail of a switched-capacitor voltage inverter under load.

    Parameters
    ----------
    vin_v : float or array-like
        Input rail [V], >= 0.
    load_a : float or array-like
        Load current [A], >= 0.
    pump_hz, c_fly_f, esr_fly_ohm, esr_res_ohm, switch_ohm, flying_esr_factor
        As in :func:`inverter_output_resistance_ohm`.
    c_res_f : float or array-like
        Reservoir capacitance C2 [F], > 0 (checked; it sets the ripple,
        :func:`inverter_ripple_vpp`, not the DC output in this model).

    Returns
    -------
    float or ndarray
        Output voltage [V], <= 0.

    Notes
    -----
    .. math:: V_{out} = -\\max(V_{in} - I_{load} R_{out}, 0)

    The linear model is clipped at 0 V: a collapsed rail does not reverse.

    References
    ----------
    refs §6 (classic converter data sheet).

    Examples
    --------
    >>> round(inverter_output_v(5.0, 0.01, 5e3, 10e-6, 10e-6, 0.1, 0.1, 46.0), 4)
    -4.335
    """
    vin = _check("vin_v", vin_v, "nonnegative")
    i = _check("load_a", load_a, "nonnegative")
    _check("c_res_f", c_res_f, "positive")
    rout = inverter_output_resistance_ohm(pump_hz, c_fly_f, esr_fly_ohm, esr_res_ohm,
                                          switch_ohm, flying_esr_factor)
    return _out(0.0 - np.maximum(vin - i * rout, 0.0))


def inverter_ripple_vpp(load_a, pump_hz, c_res_f, esr_res_ohm):
    """Peak-to-peak output ripple of a switched-capacitor inverter.

    Parameters
    ----------
    load_a : float or array-like
        Load current [A], >= 0.
    pump_hz : float or array-like
        Pump frequency [Hz], > 0.
    c_res_f : float or array-like
        Reservoir capacitance C2 [F], > 0.
    esr_res_ohm : float or array-like
        Reservoir ESR [ohm], >= 0.

    Returns
    -------
    float or ndarray
        Ripple [V peak-to-peak].

    Notes
    -----
    .. math:: V_{pp} = I_{out} \\left(\\frac{1}{2 f_{pump} C_2} + 2\\,ESR_2\\right)

    References
    ----------
    refs §6 (classic converter data sheet).

    Examples
    --------
    >>> round(inverter_ripple_vpp(0.01, 5e3, 10e-6, 0.1), 4)
    0.102
    """
    i = _check("load_a", load_a, "nonnegative")
    f = _check("pump_hz", pump_hz, "positive")
    c2 = _check("c_res_f", c_res_f, "positive")
    e2 = _check("esr_res_ohm", esr_res_ohm, "nonnegative")
    return _out(i * (1.0 / (2.0 * f * c2) + 2.0 * e2))


def charge_share_fraction(cycles, c_fly_f, c_res_f):
    """Fraction of the input reached by an unloaded inverter after n pump cycles.

    Parameters
    ----------
    cycles : float or array-like
        Number of pump cycles n, >= 0.
    c_fly_f, c_res_f : float or array-like
        Flying and reservoir capacitance [F], > 0.

    Returns
    -------
    float or ndarray
        ``|Vout| / Vin`` [-].

    Notes
    -----
    .. math:: |V_n| / V_{in} = 1 - \\left(\\frac{C_2}{C_1 + C_2}\\right)^n

    Charge conservation; equal capacitors give 1/2, 3/4, 7/8, ...

    References
    ----------
    refs §6 (computed from the formula; a fact of the trade).

    Examples
    --------
    >>> charge_share_fraction(3, 1e-6, 1e-6)
    0.875
    """
    n = _check("cycles", cycles, "nonnegative")
    c1 = _check("c_fly_f", c_fly_f, "positive")
    c2 = _check("c_res_f", c_res_f, "positive")
    return _out(-np.expm1(n * np.log(c2 / (c1 + c2))))


def coupling_corner_hz(resistance_ohm, capacitance_f):
    """High-pass corner of a coupling capacitor into a resistance.

    Parameters
    ----------
    resistance_ohm : float or array-like
        Load (plus source) resistance [ohm], > 0.
    capacitance_f : float or array-like
        Coupling capacitance [F], > 0.

    Returns
    -------
    float or ndarray
        -3 dB corner [Hz].

    Notes
    -----
    .. math:: f_c = 1 / (2 \\pi R C)

    References
    ----------
    Design brief §5 (computed from the formula).

    Examples
    --------
    >>> round(coupling_corner_hz(10e3, 1e-6), 3)
    15.915
    """
    r = _check("resistance_ohm", resistance_ohm, "positive")
    c = _check("capacitance_f", capacitance_f, "positive")
    return _out(1.0 / (2.0 * np.pi * r * c))


def reservoir_ripple_vpp(load_a, ripple_hz, capacitance_f, esr_ohm, peak_current_a=None):
    """Approximate ripple on a rectifier reservoir capacitor.

    Parameters
    ----------
    load_a : float or array-like
        DC load current [A], >= 0.
    ripple_hz : float or array-like
        Ripple frequency [Hz] (twice mains for full-wave), > 0.
    capacitance_f : float or array-like
        Reservoir capacitance [F], > 0.
    esr_ohm : float or array-like
        ESR [ohm], >= 0.
    peak_current_a : float or array-like, optional
        Peak charging current [A]; default 5 x ``load_a``
        (``parameters.PEAK_TO_LOAD_CURRENT_RATIO``, common practice).

    Returns
    -------
    float or ndarray
        Ripple [V peak-to-peak].

    Notes
    -----
    .. math:: V_{pp} \\approx \\frac{I_{load}}{f C} + I_{pk} \\, ESR

    The first term assumes the capacitor alone feeds the load for the whole
    ripple period (conduction time neglected): it slightly overestimates.  The
    second is the step across the ESR at the charging-current peak.

    References
    ----------
    Design brief §5 (common practice).

    Examples
    --------
    >>> round(reservoir_ripple_vpp(0.1, 100.0, 1000e-6, 0.1), 4)
    1.05
    """
    i = _check("load_a", load_a, "nonnegative")
    f = _check("ripple_hz", ripple_hz, "positive")
    c = _check("capacitance_f", capacitance_f, "positive")
    esr = _check("esr_ohm", esr_ohm, "nonnegative")
    if peak_current_a is None:
        ipk = P.PEAK_TO_LOAD_CURRENT_RATIO * i
    else:
        ipk = _check("peak_current_a", peak_current_a, "nonnegative")
    return _out(i / (f * c) + ipk * esr)


# --- 6. safety -------------------------------------------------------------

def stored_energy_j(capacitance_f, voltage_v):
    """Energy stored in a charged capacitor, ``C V**2 / 2``.

    Parameters
    ----------
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    voltage_v : float or array-like
        Voltage [V].

    Returns
    -------
    float or ndarray
        Energy [J].

    References
    ----------
    refs §7 (computed from the formula).

    Examples
    --------
    >>> round(stored_energy_j(100e-6, 400.0), 6)
    8.0
    """
    c = _check("capacitance_f", capacitance_f, "positive")
    v = _check("voltage_v", voltage_v)
    return _out(0.5 * c * v**2)


def discharge_time_s(capacitance_f, resistance_ohm, v0_v, v_safe_v):
    """Time for a capacitor to discharge through a resistor to a safe voltage.

    Parameters
    ----------
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    resistance_ohm : float or array-like
        Discharge resistance [ohm], > 0.
    v0_v : float or array-like
        Initial voltage magnitude [V], >= 0.
    v_safe_v : float or array-like
        Target voltage [V], > 0 (60 V d.c. is ``parameters.SAFE_VOLTAGE_V``).

    Returns
    -------
    float or ndarray
        Time [s]; 0 when ``v0_v <= v_safe_v``.

    Notes
    -----
    .. math:: t = R C \\ln(V_0 / V_{safe})

    References
    ----------
    refs §7 (computed from the formula).

    Examples
    --------
    >>> round(discharge_time_s(100e-6, 10e3, 400.0, 60.0), 3)
    1.897
    """
    c = _check("capacitance_f", capacitance_f, "positive")
    r = _check("resistance_ohm", resistance_ohm, "positive")
    v0 = _check("v0_v", v0_v, "nonnegative")
    vs = _check("v_safe_v", v_safe_v, "positive")
    with np.errstate(divide="ignore"):
        return _out(r * c * np.log(np.maximum(v0, vs) / vs))


# --- 7. scatter and risk ---------------------------------------------------

def _cumulative_hazard(damage, threshold, shape):
    """``ln2*(D/D*)**beta``; inf where D* = 0 (already failed)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        h = _LN2 * (damage / threshold) ** shape
    return np.where(threshold == 0, np.inf, h)


def cumulative_hazard(damage, damage_threshold, weibull_shape):
    """Weibull cumulative hazard in damage, with the median at the threshold.

    Parameters
    ----------
    damage : float or array-like
        Damage [-], >= 0.
    damage_threshold : float or array-like
        Median damage at failure D* [-], >= 0 (0: already failed, hazard inf).
    weibull_shape : float or array-like
        Weibull shape beta, > 0.

    Returns
    -------
    float or ndarray
        Cumulative hazard [-]: ``ln2 * (D/D*)**beta``, so that
        ``failure_probability = 1 - exp(-hazard)``.  For a group of positions
        the survival over an interval is ``exp(-sum(hazard_later - hazard_now))``,
        which is how a unit's risk is summed without a product of many terms.

    References
    ----------
    The two-parameter Weibull distribution, e.g. ``scipy.stats.weibull_min``:
    cumulative hazard ``(x/eta)**beta`` with ``eta = D*/(ln 2)**(1/beta)``.

    Examples
    --------
    >>> round(cumulative_hazard(1.0, 1.0, 3.0), 6)
    0.693147
    """
    d = _check("damage", damage, "nonnegative")
    t, b = _risk_args(damage_threshold, weibull_shape)
    return _out(_cumulative_hazard(d, t, b))


def _risk_args(threshold, shape):
    t = _check("damage_threshold", threshold, "nonnegative", allow_inf=True)
    b = _check("weibull_shape", shape, "positive")
    return t, b


def failure_probability(damage, damage_threshold, weibull_shape):
    """Probability that a capacitor has failed by damage D (Weibull, median at D*).

    Parameters
    ----------
    damage : float or array-like
        Predicted damage [-], >= 0.
    damage_threshold : float or array-like
        Median damage at failure D* [-], >= 0 (``inf``: never; 0: failed).
    weibull_shape : float or array-like
        Weibull shape beta, > 0.

    Returns
    -------
    float or ndarray
        Failure probability [-] in [0, 1].

    Notes
    -----
    .. math:: F = 1 - \\exp\\left[-\\ln 2 \\, (D / D^*)^\\beta\\right]

    i.e. a Weibull CDF in damage with scale ``eta = D* / (ln 2)**(1/beta)``,
    so F(D*) = 0.5 exactly: the prediction is the median.

    References
    ----------
    refs §5 (Weibull reliability); wear-out beta about 2-6 (from memory).

    Examples
    --------
    >>> failure_probability(1.0, 1.0, 3.0)
    0.5
    """
    d = _check("damage", damage, "nonnegative")
    t, b = _risk_args(damage_threshold, weibull_shape)
    return _out(-np.expm1(-_cumulative_hazard(d, t, b)))


def conditional_failure_probability(damage_now, damage_later, damage_threshold, weibull_shape):
    """Probability of failing between two damage levels, given it works now.

    Parameters
    ----------
    damage_now, damage_later : float or array-like
        Damage now and at the horizon [-], 0 <= now <= later.
    damage_threshold, weibull_shape
        As in :func:`failure_probability`.

    Returns
    -------
    float or ndarray
        Conditional probability [-] in [0, 1]; 1 where D* = 0.

    Notes
    -----
    .. math:: 1 - R(D_{later}) / R(D_{now}) = 1 - \\exp[-(H_{later} - H_{now})]

    with the cumulative hazard ``H = ln2 (D/D*)**beta`` (no cancellation of
    two small reliabilities).

    References
    ----------
    refs §5.

    Examples
    --------
    >>> round(conditional_failure_probability(1.0, 1.0, 1.0, 3.0), 6)
    0.0
    """
    dn = _check("damage_now", damage_now, "nonnegative")
    dl = _check("damage_later", damage_later, "nonnegative")
    if np.any(dl < dn):
        raise ValueError("damage_later must not be less than damage_now")
    t, b = _risk_args(damage_threshold, weibull_shape)
    hn = _cumulative_hazard(dn, t, b)
    hl = _cumulative_hazard(dl, t, b)
    with np.errstate(invalid="ignore"):
        p = -np.expm1(-(hl - hn))
    return _out(np.where(np.isinf(hn), 1.0, np.clip(p, 0.0, 1.0)))


def unit_failure_probability(position_probabilities, axis=-1):
    """Probability that a unit fails: any of its (independent) positions fails.

    Parameters
    ----------
    position_probabilities : array-like
        Failure probability of each position [-], in [0, 1].
    axis : int, default -1
        Axis holding the positions.

    Returns
    -------
    float or ndarray
        Unit failure probability [-].

    Notes
    -----
    .. math:: F_{unit} = 1 - \\prod_i (1 - F_i) = -\\mathrm{expm1}\\left(\\sum_i \\mathrm{log1p}(-F_i)\\right)

    The log1p/expm1 form keeps small risks accurate (1e-9 per position does
    not vanish against 1).

    References
    ----------
    Design brief §6 (series system of independent positions).

    Examples
    --------
    >>> round(unit_failure_probability([0.5, 0.5]), 6)
    0.75
    """
    p = _check("position_probabilities", position_probabilities, "probability")
    with np.errstate(divide="ignore"):
        return _out(-np.expm1(np.sum(np.log1p(-np.atleast_1d(p)), axis=axis)))


# --- 7b. a shared frailty: what "the unit works now" tells ------------------

def _log_laplace_direct(hazard, hazard_sigma):
    """``ln E[exp(-Y H)]``, ln Y ~ N(0, sigma**2), by the trapezoid rule in
    u = ln(Y)/sigma on a window around the integrand's peak (H > 0 array,
    sigma > 0 scalar)."""
    w = scipy.special.lambertw(hazard * hazard_sigma**2).real
    peak = -w / hazard_sigma
    u = peak[:, None] + np.linspace(-P.FRAILTY_WINDOW, P.FRAILTY_WINDOW, P.FRAILTY_GRID_POINTS)[None, :]
    du = 2.0 * P.FRAILTY_WINDOW / (P.FRAILTY_GRID_POINTS - 1)
    y_h = hazard[:, None] * np.exp(hazard_sigma * u)
    log_f = -0.5 * u * u - y_h
    top = log_f.max(axis=1)
    big = top + np.log(np.exp(log_f - top[:, None]).sum(axis=1) * du) - 0.5 * np.log(2.0 * np.pi)
    # Small H: E[1 - exp(-Y H)] summed without cancellation, then log1p.
    lost = (np.exp(-0.5 * u * u) * -np.expm1(-y_h)).sum(axis=1) * du / np.sqrt(2.0 * np.pi)
    with np.errstate(divide="ignore", invalid="ignore"):
        small = np.log1p(-lost)
    return np.where(hazard < 1.0, small, big)


@functools.lru_cache(maxsize=16)
def _log_laplace_table(hazard_sigma):
    """Cubic spline of ``ln(-ln E[exp(-Y H)])`` against ln H, for one sigma."""
    ln_h = np.linspace(-P.FRAILTY_LN_HAZARD_MAX, P.FRAILTY_LN_HAZARD_MAX, P.FRAILTY_TABLE_POINTS)
    value = np.log(-_log_laplace_direct(np.exp(ln_h), hazard_sigma))
    return scipy.interpolate.CubicSpline(ln_h, value, extrapolate=True)


def frailty_log_laplace(hazard, hazard_sigma):
    """Log of E[exp(-Y * hazard)] for a lognormal multiplier Y of median 1.

    Parameters
    ----------
    hazard : float or array-like
        Nominal cumulative hazard H [-], >= 0 (``inf`` allowed: gives -inf).
    hazard_sigma : float
        Standard deviation of ln Y [-], in [0, 4] (0: Y = 1 exactly).

    Returns
    -------
    float or ndarray
        ``ln E[exp(-Y H)]`` [-], <= 0: the log of the probability of surviving
        a nominal cumulative hazard H when the true hazard is Y times it.

    Notes
    -----
    With ln Y = sigma*U, U standard normal,
    ``E[exp(-Y H)] = int phi(u) exp(-H exp(sigma u)) du``.  The integrand
    peaks where ``u + H sigma exp(sigma u) = 0``, i.e. at
    ``u* = -W(H sigma**2)/sigma`` (W the Lambert W function); the integral is
    taken by the trapezoid rule on a window of +-12 around that peak (the
    integrand falls off like a normal density on the left and doubly
    exponentially on the right), once per sigma on a grid of ln H, and read
    from a cubic spline of ``ln(-ln E)`` against ln H (smooth and nearly
    straight).  Below ``exp(-30)`` the first-order ``-E[Y] H`` is used.

    References
    ----------
    The Laplace transform of the lognormal distribution has no closed form;
    checked in the tests against ``scipy.integrate.quad`` over
    ``scipy.stats.lognorm``.

    Examples
    --------
    >>> round(frailty_log_laplace(1.0, 0.0), 6)
    -1.0
    """
    h = _check("hazard", hazard, "nonnegative", allow_inf=True)
    s = float(_check_range("hazard_sigma", hazard_sigma, 0.0, P.FRAILTY_HAZARD_SIGMA_MAX))
    flat = h.reshape(-1)
    out = -flat.copy()                                # sigma = 0: exactly -H
    if s > 0:
        finite = np.isfinite(flat) & (flat > 0)
        with np.errstate(divide="ignore"):
            ln_h = np.log(np.where(finite, flat, 1.0))
        low = finite & (ln_h < -P.FRAILTY_LN_HAZARD_MAX)
        out[low] = -np.exp(0.5 * s * s) * flat[low]     # E[Y] = exp(sigma**2 / 2)
        mid = finite & ~low
        if np.any(mid):
            out[mid] = -np.exp(_log_laplace_table(s)(ln_h[mid]))
    out[np.isinf(flat)] = -np.inf
    return _out(out.reshape(h.shape))


def unit_conditional_hazard(hazard_now, hazard_later, weibull_shape, frailty_sigma):
    """Cumulative hazard of a unit over an interval, given it works at its start,
    when all its positions share one uncertain life multiplier.

    Parameters
    ----------
    hazard_now, hazard_later : float or array-like
        The unit's nominal cumulative hazard [-] (sum over its positions of
        :func:`cumulative_hazard`) at the start and the end of the interval,
        0 <= now <= later.
    weibull_shape : float or array-like
        Weibull shape beta of the positions, > 0.
    frailty_sigma : float or array-like
        Standard deviation of the natural log of the unit's damage multiplier
        Z [-], >= 0 (0: the plain Weibull series system).

    Returns
    -------
    float or ndarray
        ``-ln P(works at the end | works at the start)`` [-], >= 0;
        ``unit_conditional_risk`` is ``1 - exp(-this)``.

    Notes
    -----
    Every position's damage is taken to be Z times the predicted one, Z
    lognormal with median 1 (the prediction stays the median).  A Weibull
    cumulative hazard ``ln2 (Z x)**beta`` is then ``Z**beta`` times the
    nominal one, so the unit's survival given Z is ``exp(-Y H)`` with
    ``Y = Z**beta`` lognormal of log-sd ``beta * frailty_sigma``, and

    .. math:: -\\ln \\frac{E[e^{-Y H_{later}}]}{E[e^{-Y H_{now}}]}

    A unit still working long past its predicted life is evidence that it
    ages slower than predicted: the conditional hazard then stays moderate
    instead of growing without bound as the plain Weibull says.

    References
    ----------
    The shared-frailty model: J. W. Vaupel, K. G. Manton and E. Stallard,
    "The impact of heterogeneity in individual frailty on the dynamics of
    mortality", Demography 16(3), 439-454, 1979 (from memory).

    Examples
    --------
    >>> round(unit_conditional_hazard(1.0, 3.0, 3.0, 0.0), 6)
    2.0
    """
    h0 = _check("hazard_now", hazard_now, "nonnegative", allow_inf=True)
    h1 = _check("hazard_later", hazard_later, "nonnegative", allow_inf=True)
    b = _check("weibull_shape", weibull_shape, "positive")
    sz = _check("frailty_sigma", frailty_sigma, "nonnegative")
    if np.any(h1 < h0):
        raise ValueError("hazard_later must not be below hazard_now")
    sy = b * sz
    with np.errstate(invalid="ignore"):
        out = frailty_log_laplace(h0, sy) - frailty_log_laplace(h1, sy)
    out = np.where(np.isinf(h1), np.inf, out)
    return _out(np.maximum(out, 0.0))


def unit_conditional_risk(hazard_now, hazard_later, weibull_shape, frailty_sigma):
    """Probability that a unit fails within an interval given it works at its
    start; see :func:`unit_conditional_hazard`.

    Returns
    -------
    float or ndarray
        Probability [-] in [0, 1].

    Examples
    --------
    >>> round(unit_conditional_risk(0.0, np.log(2.0), 3.0, 0.0), 6)
    0.5
    """
    return _out(-np.expm1(-np.asarray(unit_conditional_hazard(hazard_now, hazard_later, weibull_shape,
                                                              frailty_sigma))))


# --- 8. role-aware damage thresholds ---------------------------------------

def _bisect_threshold(margin, shape):
    """Damage where ``margin(D)`` (non-increasing in D) crosses 0.

    0 where margin(0) < 0 (violated already), inf where margin(DAMAGE_MAX) >= 0
    (never violated within the model).  Vectorised root finding
    (``roots.first_crossing`` on -margin) to a bracket of ``ROOT_TOLERANCE_DAMAGE``.
    """
    size = int(np.prod(shape))
    lo = np.zeros(size)
    hi = np.full(size, P.DAMAGE_MAX)

    def shortfall(problems, damage):
        full = np.zeros(size)
        full[problems] = damage
        return -np.broadcast_to(np.asarray(margin(full.reshape(shape)), dtype=float), shape).reshape(-1)[problems]

    every = np.arange(size)
    s_lo, s_hi = shortfall(every, lo), shortfall(every, hi)
    bad0, bad_max = s_lo > 0, s_hi > 0
    solve = np.flatnonzero(~bad0 & bad_max)
    if solve.size:
        lo[solve], hi[solve] = roots.first_crossing(
            lambda k, d: shortfall(solve[k], d), lo[solve], hi[solve], s_lo[solve], s_hi[solve], 0.0,
            tol=P.ROOT_TOLERANCE_DAMAGE, bisections=2, max_steps=P.BISECTION_ITERATIONS)
    found = np.where(bad0, 0.0, np.where(bad_max, 0.5 * (lo + hi), np.inf))
    return _out(found.reshape(shape))


def threshold_pump(vin_v, load_a, pump_hz, c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm,
                   switch_ohm, min_rail_v, which="flying", other_damage=0.0,
                   esr_ratio_at_end=P.ESR_RATIO_AT_END,
                   capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END,
                   flying_esr_factor=P.FLYING_ESR_FACTOR):
    """Damage at which a charge-pump capacitor lets the negative rail fall to its minimum.

    Parameters
    ----------
    vin_v, load_a, pump_hz, switch_ohm
        As in :func:`inverter_output_v`.
    c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm : float or array-like
        Initial (D = 0) capacitances [F] and ESRs [ohm] of C1 and C2.
    min_rail_v : float or array-like
        Smallest acceptable rail magnitude [V], > 0.
    which : {'flying', 'reservoir'} or array-like of bool
        The capacitor that drifts; a boolean array means "is flying" per element.
    other_damage : float or array-like, default 0
        Damage of the other capacitor, held fixed [-].

    Returns
    -------
    float or ndarray
        D* [-]: 0 if the rail is already too small at D = 0, inf if it stays
        adequate up to ``parameters.DAMAGE_MAX``.

    Notes
    -----
    Solves ``|Vout(D)| = min_rail_v`` with ESR(D) and C(D) of
    :func:`esr_at_damage` / :func:`capacitance_at_damage`.  |Vout| falls
    monotonically with D, so a vectorised bisection with a fixed 60 steps on
    [0, 20] finds the root to double precision.

    References
    ----------
    refs §6; design brief §5.

    Examples
    --------
    >>> d = threshold_pump(5.0, 0.01, 5e3, 10e-6, 10e-6, 0.1, 0.1, 46.0, 4.0)
    >>> round(d, 4)
    3.0254
    """
    vin = _check("vin_v", vin_v, "nonnegative")
    vmin = _check("min_rail_v", min_rail_v, "positive")
    od = _check("other_damage", other_damage, "nonnegative")
    if isinstance(which, str):
        if which not in ("flying", "reservoir"):
            raise ValueError(f"which must be 'flying', 'reservoir' or a boolean array (got {which!r})")
        is_fly = np.asarray(which == "flying")
    else:
        is_fly = np.asarray(which, dtype=bool)
    parts = (vin, load_a, pump_hz, c_fly_f, c_res_f, esr_fly0_ohm, esr_res0_ohm, switch_ohm)
    inverter_output_v(*parts, flying_esr_factor)  # validates every argument once
    shape = np.broadcast_shapes(*(np.shape(a) for a in parts), vmin.shape, od.shape, is_fly.shape)

    def margin(d):
        d_fly = np.where(is_fly, d, od)
        d_res = np.where(is_fly, od, d)
        v = inverter_output_v(vin, load_a, pump_hz,
                              capacitance_at_damage(c_fly_f, d_fly, capacitance_loss_at_end),
                              capacitance_at_damage(c_res_f, d_res, capacitance_loss_at_end),
                              esr_at_damage(esr_fly0_ohm, d_fly, esr_ratio_at_end),
                              esr_at_damage(esr_res0_ohm, d_res, esr_ratio_at_end),
                              switch_ohm, flying_esr_factor)
        return -np.asarray(v) - vmin

    return _bisect_threshold(margin, shape)


def threshold_coupling(resistance_ohm, c0_f, max_corner_hz,
                       capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END):
    """Damage at which a coupling capacitor's high-pass corner rises to its limit.

    Parameters
    ----------
    resistance_ohm : float or array-like
        Resistance the capacitor couples into [ohm], > 0.
    c0_f : float or array-like
        Initial capacitance [F], > 0.
    max_corner_hz : float or array-like
        Highest acceptable corner [Hz], > 0 (e.g. 20 Hz).
    capacitance_loss_at_end : float, default 0.2
        As in :func:`capacitance_at_damage`.

    Returns
    -------
    float or ndarray
        D* [-]: 0 if the corner is already at or above the limit, inf if the
        drift law never takes it there (no loss, or the capacitance floor).

    Notes
    -----
    Closed form: with ``f0 = 1/(2 pi R C0)`` and ``C(D) = C0 (1 - l D)``,

    .. math:: D^* = (1 - f_0 / f_{max}) / \\ell

    References
    ----------
    Design brief §5 (computed from the formula).

    Examples
    --------
    >>> round(threshold_coupling(10e3, 1e-6, 20.0), 4)
    1.0211
    """
    f0 = np.asarray(coupling_corner_hz(resistance_ohm, c0_f))
    fmax = _check("max_corner_hz", max_corner_hz, "positive")
    loss = _check_range("capacitance_loss_at_end", capacitance_loss_at_end, 0.0, 1.0)
    ratio = f0 / fmax  # = C(D*)/C0
    with np.errstate(divide="ignore", invalid="ignore"):
        d = (1.0 - ratio) / loss
    d = np.where(ratio < P.CAPACITANCE_FLOOR_FRACTION, np.inf, d)
    return _out(np.where(ratio >= 1.0, 0.0, np.where(loss == 0, np.inf, d)))


def threshold_reservoir(load_a, ripple_hz, c0_f, esr0_ohm, ripple_limit_v, peak_current_a=None,
                        esr_ratio_at_end=P.ESR_RATIO_AT_END,
                        capacitance_loss_at_end=P.CAPACITANCE_LOSS_AT_END):
    """Damage at which a supply reservoir's ripple rises to its limit.

    Parameters
    ----------
    load_a, ripple_hz, peak_current_a
        As in :func:`reservoir_ripple_vpp`.
    c0_f, esr0_ohm : float or array-like
        Initial capacitance [F] and ESR [ohm].
    ripple_limit_v : float or array-like
        Largest acceptable ripple [V peak-to-peak], > 0.

    Returns
    -------
    float or ndarray
        D* [-]: 0 if already over the limit at D = 0, inf if within it up to
        ``parameters.DAMAGE_MAX``.

    Notes
    -----
    Solves ``Vpp(D) = limit`` with ``Vpp = I/(f C(D)) + Ipk ESR(D)``, which
    rises monotonically in D, by the fixed 60-step vectorised bisection of
    :func:`threshold_pump`.

    References
    ----------
    Design brief §5 (common practice ripple approximation).

    Examples
    --------
    >>> round(threshold_reservoir(0.1, 100.0, 1000e-6, 0.1, 1.5), 4)
    1.3558
    """
    vmax = _check("ripple_limit_v", ripple_limit_v, "positive")
    reservoir_ripple_vpp(load_a, ripple_hz, c0_f, esr0_ohm, peak_current_a)  # validate
    shape = np.broadcast_shapes(*(np.shape(a) for a in (load_a, ripple_hz, c0_f, esr0_ohm)),
                                np.shape(0.0 if peak_current_a is None else peak_current_a),
                                vmax.shape)

    def margin(d):
        v = reservoir_ripple_vpp(load_a, ripple_hz,
                                 capacitance_at_damage(c0_f, d, capacitance_loss_at_end),
                                 esr_at_damage(esr0_ohm, d, esr_ratio_at_end), peak_current_a)
        return vmax - np.asarray(v)

    return _bisect_threshold(margin, shape)
