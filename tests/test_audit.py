"""The register's audit history with its manager class made once
(``fleet.audit``): the same class on every access, the records still
written and read as before."""

import pytest
from simple_history.manager import HistoryManager

from fleet.audit import KeptHistoryManager
from fleet.models import Rental, Unit
from fleet.services import unit_hold
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
