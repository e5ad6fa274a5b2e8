"""The register's audit history with its manager class made once
(``fleet.audit``): the same class on every access, the records still
written and read as before."""

import datetime as dt

import pytest
from django.utils import timezone
from simple_history.manager import HistoryManager

from fleet.audit import KeptHistoryManager
from fleet.models import Rental, Unit
from fleet.services import unit_hold
from front.workflows import rental_check_in, rental_check_out
from scheduling.services import forecast_refresh
from tests.base import make_gear_model, make_location, make_unit


def test_the_manager_class_is_made_once_and_bound_per_access():
    first, second = Unit.history, Unit.history
    assert type(first) is type(second)
    assert issubclass(type(first), KeptHistoryManager)
    # Each access still makes its own manager, bound to its model.
    assert first is not second and first.model is second.model is Unit.history.model
    assert Rental.history.model is not Unit.history.model
    # django-simple-history's own manager makes a new class every time (what this replaces).
    assert HistoryManager.from_queryset(type(first.get_queryset())) is not HistoryManager.from_queryset(
        type(first.get_queryset()))


@pytest.mark.django_db
def test_history_is_still_written_and_read_per_unit():
    location, gear_model = make_location(), make_gear_model()
    unit = make_unit(gear_model, location, asset_tag="NMB-0301")
    other = make_unit(gear_model, location, asset_tag="NMB-0302")
    assert unit_hold(unit_id=unit.pk, reason="Loose mains inlet")
    records = list(Unit.objects.get(pk=unit.pk).history.order_by("history_id"))
    assert [r.status for r in records][-2:] == [Unit.Status.AVAILABLE, Unit.Status.HOLD]
    assert records[-1].hold_reason == "Loose mains inlet" and records[-1].history_type == "~"
    # An instance's history is its own: the other unit's has no hold.
    assert {r.status for r in other.history.all()} == {Unit.Status.AVAILABLE}


@pytest.mark.django_db(transaction=True)
def test_a_check_in_the_forecast_holds_is_one_audit_record_not_two():
    """The check-in writes the unit once, with the status the forecast
    decides: one audit record ("on hold", with the reason), where there used
    to be "available" and then "on hold"; its records version one step on."""
    location, gear_model = make_location(), make_gear_model()
    old = make_unit(gear_model, location, asset_tag="NMB-0311", year_made=1962, joined_on=dt.date(2001, 5, 1))
    forecast_refresh()
    rental_check_out(unit_id=old.pk, job_ref="JOB-A", out_at=timezone.now() - dt.timedelta(days=2),
                     override_reason="Test hire")
    before = old.history.count()
    version = Unit.objects.get(pk=old.pk).records_version
    rental_check_in(unit_id=old.pk, venue_ambient_c=29.0, powered_hours=14.0)
    added = list(Unit.objects.get(pk=old.pk).history.order_by("history_id"))[before:]
    assert [r.status for r in added] == [Unit.Status.HOLD]
    assert added[0].hold_reason.startswith("The forecast says")
    held = Unit.objects.get(pk=old.pk)
    assert held.status == Unit.Status.HOLD and held.hold_reason == added[0].hold_reason
    assert held.records_version == version + 1
