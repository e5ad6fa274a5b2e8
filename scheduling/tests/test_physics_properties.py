"""Property tests (Hypothesis) for scheduling.physics.

The properties follow from the formulas of docs/references.md (computed from the
formula): life laws are monotone in temperature (refs §1), Palmgren-Miner damage
is additive over time (refs §5), probabilities stay in [0, 1] and grow with the
horizon (refs §5, design brief §6).
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from scheduling import physics as ph

temps = st.floats(-40.0, 150.0)
lives = st.floats(100.0, 1e5)
rated_temps = st.sampled_from([70.0, 85.0, 105.0, 125.0])
eas = st.floats(0.1, 1.5)
damages = st.floats(0.0, 10.0)
thresholds = st.floats(0.05, 5.0)
shapes = st.floats(0.5, 8.0)
hour_arrays = hnp.arrays(np.float64, st.integers(1, 20), elements=st.floats(0.0, 1e4))


@given(lives, rated_temps, temps, st.floats(0.01, 50.0))
def test_10k_life_falls_as_temperature_rises(l0, t0, t, dt):
    assert ph.life_hours_10k(l0, t0, t + dt) < ph.life_hours_10k(l0, t0, t)


@given(lives, rated_temps, temps, st.floats(0.01, 50.0), eas)
def test_arrhenius_life_falls_as_temperature_rises(l0, t0, t, dt, ea):
    assert ph.life_hours_arrhenius(l0, t0, t + dt, ea) < ph.life_hours_arrhenius(l0, t0, t, ea)


@given(hour_arrays, hour_arrays, st.data())
def test_miner_damage_adds_over_split_histories(h1, h2, data):
    life1 = data.draw(hnp.arrays(np.float64, h1.shape, elements=lives))
    life2 = data.draw(hnp.arrays(np.float64, h2.shape, elements=lives))
    whole = ph.miner_damage(np.concatenate([h1, h2]), np.concatenate([life1, life2]))
    parts = ph.miner_damage(h1, life1) + ph.miner_damage(h2, life2)
    np.testing.assert_allclose(whole, parts, rtol=1e-12, atol=1e-300)


@given(hnp.arrays(np.float64, st.tuples(st.integers(1, 4), st.integers(1, 12)),
                  elements=st.floats(0.0, 8.0)),
       st.floats(0.0, 3.0), thresholds, shapes)
def test_unit_risk_in_unit_interval_and_rises_with_horizon(d_now, extra, d_star, beta):
    d_later = d_now + extra
    d_much_later = d_later + 0.5
    p1 = ph.unit_failure_probability(ph.conditional_failure_probability(d_now, d_later, d_star, beta))
    p2 = ph.unit_failure_probability(
        ph.conditional_failure_probability(d_now, d_much_later, d_star, beta))
    assert np.all((p1 >= 0.0) & (p1 <= 1.0))
    assert np.all((p2 >= 0.0) & (p2 <= 1.0))
    assert np.all(p2 >= p1)


@given(damages, st.floats(0.0, 5.0), thresholds, shapes)
def test_failure_probability_monotone_in_damage(d, extra, d_star, beta):
    f1 = ph.failure_probability(d, d_star, beta)
    f2 = ph.failure_probability(d + extra, d_star, beta)
    assert 0.0 <= f1 <= f2 <= 1.0


@settings(max_examples=50)
@given(st.floats(4.0, 4.9), st.floats(0.001, 0.02), st.booleans())
def test_threshold_pump_rail_just_meets_minimum(min_rail, load, flying):
    d = ph.threshold_pump(5.0, load, 5e3, 10e-6, 10e-6, 0.1, 0.1, 46.0, min_rail,
                          which="flying" if flying else "reservoir")
    if 0.0 < d < np.inf:
        d_fly, d_res = (d, 0.0) if flying else (0.0, d)
        v = ph.inverter_output_v(5.0, load, 5e3, ph.capacitance_at_damage(10e-6, d_fly),
                                 ph.capacitance_at_damage(10e-6, d_res),
                                 ph.esr_at_damage(0.1, d_fly), ph.esr_at_damage(0.1, d_res), 46.0)
        np.testing.assert_allclose(-v, min_rail, rtol=1e-6)


@settings(deadline=None)  # the first call for each spread builds its table
@given(st.floats(0.0, 1e8), st.floats(0.0, 1e3), st.floats(0.0, 1e3), st.sampled_from([2.0, 3.0, 5.0]),
       st.sampled_from([0.0, 0.2, 0.4, 0.6]))
def test_conditional_unit_risk_lies_in_zero_one_and_rises_with_the_interval(h0, extra, more, beta, sigma):
    # Shared frailty (physics.unit_conditional_hazard): a longer interval
    # (more nominal hazard at its end) never lowers the risk.
    r1 = ph.unit_conditional_risk(h0, h0 + extra, beta, sigma)
    r2 = ph.unit_conditional_risk(h0, h0 + extra + more, beta, sigma)
    assert 0.0 <= r1 <= r2 + 1e-12 <= 1.0 + 1e-12
