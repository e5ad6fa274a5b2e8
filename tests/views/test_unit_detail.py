"""The unit page: the technician's full page (actions first, the unit's own
safety, the life chart, hires and service history) and the desk's short card."""

import datetime as dt
import re

from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import GearModel, Measurement, Position, Role, Unit
from front.workflows import rental_check_in, rental_check_out, service_record_recap
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh
from tests.base import make_unit


def detail(client, tag="NMB-0001", **params):
    return client.get(reverse("unit_detail", args=[tag]), params)


def test_each_capacitor_reads_with_its_own_symbols(client, users, fleet):
    forecast_refresh(unit_ids=[fleet.unit.pk])
    client.force_login(users.technician)
    response = detail(client)
    assert response.status_code == 200
    rows = {r["designator"]: r for r in response.context["rows"]}
    assert set(rows) == {"C1", "C7", "C12"}
    assert rows["C1"]["part"] == "2200 µF 35 V 85 °C"
    assert rows["C1"]["endurance"] == "2,000 h"
    assert rows["C12"]["part"] == "470 nF 63 V 105 °C"
    text = response.content.decode()
    # No value written with a plain "u" (a random CSRF token may hold "uF").
    assert "4.7 µF" in text and not re.search(r"\d\s*uF\b", text)
    assert "Supply reservoir" in text and "Signal coupling" in text


def test_the_action_comes_first_and_each_position_has_one(client, users, fleet):
    forecast_refresh(unit_ids=[fleet.unit.pk])
    client.force_login(users.technician)
    response = detail(client)
    text = response.content.decode()
    headers = re.findall(r"<th[^>]*>([^<]+)</th>", text[text.index('class="grid caps'):])
    assert headers[0].startswith("Action")
    actions = [r["action_name"] for r in response.context["rows"]]
    assert set(actions) <= {"replace", "measure", "leave"} and len(actions) == 3
    order = {"replace": 0, "measure": 1, "leave": 2}
    assert actions == sorted(actions, key=order.get)
    assert "999" not in text


def test_grouped_by_role_shows_one_heading_per_role(client, users, fleet):
    forecast_refresh(unit_ids=[fleet.unit.pk])
    client.force_login(users.technician)
    response = detail(client, view="role")
    labels = [label for label, _ in response.context["groups"]]
    # the reservoir hurts a hire more than decoupling, decoupling more than coupling (parameters.ROLE_HIRE_IMPACT)
    assert labels == ["Supply reservoir", "Supply decoupling", "Signal coupling"]


def test_a_part_far_past_its_limit_is_in_words_not_a_big_percentage(client, users, fleet):
    unit = make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0009", year_made=1960,
                     joined_on=dt.date(1990, 1, 1), prior_powered_h_per_year=3000, prior_ambient_c=45)
    forecast_refresh(unit_ids=[unit.pk])
    client.force_login(users.technician)
    response = detail(client, "NMB-0009")
    rows = response.context["rows"]
    far = [r for r in rows if r["damage"] > 2]
    assert far, "the fixture should age at least one part past the drift model's range"
    for r in far:
        assert r["life_used"] == "over 2x rated life"
        assert r["esr_now"] == "over 4x new"
        assert r["reaches"].startswith("since about ")
    assert "%" not in "".join(r["life_used"] for r in far)


def test_the_risk_says_what_it_assumes(client, users, fleet):
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="due",
                                due_date=dt.date(2030, 2, 1), risk=0.123, horizon_days=90, max_damage_ratio=0.97,
                                hire_risk=0.031, reasons=["C1 supply reservoir: ripple would exceed 2 V p-p"],
                                positions=b"")
    client.force_login(users.technician)
    text = detail(client).content.decode()
    assert "If it works today, chance of a fault within 90 days: 12 %" in text
    assert "If it works today, chance of a fault during its next hire: 3.1 %" in text
    assert "1 Feb 2030" in text
    assert "C1 supply reservoir: ripple would exceed 2 V p-p" in text


def test_a_due_date_long_past_is_secondary_and_approximate(client, users, fleet):
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue",
                                due_date=dt.date(1993, 2, 11), act_by=timezone.localdate(), priority=1, risk=0.2,
                                horizon_days=90, max_damage_ratio=3.0, reasons=[], positions=b"")
    client.force_login(users.technician)
    text = detail(client).content.decode()
    assert "past its limit since about 1993" in text
    assert "Priority 1 of 1" in text and "act by <strong>now</strong>" in text


def test_the_page_says_not_yet_forecast_without_a_forecast(client, users, fleet):
    client.force_login(users.technician)
    assert "Not yet forecast" in detail(client).content.decode()


def test_safety_names_this_units_hazards_and_not_others(client, users, fleet):
    client.force_login(users.technician)
    text = detail(client).content.decode()
    assert "Mains voltage inside (230 V a.c.)" in text
    assert "Tube" not in text and "tube" not in text
    assert "discharge" in text.lower() and "verify with a meter" in text
    assert "does not replace local electrical codes, the maker's service information or licensed practice" in text


def _valve_amp(location):
    gm = GearModel.objects.create(
        maker="Hollin Forge", model_name="Cinder 30", category=GearModel.Category.AMP, year_from=1970, year_to=1975,
        internal_rise_k=20.0, hazard_mains=True, hazard_tube_hv=True,
        hazard_notes="B+ about 400 V: the filter cans stay charged after unplugging.")
    Position.objects.create(gear_model=gm, designator="C1", role=Role.GENERAL, capacitance_uf=100,
                            rated_voltage_v=400, rated_temp_c=85, rated_life_h=2000, tan_delta=0.15, diameter_mm=35,
                            length_mm=50, operating_voltage_v=380)
    Position.objects.create(gear_model=gm, designator="C2", role=Role.GENERAL, capacitance_uf=220,
                            rated_voltage_v=35, rated_temp_c=85, rated_life_h=2000, tan_delta=0.15, diameter_mm=13,
                            length_mm=25)
    return make_unit(gm, location, asset_tag="CND-0001", year_made=1972, joined_on=dt.date(2010, 1, 1))


def test_a_tube_unit_shows_its_notes_and_its_charged_parts(client, users, fleet):
    _valve_amp(fleet.location)
    client.force_login(users.technician)
    response = detail(client, "CND-0001")
    text = response.content.decode()
    assert "B+ about 400 V: the filter cans stay charged after unplugging." in text
    assert "Tube high voltage" in text
    charged = response.context["safety"]["charged"]
    # only the part rated above 60 V: 100 µF at 400 V holds 8.0 J and falls to 60 V
    # through 10 kohm in 1.897 s (references.md §7, worked values)
    assert [p["designator"] for p in charged] == ["C1"]
    assert charged[0]["energy"] == "8 J"
    assert charged[0]["discharge"] == "1.9 s"
    assert "10 kΩ" in text


def test_a_lower_case_tag_in_the_address_redirects_to_the_unit(client, users, fleet):
    client.force_login(users.desk)
    response = detail(client, "nmb-0001")
    assert response.status_code == 302
    assert response["Location"] == reverse("unit_detail", args=["NMB-0001"])


def test_an_unknown_tag_is_the_apps_own_404_even_with_debug_on(client, users, fleet, settings):
    settings.DEBUG = True
    client.force_login(users.technician)
    response = detail(client, "NOPE-1")
    assert response.status_code == 404
    text = response.content.decode()
    assert "No unit has the asset tag NOPE-1" in text
    assert 'class="topbar"' in text and reverse("workshop") in text


def test_the_desk_sees_a_short_card_without_the_capacitor_table(client, users, fleet):
    forecast_refresh(unit_ids=[fleet.unit.pk])
    client.force_login(users.desk)
    response = detail(client)
    text = response.content.decode()
    assert "Capacitors" not in text and "Life chart" not in text
    assert response.context["desk"]["word"] in ("May go out", "Check with the workshop")
    assert reverse("check_out") in text


def test_a_held_unit_tells_the_desk_why(client, users, fleet):
    now = timezone.now()
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-7", out_at=now - dt.timedelta(days=2))
    rental_check_in(unit_id=fleet.unit.pk, in_at=now - dt.timedelta(days=1), venue_ambient_c=25, powered_hours=5,
                    reported_faults="Crackles on the left channel")
    client.force_login(users.desk)
    desk = detail(client).context["desk"]
    assert desk["word"] == "Do not hire out"
    assert any("Crackles on the left channel" in d for d in desk["details"])


def test_the_life_chart_shows_todays_risk(client, users, fleet):
    forecast_refresh(unit_ids=[fleet.unit.pk])
    forecast = UnitForecast.objects.get(unit=fleet.unit)
    client.force_login(users.technician)
    text = detail(client).content.decode()
    assert "<svg" in text and 'class="lifechart"' in text
    from reports.formatting import percent

    desc = re.search(r"<desc[^>]*>(.*?)</desc>", text, re.S).group(1)
    assert f"chance of a fault within 90 days: {percent(forecast.risk)}" in desc


def test_hires_and_service_records_are_shown(client, users, fleet):
    now = timezone.now()
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-1", out_at=now - dt.timedelta(days=3))
    rental_check_in(unit_id=fleet.unit.pk, in_at=now - dt.timedelta(days=2), venue_ambient_c=28,
                    powered_hours=9.5)
    record = service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date.today(),
                                  replacements={"C1": {"rated_temp_c": 105, "rated_life_h": 5000}},
                                  technician_name="Ada Bench", notes="Reservoir swapped.")
    Measurement.objects.create(service_record=record, quantity="esr", position=fleet.gear_model.positions.get(
        designator="C1"), value=0.42)
    client.force_login(users.technician)
    text = detail(client).content.decode()
    assert "JOB-1" in text and "9.5 h" in text and "28 °C" in text and "1 day" in text
    assert "Reservoir swapped." in text and "Ada Bench" in text
    assert "fitted" in text
    assert "0.42 Ω" in text


def test_the_query_count_does_not_grow_with_parts_hires_and_records(client, users, fleet):
    client.force_login(users.technician)
    start = timezone.now() - dt.timedelta(days=60)

    def hire(i):
        # the bench clears a unit the check-in held for recap before it goes out again
        Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.AVAILABLE)
        rental_check_out(unit_id=fleet.unit.pk, job_ref=f"JOB-{i}", out_at=start + dt.timedelta(days=10 * i),
                         override_reason="checked at the bench")
        rental_check_in(unit_id=fleet.unit.pk, in_at=start + dt.timedelta(days=10 * i + 2), venue_ambient_c=25,
                        powered_hours=4)

    def service(designator):
        record = service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date.today(),
                                      replacements={designator: {"rated_life_h": 4000}})
        Measurement.objects.create(service_record=record, quantity="rail", rail_name="+15V", value=15.1)

    def count(**params):
        with CaptureQueriesContext(connection) as ctx:
            assert detail(client, **params).status_code == 200
        return len(ctx.captured_queries)

    hire(0)
    service("C1")
    one_of_each = count(), count(view="role")
    for i in range(1, 6):
        hire(i)
    for designator in ("C7", "C12", "C1"):
        service(designator)
    make_unit(fleet.gear_model, fleet.location, asset_tag="NMB-0002")
    forecast_refresh()
    assert (count(), count(view="role")) == one_of_each
