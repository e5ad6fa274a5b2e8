"""The rental desk's check-out form."""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import Rental, Unit
from front.workflows import rental_check_out
from scheduling.models import UnitForecast

URL = reverse("check_out")


def post(client, **data):
    form = {"asset_tag": "NMB-0001", "job_ref": "JOB-2024-118", "expected_ambient_c": "27"}
    form.update(data)
    return client.post(URL, form)


def test_the_form_puts_the_cursor_in_the_tag_box(client, users, fleet):
    client.force_login(users.desk)
    text = client.get(URL).content.decode()
    assert 'name="asset_tag"' in text
    tag_input = text[text.index('name="asset_tag"') - 200:text.index('name="asset_tag"') + 200]
    assert "autofocus" in tag_input
    assert 'type="submit"' in text


def test_checking_out_writes_the_hire_and_marks_the_unit_out(client, users, fleet):
    client.force_login(users.desk)
    response = post(client, asset_tag="  nmb-0001 ")
    assert response.status_code == 302
    rental = Rental.objects.get()
    assert rental.unit == fleet.unit
    assert rental.job_ref == "JOB-2024-118"
    assert rental.expected_ambient_c == 27
    assert rental.checked_out_by == users.desk
    assert abs((timezone.now() - rental.out_at).total_seconds()) < 60
    fleet.unit.refresh_from_db()
    assert fleet.unit.status == Unit.Status.OUT
    page = client.get(response["Location"]).content.decode()
    assert "NMB-0001 checked out on job JOB-2024-118" in page


def test_a_given_check_out_time_is_used(client, users, fleet):
    client.force_login(users.manager)
    post(client, out_at="2024-05-17T09:30")
    rental = Rental.objects.get()
    assert timezone.localtime(rental.out_at).strftime("%Y-%m-%d %H:%M") == "2024-05-17 09:30"


@pytest.mark.parametrize("data, field, message", [
    ({"asset_tag": "ZZZ-999"}, "asset_tag", "No unit has the asset tag ZZZ-999"),
    ({"asset_tag": "   "}, "asset_tag", "Scan or type the unit's asset tag."),
    ({"job_ref": ""}, "job_ref", "Give the job reference"),
    ({"expected_ambient_c": "warm"}, "expected_ambient_c", "Enter the temperature as a number"),
    ({"expected_ambient_c": "90"}, "expected_ambient_c", "hotter than 85"),
    ({"expected_ambient_c": "-41"}, "expected_ambient_c", "colder than -40"),
    ({"out_at": "yesterday"}, "out_at", "Enter a date and time"),
    ({"out_at": "2099-01-01T10:00"}, "out_at", "in the future"),
])
def test_bad_input_shows_an_error_and_writes_nothing(client, users, fleet, data, field, message):
    client.force_login(users.desk)
    response = post(client, **data)
    assert response.status_code == 200
    assert message in " ".join(response.context["form"].errors[field])
    assert "Nothing was saved." in response.content.decode()
    assert not Rental.objects.exists()
    fleet.unit.refresh_from_db()
    assert fleet.unit.status == Unit.Status.AVAILABLE


def test_the_cursor_goes_to_the_first_field_with_an_error(client, users, fleet):
    client.force_login(users.desk)
    response = post(client, job_ref="")
    assert response.context["form"].fields["job_ref"].widget.attrs.get("autofocus")
    assert not response.context["form"].fields["asset_tag"].widget.attrs.get("autofocus")


def test_a_unit_already_out_is_refused_with_the_services_message(client, users, fleet):
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-1", out_at=timezone.now() - dt.timedelta(hours=1))
    client.force_login(users.desk)
    response = post(client)
    assert response.status_code == 200
    assert "NMB-0001 is already out; check it in first." in response.context["form"].non_field_errors()
    assert Rental.objects.count() == 1


def test_a_held_unit_is_refused(client, users, fleet):
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.HOLD)
    client.force_login(users.desk)
    response = post(client)
    assert ("NMB-0001 is held, not available for hire; the workshop must release it first."
            in response.context["form"].non_field_errors())
    assert not Rental.objects.exists()


def test_a_unit_due_for_recap_goes_out_only_with_a_recorded_reason(client, users, fleet):
    from fleet.models import CheckoutOverride

    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue", risk=0.5,
                                horizon_days=90, max_damage_ratio=1.4, reasons=["C1 worn"], positions=b"")
    client.force_login(users.desk)
    response = post(client)
    assert response.status_code == 200
    assert "overdue for a recap" in " ".join(response.context["form"].errors["override_reason"])
    assert 'name="override_reason"' in response.content.decode()
    assert not Rental.objects.exists()
    assert post(client, override_reason="Workshop measured the rails this morning").status_code == 302
    override = CheckoutOverride.objects.get()
    assert (override.decided_by, override.forecast_status) == (users.desk, "overdue")
    assert override.reason == "Workshop measured the rails this morning"
    # the unit page shows who, when and why
    page = client.get(f"/units/{fleet.unit.asset_tag}/").content.decode()
    assert "Workshop measured the rails this morning" in page


def test_a_held_unit_is_refused_at_once_without_asking_for_a_reason(client, users, fleet):
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.HOLD, hold_reason="Hum on every channel")
    UnitForecast.objects.create(unit=fleet.unit, computed_at=timezone.now(), status="overdue", risk=0.5,
                                horizon_days=90, max_damage_ratio=1.4, reasons=["C1 worn"], positions=b"")
    client.force_login(users.desk)
    response = post(client, override_reason="Please")
    errors = " ".join(response.context["form"].non_field_errors())
    assert "held (Hum on every channel)" in errors and "workshop must release it" in errors
    assert 'name="override_reason"' not in response.content.decode()
    assert not Rental.objects.exists()


def test_a_tag_from_the_start_page_is_filled_in_and_the_cursor_moves_on(client, users, fleet):
    client.force_login(users.desk)
    response = client.get(URL, {"tag": "nmb-0001"})
    form = response.context["form"]
    assert form.initial["asset_tag"] == "NMB-0001"
    assert form.fields["job_ref"].widget.attrs.get("autofocus")


def test_the_came_back_at_message_is_in_local_time(client, users, fleet):
    """The form takes local time, so the message gives local time too (IANA tz database, Europe/London:
    British Summer Time is UTC+1 in July)."""
    import datetime as dt

    from front.workflows import rental_check_in, rental_check_out

    utc = dt.timezone.utc
    rental_check_out(unit_id=fleet.unit.pk, job_ref="JOB-1", out_at=dt.datetime(2024, 7, 10, 8, 0, tzinfo=utc))
    rental_check_in(unit_id=fleet.unit.pk, in_at=dt.datetime(2024, 7, 12, 16, 30, tzinfo=utc), venue_ambient_c=25,
                    powered_hours=5)
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.AVAILABLE)
    client.force_login(users.desk)
    response = client.post(URL, {"asset_tag": "NMB-0001", "job_ref": "JOB-2", "expected_ambient_c": "24",
                                 "out_at": "2024-07-12T17:00", "override_reason": "Workshop agreed"})
    assert response.status_code == 200
    assert "NMB-0001 came back at 12 Jul 2024 17:30; it cannot go out before that." in response.content.decode()


# --- when a reason is needed (front.workflows.checkout_reason_needed) ------------------------------

def _forecast(unit, *, status="overdue", risk=0.04, priority=7, act_by=None):
    return UnitForecast.objects.create(
        unit=unit, computed_at=timezone.now(), status=status, risk=risk, horizon_days=90, max_damage_ratio=1.4,
        reasons=["C1 supply reservoir: past its limit"], positions=b"", priority=priority,
        act_by=act_by or timezone.localdate(), due_date=dt.date(1994, 3, 1))


def test_an_overdue_unit_below_the_house_risk_limit_goes_out_without_a_reason(client, users, fleet):
    """The demo's common case: old parts past their limit, but a 4 % chance of a fault within 90 days
    against the house limit of 10 %: the desk sees the forecast and is not asked for a reason."""
    from fleet.models import CheckoutOverride

    _forecast(fleet.unit, risk=0.04)
    client.force_login(users.desk)
    page = client.get(URL, {"tag": "NMB-0001"}).content.decode()
    assert 'name="override_reason"' not in page
    assert ("Recap overdue: the workshop would take it now, priority 7. If it works today, chance of a fault "
            "within 90 days 4 %, below the house limit of 10 %: it may go out") in page
    assert "A reason is asked for only when" in page  # the rule, on the page
    response = post(client)
    assert response.status_code == 302
    assert Rental.objects.get().unit == fleet.unit
    assert not CheckoutOverride.objects.exists()


def test_a_unit_at_the_house_risk_limit_asks_for_the_reason_up_front(client, users, fleet):
    from fleet.models import CheckoutOverride

    _forecast(fleet.unit, risk=0.10)  # "reached" includes the limit itself
    client.force_login(users.desk)
    page = client.get(URL, {"tag": "NMB-0001"}).content.decode()
    assert 'name="override_reason"' in page
    response = post(client)
    assert response.status_code == 200
    error = " ".join(response.context["form"].errors["override_reason"])
    assert "chance of a fault within 90 days is 10 %, at or above the house limit of 10 %" in error
    assert not Rental.objects.exists()
    assert post(client, override_reason="Workshop checked the rails this morning").status_code == 302
    override = CheckoutOverride.objects.get()
    assert (override.reason, override.forecast_status, override.forecast_risk) == (
        "Workshop checked the rails this morning", "overdue", 0.10)
    assert override.decided_by == users.desk


def test_the_limit_is_the_active_house_policys(client, users, fleet):
    from fleet.models import MaintenancePolicy

    MaintenancePolicy.objects.update(active=False)
    MaintenancePolicy.objects.create(name="Strict", active=True, risk_limit=0.03)
    _forecast(fleet.unit, risk=0.04)
    client.force_login(users.desk)
    response = post(client)
    assert response.status_code == 200 and "house limit of 3 %" in " ".join(
        response.context["form"].errors["override_reason"])


def test_the_workflow_applies_the_same_rule_and_keeps_a_reason_given(fleet):
    """Commands and tests call the workflow: no reason needed below the limit, and a reason given for a
    due or overdue unit is recorded as before."""
    from fleet.models import CheckoutOverride
    from front.workflows import OverrideNeeded, checkout_reason_needed, rental_check_in

    forecast = _forecast(fleet.unit, risk=0.04)
    assert checkout_reason_needed(forecast) == ""
    rental = rental_check_out(unit_id=fleet.unit.pk, job_ref="J-1", out_at=timezone.now() - dt.timedelta(days=3))
    assert not CheckoutOverride.objects.exists()
    rental_check_in(unit_id=fleet.unit.pk, in_at=rental.out_at + dt.timedelta(days=1), venue_ambient_c=25,
                    powered_hours=5)
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.AVAILABLE)
    UnitForecast.objects.filter(unit=fleet.unit).update(status="overdue", risk=0.04)
    rental_check_out(unit_id=fleet.unit.pk, job_ref="J-2", override_reason="Asked the workshop anyway")
    assert CheckoutOverride.objects.get().reason == "Asked the workshop anyway"
    Rental.objects.filter(job_ref="J-2").delete()
    CheckoutOverride.objects.all().delete()
    Unit.objects.filter(pk=fleet.unit.pk).update(status=Unit.Status.AVAILABLE)
    UnitForecast.objects.filter(unit=fleet.unit).update(status="invalid", risk=None)
    with pytest.raises(OverrideNeeded, match="cannot be worked out"):
        rental_check_out(unit_id=fleet.unit.pk, job_ref="J-3")


def test_the_desk_card_follows_the_rule(client, users, fleet):
    forecast = _forecast(fleet.unit, risk=0.04)
    client.force_login(users.desk)
    card = client.get(f"/units/{fleet.unit.asset_tag}/").context["desk"]
    assert (card["go"], card["word"]) == (True, "May go out")
    assert "below the house limit of 10 %" in " ".join(card["details"])
    UnitForecast.objects.filter(pk=forecast.pk).update(risk=0.2)
    card = client.get(f"/units/{fleet.unit.asset_tag}/").context["desk"]
    assert (card["go"], card["word"]) == (False, "Check with the workshop")


def test_the_desk_sees_why_before_it_types_a_reason(client, users, fleet):
    _forecast(fleet.unit, risk=0.22)
    client.force_login(users.desk)
    page = client.get(URL, {"tag": "NMB-0001"}).content.decode()
    assert ("Recap overdue and its chance of a fault within 90 days is 22 %, at or above the house limit of "
            "10 %: it should stay in for the workshop") in page
