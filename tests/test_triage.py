"""Triage: the next hire's risk, priorities, act-by dates and per-position actions.

The risk of the next hire is checked against scipy (the Weibull conditional
probability from ``scipy.stats.weibull_min``, the shared lognormal frailty by
``scipy.integrate.quad`` over ``scipy.stats.lognorm``).  The role weights and
the measure share are our own assumptions (scheduling/parameters.py); the
tests hold the rules that use them.
"""

import datetime as dt
import json
from io import StringIO

import numpy as np
import pytest
from django.core.management import call_command
from scipy import integrate, stats

from fleet.models import Location, Position, Unit
from front import workflows
from scheduling import parameters as P
from scheduling import triage as T
from scheduling.days import date_to_day
from scheduling.forecast import Policy
from scheduling.models import UnitForecast
from scheduling.reasons import action_words
from scheduling.services import forecast_compute, forecast_refresh, stored_positions
from scheduling.thresholds import ROLE_CODES

TODAY = dt.date(2026, 12, 1)
LN2 = np.log(2.0)


def weibull_at_median_one(shape):
    """scipy's two-parameter Weibull with its median at damage share 1."""
    return stats.weibull_min(shape, scale=LN2 ** (-1.0 / shape))


# --- the risk of the next hire -----------------------------------------------------

@pytest.mark.parametrize("x, dx, shape", [(0.3, 0.01, 3.0), (1.4, 0.002, 3.0), (0.8, 0.05, 2.0)])
def test_one_position_without_scatter_between_units_matches_the_weibull_conditional(x, dx, shape):
    """P(fail in (x, x+dx] | survived to x) = 1 - S(x+dx)/S(x) (scipy.stats.weibull_min)."""
    risk, _ = T.hire_risk(x_now=np.array([x]), x_hire=np.array([dx]), unit_index=np.array([0]), n_units=1,
                          dead=np.array([False]), weibull_shape=shape, frailty_sigma=0.0)
    w = weibull_at_median_one(shape)
    assert risk[0] == pytest.approx(1.0 - w.sf(x + dx) / w.sf(x), rel=1e-9)


def test_the_shared_frailty_conditions_on_the_unit_working_now():
    """With damage multiplied by a lognormal Z for all positions of a unit,
    P(survive the hire | works now) = E[exp(-Z^b H1)] / E[exp(-Z^b H0)], the
    expectation by scipy.integrate.quad over scipy.stats.lognorm."""
    x = np.array([0.9, 1.6, 0.2])
    dx = np.array([0.004, 0.01, 0.001])
    shape, sigma = 3.0, 0.4
    risk, added = T.hire_risk(x_now=x, x_hire=dx, unit_index=np.zeros(3, dtype=int), n_units=1,
                              dead=np.array([False]), weibull_shape=shape, frailty_sigma=sigma)
    h0 = np.sum(LN2 * x ** shape)
    h1 = np.sum(LN2 * (x + dx) ** shape)
    z = stats.lognorm(s=sigma)

    def expect(h):
        return integrate.quad(lambda v: np.exp(-v ** shape * h) * z.pdf(v), 0, np.inf, epsabs=0, epsrel=1e-12,
                              limit=200)[0]

    assert risk[0] == pytest.approx(1.0 - expect(h1) / expect(h0), rel=1e-6)
    np.testing.assert_allclose(added, LN2 * ((x + dx) ** shape - x ** shape), rtol=1e-12)


def test_a_unit_with_a_part_that_fails_even_new_is_certain_to_fail():
    risk, _ = T.hire_risk(x_now=np.array([0.1, 0.0]), x_hire=np.array([0.01, 0.0]), unit_index=np.array([0, 1]),
                          n_units=2, dead=np.array([False, True]), weibull_shape=3.0, frailty_sigma=0.4)
    assert risk[1] == 1.0 and 0 < risk[0] < 1


# --- priorities and dates ---------------------------------------------------------

def _fleet_of_two(role_a, role_b, **kw):
    """Two units of one position each, in the same state but for the role."""
    args = dict(unit_index=np.array([0, 1]), n_units=2,
                role_code=np.array([ROLE_CODES[role_a], ROLE_CODES[role_b]]),
                damage=np.array([0.9, 0.9]), threshold=np.array([1.0, 1.0]), hire_damage=np.array([0.01, 0.01]),
                installed_day=np.full(2, date_to_day(dt.date(2015, 1, 1))), is_original=np.array([False, False]),
                status=["due", "due"], due_day=np.full(2, date_to_day(dt.date(2026, 9, 1))),
                today_day=date_to_day(TODAY), policy=Policy(calendar_age_years=40.0), weibull_shape=3.0,
                frailty_sigma=0.4)
    args.update(kw)
    return T.triage(**args)


def test_a_unit_the_failure_would_silence_goes_before_one_that_would_lose_its_low_end():
    tri = _fleet_of_two("signal_coupling", "pump_flying")
    assert tri.hire_risk[0] == pytest.approx(tri.hire_risk[1])
    assert list(tri.priority) == [2, 1]
    assert tri.impact[1] == P.ROLE_HIRE_IMPACT["pump_flying"]
    assert tri.impact[0] == P.ROLE_HIRE_IMPACT["signal_coupling"]


def test_work_already_due_is_to_be_done_from_today_not_in_the_past():
    tri = _fleet_of_two("general", "general", due_day=np.array([date_to_day(dt.date(1993, 2, 1)),
                                                                  date_to_day(dt.date(2027, 3, 1))]))
    assert tri.act_by_day[0] == date_to_day(TODAY)
    assert tri.act_by_day[1] == date_to_day(dt.date(2027, 3, 1))


def test_units_of_the_same_score_go_by_act_by_date_then_unit_as_the_stored_renumbering_does():
    """Ties on score: the earlier act-by date first, a date counted as the day
    stored (a fraction of a day does not count), work already due counted
    from today; then the lower unit.  services.priorities_rank orders the
    stored rows so (score, act-by date nulls last, unit id), and a refresh of
    the whole fleet keeps triage's numbers without renumbering."""
    days = [dt.date(2027, 5, 1), dt.date(2027, 3, 1), dt.date(2027, 3, 1), dt.date(1990, 1, 1), dt.date(2027, 3, 1)]
    due = np.array([date_to_day(d) for d in days])
    due[4] += 0.7  # later on the same day as units 1 and 2
    n = len(days)
    tri = T.triage(unit_index=np.arange(n), n_units=n, role_code=np.full(n, ROLE_CODES["general"]),
                   damage=np.full(n, 0.9), threshold=np.ones(n), hire_damage=np.full(n, 0.01),
                   installed_day=np.full(n, date_to_day(dt.date(2015, 1, 1))), is_original=np.zeros(n, dtype=bool),
                   status=["due"] * n, due_day=due, today_day=date_to_day(TODAY),
                   policy=Policy(calendar_age_years=40.0), weibull_shape=3.0, frailty_sigma=0.4)
    assert len(set(tri.score.tolist())) == 1
    assert list(tri.priority) == [5, 2, 3, 1, 4]


def test_units_that_need_no_work_get_no_priority():
    tri = _fleet_of_two("general", "pump_flying", damage=np.array([0.1, 0.95]), status=["ok", "due"])
    assert list(tri.priority) == [0, 1]
    assert list(tri.needs_work) == [False, True]


# --- actions ------------------------------------------------------------------------

def test_each_position_gets_replace_measure_or_leave_by_the_documented_rules():
    today = date_to_day(TODAY)
    installed = np.array([date_to_day(dt.date(y, 7, 1)) for y in (2010, 2010, 1979, 2010, 2010, 2010)])
    action, why = T.position_actions(
        damage=np.array([1.2, 0.5, 0.3, 0.75, 0.2, 0.4]), threshold=np.array([1.0, 1.0, 1.0, 1.0, 1.0, 0.0]),
        installed_day=installed, is_original=np.array([False, False, True, False, False, True]), today_day=today,
        damage_limit=1.0, calendar_age_years=40.0)
    assert [T.ACTION_NAMES[a] for a in action] == ["replace", "leave", "replace", "measure", "leave", "measure"]
    assert list(why) == [T.WHY_PAST_LIMIT, T.WHY_FINE, T.WHY_AGE, T.WHY_NEAR_LIMIT, T.WHY_FINE, T.WHY_NEW_FAILS]


def test_the_house_damage_limit_moves_the_replace_line():
    action, _ = T.position_actions(damage=np.array([0.85]), threshold=np.array([1.0]),
                                   installed_day=np.array([0.0]), is_original=np.array([False]),
                                   today_day=date_to_day(TODAY), damage_limit=0.8, calendar_age_years=40.0)
    assert T.ACTION_NAMES[action[0]] == "replace"


def test_a_unit_due_on_its_summed_risk_measures_the_parts_that_carry_it():
    """Every part under its limit, yet the unit is due: the two carrying most
    of the next hire's hazard are to be measured."""
    n = 5
    tri = T.triage(unit_index=np.zeros(n, dtype=int), n_units=1, role_code=np.full(n, ROLE_CODES["general"]),
                   damage=np.array([0.2, 0.5, 0.6, 0.3, 0.1]), threshold=np.ones(n), hire_damage=np.full(n, 0.01),
                   installed_day=np.zeros(n), is_original=np.zeros(n, dtype=bool), status=["overdue"],
                   due_day=np.array([date_to_day(TODAY) - 30]), today_day=date_to_day(TODAY), policy=Policy(),
                   weibull_shape=3.0, frailty_sigma=0.4)
    assert [T.ACTION_NAMES[a] for a in tri.action] == ["leave", "measure", "measure", "leave", "leave"]
    assert set(tri.why[[1, 2]]) == {T.WHY_RISK_SHARE}


def test_each_action_has_a_line_of_why():
    assert action_words(T.REPLACE, T.WHY_PAST_LIMIT, "pump_flying", min_rail_v=3.25) == (
        "replace: negative rail below 3.25 V at today's predicted ESR")
    assert action_words(T.REPLACE, T.WHY_AGE, "general", age_years=45.4, age_limit_years=40) == (
        "replace: original part 45 years old (house limit 40 years)")
    assert action_words(T.MEASURE, T.WHY_NEAR_LIMIT, "timing", share=0.81) == (
        "measure: at 81 % of its limit; read its ESR and capacitance")
    assert action_words(T.LEAVE, T.WHY_FINE, "general", share=0.3) == "leave: 30 % of its limit"


# --- through the engine and the database ------------------------------------------------

@pytest.fixture
def fleet(db):
    from fleet.models import GearModel

    store = Location.objects.create(name="Triage store", profile="constant", constant_temp_c=20.0)
    model = GearModel.objects.create(maker="Test Maker", model_name="Sorter 2", year_from=1980, year_to=1990,
                                     internal_rise_k=12.0)
    for designator in ("C1", "C2"):
        Position.objects.create(gear_model=model, designator=designator, capacitance_uf=100, rated_voltage_v=25,
                                rated_temp_c=85, rated_life_h=2000, esr_ohm=0.5, diameter_mm=6.3, length_mm=11)
    units = [workflows.unit_create(asset_tag=f"TR-{k}", gear_model=model, year_made=year, joined_on=dt.date(2024, 1, 1),
                                   home_location=store) for k, year in enumerate((1981, 2012, 2023))]
    return units


def _hire(unit, start, days, powered):
    Unit.objects.filter(pk=unit.pk, status=Unit.Status.HOLD).update(status=Unit.Status.AVAILABLE)
    workflows.rental_check_out(unit_id=unit.pk, job_ref="J", out_at=start, override_reason="test hire")
    workflows.rental_check_in(unit_id=unit.pk, in_at=start + dt.timedelta(days=days), venue_ambient_c=30.0,
                              powered_hours=powered)


def test_one_hire_adds_its_powered_hours_hot_and_the_rest_of_it_cool(fleet):
    """A unit hired once in the last year (20 h powered of 72 h out at 30 degC)
    adds per part 20 h at 30 + 12 K rise and 52 h at 30 degC, each through the
    10 K rule L = L0 * 2**((T0 - T)/10) (refs §1); the parts carry no ripple."""
    unit = fleet[1]
    Unit.objects.filter(pk=unit.pk).update(joined_on=dt.date(2024, 1, 1))
    start = dt.datetime(2026, 6, 1, 9, tzinfo=dt.timezone.utc)
    _hire(unit, start, 3, 20.0)
    run = forecast_compute(today=TODAY, unit_ids=[unit.pk])

    def life(t_c):
        return 2000.0 * 2 ** ((85.0 - t_c) / 10.0)

    expected = 20.0 / life(42.0) + 52.0 / life(30.0)
    np.testing.assert_allclose(run.result.hire_damage, expected, rtol=1e-9)


def test_the_refresh_stores_act_by_priority_and_actions(fleet):
    run = forecast_refresh(today=TODAY)
    stored = {f.unit.asset_tag: f for f in UnitForecast.objects.select_related("unit")}
    for f in stored.values():
        assert f.act_by is None or f.act_by >= TODAY
        actions = stored_positions(f)["action"]
        assert len(actions) == 2 and set(actions.tolist()) <= {T.LEAVE, T.MEASURE, T.REPLACE}
    # The 1981 unit's original parts are past the 30-year calendar limit of the default policy.
    assert stored["TR-0"].priority == 1
    assert set(stored_positions(stored["TR-0"])["action"].tolist()) == {T.REPLACE}
    assert stored["TR-2"].priority is None
    ranked = sorted(p for p in run.result.priority.tolist() if p)
    assert ranked == list(range(1, len(ranked) + 1))


def test_the_due_list_is_in_priority_order(fleet):
    forecast_refresh(today=TODAY)
    out = StringIO()
    call_command("due_list", "--csv", "--today", TODAY.isoformat(), stdout=out)
    rows = [line.split(",") for line in out.getvalue().strip().splitlines()]
    header, body = rows[0], rows[1:]
    priorities = [int(r[header.index("priority")]) for r in body]
    assert priorities == sorted(priorities) and priorities[0] == 1
    data = json.loads(_json_of("TR-0"))
    assert data[0]["priority"] == 1 and data[0]["act_by"] >= TODAY.isoformat()


def _json_of(tag):
    out = StringIO()
    call_command("forecast", "--json", "--unit", tag, "--today", TODAY.isoformat(), stdout=out)
    return out.getvalue()
