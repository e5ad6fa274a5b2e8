"""Circuits a capacitor serves, and the damage each role can take.

The switched-capacitor voltage inverter (refs §6), the coupling high-pass
corner and the reservoir ripple, then the role-aware damage thresholds D*
(design brief §5).
"""

import numpy as np

from scheduling import parameters as P
from scheduling import roots

from .drift import _capacitance_at, _esr_at
from .validation import _check, _check_range, _out


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
    refs §6: a classic CMOS switched-capacitor voltage converter data sheet.

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
    return _out(_inverter_rout(f, c1, e1, e2, rsw, k))


def _inverter_rout(f, c1, e1, e2, rsw, k):
    """:func:`inverter_output_resistance_ohm` on float arrays already checked."""
    return rsw + 1.0 / (f * c1) + k * e1 + e2


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
    return _out(_inverter_v(vin, i, rout))


def _inverter_v(vin, i, rout):
    """:func:`inverter_output_v` from the output resistance, on checked float arrays."""
    return 0.0 - np.maximum(vin - i * rout, 0.0)


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
    return _out(_ripple_vpp(i, f, c, esr, ipk))


def _ripple_vpp(i, f, c, esr, ipk):
    """:func:`reservoir_ripple_vpp` on float arrays already checked."""
    return i / (f * c) + ipk * esr


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

    # Checked once here; the bisection's margin uses the unchecked kernels
    # (every damage it tries lies in [0, DAMAGE_MAX]).
    r = _check_range("esr_ratio_at_end", esr_ratio_at_end, 1.0, np.inf)
    loss = _check_range("capacitance_loss_at_end", capacitance_loss_at_end, 0.0, 1.0)
    i, f, c1, e1, e2, rsw, k = (np.asarray(a, dtype=np.float64) for a in (
        load_a, pump_hz, c_fly_f, esr_fly0_ohm, esr_res0_ohm, switch_ohm, flying_esr_factor))

    def margin(d):
        d_fly = np.where(is_fly, d, od)
        d_res = np.where(is_fly, od, d)
        rout = _inverter_rout(f, _capacitance_at(c1, d_fly, loss), _esr_at(e1, d_fly, r), _esr_at(e2, d_res, r),
                              rsw, k)
        return -_inverter_v(vin, i, rout) - vmin

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

    # Checked once here; the bisection's margin uses the unchecked kernels.
    r = _check_range("esr_ratio_at_end", esr_ratio_at_end, 1.0, np.inf)
    loss = _check_range("capacitance_loss_at_end", capacitance_loss_at_end, 0.0, 1.0)
    i, f, c0, e0 = (np.asarray(a, dtype=np.float64) for a in (load_a, ripple_hz, c0_f, esr0_ohm))
    ipk = P.PEAK_TO_LOAD_CURRENT_RATIO * i if peak_current_a is None else np.asarray(peak_current_a, dtype=np.float64)
    inputs = (i, f, c0, e0, vmax, ipk, r, loss)
    size = int(np.prod(shape))
    if 0 < size <= RESERVOIR_MEMO_AT_MOST:
        return _out(_reservoir_remembered(inputs, shape))
    return _out(_solve_reservoir(inputs, shape))


#: ``threshold_reservoir`` remembers the answers of calls of at most this many
#: problems (a unit's reservoirs at the desk), by their inputs; a larger call
#: (a fleet refresh) solves them all at once and remembers nothing.
RESERVOIR_MEMO_AT_MOST = 64
#: Most answers remembered; the memory is emptied when it is full.
RESERVOIR_MEMO_SIZE = 4096
_reservoir_memo = {}


def _solve_reservoir(inputs, shape):
    """D* of each reservoir problem: the bisection of ``threshold_reservoir``
    on its checked float arrays (load, ripple frequency, C0, ESR0, ripple
    limit, peak current, ESR ratio and capacitance loss at the end), broadcast
    to ``shape``."""
    i, f, c0, e0, vmax, ipk, r, loss = inputs

    def margin(d):
        return vmax - _ripple_vpp(i, f, _capacitance_at(c0, d, loss), _esr_at(e0, d, r), ipk)

    return np.asarray(_bisect_threshold(margin, shape), dtype=np.float64).reshape(shape)


def _reservoir_remembered(inputs, shape):
    """``_solve_reservoir`` for a few problems, each answered from the
    process's memory of earlier calls when its eight inputs are the same.

    The threshold is a pure function of those inputs, and the bisection
    treats every problem on its own (element-wise steps, a bracket per
    problem), so an answer remembered is the one solving it again gives: the
    units of one gear model share their reservoirs' design figures and, while
    original, their parts' ratings, and the desk's next check-in of such a unit
    skips the search.  A test holds the remembered answers equal to fresh ones."""
    columns = [np.broadcast_to(a, shape).reshape(-1) for a in inputs]
    keys = list(zip(*(c.tolist() for c in columns)))
    found = [_reservoir_memo.get(key) for key in keys]
    missing = [k for k, value in enumerate(found) if value is None]
    if missing:
        solved = _solve_reservoir(tuple(c[missing] for c in columns), (len(missing),)).tolist()
        if len(_reservoir_memo) + len(missing) > RESERVOIR_MEMO_SIZE:
            _reservoir_memo.clear()
        for k, value in zip(missing, solved):
            found[k] = value
            _reservoir_memo[keys[k]] = value
    return np.array(found, dtype=np.float64).reshape(shape)
