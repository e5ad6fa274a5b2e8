"""The check-in's verdict is worded from the forecast row as the refresh
stored it, built from the run (``scheduling.store.rows_as_stored``), not
read back: here every field of those rows is held equal to the row read
back from the table, for a unit the forecast holds for a recap (placed
among the priorities), one it lets go out again, one it cannot forecast,
and a refresh of the whole fleet (numbered by triage).

All makers, models and tags are invented.
"""

import datetime as dt
import math

import pytest
from django.utils import timezone

from fleet.models import Position, Unit, UnitCapacitor
from fleet.services import units_mark_changed
from front.workflows import rental_check_in, rental_check_out
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh, rows_as_stored
from tests.base import make_gear_model, make_location, make_unit

pytestmark = pytest.mark.django_db(transaction=True)

FIELDS = [f.attname for f in UnitForecast._meta.concrete_fields if f.name != "id"]


def _same(built, stored):
    """Field by field: equal, NaN equal to NaN, bytes as bytes."""
    for name in FIELDS:
        a, b = getattr(built, name), getattr(stored, name)
        if isinstance(b, memoryview):
            b = bytes(b)
        if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
            continue
        assert a == b, (name, a, b)


@pytest.fixture
def units(db):
    location, gear_model = make_location(), make_gear_model()
    quiet = make_gear_model(model_name="Nimbus 5")
    # Figures no new part fails: no hot reservoir, a coupling corner a new part meets.
    Position.objects.filter(gear_model=quiet, designator="C1").delete()
    Position.objects.filter(gear_model=quiet, designator="C12").update(coupling_max_corner_hz=80)
    young = make_unit(quiet, location, asset_tag="NMB-0401", year_made=2023, joined_on=dt.date(2024, 1, 10))
    old = make_unit(gear_model, location, asset_tag="NMB-0402", year_made=1962, joined_on=dt.date(2001, 5, 1))
    bad = make_unit(gear_model, location, asset_tag="NMB-0403", year_made=1975)
    for k in range(3):
        make_unit(gear_model, location, asset_tag=f"NMB-04{k + 10}", year_made=1990 + k)
    forecast_refresh()
    for unit in (young, old, bad):
        rental_check_out(unit_id=unit.pk, job_ref="JOB-R", out_at=timezone.now() - dt.timedelta(days=2),
                         override_reason="Test hire")
    return young, old, bad


def _check_in(unit):
    return rental_check_in(unit_id=unit.pk, venue_ambient_c=29.0, powered_hours=14.0)


def test_a_held_unit_s_row_as_built_equals_the_row_stored(units):
    _, old, _ = units
    rental = _check_in(old)
    stored = UnitForecast.objects.get(unit=old)
    assert stored.status in ("due", "overdue") and stored.priority is not None  # placed among the priorities
    assert Unit.objects.get(pk=old.pk).status == Unit.Status.HOLD
    _same(rental.forecast_now, stored)


def test_a_unit_that_may_go_out_has_its_row_as_stored(units):
    young, _, _ = units
    rental = _check_in(young)
    stored = UnitForecast.objects.get(unit=young)
    assert stored.status in ("ok", "watch") and stored.priority is None
    _same(rental.forecast_now, stored)


def test_a_unit_that_cannot_be_forecast_has_its_row_as_stored(units):
    _, _, bad = units
    UnitCapacitor.objects.filter(unit=bad, position__designator="C1").update(capacitance_uf=1e-6, esr_ohm=None,
                                                                             tan_delta=0.1)
    units_mark_changed(unit_ids=[bad.pk])
    rental = _check_in(bad)
    stored = UnitForecast.objects.get(unit=bad)
    assert stored.status == UnitForecast.Status.INVALID and stored.reasons
    _same(rental.forecast_now, stored)


def test_a_whole_fleet_s_rows_as_built_equal_the_rows_stored(units):
    run = forecast_refresh()
    ids = list(Unit.objects.values_list("pk", flat=True))
    built = rows_as_stored(run, ids)
    stored = {f.unit_id: f for f in UnitForecast.objects.all()}
    assert built.keys() == stored.keys() == set(ids)
    assert any(f.priority is not None for f in stored.values())  # triage numbered some
    for unit_id in ids:
        _same(built[unit_id], stored[unit_id])
