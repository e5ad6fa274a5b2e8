"""The forecast's numerical helpers against outside references.

The crossing solver is checked against ``scipy.optimize.brentq``; the per-unit
selection of earliest rows against a plain sort.  No database.
"""

import numpy as np
import pytest
from scipy import optimize

from scheduling import forecast as F


def _curves():
    """Increasing test functions of t (days), one per unit, with their brackets."""
    rng = np.random.default_rng(7)
    n = 200
    scale = rng.uniform(50.0, 20000.0, n)
    power = rng.uniform(1.0, 6.0, n)
    offset = rng.uniform(-15000.0, 0.0, n)

    def value(units, t):
        x = np.maximum(t - offset[units], 0.0) / scale[units]
        return -np.expm1(-x ** power[units])  # a Weibull-like risk curve in [0, 1)

    return n, value, offset


def test_first_crossing_matches_brentq():
    n, value, offset = _curves()
    limit = 0.1
    lo, hi = offset.copy(), np.full(n, 36525.0)
    units = np.arange(n)
    ok = value(units, hi) >= limit
    got = F._first_crossing(value, lo[ok], hi[ok], value(units[ok], lo[ok]), value(units[ok], hi[ok]), limit)
    for k, u in enumerate(units[ok]):
        root = optimize.brentq(lambda t: value(np.array([u]), np.array([t]))[0] - limit, lo[u], hi[u],
                               xtol=1e-9)
        # Within the solver's tolerance, and never before the crossing.
        assert root - 1e-6 <= got[k] <= root + F.DUE_DATE_TOLERANCE_DAYS


def test_first_crossing_on_log_values_as_the_engine_uses_it():
    # The engine solves on the log of the hazard (-ln(1 - risk)); same roots.
    n, value, offset = _curves()
    limit = 0.1

    def log_hazard(units, t):
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(-np.log1p(-value(units, t)), 1e-300))

    units = np.arange(n)
    lo, hi = offset.copy(), np.full(n, 36525.0)
    got = F._first_crossing(log_hazard, lo, hi, log_hazard(units, lo), log_hazard(units, hi),
                            np.log(-np.log1p(-limit)))
    for u in units:
        root = optimize.brentq(lambda t: value(np.array([u]), np.array([t]))[0] - limit, lo[u], hi[u],
                               xtol=1e-9)
        assert root - 1e-6 <= got[u] <= root + F.DUE_DATE_TOLERANCE_DAYS


def test_shrinking_evaluator_gives_the_same_values_as_a_full_one():
    n, value, _ = _curves()
    shrinking = F._Shrinking(lambda subset: (lambda t: value(subset, t)))
    t = np.linspace(-1000.0, 5000.0, n)
    all_units = np.arange(n)
    assert np.array_equal(shrinking(all_units, t), value(all_units, t))
    few = all_units[::7]
    assert np.array_equal(shrinking(few, t[few]), value(few, t[few]))
    fewer = few[::2]  # now served from a rebuilt, smaller evaluator
    assert np.array_equal(shrinking(fewer, t[fewer]), value(fewer, t[fewer]))


@pytest.mark.parametrize("shuffle", [False, True])
def test_first_per_unit_picks_the_earliest_rows_like_a_sort(shuffle):
    rng = np.random.default_rng(3)
    for _ in range(200):
        n_units = int(rng.integers(1, 8))
        unit_index = np.repeat(np.arange(n_units), rng.integers(0, 5, n_units))
        if shuffle:
            unit_index = rng.permutation(unit_index)
        key = rng.choice([1.0, 2.0, 3.0, np.inf], unit_index.size)
        got = F._first_per_unit(unit_index, key, n_units, k=2)
        for u in range(n_units):
            rows = np.flatnonzero(unit_index == u)
            expected = list(rows[np.argsort(key[rows], kind="stable")][:2])
            expected += [-1] * (2 - len(expected))
            assert list(got[u]) == expected


@pytest.mark.parametrize("shuffle", [False, True])
@pytest.mark.parametrize("ufunc, empty", [(np.minimum, np.inf), (np.maximum, 0.0)])
def test_per_unit_reduction_matches_ufunc_at(shuffle, ufunc, empty):
    rng = np.random.default_rng(5)
    n_units = 30
    unit_index = np.repeat(np.arange(n_units), rng.integers(0, 6, n_units))
    if shuffle:
        unit_index = rng.permutation(unit_index)
    values = rng.normal(size=unit_index.size)
    expected = np.full(n_units, empty)
    ufunc.at(expected, unit_index, values)
    assert np.array_equal(F._per_unit(ufunc, unit_index, values, n_units, empty), expected)
