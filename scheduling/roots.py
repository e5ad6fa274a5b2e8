"""A vectorised root finder shared by the physics and the forecast.

Pure numpy, no Django, no physics: many independent one-dimensional problems
at once, each an increasing function crossing a limit inside its bracket.
"""

import numpy as np


def first_crossing(value_of, lo, hi, value_lo, value_hi, limit, *, tol, bisections, max_steps):
    """Per problem k, the point x in (lo[k], hi[k]] where an increasing
    ``value_of(problems, x)`` reaches ``limit``.

    Parameters
    ----------
    value_of : callable
        ``value_of(problems, x)`` evaluates the problems ``problems`` (indices
        into lo/hi) at their points ``x``.
    lo, hi : ndarray
        Brackets; ``value_lo`` < limit at lo and ``value_hi`` >= limit at hi.
    limit : float
    tol : float
        Stop a problem once its bracket is no wider than this.
    bisections : int
        Halvings before the secant steps (the values may run off at the ends).
    max_steps : int
        Most steps in all.

    Returns
    -------
    (lo, hi) : ndarrays
        The final brackets: the value is below the limit at lo, at or above it at hi.

    Notes
    -----
    Regula falsi, Illinois variant: the end kept twice in a row has its value
    halved, so neither end stays put; a secant step that would land next to an
    end goes almost a tolerance in.  Each step works on the problems not yet
    within tolerance.  Checked against ``scipy.optimize.brentq`` in the tests.
    """
    lo, hi = np.asarray(lo, dtype=float).copy(), np.asarray(hi, dtype=float).copy()
    f_lo = np.asarray(value_lo, dtype=float) - limit
    f_hi = np.asarray(value_hi, dtype=float) - limit
    side = np.zeros(lo.size, dtype=np.int8)  # which end moved last: -1 lo, +1 hi
    for step in range(max_steps):
        active = np.flatnonzero(hi - lo > tol)
        if not active.size:
            break
        a, b, fa, fb = lo[active], hi[active], f_lo[active], f_hi[active]
        mid = 0.5 * (a + b)
        if step < bisections:
            x = mid
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                x = b - fb * (b - a) / (fb - fa)
            x = np.where(np.isfinite(x), x, mid)
            edge = np.minimum(0.9 * tol, 0.5 * (b - a))
            x = np.clip(x, a + edge, b - edge)
        f = np.asarray(value_of(active, x), dtype=float) - limit
        up = f >= 0
        k_hi, k_lo = active[up], active[~up]
        hi[k_hi], f_hi[k_hi] = x[up], f[up]
        lo[k_lo], f_lo[k_lo] = x[~up], f[~up]
        f_lo[k_hi[side[k_hi] == 1]] *= 0.5
        f_hi[k_lo[side[k_lo] == -1]] *= 0.5
        side[k_hi], side[k_lo] = 1, -1
    return lo, hi
