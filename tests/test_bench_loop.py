"""The workshop loop as services: intake, readings that move the forecast,
a recap at the bench, release, check-outs against the forecast, the audit
trail.  Physics values are checked against the physics API (and through it
against scipy in scheduling/tests/test_findings.py); these tests check that
the loop applies them as documented.
"""

import datetime as dt
import json
import zoneinfo
from io import StringIO

import numpy as np
import pytest
from django.core.exceptions import ValidationError
from django.core.management import call_command
from django.utils import timezone

from fleet.models import BenchVisit, CheckoutOverride, GearModel, Location, Position, Reading, Unit
from fleet.services import ServiceError, units_mark_changed
from front import bench, workflows
from scheduling import physics
from scheduling.services import forecast_compute, forecast_refresh
from tests.base import make_user

NOW = timezone.now()


def _pos(model, designator, **kw):
    values = dict(capacitance_uf=100, rated_voltage_v=25, rated_temp_c=85, rated_life_h=2000, esr_ohm=0.5,
                  diameter_mm=6.3, length_mm=11, operating_voltage_v=12)
    values.update(kw)
    return Position.objects.create(gear_model=model, designator=designator, **values)


@pytest.fixture
def unit(db):
    """An invented 1988 effects unit with a charge pump (C4 flying, C5 reservoir)."""
    store = Location.objects.create(name="Test store", profile="constant", constant_temp_c=22.0)
    model = GearModel.objects.create(maker="Test Maker", model_name="Echo 2", year_from=1986, year_to=1990,
                                     internal_rise_k=14.0)
    _pos(model, "C1")
    _pos(model, "C2", capacitance_uf=4.7, esr_ohm=4.0, role="signal_coupling", coupling_load_ohm=10_000,
         coupling_max_corner_hz=20)
    pump = dict(rated_voltage_v=16, rated_temp_c=85, rated_life_h=1000, diameter_mm=5, length_mm=11,
                pump_input_v=5.0, pump_load_a=0.02, pump_freq_hz=5000, pump_switch_ohm=46, pump_min_rail_v=3.25,
                operating_voltage_v=5, ripple_current_a=0.04, ripple_freq_hz=5000)
    _pos(model, "C4", role="pump_flying", pump_partner="C5", capacitance_uf=10, esr_ohm=3.5, **pump)
    _pos(model, "C5", role="pump_reservoir", pump_partner="C4", capacitance_uf=47, esr_ohm=1.2, **pump)
    u = workflows.unit_create(asset_tag="EC-0001", gear_model=model, year_made=2012, joined_on=dt.date(2020, 3, 1),
                              home_location=store)
    forecast_refresh(unit_ids=[u.pk])
    return u


@pytest.fixture
def tech(db):
    return make_user("technician", "tamsin.tech")


def on_bench(unit, tech):
    Unit.objects.filter(pk=unit.pk).update(status=Unit.Status.HOLD, hold_reason="Dry signal only")
    return bench.bench_intake(unit_id=unit.pk, notes="No effect on either output.", user=tech)


def predicted(unit, designator):
    run = forecast_compute(unit_ids=[unit.pk])
    return next(p for p in run.unit_dict(0)["positions"] if p["designator"] == designator)


# --- 1. intake -----------------------------------------------------------------

def test_intake_puts_a_held_unit_on_the_bench_with_who_when_and_notes(unit, tech):
    visit = on_bench(unit, tech)
    unit.refresh_from_db()
    assert unit.status == Unit.Status.BENCH
    assert (visit.opened_by, visit.came_from, visit.intake_notes) == (tech, "hold", "No effect on either output.")
    assert abs((visit.opened_at - timezone.now()).total_seconds()) < 60
    with pytest.raises(ServiceError, match="already on the bench"):
        bench.bench_intake(unit_id=unit.pk)


def test_a_unit_out_on_hire_cannot_come_to_the_bench(unit):
    workflows.rental_check_out(unit_id=unit.pk, job_ref="J-1", out_at=NOW - dt.timedelta(hours=2),
                               override_reason="Short studio session")
    with pytest.raises(ServiceError, match="out on hire"):
        bench.bench_intake(unit_id=unit.pk)
    assert not BenchVisit.objects.exists()


# --- 2. readings that cannot be right -------------------------------------------

@pytest.mark.parametrize("kwargs, field, words", [
    (dict(designator="C4", esr_ohm=0.0), "esr_ohm", "above zero"),
    (dict(designator="C4", esr_ohm=-1.0), "esr_ohm", "above zero"),
    (dict(designator="C4", esr_ohm=1.0), "esr_ohm", "well below a new part"),
    (dict(designator="C4", capacitance_uf=0.0), "capacitance_uf", "above zero"),
    (dict(designator="C4", capacitance_uf=22.0), "capacitance_uf", "far above"),
    (dict(designator="C4", leakage_ua=-3.0), "leakage_ua", "negative"),
    (dict(rail_name="-5V", rail_measured_v=3.4, rail_load_ma=20), "rail_measured_v", "wrong sign"),
    (dict(rail_name="+15V", rail_measured_v=-15.1), "rail_measured_v", "wrong sign"),
    (dict(rail_name="-5V", rail_measured_v=-5.5, rail_load_ma=20), "rail_measured_v", "more than the pump"),
    (dict(rail_name="-5V", rail_measured_v=-4.9, rail_load_ma=20), "rail_measured_v", "perfect capacitors"),
    (dict(rail_name="-5V", rail_measured_v=-3.0), "rail_load_ma", "load current"),
])
def test_a_reading_that_cannot_be_right_is_refused_with_a_message_on_its_field(unit, tech, kwargs, field, words):
    on_bench(unit, tech)
    with pytest.raises(ValidationError) as caught:
        bench.bench_reading_record(unit_id=unit.pk, user=tech, **kwargs)
    assert words in " ".join(caught.value.message_dict[field])
    assert not Reading.objects.exists()


def test_unknown_positions_and_units_off_the_bench_are_refused(unit, tech):
    with pytest.raises(ServiceError, match="not on the bench"):
        bench.bench_reading_record(unit_id=unit.pk, designator="C4", esr_ohm=5.0)
    on_bench(unit, tech)
    with pytest.raises(ServiceError, match="has no position C99"):
        bench.bench_reading_record(unit_id=unit.pk, designator="C99", esr_ohm=5.0)


# --- 3. readings move the forecast ------------------------------------------------

def test_reading_exactly_the_predicted_esr_leaves_the_damage_unchanged(unit, tech):
    on_bench(unit, tech)
    p = predicted(unit, "C1")
    out = bench.bench_reading_record(unit_id=unit.pk, designator="C1", esr_ohm=p["esr_ohm"], user=tech)
    # damage_from_esr(ESR0, ESR0 * 2**D) = D (physics API)
    assert physics.damage_from_esr(0.5, p["esr_ohm"]) == pytest.approx(p["damage"], rel=1e-5)
    before, after = out.moved()["C1"]
    assert after == pytest.approx(before, rel=1e-5)
    assert out.reading.predicted_esr_ohm == pytest.approx(p["esr_ohm"], rel=1e-6)


def test_reading_twice_the_predicted_esr_adds_exactly_one_to_the_damage(unit, tech):
    on_bench(unit, tech)
    p = predicted(unit, "C1")
    out = bench.bench_reading_record(unit_id=unit.pk, designator="C1", esr_ohm=2 * p["esr_ohm"], user=tech)
    before, after = out.moved()["C1"]
    assert after == pytest.approx(before + 1.0, rel=1e-6)  # ESR0 * 2**(D + 1) = 2 * ESR0 * 2**D
    # The part aged faster than predicted: its future rate takes measured / predicted (within the clip).
    run = forecast_compute(unit_ids=[unit.pk])
    i = next(i for i in run.rows_of(0) if run.fleet.pos_designator[run.fleet.position_index[i]] == "C1")
    assert run.result.readings.rate_factor[i] == pytest.approx(physics.rate_factor(after, before, 0.29), rel=1e-3)


def test_a_reading_that_confirms_the_predicted_wear_says_why_the_chance_of_a_fault_rose(unit, tech):
    from front.views.readings import reading_summary

    on_bench(unit, tech)
    p = predicted(unit, "C4")
    plain_before = forecast_compute(unit_ids=[unit.pk], frailty_sigma=0.0).result.risk[0]
    out = bench.bench_reading_record(unit_id=unit.pk, designator="C4", esr_ohm=p["esr_ohm"], user=tech)
    before, after = out.moved()["C4"]
    assert after == pytest.approx(before, rel=1e-5)  # the reading is the prediction
    assert out.after.risk - out.before.risk >= 0.05  # and still the chance rose (C4 is far past its limit)
    # The rise is the frailty's allowance going: without a frailty spread nothing moves.
    plain_after = forecast_compute(unit_ids=[unit.pk], frailty_sigma=0.0).result.risk[0]
    assert plain_after == pytest.approx(plain_before, rel=1e-6)  # the reading is stored to six digits
    words = reading_summary(out)
    assert "Why the chance rose: until now the forecast allowed that C4, still working, had aged slower" in words


def test_a_reading_that_finds_more_wear_or_moves_nothing_needs_no_explaining(unit, tech):
    from front.views.readings import reading_summary

    on_bench(unit, tech)
    p = predicted(unit, "C4")
    worse = bench.bench_reading_record(unit_id=unit.pk, designator="C4", esr_ohm=2 * p["esr_ohm"], user=tech)
    assert worse.after.risk > worse.before.risk
    assert "Why the chance rose" not in reading_summary(worse)
    q = predicted(unit, "C2")
    same = bench.bench_reading_record(unit_id=unit.pk, designator="C2", esr_ohm=q["esr_ohm"], user=tech)
    assert abs(same.after.risk - same.before.risk) < 0.05
    assert "Why the chance rose" not in reading_summary(same)


def test_esr_and_capacitance_of_one_reading_combine_by_inverse_variance(unit, tech):
    on_bench(unit, tech)
    out = bench.bench_reading_record(unit_id=unit.pk, designator="C2", esr_ohm=9.0, capacitance_uf=3.9, user=tech)
    expected, _ = physics.damage_from_readings(4.0, 9.0, 4.7e-6, 3.9e-6)
    assert out.after.positions["C2"]["damage"] == pytest.approx(expected, rel=1e-5)


def test_a_low_pump_rail_under_load_moves_both_pump_parts_as_the_inverter_model_says(unit, tech):
    on_bench(unit, tech)
    before = forecast_compute(unit_ids=[unit.pk]).unit_dict(0)["positions"]
    d = {p["designator"]: p["damage"] for p in before}
    out = bench.bench_reading_record(unit_id=unit.pk, rail_name="-5V", rail_measured_v=-2.0, rail_load_ma=20,
                                     user=tech)
    assert out.reading.pump_position.designator == "C4"
    expected = physics.pump_damage_from_rail(5.0, -2.0, 0.02, 5000, 10e-6, 47e-6, 3.5, 1.2, 46.0, d["C4"], d["C5"])
    moved = out.moved()
    assert moved["C4"][1] == pytest.approx(expected[0], rel=1e-5)
    assert moved["C5"][1] == pytest.approx(expected[1], rel=1e-5)
    assert out.after.risk > out.before.risk
    # the reading stored what the forecast predicted for that rail at that load
    assert -5.0 < out.reading.predicted_rail_v < -2.0


def test_the_predicted_rail_read_back_leaves_the_pump_parts_unchanged(unit, tech):
    on_bench(unit, tech)
    first = bench.bench_reading_record(unit_id=unit.pk, rail_name="-5V", rail_measured_v=-3.0, rail_load_ma=20)
    Reading.objects.all().delete()
    out = bench.bench_reading_record(unit_id=unit.pk, rail_name="-5V",
                                     rail_measured_v=round(first.reading.predicted_rail_v, 9), rail_load_ma=20)
    for before, after in out.moved().values():
        assert after == pytest.approx(before, rel=1e-6)


def test_with_no_frailty_spread_a_reading_moves_only_its_own_position(unit, tech):
    on_bench(unit, tech)
    base = forecast_compute(unit_ids=[unit.pk], frailty_sigma=0.0)
    bench.bench_reading_record(unit_id=unit.pk, designator="C1", esr_ohm=4.0, user=tech)
    after = forecast_compute(unit_ids=[unit.pk], frailty_sigma=0.0)
    a, b = base.unit_dict(0)["positions"], after.unit_dict(0)["positions"]
    for p, q in zip(a, b):
        if p["designator"] != "C1":
            assert (q["damage"], q["damage_threshold"]) == (p["damage"], p["damage_threshold"])
    assert after.result.readings.frailty_mean[0] == 0.0


def test_a_reading_updates_the_units_frailty_by_the_conjugate_rule_and_the_others_risk_follows(unit, tech):
    on_bench(unit, tech)
    plain = forecast_compute(unit_ids=[unit.pk])
    p = predicted(unit, "C1")
    bench.bench_reading_record(unit_id=unit.pk, designator="C1", esr_ohm=8 * p["esr_ohm"], user=tech)
    run = forecast_compute(unit_ids=[unit.pk])
    found = run.result.readings
    d_meas = p["damage"] + 3.0
    s_d = 0.2 / np.log(2.0)
    y = np.log(d_meas / p["damage"])
    s_y = np.sqrt(0.25**2 + (s_d / p["damage"]) ** 2)
    mean, sd = physics.frailty_posterior([0], [y], [s_y], 0.4, 1)
    assert found.frailty_mean[0] == pytest.approx(mean[0], rel=1e-4)
    assert found.frailty_sd[0] == pytest.approx(sd[0], rel=1e-4)
    # The other positions' damage stays, but their share of the risk rises with the unit's frailty:
    # the risk with the reading exceeds the one where C1's new damage carries no news for the others.
    no_news = forecast_compute(unit_ids=[unit.pk], frailty_sigma=0.0)
    assert run.result.risk[0] > plain.result.risk[0]
    assert found.frailty_mean[0] > 0 and no_news.result.readings.frailty_mean[0] == 0


def test_forecast_json_shows_the_latest_measured_values(unit, tech):
    on_bench(unit, tech)
    bench.bench_reading_record(unit_id=unit.pk, designator="C1", esr_ohm=1.7, capacitance_uf=82, user=tech)
    out = StringIO()
    call_command("forecast", "--unit", "EC-0001", "--json", stdout=out)
    positions = {p["designator"]: p for p in json.loads(out.getvalue())[0]["positions"]}
    assert positions["C1"]["measured_esr_ohm"] == 1.7
    assert positions["C1"]["measured_capacitance_f"] == pytest.approx(82e-6)
    assert positions["C1"]["measured_on"] == timezone.localdate().isoformat()
    assert positions["C2"]["measured_esr_ohm"] is None and positions["C2"]["measured_on"] is None


# --- 4. recap at the bench ------------------------------------------------------

def test_suggested_replacements_follow_the_house_rules(unit):
    caps = bench.recap_positions(unit_id=unit.pk, choice="role", role="pump_flying")
    ratings, low_esr = bench.replacement_suggestion(caps[0])
    assert ratings["capacitance_uf"] == 10 and ratings["rated_voltage_v"] >= 16
    assert ratings["rated_temp_c"] == 105 and ratings["rated_life_h"] >= 2000
    assert ratings["diameter_mm"] <= 5 and low_esr
    assert [c.position.designator for c in bench.recap_positions(unit_id=unit.pk)] == ["C1", "C2", "C4", "C5"]
    with pytest.raises(ServiceError, match="no position C9"):
        bench.recap_positions(unit_id=unit.pk, choice="pick", designators=["C4", "C9"])


def test_a_recap_at_the_bench_starts_the_new_parts_afresh_and_keeps_removed_readings(unit, tech):
    on_bench(unit, tech)
    bench.bench_reading_record(unit_id=unit.pk, designator="C4", esr_ohm=14.0, user=tech)
    record = bench.bench_recap(unit_id=unit.pk, replacements={"C4": {}, "C5": {"rated_life_h": 5000}},
                               removed_readings={"C5": {"esr_ohm": 3.3}}, user=tech, notes="Pump pair")
    assert record.signed_off_by == tech and record.signed_off_at is not None
    assert record.bench_visit.unit_id == unit.pk
    assert sorted(p.position.designator for p in record.replaced.all()) == ["C4", "C5"]
    # readings of the parts taken out are findings now, not about the new parts
    assert set(Reading.objects.values_list("part_removed", flat=True)) == {True}
    assert record.readings.get().esr_ohm == 3.3
    after = {p["designator"]: p for p in forecast_compute(unit_ids=[unit.pk]).unit_dict(0)["positions"]}
    assert after["C4"]["damage"] < 0.01 and after["C4"]["measured_esr_ohm"] is None


def test_a_replacement_that_will_not_fit_is_refused_and_nothing_is_written(unit, tech):
    on_bench(unit, tech)
    with pytest.raises(ServiceError, match="wider than the 5 mm"):
        bench.bench_recap(unit_id=unit.pk, replacements={"C4": {"diameter_mm": 6.3}}, user=tech)
    with pytest.raises(ServiceError, match="below the circuit"):
        bench.bench_recap(unit_id=unit.pk, replacements={"C1": {"rated_voltage_v": 10}}, user=tech)
    assert not unit.service_records.exists()


# --- 5. release -----------------------------------------------------------------------

def test_release_makes_the_unit_available_or_keeps_it_held_with_a_reason(unit, tech):
    on_bench(unit, tech)
    visit = bench.bench_release(unit_id=unit.pk, keep_held_reason="Waiting for a 47 µF 16 V part", user=tech)
    unit.refresh_from_db()
    assert (unit.status, unit.hold_reason) == (Unit.Status.HOLD, "Waiting for a 47 µF 16 V part")
    assert visit.outcome == BenchVisit.Outcome.HELD
    bench.bench_intake(unit_id=unit.pk, user=tech)
    bench.bench_release(unit_id=unit.pk, user=tech)
    unit.refresh_from_db()
    assert (unit.status, unit.hold_reason) == (Unit.Status.AVAILABLE, "")
    with pytest.raises(ServiceError, match="not on the bench"):
        bench.bench_release(unit_id=unit.pk)


# --- 6. check-out against the forecast -----------------------------------------------

def test_a_check_out_against_the_forecast_needs_a_reason_and_records_it(unit):
    from scheduling.models import UnitForecast

    UnitForecast.objects.filter(unit=unit).update(status="due")
    desk = make_user("desk", "dora.desk")
    with pytest.raises(workflows.OverrideNeeded, match="give the reason"):
        workflows.rental_check_out(unit_id=unit.pk, job_ref="J-9", user=desk)
    rental = workflows.rental_check_out(unit_id=unit.pk, job_ref="J-9", user=desk,
                                        override_reason="Workshop checked the pump rail this morning")
    o = CheckoutOverride.objects.get()
    assert (o.rental, o.decided_by, o.forecast_status) == (rental, desk, "due")
    assert o.reason == "Workshop checked the pump rail this morning"


# --- audit trail -------------------------------------------------------------------------

def test_the_audit_trail_names_who_changed_the_unit_and_its_parts(unit, tech):
    on_bench(unit, tech)
    bench.bench_recap(unit_id=unit.pk, replacements={"C4": {}}, user=tech)
    unit_changes = unit.history.filter(history_user=tech)
    assert unit_changes.filter(status="bench").exists()
    cap = unit.capacitors.get(position__designator="C4")
    assert cap.history.filter(history_user=tech, is_original=False).exists()


def test_readings_stay_with_their_unit_when_another_unit_cannot_be_forecast(unit, tech):
    from fleet.models import UnitCapacitor

    other = workflows.unit_create(asset_tag="EC-0002", gear_model=unit.gear_model, year_made=2012,
                                  joined_on=dt.date(2020, 3, 1), home_location=unit.home_location)
    on_bench(other, tech)
    p = predicted(other, "C1")
    bench.bench_reading_record(unit_id=other.pk, designator="C1", esr_ohm=2 * p["esr_ohm"], user=tech)
    # A part no one makes (1 pF in a 6.3 mm can) sets the first unit aside; the second's capacitor
    # rows move up, and its reading must move with them.
    UnitCapacitor.objects.filter(unit=unit, position__designator="C2").update(capacitance_uf=1e-6)
    units_mark_changed(unit_ids=[unit.pk])  # as every writer of fitted parts does
    run = forecast_refresh()
    assert [run.fleet.asset_tag[u] for u in range(run.fleet.n_units)] == ["EC-0002"]
    assert [u.asset_tag for u in run.unforecastable] == ["EC-0001"]
    c1 = next(q for q in run.unit_dict(0)["positions"] if q["designator"] == "C1")
    assert c1["damage"] == pytest.approx(p["damage"] + 1.0, rel=1e-5)
    assert c1["measured_esr_ohm"] == pytest.approx(2 * p["esr_ohm"], rel=1e-6)


def test_the_engine_reads_the_readings_that_move_the_forecast_with_their_local_day(unit):
    """The loader's plain-cursor read of the readings (scheduling.loader._readings)
    against the same question asked through the ORM, whose times are aware:
    the same rows, and each reading's day the local one (a reading at 00:30
    British Summer Time is on the day after its UTC date)."""
    from django.db.models import Q

    from scheduling.loader import _readings

    c4, c5 = (Position.objects.get(gear_model=unit.gear_model, designator=d) for d in ("C4", "C5"))
    london = zoneinfo.ZoneInfo("Europe/London")
    at = [dt.datetime(2026, 7, 11, 0, 30, tzinfo=london), dt.datetime(2026, 1, 5, 23, 59, 59, 900000, tzinfo=london),
          dt.datetime(2026, 3, 29, 1, 30, tzinfo=dt.timezone.utc)]
    made = [
        Reading.objects.create(unit=unit, kind=Reading.Kind.CAPACITOR, taken_at=at[0], position=c4, esr_ohm=4.2),
        Reading.objects.create(unit=unit, kind=Reading.Kind.CAPACITOR, taken_at=at[1], position=c5,
                               capacitance_uf=40.0),
        Reading.objects.create(unit=unit, kind=Reading.Kind.RAIL, taken_at=at[2], rail_name="-5V",
                               rail_measured_v=-4.1, rail_load_ma=10.0, rail_input_v=5.0, pump_position=c4),
        # Not read: a part since replaced, a rail without a load, a capacitor with neither figure.
        Reading.objects.create(unit=unit, kind=Reading.Kind.CAPACITOR, taken_at=at[0], position=c5, esr_ohm=9.0,
                               part_removed=True),
        Reading.objects.create(unit=unit, kind=Reading.Kind.RAIL, taken_at=at[0], rail_name="-5V",
                               rail_measured_v=-4.0, pump_position=c4),
        Reading.objects.create(unit=unit, kind=Reading.Kind.CAPACITOR, taken_at=at[0], position=c4, leakage_ua=3.0),
    ]
    orm = list(Reading.objects.filter(part_removed=False).filter(
        Q(kind="capacitor", esr_ohm__isnull=False) | Q(kind="capacitor", capacitance_uf__isnull=False)
        | Q(kind="rail", pump_position__isnull=False, rail_load_ma__gt=0)).filter(unit_id__in=[unit.pk])
        .order_by("unit_id", "taken_at", "id").values_list(
        "unit_id", "kind", "position_id", "taken_at", "esr_ohm", "capacitance_uf", "pump_position_id",
        "rail_measured_v", "rail_input_v", "rail_load_ma"))
    read = _readings([unit.pk])
    assert len(read["rows"]) == len(orm) == 3 and {r[1] for r in read["rows"]} == {"capacitor", "rail"}
    assert [r[:3] + r[4:] for r in read["rows"]] == [r[:3] + r[4:] for r in orm]
    # The local days: 5 Jan (GMT), 29 Mar (01:30 UTC is 02:30 BST, the day the clocks go forward), 11 Jul (BST).
    epoch = dt.date(1970, 1, 1)
    assert read["days"].tolist() == [float((d - epoch).days) for d in
                                     (dt.date(2026, 1, 5), dt.date(2026, 3, 29), dt.date(2026, 7, 11))]
    assert read["unit_id"].tolist() == [unit.pk] * 3 and len(made) == 6
