"""The life engine end to end: thermal histories, forecast, stored results.

Values checked against outside sources name the source; the rest checks the
engine's bookkeeping (incremental histories equal rebuilt ones, the fast path
equals the general one, results are idempotent, queries do not grow with the
fleet).
"""

import datetime as dt
import json
from io import StringIO

import numpy as np
import pytest
from django.core.management import CommandError, call_command
from django.utils import timezone

from front import workflows as services
from fleet.models import GearModel, Location, MaintenancePolicy, Position, Unit
from scheduling import histogram as H
from scheduling import exposure, physics, thermal
from scheduling.forecast import EngineOptions, Policy, compute
from scheduling.loader import load_fleet
from scheduling.models import ThermalHistory, UnitForecast
from scheduling.services import forecast_compute, forecast_refresh, stored_positions

TODAY = dt.date(2026, 12, 1)


def aware(*args):
    return dt.datetime(*args, tzinfo=dt.timezone.utc)


def general(model, designator, **kw):
    values = dict(capacitance_uf=100, rated_voltage_v=25, rated_temp_c=85, rated_life_h=2000, esr_ohm=0.5,
                  diameter_mm=6.3, length_mm=11)
    values.update(kw)
    return Position.objects.create(gear_model=model, designator=designator, **values)


def pump_pair(model, esr_ohm=0.5, min_rail_v=4.0):
    common = dict(capacitance_uf=10, rated_voltage_v=16, rated_temp_c=105, rated_life_h=2000, esr_ohm=esr_ohm,
                  diameter_mm=5, length_mm=11, pump_input_v=5.0, pump_load_a=0.01, pump_freq_hz=5000,
                  pump_switch_ohm=46, pump_min_rail_v=min_rail_v)
    Position.objects.create(gear_model=model, designator="C31", role="pump_flying", pump_partner="C32", **common)
    Position.objects.create(gear_model=model, designator="C32", role="pump_reservoir", pump_partner="C31", **common)


@pytest.fixture
def store(db):
    return Location.objects.create(name="Test store", profile="constant", constant_temp_c=20.0)


@pytest.fixture
def attic(db):
    return Location.objects.create(name="Test attic", profile="monthly",
                                   monthly_temps_c=[18, 18, 20, 23, 27, 31, 34, 33, 29, 24, 20, 18])


@pytest.fixture
def effects_model(db):
    model = GearModel.objects.create(maker="Test Maker", model_name="Echo 1", year_from=1985, year_to=1988,
                                     internal_rise_k=10.0)
    general(model, "C1")
    general(model, "C2", capacitance_uf=4.7, esr_ohm=4.0, role="signal_coupling", coupling_load_ohm=10_000,
            coupling_max_corner_hz=20)
    pump_pair(model)
    return model


def hire(unit, start, days, powered_hours, ambient_c):
    # Tests hire one unit many times; a unit the check-in held for recap is
    # cleared first, as the bench would after looking at it.
    Unit.objects.filter(pk=unit.pk, status=Unit.Status.HOLD).update(status=Unit.Status.AVAILABLE)
    services.rental_check_out(unit_id=unit.pk, job_ref="T", out_at=start, override_reason="test hire")
    services.rental_check_in(unit_id=unit.pk, in_at=start + dt.timedelta(days=days), venue_ambient_c=ambient_c,
                             powered_hours=powered_hours)


def make_unit(model, location, tag="T-0001", year=2018, joined=dt.date(2023, 1, 1), **kw):
    return services.unit_create(asset_tag=tag, gear_model=model, year_made=year, joined_on=joined,
                                home_location=location, **kw)


# --- thermal histories --------------------------------------------------------

def test_incremental_history_equals_rebuilt_history(effects_model, attic):
    unit = make_unit(effects_model, attic)
    start = aware(2023, 2, 1, 9)
    for k in range(12):
        hire(unit, start + dt.timedelta(days=27 * k), days=3, powered_hours=20 + k, ambient_c=22 + k)
    thermal.thermal_advance_storage(until=aware(2024, 6, 1))
    h = ThermalHistory.objects.get(unit=unit)
    incremental = H.from_bytes(h.powered), H.from_bytes(h.unpowered)
    thermal.thermal_rebuild(until=aware(2024, 6, 1))
    h.refresh_from_db()
    np.testing.assert_allclose(H.from_bytes(h.powered), incremental[0], rtol=1e-12)
    np.testing.assert_allclose(H.from_bytes(h.unpowered), incremental[1], rtol=1e-12)


def test_history_accounts_for_every_hour_since_manufacture(effects_model, store):
    unit = make_unit(effects_model, store)
    hire(unit, aware(2023, 3, 1, 9), days=4, powered_hours=30, ambient_c=31)
    until = aware(2024, 1, 1)
    thermal.thermal_advance_storage(until=until)
    h = ThermalHistory.objects.get(unit=unit)
    total = H.from_bytes(h.powered).sum() + H.from_bytes(h.unpowered).sum()
    expected = (until - exposure.manufactured_at(unit.year_made)).total_seconds() / 3600
    assert total == pytest.approx(expected, rel=1e-9)
    # the hire's powered hours sit at venue ambient + the model's internal rise (31 + 10 degC)
    assert H.from_bytes(h.powered)[H.bin_index(41.0)] == pytest.approx(30.0)


def test_storage_only_damage_matches_the_ten_kelvin_rule_table(db):
    """2000 h @ 105 degC used at 65 degC lasts 32 000 h (references.md §1,
    computed from the 10 K rule; a manufacturer's primer states the rule)."""
    warm = Location.objects.create(name="Oven", profile="constant", constant_temp_c=65.0)
    model = GearModel.objects.create(maker="Test Maker", model_name="Box", year_from=2020, year_to=2020,
                                     internal_rise_k=0.0)
    general(model, "C1", rated_temp_c=105, rated_life_h=2000)
    unit = services.unit_create(asset_tag="OV-1", gear_model=model, year_made=2020, joined_on=dt.date(2020, 7, 1),
                                home_location=warm, prior_powered_h_per_year=0, prior_storage_c=65.0)
    start = exposure.manufactured_at(2020)
    until = start + dt.timedelta(hours=16_000)
    thermal.thermal_advance_storage(until=until)
    run = forecast_compute(today=until.date(), unit_ids=[unit.pk])
    # 16 000 h of 32 000 h, plus under a day of projection between `until` and midnight
    assert run.result.damage[0] == pytest.approx(0.5, abs=0.5 * 24 / 32_000)


# --- the forecast -------------------------------------------------------------

def test_pump_capacitor_with_small_margin_is_named_first(effects_model, attic):
    # Small cans with a few ohms of ESR: the data sheet of a classic converter
    # warns electrolytics "may have ESRs as high as 10 ohm" (references.md §6).
    Position.objects.filter(gear_model=effects_model, designator__in=["C31", "C32"]).update(
        pump_min_rail_v=4.1, esr_ohm=3.0, rated_temp_c=85, rated_life_h=1000)
    unit = make_unit(effects_model, attic, year=2022)
    for k in range(20):
        hire(unit, aware(2023, 2, 1, 9) + dt.timedelta(days=30 * k), 4, 40, 30)
    run = forecast_refresh(today=TODAY)
    d = run.unit_dict(0)
    by_des = {p["designator"]: p for p in d["positions"]}
    # The rail needs |Vout| >= 4.1 V.  Both pump parts age together, so the
    # pair's thresholds are their damages at the moment the rail reaches -4.1 V
    # (inverter output formula, references.md §6):
    pos = by_des["C31"]
    d_star = pos["damage_threshold"]
    d_res = by_des["C32"]["damage_threshold"]
    rail = physics.inverter_output_v(5.0, 0.01, 5000, physics.capacitance_at_damage(10e-6, d_star),
                                     physics.capacitance_at_damage(10e-6, d_res),
                                     physics.esr_at_damage(3.0, d_star), physics.esr_at_damage(3.0, d_res), 46)
    assert rail == pytest.approx(-4.1, rel=1e-6)
    assert d_star < 1.0  # tighter than the general end-of-life limit
    firsts = sorted(d["positions"], key=lambda p: p["reaches_threshold_on"] or "9999")

    assert firsts[0]["designator"] == "C31"
    assert any(r.startswith("C31 pump flying: negative rail") and "below 4.1 V" in r for r in d["reasons"])


def test_ten_kelvin_fast_path_equals_the_general_histogram_sum(effects_model, attic, store):
    a = make_unit(effects_model, attic, tag="T-A")
    b = make_unit(effects_model, store, tag="T-B")
    hire(a, aware(2023, 5, 1, 9), 5, 60, 33)
    services.service_record_recap(unit_id=b.pk, performed_on=dt.date(2023, 9, 1),
                                  replacements={"C1": {"rated_temp_c": 105, "rated_life_h": 5000}})
    hire(b, aware(2024, 1, 10, 9), 3, 20, 21)
    thermal.thermal_advance_storage(until=aware(2026, 12, 1))
    fa = load_fleet(today=TODAY)
    fast = compute(fa, today=TODAY)
    # General path: gather each capacitor's histograms and sum hours / life bin by bin.
    rise = physics.ripple_rise_k(np.nan_to_num(fa.pos_ripple_a[fa.position_index]), fa.esr0_ohm, fa.diameter_mm,
                                 fa.length_mm)
    hp = fa.hist_powered[fa.unit_index].copy()
    hu = fa.hist_unpowered[fa.unit_index].copy()
    has = fa.baseline_index >= 0
    hp[has] -= fa.snap_powered[fa.baseline_index[has]]
    hu[has] -= fa.snap_unpowered[fa.baseline_index[has]]
    life_p = physics.life_hours_10k(fa.rated_life_h[:, None], fa.rated_temp_c[:, None],
                                    H.BIN_CENTRES_C[None, :] + rise[:, None])
    life_u = physics.life_hours_10k(fa.rated_life_h[:, None], fa.rated_temp_c[:, None], H.BIN_CENTRES_C[None, :])
    slow = (hp / life_p).sum(axis=1) + (hu / life_u).sum(axis=1)
    since = np.maximum(fast.today_day - np.maximum(fa.accounted_day[fa.unit_index], fa.installed_day), 0)
    np.testing.assert_allclose(fast.damage - fast.rate_per_day * since, slow, rtol=1e-10)
    # the recapped C1 of unit B starts afresh: less damage than B's original C2 in the same box
    assert b.capacitors.get(position__designator="C1").is_original is False


def test_risk_lies_in_zero_one_and_rises_with_the_horizon(effects_model, attic):
    make_unit(effects_model, attic)
    fa = load_fleet(today=TODAY)
    risks = [compute(fa, today=TODAY, policy=Policy(horizon_days=h)).risk[0] for h in (30, 90, 365, 3650)]
    assert all(0.0 <= r <= 1.0 for r in risks)
    assert risks == sorted(risks) and risks[-1] > risks[0]


def test_unit_risk_without_frailty_equals_the_product_rule_over_its_positions(effects_model, attic):
    make_unit(effects_model, attic)
    fa = load_fleet(today=TODAY)
    pol = Policy(horizon_days=365)
    r = compute(fa, today=TODAY, policy=pol, options=EngineOptions(frailty_sigma=0.0))
    later = r.damage + r.rate_per_day * 365
    f = physics.conditional_failure_probability(r.damage, later, r.threshold, EngineOptions().weibull_shape)
    assert r.risk[0] == pytest.approx(physics.unit_failure_probability(f), rel=1e-9)


def test_unit_risk_with_frailty_is_the_lognormal_mixture_of_the_product_rule(effects_model, attic):
    """Every position's damage is Z times the prediction, ln Z ~ N(0, sigma):
    the risk given the unit works now is E[S(later | Z)] / E[S(now | Z)],
    here integrated with scipy.integrate.quad over scipy.stats.lognorm."""
    from scipy import integrate, stats

    make_unit(effects_model, attic)
    fa = load_fleet(today=TODAY)
    options = EngineOptions(frailty_sigma=0.4)
    r = compute(fa, today=TODAY, policy=Policy(horizon_days=365), options=options)
    later = r.damage + r.rate_per_day * 365
    beta = options.weibull_shape

    def survival(z, damage):
        f = physics.failure_probability(z * damage, r.threshold, beta)
        return 1.0 - physics.unit_failure_probability(f)

    def mixture(damage):
        return integrate.quad(lambda z: stats.lognorm.pdf(z, 0.4) * survival(z, damage), 0, np.inf,
                              epsabs=0, epsrel=1e-11, limit=400)[0]

    expected = 1.0 - mixture(later) / mixture(r.damage)
    assert r.risk[0] == pytest.approx(expected, rel=1e-6)
    plain = compute(fa, today=TODAY, policy=Policy(horizon_days=365), options=EngineOptions(frailty_sigma=0.0))
    assert r.risk[0] != pytest.approx(plain.risk[0], rel=1e-3)  # the spread does change the answer


def test_hot_attic_ages_a_unit_faster_than_the_cool_store(effects_model, attic, store):
    make_unit(effects_model, attic, tag="T-HOT")
    make_unit(effects_model, store, tag="T-COOL")
    run = forecast_compute(today=TODAY)
    damage = {run.fleet.asset_tag[u]: run.result.damage[run.rows_of(u)].max() for u in range(2)}
    assert damage["T-HOT"] > damage["T-COOL"]


def test_arrhenius_law_and_feedback_switch_change_the_numbers(effects_model, attic):
    unit = make_unit(effects_model, attic)
    Position.objects.filter(designator="C1").update(ripple_current_a=0.3)
    unit.capacitors.filter(position__designator="C1").update(esr_ohm=0.5)
    hire(unit, aware(2023, 5, 1, 9), 5, 100, 33)
    base = forecast_compute(today=TODAY)
    fb = forecast_compute(today=TODAY, esr_feedback=True)
    arr = forecast_compute(today=TODAY, law="arrhenius", activation_energy_ev=0.8315)
    i = [base.fleet.pos_designator[p] for p in base.fleet.position_index].index("C1")
    assert fb.result.damage[i] > base.result.damage[i]          # hotter as ESR grows
    assert arr.result.damage[i] != pytest.approx(base.result.damage[i], rel=1e-3)


def test_calendar_age_limit_makes_an_original_unit_due(effects_model, store):
    make_unit(effects_model, store, year=1986)
    MaintenancePolicy.objects.create(name="strict", active=True, calendar_age_years=40)
    run = forecast_refresh(today=TODAY)
    assert run.unit_dict(0)["due_date"] <= "2026-07-01"
    assert run.unit_dict(0)["status"] == "overdue"
    assert any("40 years" in r for r in run.unit_dict(0)["reasons"])


def test_refresh_is_idempotent_and_skips_retired_units(effects_model, store):
    a = make_unit(effects_model, store, tag="T-A")
    b = make_unit(effects_model, store, tag="T-B")
    forecast_refresh(today=TODAY)
    first = {f.unit_id: (f.status, f.due_date, f.risk, bytes(f.positions)) for f in UnitForecast.objects.all()}
    forecast_refresh(today=TODAY)
    second = {f.unit_id: (f.status, f.due_date, f.risk, bytes(f.positions)) for f in UnitForecast.objects.all()}
    assert first == second and len(first) == 2
    Unit.objects.filter(pk=b.pk).update(status=Unit.Status.RETIRED)
    forecast_refresh(today=TODAY)
    assert list(UnitForecast.objects.values_list("unit_id", flat=True)) == [a.pk]
    assert len(stored_positions(UnitForecast.objects.get(unit=a))) == 4


def test_storage_reform_flag_after_long_unpowered_storage(effects_model, store):
    make_unit(effects_model, store, joined=dt.date(2023, 1, 1))
    run = forecast_compute(today=TODAY)  # never hired since joining: about 47 months unpowered
    assert bool(run.result.storage_reform[0])
    assert any("reform" in r for r in run.result.reasons[0])


def test_queries_do_not_grow_with_the_fleet(effects_model, store, django_assert_max_num_queries):
    for k in range(2):
        make_unit(effects_model, store, tag=f"S-{k}")
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    with CaptureQueriesContext(connection) as small:
        forecast_refresh(today=TODAY)
    for k in range(2, 12):
        make_unit(effects_model, store, tag=f"S-{k}")
    with CaptureQueriesContext(connection) as large:
        forecast_refresh(today=TODAY)
    assert len(large.captured_queries) == len(small.captured_queries)


def test_check_in_refreshes_the_units_forecast(effects_model, store):
    unit = make_unit(effects_model, store)
    assert not UnitForecast.objects.filter(unit=unit).exists()
    hire(unit, aware(2026, 11, 20, 9), 2, 10, 25)
    assert UnitForecast.objects.filter(unit=unit).exists()


# --- commands -----------------------------------------------------------------

def test_forecast_command_prints_json_per_unit(effects_model, store):
    make_unit(effects_model, store, tag="T-J")
    out = StringIO()
    call_command("forecast", "--json", "--unit", "t-j", "--today", "2026-12-01", stdout=out)
    data = json.loads(out.getvalue())
    assert [d["asset_tag"] for d in data] == ["T-J"]
    keys = {"asset_tag", "status", "due_date", "risk", "horizon_days", "reasons", "positions", "act_by",
            "priority"}
    assert keys <= set(data[0])
    assert {p["designator"] for p in data[0]["positions"]} == {"C1", "C2", "C31", "C32"}
    assert set(data[0]["positions"][0]) == {"designator", "role", "damage", "esr_ohm", "capacitance_f",
                                            "damage_threshold", "reaches_threshold_on", "action",
                                            "measured_esr_ohm", "measured_capacitance_f", "measured_on"}
    assert data[0]["act_by"] is None or data[0]["act_by"] >= "2026-12-01"
    assert {p["action"] for p in data[0]["positions"]} <= {"replace", "measure", "leave"}


def test_forecast_command_passes_the_scatter_options_to_the_engine(effects_model, attic):
    make_unit(effects_model, attic, tag="T-S")

    def risk(*args):
        out = StringIO()
        call_command("forecast", "--json", "--today", "2026-12-01", *args, stdout=out)
        return json.loads(out.getvalue())[0]["risk"]

    plain = risk("--frailty-sigma", "0")
    assert plain != pytest.approx(risk(), rel=1e-3)
    assert plain != pytest.approx(risk("--frailty-sigma", "0", "--weibull-shape", "5"), rel=1e-3)


def test_due_list_orders_most_urgent_first_and_writes_csv(effects_model, store, attic):
    make_unit(effects_model, attic, tag="T-OLD", year=1985)
    make_unit(effects_model, store, tag="T-NEW", year=2018)
    MaintenancePolicy.objects.create(name="p", active=True, calendar_age_years=39)
    out = StringIO()
    call_command("due_list", "--csv", "--within", "3650", "--today", "2026-12-01", stdout=out)
    lines = out.getvalue().strip().splitlines()
    header = lines[0].split(",")
    assert header[:2] == ["priority", "asset_tag"]
    rows = [dict(zip(header, line.split(","))) for line in lines[1:]]
    assert rows[0]["asset_tag"] == "T-OLD" and rows[0]["forecast"] == "overdue" and rows[0]["priority"] == "1"
    assert all(r["forecast"] != "overdue" for r in rows[1:])


@pytest.mark.parametrize("args, message", [
    (["--unit", "NO-SUCH"], "No unit has the asset tag"),
    (["--today", "yesterday"], "--today must be a date"),
    (["--law", "arrhenius"], "needs --activation-energy"),
    (["--activation-energy", "0.7"], "only applies with --law arrhenius"),
    (["--weibull-shape", "0"], "--weibull-shape must be above zero"),
    (["--frailty-sigma", "-0.1"], "--frailty-sigma must be zero or above"),
    (["--weibull-shape", "8", "--frailty-sigma", "0.5"], "must not exceed 3"),
])
def test_forecast_command_rejects_bad_arguments(db, args, message):
    with pytest.raises(CommandError, match=message):
        call_command("forecast", *args, stdout=StringIO())


def test_due_list_rejects_negative_days(db):
    with pytest.raises(CommandError, match="zero or more"):
        call_command("due_list", "--within", "-1", stdout=StringIO())


def test_engine_options_reject_a_bad_law():
    with pytest.raises(ValueError, match="law"):
        EngineOptions(law="guess")
    with pytest.raises(ValueError, match="activation_energy_ev"):
        EngineOptions(law="arrhenius", activation_energy_ev=0)


def test_check_in_holds_a_unit_the_forecast_calls_overdue(effects_model, store):
    unit = make_unit(effects_model, store, year=1980)
    MaintenancePolicy.objects.create(name="strict", active=True, calendar_age_years=40)
    hire(unit, aware(2026, 11, 20, 9), 2, 10, 25)
    unit.refresh_from_db()
    assert UnitForecast.objects.get(unit=unit).status == "overdue"
    assert unit.status == Unit.Status.HOLD


def test_check_in_leaves_a_healthy_unit_available(effects_model, store):
    unit = make_unit(effects_model, store, year=2024, joined=dt.date(2025, 1, 1))
    hire(unit, aware(2026, 11, 20, 9), 2, 10, 25)
    unit.refresh_from_db()
    assert UnitForecast.objects.get(unit=unit).status == "ok"
    assert unit.status == Unit.Status.AVAILABLE


def test_a_stored_forecast_in_an_older_layout_reads_as_empty(effects_model, store):
    unit = make_unit(effects_model, store)
    forecast_refresh(today=TODAY)
    UnitForecast.objects.filter(unit=unit).update(positions=b"\x00" * 7)
    assert len(stored_positions(UnitForecast.objects.get(unit=unit))) == 0


@pytest.mark.parametrize("law, ea", [("10k", None), ("arrhenius", 0.8315)])
def test_equivalent_temperature_inverts_the_life_law(law, ea):
    """The feedback path's constant equivalent temperature must give back the
    life it came from under physics.life_hours_10k / life_hours_arrhenius."""
    from scheduling.forecast import _equivalent_temp_c

    opts = EngineOptions(law=law, activation_energy_ev=ea)
    life = np.array([5_000.0, 64_000.0, 400_000.0])
    temp = _equivalent_temp_c(life, 2000.0, 85.0, opts)
    back = (physics.life_hours_10k(2000.0, 85.0, temp) if law == "10k"
            else physics.life_hours_arrhenius(2000.0, 85.0, temp, ea))
    np.testing.assert_allclose(back, life, rtol=1e-9)


def test_recent_use_counts_hours_out_from_the_hire_times(effects_model, store):
    """Hours out on hire come from the database's own date arithmetic."""
    from scheduling.loader import recent_use

    unit = make_unit(effects_model, store)
    hire(unit, aware(2026, 10, 1, 9), days=3, powered_hours=20, ambient_c=30)
    powered, out, ambient, hires = recent_use([unit.pk], TODAY)[unit.pk]
    assert (powered, ambient, hires) == (20.0, 30.0, 1)
    assert out == pytest.approx(72.0, abs=1e-6)


def test_ten_kelvin_fast_path_for_unpowered_rates_equals_the_plain_sum(effects_model, attic, store):
    """The per-unit factorisation of the 10 K rule for storage and hire-off time
    gives the same rate as the month-by-month, part-by-part sum."""
    from scheduling.forecast import _unpowered_per_year, projected_use

    make_unit(effects_model, attic, tag="T-A")
    make_unit(effects_model, store, tag="T-B", year=1990)
    fa = load_fleet(today=TODAY)
    p, o, a = projected_use(fa)
    frac = np.maximum(1.0 - o / 8766.0, 0.0)
    opts = EngineOptions()
    fast = _unpowered_per_year(fa, o - p, a, frac, opts)
    plain = _unpowered_per_year(fa, o - p, a, frac, opts, factorise=False)
    assert np.all(plain > 0)
    np.testing.assert_allclose(fast, plain, rtol=1e-12)
