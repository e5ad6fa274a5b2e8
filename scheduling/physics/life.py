"""Temperature life laws, ripple self-heating and damage accumulation.

The 10 K rule and the Arrhenius law (refs §1), the ripple rise of a can
(refs §4) and Palmgren-Miner damage over temperature-time histograms (refs §5).
"""

import numpy as np

from scheduling import parameters as P

from .validation import _check, _inverse_life, _law, _out

_CHUNK_ROWS = 8192  # rows per block in the general Arrhenius histogram path


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
