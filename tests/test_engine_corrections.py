"""Two corrections of the life engine, each checked against an independent
computation: the pump pair's failure date when its rail failed before today,
and shelf ageing in the ESR feedback path.
"""

import datetime as dt

import numpy as np
import pytest
from scipy import integrate, optimize

from scheduling import physics
from scheduling.forecast import EngineOptions, compute
from scheduling.loader import load_fleet

from .test_life_engine import TODAY, effects_model, general, make_unit, pump_pair, store  # noqa: F401
from front import workflows


def _rows(fa, designator):
    return [i for i in range(fa.n_caps) if fa.pos_designator[fa.position_index[i]] == designator]


def test_a_pump_pair_that_failed_in_the_past_fails_at_one_moment_under_even_ageing(effects_model, store):
    """README "dates already passed": each part aged evenly since it went in.
    The pair's failure time is where the inverter's rail (references.md §6)
    with both parts on that line reaches the minimum; found here by
    scipy.optimize.brentq, independently of the engine's own root finder."""
    from fleet.models import Position

    Position.objects.filter(gear_model=effects_model, designator__in=["C31", "C32"]).update(
        esr_ohm=3.0, rated_temp_c=85, rated_life_h=1000, pump_min_rail_v=4.1)
    unit = make_unit(effects_model, store, tag="T-PUMP", year=1990, joined=dt.date(2015, 1, 1))
    # The flying part was changed later than the reservoir: the two ages differ.
    workflows.service_record_recap(unit_id=unit.pk, performed_on=dt.date(1996, 5, 1),
                                   replacements={"C31": {"rated_temp_c": 85, "rated_life_h": 1000}})
    fa = load_fleet(today=TODAY)
    out = compute(fa, today=TODAY)
    (f,), (r,) = _rows(fa, "C31"), _rows(fa, "C32")
    today = out.today_day
    assert out.reaches_day[f] < today and out.reaches_day[r] < today  # failed in the past
    assert 0 < out.threshold[f] < 2 and 0 < out.threshold[r] < 2  # neither capped

    age_f, age_r = today - fa.installed_day[f], today - fa.installed_day[r]

    def margin(t):
        d_f = out.damage[f] * (age_f + t) / age_f
        d_r = out.damage[r] * (age_r + t) / age_r
        v = physics.inverter_output_v(5.0, 0.01, 5000, physics.capacitance_at_damage(10e-6, d_f),
                                      physics.capacitance_at_damage(10e-6, d_r), physics.esr_at_damage(3.0, d_f),
                                      physics.esr_at_damage(3.0, d_r), 46.0)
        return -v - 4.1

    t_fail = optimize.brentq(margin, -min(age_f, age_r), 0.0, xtol=1e-6)
    # One moment for the pair, the one even ageing gives (to the day).
    assert out.reaches_day[f] == pytest.approx(out.reaches_day[r], abs=1e-3)
    assert out.reaches_day[f] == pytest.approx(today + t_fail, abs=0.01)
    # and each threshold is that part's damage then
    assert out.threshold[f] == pytest.approx(out.damage[f] * (age_f + t_fail) / age_f, rel=1e-6)
    assert out.threshold[r] == pytest.approx(out.damage[r] * (age_r + t_fail) / age_r, rel=1e-6)


def test_a_pump_pair_failing_ahead_still_drifts_at_its_projected_rates(effects_model, store):
    unit = make_unit(effects_model, store, tag="T-NEW", year=2022, joined=dt.date(2023, 1, 1))
    assert unit.pk
    fa = load_fleet(today=TODAY)
    out = compute(fa, today=TODAY)
    (f,), (r,) = _rows(fa, "C31"), _rows(fa, "C32")
    assert out.reaches_day[f] > out.today_day
    t = out.reaches_day[f] - out.today_day
    assert out.threshold[f] == pytest.approx(out.damage[f] + out.rate_per_day[f] * t, rel=1e-6)
    assert out.threshold[r] == pytest.approx(out.damage[r] + out.rate_per_day[r] * t, rel=1e-6)


def test_esr_feedback_counts_shelf_ageing_in_the_esr_that_heats_the_part(db):
    """The unpowered damage is spread evenly over the powered hours: the
    ODE dD/dh = 1/L(Ta + rise0 * 2**D) + D_unpowered / hours, integrated by
    scipy.integrate.solve_ivp, gives the damage of the feedback path."""
    from fleet.models import GearModel, Location

    warm = Location.objects.create(name="Warm store", profile="constant", constant_temp_c=30.0)
    model = GearModel.objects.create(maker="Test Maker", model_name="Pump box", year_from=2005, year_to=2010,
                                     internal_rise_k=15.0)
    general(model, "C1", rated_temp_c=105, rated_life_h=1000, esr_ohm=3.5, capacitance_uf=10, diameter_mm=5,
            length_mm=11, ripple_current_a=0.06, ripple_freq_hz=5000)
    make_unit(model, warm, tag="T-FB", year=2006, joined=dt.date(2020, 1, 1), prior_powered_h_per_year=400)
    fa = load_fleet(today=TODAY)
    plain = compute(fa, today=TODAY)
    fb = compute(fa, today=TODAY, options=EngineOptions(esr_feedback=True))
    since = max(plain.today_day - max(fa.accounted_day[0], fa.installed_day[0]), 0.0)
    d_plain = plain.damage[0] - plain.rate_per_day[0] * since
    d_fb = fb.damage[0] - fb.rate_per_day[0] * since

    # Independent: split the plain damage into powered and unpowered shares
    # from the histograms, find the equivalent powered ambient, integrate.
    from scheduling import histogram as H

    rise0 = physics.ripple_rise_k(0.06, 3.5, 5, 11)
    hours = fa.hist_powered[0].sum()
    d_pow = (fa.hist_powered[0] / physics.life_hours_10k(1000, 105, H.BIN_CENTRES_C + rise0)).sum()
    d_unp = d_plain - d_pow
    core_eq = 105 - 10 * np.log2(hours / d_pow / 1000)
    ambient_eq = core_eq - rise0

    def rate(_h, d):
        return [1 / physics.life_hours_10k(1000, 105, ambient_eq + rise0 * 2 ** d[0]) + d_unp / hours]

    sol = integrate.solve_ivp(rate, (0, hours), [0.0], rtol=1e-10, atol=1e-12)
    assert d_fb == pytest.approx(sol.y[0, -1], rel=1e-6)
    # Shelf ageing raises the ESR that heats the part: more than integrating
    # the powered hours from zero and adding the unpowered damage afterwards.
    old = physics.damage_with_esr_feedback(hours, ambient_eq, 1000, 105, 0.06, 3.5, 5, 11) + d_unp
    assert d_fb > old * 1.001
