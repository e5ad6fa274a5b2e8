"""Per-unit reductions over capacitor rows grouped by unit (pure numpy)."""

import numpy as np


def _unit_bounds(unit_index, n_units):
    """``(starts, ends)`` of each unit's rows when the rows are grouped by unit
    (``unit_index`` non-decreasing, as the loader reads them), else None."""
    if np.any(unit_index[1:] < unit_index[:-1]):
        return None
    units = np.arange(n_units)
    return np.searchsorted(unit_index, units, side="left"), np.searchsorted(unit_index, units, side="right")


def _per_unit(ufunc, unit_index, values, n_units, empty):
    """``ufunc`` (np.minimum or np.maximum) of ``values`` over each unit's rows,
    with ``empty`` folded in (and given to units without rows).  Rows grouped
    by unit (as the loader reads them) take one ``reduceat``; otherwise ``at``."""
    out = np.full(n_units, empty, dtype=float)
    if not unit_index.size:
        return out
    bounds = _unit_bounds(unit_index, n_units)
    if bounds is None:
        ufunc.at(out, unit_index, values)
        return out
    starts, ends = bounds
    has = starts < ends
    out[has] = ufunc(ufunc.reduceat(values, starts[has]), empty)
    return out


def _first_per_unit(unit_index, key, n_units, k=1):
    """Capacitor row indices of the ``k`` smallest ``key`` per unit (-1 where none);
    ties go to the earlier row."""
    out = np.full((n_units, k), -1, dtype=np.int64)
    if not unit_index.size:
        return out
    bounds = _unit_bounds(unit_index, n_units)
    if bounds is None:  # not grouped by unit: sort
        order = np.lexsort((key, unit_index))
        sorted_units = unit_index[order]
        starts = np.searchsorted(sorted_units, np.arange(n_units), side="left")
        ends = np.searchsorted(sorted_units, np.arange(n_units), side="right")
        for j in range(k):
            pos = starts + j
            ok = pos < ends
            out[ok, j] = order[pos[ok]]
        return out
    # Rows grouped by unit: k passes of a per-unit minimum, each removing the
    # row it found.
    starts, ends = bounds
    has = np.flatnonzero(ends > starts)
    work = key.astype(float).copy()
    rows = np.arange(work.size)
    sizes = ends[has] - starts[has]
    for j in range(k):
        # fmin skips NaN, the mark of a row already taken.
        least = np.fmin.reduceat(work, starts[has])
        hit = work == np.repeat(least, sizes)
        first = np.minimum.reduceat(np.where(hit, rows, work.size), starts[has])
        ok = first < work.size
        out[has[ok], j] = first[ok]
        work[first[ok]] = np.nan
    return out
