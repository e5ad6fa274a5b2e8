"""ESR and capacitance drift with damage, their inverses, and damage with
ESR feedback on the ripple heating (design brief §4; refs §2, §5).
"""

import numpy as np

from scheduling import parameters as P

from .life import ripple_rise_k
from .validation import _check, _check_range, _inverse_life, _law, _out


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
    return _out(_esr_at(e0, d, r))


def _esr_at(e0, d, r):
    """:func:`esr_at_damage` on float arrays already checked (the root finders'
    inner loops call it many times on the same arguments)."""
    return e0 * r**d


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
    return _out(_capacitance_at(c0, d, loss))


def _capacitance_at(c0, d, loss):
    """:func:`capacitance_at_damage` on float arrays already checked."""
    return c0 * np.maximum(1.0 - loss * d, P.CAPACITANCE_FLOOR_FRACTION)


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
                             esr_ratio_at_end=P.ESR_RATIO_AT_END, extra_rate_per_h=0.0):
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
    extra_rate_per_h : float or array-like, default 0
        Damage per hour added to the thermal rate [1/h], >= 0: damage from
        elsewhere (e.g. the part's unpowered ageing) spread evenly over the
        interval, so that it raises the ESR that heats the part as it goes.

    Returns
    -------
    float or ndarray
        Damage at the end of the interval [-] (``damage0`` included), capped
        at ``parameters.DAMAGE_MAX`` (thermal runaway).

    Notes
    -----
    .. math:: \\frac{dD}{dt} = \\frac{1}{L\\left(T_a + \\frac{I^2 ESR_0 r^D}{h A}\\right)} + k_{extra}

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
    extra = _check("extra_rate_per_h", extra_rate_per_h, "nonnegative")
    if int(steps) != steps or steps < 1:
        raise ValueError("steps must be a positive integer")
    rise0 = np.asarray(ripple_rise_k(ripple_current_a, esr0_ohm, diameter_mm, length_mm,
                                     h_w_per_cm2_k))
    shape = np.broadcast_shapes(t.shape, amb.shape, l0.shape, t0.shape, rise0.shape, d0.shape, extra.shape)
    dmax = P.DAMAGE_MAX

    def rate(d):
        return _inverse_life(amb + rise0 * r ** np.minimum(d, dmax), l0, t0, ea) + extra

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
