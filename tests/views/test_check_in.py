"""The rental desk's check-in form and its verdict: may the unit go out again?"""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import Rental, Unit
from front.workflows import rental_check_out
from front.views import return_verdict
from scheduling.models import UnitForecast

URL = reverse("check_in")


@pytest.fixture
def out_unit(fleet):
    """NMB-0001 out on hire since two days ago."""
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-55", out_at=timezone.now() - dt.timedelta(days=2),
                     expected_ambient_c=26)
    return fleet.unit


def post(client, **data):
    form = {"asset_tag": "NMB-0001", "venue_ambient_c": "29", "powered_hours": "14", "meter_reading_h": "",
            "reported_faults": ""}
    form.update(data)
    return client.post(URL, form)


def set_forecast(unit, status, due_date=None, reasons=()):
    UnitForecast.objects.update_or_create(unit=unit, defaults=dict(
        computed_at=timezone.now(), status=status, due_date=due_date, risk=0.2, horizon_days=90,
        max_damage_ratio=0.9, reasons=list(reasons), positions=b""))


def test_check_out_then_check_in_through_the_forms_writes_the_hire_and_shows_the_verdict(client, users, fleet):
    client.force_login(users.desk)
    out_at = (timezone.localtime() - dt.timedelta(days=1)).strftime("%Y-%m-%dT%H:%M")
    response = client.post(reverse("check_out"), {"asset_tag": "nmb-0001", "job_ref": "JOB-9", "expected_ambient_c": "24",
                                                  "out_at": out_at})
    assert response.status_code == 302
    response = post(client, asset_tag=" nmb-0001", powered_hours="6.5")
    assert response.status_code == 200
    rental = Rental.objects.get()
    assert rental.in_at is not None
    assert rental.powered_hours == 6.5
    assert rental.venue_ambient_c == 29
    assert rental.hours_source == Rental.HoursSource.ESTIMATE
    assert rental.checked_in_by == users.desk
    page = client.get(response["Content-Location"])
    verdict = page.context["verdict"]
    # The check-in refreshed the forecast (or there is none yet); the panel says what it says.
    expected = return_verdict(rental, UnitForecast.objects.filter(unit=fleet.unit).first())
    assert verdict["headline"] == expected["headline"]
    assert verdict["headline"] in page.content.decode()
    assert "NMB-0001: " in verdict["headline"]
    # The answer to the POST is the verdict itself, over an empty form for the
    # next unit; the verdict keeps its own address, which a reload shows.
    assert response.context["verdict"]["headline"] == expected["headline"]
    assert not response.context["form"]["asset_tag"].value()
    assert response["Content-Location"] == f"{URL}?returned={rental.pk}"
    assert "history.replaceState" in response.content.decode()


def test_reported_faults_hold_the_unit_for_the_bench(client, users, out_unit):
    client.force_login(users.desk)
    response = post(client, reported_faults="Crackle on the left channel")
    page = client.get(response["Content-Location"])
    text = page.content.decode()
    assert "NMB-0001: hold for the bench" in text
    assert "Crackle on the left channel" in text
    out_unit.refresh_from_db()
    assert out_unit.status == Unit.Status.HOLD


def test_an_hour_meter_reading_counts_the_hours_since_the_last_reading(client, users, fleet):
    Unit.objects.filter(pk=fleet.unit.pk).update(hour_meter_h=1200)
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-56", out_at=timezone.now() - dt.timedelta(days=2))
    client.force_login(users.desk)
    assert post(client, powered_hours="", meter_reading_h="1210.5").status_code == 200
    rental = Rental.objects.get()
    assert rental.powered_hours == pytest.approx(10.5)
    assert rental.hours_source == Rental.HoursSource.METER


@pytest.mark.parametrize("status, due, reasons, go, headline", [
    ("ok", None, [], True, "NMB-0001: may go out again"),
    ("watch", dt.date(2031, 3, 9), ["C1 ageing"], True, "NMB-0001: may go out again; recap coming up by 9 Mar 2031"),
    ("due", dt.date(2030, 1, 1), ["C1 has used its endurance"], False, "NMB-0001: hold for recap"),
    ("overdue", None, ["C7 past its calendar age"], False, "NMB-0001: hold for recap"),
])
def test_the_verdict_follows_the_forecast_after_check_in(client, users, out_unit, status, due, reasons, go,
                                                         headline):
    client.force_login(users.desk)
    response = post(client)
    assert response.status_code == 200
    set_forecast(out_unit, status, due, reasons)  # as the life engine would leave it
    page = client.get(response["Content-Location"])
    verdict = page.context["verdict"]
    assert verdict["go"] is go
    assert verdict["headline"] == headline
    text = page.content.decode()
    assert headline in text
    for reason in reasons:
        assert reason in text


def test_without_a_forecast_the_unit_may_go_out(users):
    rental = Rental(unit=Unit(asset_tag="NMB-0001"), job_ref="J", reported_faults="")
    assert return_verdict(rental, None) == {
        "go": True, "headline": "NMB-0001: may go out again (no forecast yet)", "details": []}


@pytest.mark.parametrize("data, field, message", [
    ({"asset_tag": "NOPE-1"}, "asset_tag", "No unit has the asset tag NOPE-1"),
    ({"powered_hours": "six"}, "powered_hours", "Enter hours as a number"),
    ({"powered_hours": "-3"}, "powered_hours", "Hours cannot be negative."),
    ({"powered_hours": "", "meter_reading_h": "-1"}, "meter_reading_h", "Hours cannot be negative."),
    ({"venue_ambient_c": "86"}, "venue_ambient_c", "hotter than 85"),
    ({"venue_ambient_c": "-45"}, "venue_ambient_c", "colder than -40"),
    ({"venue_ambient_c": ""}, "venue_ambient_c", "This field is required."),
    ({"venue_ambient_c": "nan"}, "venue_ambient_c", "Enter the temperature as a number"),
    ({"powered_hours": ""}, "__all__", "Give the hours powered or the hour-meter reading."),
])
def test_bad_input_shows_an_error_and_writes_nothing(client, users, out_unit, data, field, message):
    client.force_login(users.desk)
    response = post(client, **data)
    assert response.status_code == 200
    assert message in " ".join(response.context["form"].errors[field])
    assert "Nothing was saved." in response.content.decode()
    rental = Rental.objects.get()
    assert rental.in_at is None and rental.powered_hours is None
    out_unit.refresh_from_db()
    assert out_unit.status == Unit.Status.OUT


@pytest.mark.parametrize("data, message", [
    ({"powered_hours": "60"}, "more than the"),  # longer than the two days out
    ({"powered_hours": "", "meter_reading_h": "100"}, "give the hours powered as well"),
])
def test_the_services_refusals_show_as_form_errors(client, users, out_unit, data, message):
    client.force_login(users.desk)
    response = post(client, **data)
    assert response.status_code == 200
    assert message in " ".join(response.context["form"].non_field_errors())
    assert Rental.objects.get().in_at is None


def test_a_unit_that_is_not_out_is_refused(client, users, fleet):
    client.force_login(users.desk)
    response = post(client)
    assert "NMB-0001 is not out on hire." in response.context["form"].non_field_errors()
    assert not Rental.objects.exists()


def test_a_tag_from_the_start_page_fills_in_the_expected_ambient(client, users, out_unit):
    client.force_login(users.desk)
    form = client.get(URL, {"tag": "nmb-0001"}).context["form"]
    assert form.initial == {"asset_tag": "NMB-0001", "venue_ambient_c": "26"}
    assert form.fields["powered_hours"].widget.attrs.get("autofocus") or \
        form.fields["venue_ambient_c"].widget.attrs.get("autofocus")


def test_the_desk_sees_how_long_the_unit_was_out_and_its_last_meter_reading(client, users, out_unit):
    Unit.objects.filter(pk=out_unit.pk).update(hour_meter_h=1234.5)
    client.force_login(users.desk)
    response = client.get(URL, {"tag": "NMB-0001"})
    text = response.content.decode()
    assert "2 days" in text and "so far" in text
    assert "last read <strong>1,234.5 h</strong>" in text
    assert response.context["meter"]["hours"] == 1234.5


def test_a_unit_without_a_meter_reading_takes_its_first_with_the_hours(client, users, out_unit):
    client.force_login(users.desk)
    page = client.get(URL, {"tag": "NMB-0001"}).content.decode()
    assert "no reading yet" in page
    response = post(client, powered_hours="9", meter_reading_h="4711")
    assert response.status_code == 200
    rental = Rental.objects.get()
    assert rental.powered_hours == 9 and rental.hours_source == Rental.HoursSource.ESTIMATE
    assert rental.meter_reading_h == 4711
    out_unit.refresh_from_db()
    assert out_unit.hour_meter_h == 4711
    verdict_page = client.get(response["Content-Location"]).content.decode()
    assert "meter 4,711 h" in verdict_page and "after 2 days" in verdict_page


def test_the_form_finds_the_unit_by_its_tag_alone_and_an_error_page_still_names_its_model(client, users, out_unit):
    """The desk's forms read the unit alone (no join to its gear model and home:
    the workflow needs its id); a page that shows the form again with an
    error still names the unit's gear model beside its tag."""
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    client.force_login(users.desk)
    with CaptureQueriesContext(connection) as ctx:
        response = post(client, venue_ambient_c="86")  # refused: too hot
    lookups = [q["sql"] for q in ctx.captured_queries if 'FROM "fleet_unit"' in q["sql"] and '"asset_tag" =' in q["sql"]]
    assert lookups and all("JOIN" not in sql for sql in lookups), lookups
    page = response.content.decode()
    assert "hotter than 85" in page
    assert f'<span class="tag">NMB-0001</span> {out_unit.gear_model}' in page
