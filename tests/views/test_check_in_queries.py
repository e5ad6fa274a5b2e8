"""The check-in POST's queries: a ceiling, so that new work in the desk's
hottest path shows up here (`manage.py bench_desk` prints the time).

Outside a test transaction, as a real request runs (``transaction=True``); the
same count on SQLite and PostgreSQL.  The answer to the POST is the verdict
itself (no redirect and second request).  A check-in of a unit the forecast
lets go out again (18; 61 before the first cut):

- 3  the session, the user with the roles they hold (``fleet.roles.RolesBackend``:
     one query), the unit by its tag (the form);
- 1  BEGIN (and COMMIT at the end: 1);
- 5  closing the hire (``fleet.services.rental_close``, no savepoint of its
     own): the open hire and its unit locked (one query), the hire written
     with its history row; the unit written with its history row once, after
     the forecast, with the status it decides;
- 2  the thermal history (``scheduling.thermal.thermal_check_in``: only this
     hire changed the unit's records): the history locked (with its gear
     model's internal rise and its home's temperatures), the history written once
     with this hire added to it and to its packed recent hires (the packed
     fitted parts kept).  Its snapshot dates, capacitor rows and earlier
     hires are not read again: a hire moves neither a part nor a reading;
- 6  the forecast (``scheduling.services.forecast_refresh``, no second sync,
     handed the unit's row locked above, the history just written and the
     home's temperatures just read): the policy, the gear models, their kept
     mean use, the positions, the readings (a unit with replaced parts or
     readings: its snapshots too); the forecast written (whether it needs a
     place among the fleet's priorities is read from the run, not back from
     the table).  The verdict is worded from the row as stored, built from
     the run (``scheduling.store.rows_as_stored``): not read back.

A unit the forecast holds for a recap (19; 70 before) adds its place among the
priorities (one write with the count inside; the hold goes into the one
write of the unit row).  The fleet's
renumbering is queued for a worker after the commit: not the request's.
The verdict's own address, as a reload asks for it (4): the session, the
user with their roles, the hire with its unit, the forecast.
"""

import datetime as dt

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Position, Rental, Unit
from front.workflows import rental_check_in, rental_check_out
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh
from tests.base import make_gear_model, make_location, make_role_users, make_unit

pytestmark = pytest.mark.django_db(transaction=True)

#: Ceilings (see the module's docstring for what they are).
MAY_GO_OUT = 18
HELD_BY_FORECAST = 19
VERDICT_PAGE = 4


@pytest.fixture
def desk(client, settings, monkeypatch):
    settings.SECURE_SSL_REDIRECT = False
    # After the commit the check-in queues the fleet's renumbering for a
    # worker: not the request's queries (the suite's Celery runs it eagerly).
    monkeypatch.setattr("scheduling.services._queue_ranking", lambda: None)
    client.force_login(make_role_users().desk)
    return client


@pytest.fixture
def units(db):
    """A recent unit the forecast passes and an old one it holds for a recap,
    among a few others, each with a forecast and out on hire for two days."""
    location = make_location()
    gear_model = make_gear_model()
    quiet = make_gear_model(model_name="Nimbus 5")
    # Figures no new part fails: no hot reservoir, a coupling corner a new part meets.
    Position.objects.filter(gear_model=quiet, designator="C1").delete()
    Position.objects.filter(gear_model=quiet, designator="C12").update(coupling_max_corner_hz=80)
    young = make_unit(quiet, location, asset_tag="NMB-0101", year_made=2023, joined_on=dt.date(2024, 1, 10))
    old = make_unit(gear_model, location, asset_tag="NMB-0102", year_made=1962, joined_on=dt.date(2001, 5, 1))
    for k in range(3):
        make_unit(gear_model, location, asset_tag=f"NMB-02{k:02d}", year_made=1990 + k)
    forecast_refresh()
    for unit in (young, old):
        rental_check_out(unit_id=unit.pk, job_ref="JOB-Q", out_at=timezone.now() - dt.timedelta(days=2),
                         override_reason="Test hire")
    return young, old


def check_in(client, unit):
    with CaptureQueriesContext(connection) as posted:
        response = client.post(reverse("check_in"), {
            "asset_tag": unit.asset_tag, "venue_ambient_c": "29", "powered_hours": "14", "meter_reading_h": "",
            "reported_faults": ""})
    assert response.status_code == 200  # the verdict, in the answer to the POST
    with CaptureQueriesContext(connection) as shown:
        again = client.get(response["Content-Location"])  # the verdict's own address, as a reload asks for it
    assert again.context["verdict"]["headline"] == response.context["verdict"]["headline"]
    return response, len(posted), len(shown)


def test_a_check_in_that_lets_the_unit_go_out_stays_within_its_queries(desk, units):
    young, _ = units
    page, posted, shown = check_in(desk, young)
    # The check-in happened: the hire is closed, the forecast refreshed, the unit may go out.
    assert page.context["verdict"]["go"] is True, page.context["verdict"]
    assert Rental.objects.get(unit=young).in_at is not None
    assert UnitForecast.objects.get(unit=young).status in ("ok", "watch")
    assert Unit.objects.get(pk=young.pk).status == Unit.Status.AVAILABLE
    assert posted <= MAY_GO_OUT, f"{posted} queries ({connection.vendor})"
    assert shown <= VERDICT_PAGE


def test_a_check_in_that_holds_the_unit_for_a_recap_stays_within_its_queries(desk, units):
    _, old = units
    page, posted, shown = check_in(desk, old)
    assert page.context["verdict"]["go"] is False
    held = Unit.objects.get(pk=old.pk)
    assert held.status == Unit.Status.HOLD and held.hold_reason.startswith("The forecast says")
    assert UnitForecast.objects.get(unit=old).status in ("due", "overdue")
    assert posted <= HELD_BY_FORECAST, f"{posted} queries ({connection.vendor})"
    assert shown <= VERDICT_PAGE


#: The check-out POST (to its redirect), for a unit the forecast lets go out
#: without a reason: the session, the user with their roles and the unit by its tag; the
#: form's weighing of the forecast and the policy; then the workflow (the
#: forecast and policy read again inside its transaction, the unit locked,
#: its open and last hires, the hire written with its history row, the unit
#: written with its history row; no savepoint of the service's own).  The
#: references and the table's constraints are not checked again through
#: Django's model validation (14 queries more before): the service holds
#: them under the unit's lock and the database on save.
CHECK_OUT = 16


def test_a_check_out_stays_within_its_queries(desk, units):
    young, _ = units
    rental_check_in(unit_id=young.pk, venue_ambient_c=24.0, powered_hours=1.0)  # the fixture sent it out
    Unit.objects.filter(pk=young.pk).update(status=Unit.Status.AVAILABLE, hold_reason="")
    with CaptureQueriesContext(connection) as posted:
        response = desk.post(reverse("check_out"), {"asset_tag": young.asset_tag, "job_ref": "JOB-Q2",
                                                    "expected_ambient_c": "24", "out_at": "", "override_reason": ""})
    assert response.status_code == 302, response.content.decode()[-2000:]
    assert Rental.objects.filter(unit=young, in_at__isnull=True, job_ref="JOB-Q2").count() == 1
    assert Unit.objects.get(pk=young.pk).status == Unit.Status.OUT
    assert len(posted) <= CHECK_OUT, f"{len(posted)} queries ({connection.vendor})"
