"""Argument checks shared by the physics functions.

Each returns the argument as a float64 array or raises ``ValueError`` naming
it; no Django, no I/O.
"""

import numpy as np

from scheduling import parameters as P

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
