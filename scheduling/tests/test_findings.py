"""Check values for the bench findings in scheduling.physics.findings.

Each check names what it is checked against: the drift laws' own inverses
(design brief "Readings from the bench"), scipy (optimize, integrate, stats)
or references.md ("refs §n").
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, optimize, stats

from scheduling import parameters as P
from scheduling import physics as ph

from .test_physics import _lognormal_laplace_by_quad


def test_reading_exactly_the_predicted_esr_gives_the_predicted_damage():
    # Design brief: D = log2(ESR_meas / ESR0) inverts ESR = ESR0 * 2**D.
    d = np.array([0.0, 0.3, 1.0, 2.7])
    predicted = ph.esr_at_damage(3.5, d)
    assert_allclose(ph.damage_from_esr(3.5, predicted), d, atol=1e-12)
    d_both, _ = ph.damage_from_readings(3.5, predicted, 10e-6, ph.capacitance_at_damage(10e-6, d))
    assert_allclose(d_both, d, atol=1e-12)


def test_reading_twice_the_predicted_esr_adds_exactly_one():
    d = np.array([0.0, 0.3, 1.0, 2.7])
    assert_allclose(ph.damage_from_esr(3.5, 2.0 * ph.esr_at_damage(3.5, d)), d + 1.0, atol=1e-12)


def test_esr_and_capacitance_combine_as_the_maximum_likelihood_estimate():
    # Two independent normal estimates of one damage: the inverse-variance mean
    # is the value that maximises their joint likelihood (scipy.optimize over
    # scipy.stats.norm).
    esr0, c0 = 1.2, 47e-6
    d, sd = ph.damage_from_readings(esr0, 3.1, c0, 38e-6)
    d_e = ph.damage_from_esr(esr0, 3.1)
    d_c = ph.damage_from_capacitance(c0, 38e-6)
    s_e = P.READING_ESR_LOG_SD / np.log(2.0)
    s_c = P.READING_CAPACITANCE_REL_SD / 0.2
    best = optimize.minimize_scalar(lambda x: -(stats.norm.logpdf(d_e, x, s_e) + stats.norm.logpdf(d_c, x, s_c)),
                                    bounds=(0, 5), method="bounded", options={"xatol": 1e-10})
    assert d == pytest.approx(best.x, abs=1e-7)
    assert min(d_e, d_c) < d < max(d_e, d_c)
    assert sd < min(s_e, s_c)
    # one reading alone keeps its own error; none gives NaN
    assert ph.damage_from_readings(esr0, 3.1, c0, np.nan) == pytest.approx((d_e, s_e))
    assert np.isnan(ph.damage_from_readings(esr0, np.nan, c0, np.nan)[0])


def test_readings_that_cannot_be_right_are_refused():
    with pytest.raises(ValueError, match="esr_ohm"):
        ph.damage_from_readings(1.0, -2.0, 1e-6, np.nan)
    with pytest.raises(ValueError, match="c_f"):
        ph.damage_from_readings(1.0, np.nan, 1e-6, 0.0)
    with pytest.raises(ValueError, match="negative rail"):
        ph.pump_damage_from_rail(5.0, 1.0, 0.02, 5e3, 10e-6, 47e-6, 3.5, 1.2, 46.0, 0.5, 0.5)
    with pytest.raises(ValueError, match="exceed the input"):
        ph.pump_damage_from_rail(5.0, -6.0, 0.02, 5e3, 10e-6, 47e-6, 3.5, 1.2, 46.0, 0.5, 0.5)


PUMP = dict(pump_hz=5e3, c_fly_f=10e-6, c_res_f=47e-6, esr_fly0_ohm=3.5, esr_res0_ohm=1.2, switch_ohm=46.0)


def _rail(d_fly, d_res, vin=5.0, load=0.02):
    return ph.inverter_output_v(vin, load, PUMP["pump_hz"], ph.capacitance_at_damage(10e-6, d_fly),
                                ph.capacitance_at_damage(47e-6, d_res), ph.esr_at_damage(3.5, d_fly),
                                ph.esr_at_damage(1.2, d_res), PUMP["switch_ohm"])


@pytest.mark.parametrize("d_fly, d_res", [(0.4, 0.2), (1.0, 1.0), (0.05, 1.7), (2.5, 0.8)])
def test_inverting_the_inverter_at_the_predicted_damage_returns_it(d_fly, d_res):
    # refs §6 output formula: the rail the model predicts, read back.
    rail = _rail(d_fly, d_res)
    got = ph.pump_damage_from_rail(5.0, rail, 0.02, damage_fly_predicted=d_fly, damage_res_predicted=d_res, **PUMP)
    assert_allclose(got, (d_fly, d_res), rtol=1e-9)


def test_a_low_rail_scales_both_pump_parts_by_the_root_scipy_finds():
    d_fly, d_res = 0.6, 0.3
    rail = -2.4
    got = ph.pump_damage_from_rail(5.0, rail, 0.02, damage_fly_predicted=d_fly, damage_res_predicted=d_res, **PUMP)
    q = optimize.brentq(lambda x: _rail(x * d_fly, x * d_res) - rail, 0.0, 20.0 / d_fly, xtol=1e-14)
    assert_allclose(got, (q * d_fly, q * d_res), rtol=1e-9)
    assert got[0] > d_fly and got[1] > d_res


def test_rails_at_the_edges_of_the_model():
    # better than new parts: no damage; collapsed to 0 V: the damage where it
    # just reaches 0 V; a new pair (predicted 0) still moves, equally.
    best = ph.pump_damage_from_rail(5.0, _rail(0, 0) - 0.05, 0.02, damage_fly_predicted=0.5,
                                    damage_res_predicted=0.5, **PUMP)
    assert best == (0.0, 0.0)
    dead = ph.pump_damage_from_rail(5.0, 0.0, 0.02, damage_fly_predicted=0.5, damage_res_predicted=0.5, **PUMP)
    assert _rail(*dead) == pytest.approx(0.0, abs=1e-9)
    assert _rail(dead[0] * 0.99, dead[1] * 0.99) < 0
    young = ph.pump_damage_from_rail(5.0, -3.0, 0.02, damage_fly_predicted=0.0, damage_res_predicted=0.0, **PUMP)
    assert young[0] == pytest.approx(young[1]) and young[0] > 0
    assert _rail(*young) == pytest.approx(-3.0, abs=1e-9)


def _posterior_by_quad(ys, sds, s0):
    """Mean and sd of ln Z from prior x likelihood, by scipy.integrate.quad."""
    def dens(x):
        return stats.norm.pdf(x, 0, s0) * np.prod([stats.norm.pdf(y, x, s) for y, s in zip(ys, sds)])

    z = integrate.quad(dens, -8, 8, points=[0.0])[0]
    m = integrate.quad(lambda x: x * dens(x), -8, 8, points=[0.0])[0] / z
    v = integrate.quad(lambda x: (x - m) ** 2 * dens(x), -8, 8, points=[0.0])[0] / z
    return m, np.sqrt(v)


def test_frailty_posterior_matches_prior_times_likelihood_integrated_by_scipy():
    ys = [0.7, 0.2, -0.1]
    sds = [0.3, 0.5, 0.9]
    mean, sd = ph.frailty_posterior([1, 1, 1], ys, sds, 0.4, 3)
    m, s = _posterior_by_quad(ys, sds, 0.4)
    assert mean[1] == pytest.approx(m, abs=1e-8)
    assert sd[1] == pytest.approx(s, rel=1e-7)
    # units without readings keep the prior; no spread means no update at all
    assert (mean[0], sd[0]) == (0.0, 0.4) and (mean[2], sd[2]) == (0.0, 0.4)
    assert ph.frailty_posterior([0], [0.7], [0.3], 0.0, 1) == (pytest.approx([0.0]), pytest.approx([0.0]))


def test_rate_factor_follows_the_ratio_within_its_clip():
    assert_allclose(ph.rate_factor([2.0, 0.5, 10.0, 0.0], 1.0, 0.3), [2.0, 0.5, P.RATE_FACTOR_MAX,
                                                                      P.RATE_FACTOR_MIN])
    # a part too young for the reading to tell its rate keeps its predicted rate
    assert ph.rate_factor(0.5, 0.1, 0.3) == 1.0


def test_leakage_limit_of_the_data_sheet_convention_refs_s2():
    # [C] refs §2: 47 uF / 450 V -> 211.5 uA; small parts take the 3 uA floor.
    assert ph.leakage_limit_ua(47, 450) == pytest.approx(211.5)
    assert ph.leakage_limit_ua(10, 16) == pytest.approx(3.0)


@pytest.mark.parametrize("sigma", [0.3, 1.2])
def test_frailty_with_a_sigma_per_element_matches_scipy_quad(sigma):
    hazards = np.array([1e-4, 0.05, 0.7, 3.0, 40.0])
    sigmas = np.array([sigma, 0.8, sigma, 0.8, sigma])
    got = ph.frailty_log_laplace(hazards, sigmas)
    expected = [_lognormal_laplace_by_quad(h, s) for h, s in zip(hazards, sigmas)]
    assert_allclose(got, expected, rtol=1e-7)
    # the direct integral and the table agree where both apply
    table = ph.frailty_log_laplace(hazards, sigma)
    direct = ph.frailty_log_laplace(hazards, np.full(hazards.size, sigma))
    assert_allclose(direct, table, rtol=1e-7)
