"""The unit page: facts, hazards, forecast, capacitors, hires, service records, safety note."""

import datetime as dt

from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Measurement, Unit
from front.workflows import rental_check_in, rental_check_out, service_record_recap
from front.views import format_capacitance
from scheduling.models import UnitForecast


def detail(client, tag="NMB-0001"):
    return client.get(reverse("unit_detail", args=[tag]))


def test_the_page_lists_each_capacitor_with_readable_values(client, users, fleet):
    client.force_login(users.technician)
    response = detail(client)
    assert response.status_code == 200
    rows = response.context["capacitors"]
    assert [r["designator"] for r in rows] == ["C1", "C7", "C12"]
    c1 = rows[0]
    assert c1["capacitance"] == "2200 uF"
    assert c1["voltage"] == "35 V"
    assert c1["temperature"] == "85 °C"
    assert c1["endurance"] == "2,000 h"
    assert c1["installed_on"] == dt.date(1981, 7, 1)
    assert c1["original"] is True
    text = response.content.decode()
    assert "470 nF" in text and "4.7 uF" in text
    assert "Supply reservoir" in text and "Signal coupling" in text


def test_the_page_carries_the_safety_caution_and_hazards_in_words(client, users, fleet):
    client.force_login(users.desk)
    text = detail(client).content.decode()
    assert "Mains voltage and charged capacitors can kill" in text
    assert "discharge the capacitors and verify with a meter" in text
    assert "Tube gear carries lethal voltages" in text
    assert "Follow local electrical codes and licensed practice" in text
    assert "Mains voltage inside (230 V a.c.)" in text


def test_the_page_says_not_yet_forecast_without_a_forecast(client, users, fleet):
    client.force_login(users.desk)
    assert "Not yet forecast" in detail(client).content.decode()


def test_the_page_shows_the_forecast_when_there_is_one(client, users, fleet):
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="due",
                                due_date=dt.date(2030, 2, 1), risk=0.123, horizon_days=90, max_damage_ratio=0.97,
                                reasons=["C1 has used 97% of its endurance"], positions=b"")
    client.force_login(users.desk)
    text = detail(client).content.decode()
    assert "Due" in text and "01 Feb 2030" in text
    assert "12 % chance of a failure within 90 days" in text
    assert "C1 has used 97% of its endurance" in text


def test_a_lower_case_tag_in_the_address_redirects_to_the_unit(client, users, fleet):
    client.force_login(users.desk)
    response = detail(client, "nmb-0001")
    assert response.status_code == 302
    assert response["Location"] == reverse("unit_detail", args=["NMB-0001"])


def test_an_unknown_tag_is_a_404(client, users, fleet):
    client.force_login(users.desk)
    assert detail(client, "NOPE-1").status_code == 404


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
    response = detail(client)
    text = response.content.decode()
    assert "JOB-1" in text and "9.5 h" in text and "28 °C" in text
    assert "Reservoir swapped." in text and "Ada Bench" in text
    assert "replaced" in text
    assert "0.42" in text


def test_the_query_count_does_not_grow_with_parts_hires_and_records(client, users, fleet):
    client.force_login(users.technician)
    start = timezone.now() - dt.timedelta(days=60)

    def hire(i):
        # the bench clears a unit the check-in held for recap before it goes out again
        Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.AVAILABLE)
        rental_check_out(unit_id=fleet.unit.pk, job_ref=f"JOB-{i}", out_at=start + dt.timedelta(days=10 * i))
        rental_check_in(unit_id=fleet.unit.pk, in_at=start + dt.timedelta(days=10 * i + 2), venue_ambient_c=25,
                        powered_hours=4)

    def service(designator):
        record = service_record_recap(unit_id=fleet.unit.pk, performed_on=dt.date.today(),
                                      replacements={designator: {"rated_life_h": 4000}})
        Measurement.objects.create(service_record=record, quantity="rail", rail_name="+15V", value=15.1)

    def count():
        with CaptureQueriesContext(connection) as ctx:
            assert detail(client).status_code == 200
        return len(ctx.captured_queries)

    hire(0)
    service("C1")
    one_of_each = count()
    for i in range(1, 6):
        hire(i)
    for designator in ("C7", "C12", "C1"):
        service(designator)
    assert count() == one_of_each


def test_capacitance_is_written_the_way_parts_are_marked():
    assert format_capacitance(4.7) == "4.7 uF"
    assert format_capacitance(0.47) == "470 nF"
    assert format_capacitance(0.1) == "100 nF"
    assert format_capacitance(0.0022) == "2.2 nF"
    assert format_capacitance(0.000047) == "47 pF"
    assert format_capacitance(2200) == "2200 uF"
    assert format_capacitance(10000) == "10000 uF"
    assert format_capacitance(1) == "1 uF"
    assert format_capacitance(22.0) == "22 uF"


def test_each_capacitor_shows_its_predicted_state_from_the_forecast(client, users, fleet):
    from scheduling.services import forecast_refresh

    forecast_refresh(unit_ids=[fleet.unit.pk])
    client.force_login(users.technician)
    rows = detail(client).context["capacitors"]
    assert rows and all(r["predicted"] is not None for r in rows)
    text = detail(client).content.decode()
    assert "Life used" in text and "ESR now" in text
    # the page shows what the engine stored: each row's ESR, or that it is past the drift model
    for row in rows:
        if row["predicted"]["beyond"]:
            assert "beyond the model" in text
        else:
            assert row["predicted"]["esr"] in text
