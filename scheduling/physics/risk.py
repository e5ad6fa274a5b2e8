"""Scatter and risk: Weibull wear-out in damage, series systems and the
shared lognormal frailty of a unit's positions (refs §5).
"""

import functools

import numpy as np
import scipy.interpolate
import scipy.special

from scheduling import parameters as P

from .validation import _check, _check_range, _out

_LN2 = np.log(2.0)


# --- 7. scatter and risk ---------------------------------------------------

def _power(x, shape):
    """``x**shape``; a whole shape of 1 to 4 (the default is 3) by repeated
    multiplication, several times faster than ``pow`` on large arrays and
    within an ulp or two of it."""
    if np.ndim(shape) == 0 and float(shape) in (1.0, 2.0, 3.0, 4.0):
        out = x
        for _ in range(int(shape) - 1):
            out = out * x
        return out
    return x ** shape


def _cumulative_hazard(damage, threshold, shape):
    """``ln2*(D/D*)**beta``; inf where D* = 0 (already failed)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        h = _LN2 * _power(damage / threshold, shape)
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


def _log_laplace_one_sigma(flat, s, table):
    """``ln E[exp(-Y H)]`` for a flat array of H and one sigma (see
    :func:`frailty_log_laplace`); ``table``: read the spline, else integrate."""
    out = -flat.copy()                                # sigma = 0: exactly -H
    if s > 0:
        finite = np.isfinite(flat) & (flat > 0)
        with np.errstate(divide="ignore"):
            ln_h = np.log(np.where(finite, flat, 1.0))
        low = finite & (ln_h < -P.FRAILTY_LN_HAZARD_MAX)
        out[low] = -np.exp(0.5 * s * s) * flat[low]     # E[Y] = exp(sigma**2 / 2)
        mid = finite & ~low
        if np.any(mid):
            if table:
                out[mid] = -np.exp(_log_laplace_table(s)(ln_h[mid]))
            else:
                out[mid] = _log_laplace_direct(flat[mid], s)
    out[np.isinf(flat)] = -np.inf
    return out


def frailty_log_laplace(hazard, hazard_sigma):
    """Log of E[exp(-Y * hazard)] for a lognormal multiplier Y of median 1.

    Parameters
    ----------
    hazard : float or array-like
        Nominal cumulative hazard H [-], >= 0 (``inf`` allowed: gives -inf).
    hazard_sigma : float or array-like
        Standard deviation of ln Y [-], in [0, 3] (0: Y = 1 exactly); an
        array broadcast against ``hazard`` gives each element its own.

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
    straight).  Below ``exp(-30)`` the first-order ``-E[Y] H`` is used.  A
    sigma shared by few elements (``parameters.FRAILTY_DIRECT_MAX``) is
    integrated directly instead of tabulated.

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
    sigmas = _check_range("hazard_sigma", hazard_sigma, 0.0, P.FRAILTY_HAZARD_SIGMA_MAX)
    flat = h.reshape(-1)
    if sigmas.ndim == 0:
        out = _log_laplace_one_sigma(flat, float(sigmas), table=True)
    else:
        # One sigma per element (a unit's own, after bench readings): each
        # distinct value on its own; a few elements are integrated directly,
        # many share a table.
        every = np.broadcast_to(sigmas, h.shape).reshape(-1)
        out = np.empty(flat.size)
        values, which = np.unique(every, return_inverse=True)
        for k, value in enumerate(values):
            sel = which == k
            out[sel] = _log_laplace_one_sigma(flat[sel], float(value),
                                              table=np.count_nonzero(sel) > P.FRAILTY_DIRECT_MAX)
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
        Z [-], >= 0 (0: the plain Weibull series system); per unit after
        bench readings (:func:`frailty_posterior`).

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
    if sy.ndim == 0:
        # One sigma: both ends in one pass (element by element, as two would).
        _check_range("hazard_sigma", sy, 0.0, P.FRAILTY_HAZARD_SIGMA_MAX)
        shape = np.broadcast_shapes(h0.shape, h1.shape)
        both = np.concatenate((np.broadcast_to(h0, shape).reshape(-1), np.broadcast_to(h1, shape).reshape(-1)))
        now, later = np.split(_log_laplace_one_sigma(both, float(sy), table=True), 2)
        with np.errstate(invalid="ignore"):
            out = now.reshape(shape) - later.reshape(shape)
    else:
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
    >>> import numpy as np
    >>> round(unit_conditional_risk(0.0, np.log(2.0), 3.0, 0.0), 6)
    0.5
    """
    return _out(-np.expm1(-np.asarray(unit_conditional_hazard(hazard_now, hazard_later, weibull_shape,
                                                              frailty_sigma))))
