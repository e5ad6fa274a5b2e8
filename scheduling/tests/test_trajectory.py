"""A unit's damage and risk over time (scheduling.trajectory), checked
against scipy: the Weibull survival of ``scipy.stats.weibull_min`` and the
lognormal frailty integral by ``scipy.integrate.quad``."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats

from scheduling.trajectory import damage_at, risk_at, trajectory

TODAY = 20_000.0  # days since 1970-01-01 (10 Oct 2024)
POSITIONS = dict(damage_now=np.array([0.8, 0.3, 1.6]), rate_per_day=np.array([2e-4, 5e-5, 1e-4]),
                 installed_day=np.array([TODAY - 8000, TODAY - 3000, TODAY - 12000]), today_day=TODAY)
THRESHOLD = np.array([1.0, 0.6, 2.0])


def test_behind_today_each_part_aged_evenly_since_it_went_in():
    d = damage_at([TODAY - 4000, TODAY], **POSITIONS)
    # half of the first part's 8,000 days ago: half its damage
    assert_allclose(d[0], [0.4, 0.8])
    assert_allclose(d[:, 1], POSITIONS["damage_now"])
    assert np.isnan(damage_at([TODAY - 3500], **POSITIONS)[1, 0])   # not yet fitted then


def test_ahead_of_today_damage_grows_at_the_projected_rate():
    d = damage_at([TODAY + 1000], **POSITIONS)[:, 0]
    assert_allclose(d, POSITIONS["damage_now"] + 1000 * POSITIONS["rate_per_day"])


def _weibull_survival(x, beta):
    """Weibull with its median at x = 1: scale (ln 2)**(-1/beta) (scipy.stats.weibull_min)."""
    return stats.weibull_min.sf(x, beta, scale=math.log(2) ** (-1.0 / beta))


@pytest.mark.parametrize("when", [-5000.0, -100.0, 0.0, 800.0])
def test_without_spread_the_risk_is_the_weibull_series_system(when):
    beta, horizon = 3.0, 90.0
    risk = risk_at([TODAY + when], threshold=THRESHOLD, horizon_days=horizon, weibull_shape=beta,
                   frailty_sigma=0.0, **POSITIONS)[0]
    x0 = np.nan_to_num(damage_at([TODAY + when], **POSITIONS)[:, 0]) / THRESHOLD
    x1 = np.nan_to_num(damage_at([TODAY + when + horizon], **POSITIONS)[:, 0]) / THRESHOLD
    expected = 1.0 - np.prod(_weibull_survival(x1, beta) / _weibull_survival(x0, beta))
    assert_allclose(risk, expected, rtol=1e-9)


def test_with_the_shared_frailty_the_risk_matches_the_lognormal_integral():
    beta, sigma, horizon = 3.0, 0.4, 90.0
    days = [TODAY - 2000, TODAY, TODAY + 1500]
    risk = risk_at(days, threshold=THRESHOLD, horizon_days=horizon, weibull_shape=beta, frailty_sigma=sigma,
                   **POSITIONS)
    for k, day in enumerate(days):
        x0 = np.nan_to_num(damage_at([day], **POSITIONS)[:, 0]) / THRESHOLD
        x1 = np.nan_to_num(damage_at([day + horizon], **POSITIONS)[:, 0]) / THRESHOLD
        h0, h1 = (math.log(2) * np.sum(x ** beta) for x in (x0, x1))

        def mean_survival(h):
            # E[exp(-Z**beta h)], ln Z ~ N(0, sigma): by quadrature over ln Z
            f = lambda z: math.exp(-math.exp(beta * z) * h) * stats.norm.pdf(z, scale=sigma)  # noqa: E731
            return integrate.quad(f, -12 * sigma, 12 * sigma, epsabs=0, epsrel=1e-11, limit=200)[0]

        expected = 1.0 - mean_survival(h1) / mean_survival(h0)
        assert_allclose(risk[k], expected, rtol=1e-6)


def test_a_position_that_fails_new_makes_the_risk_certain():
    risk = risk_at([TODAY], threshold=np.array([1.0, 0.0, 2.0]), horizon_days=90, **POSITIONS)
    assert risk[0] == 1.0


def test_the_trajectory_spans_the_range_with_today_among_the_times():
    t = trajectory(threshold=THRESHOLD, damage_limit=1.0, horizon_days=90, start_day=TODAY - 12000,
                   end_day=TODAY + 3650, points=50, **POSITIONS)
    assert t.days[0] == TODAY - 12000 and t.days[-1] == TODAY + 3650
    assert TODAY in t.days
    assert t.damage.shape == (3, t.days.size) and t.risk.shape == t.days.shape
    assert_allclose(t.limit, THRESHOLD)
    with pytest.raises(ValueError):
        trajectory(threshold=THRESHOLD, damage_limit=1.0, horizon_days=90, start_day=TODAY, end_day=TODAY,
                   **POSITIONS)
