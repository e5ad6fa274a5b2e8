"""Desks racing each other on one unit, in threads with their own database
connections: exactly one check-out and one check-in win, the others get the
rules' message, and the hire's hours are counted once.

On PostgreSQL the row locks (``select_for_update``) decide; on SQLite every
transaction takes the write lock when it begins (BEGIN IMMEDIATE), so the
same race queues.  (Several web worker processes on SQLite: test_sqlite_workers.py.)
"""

import datetime as dt
import threading

import pytest
from django.db import connection, connections
from django.utils import timezone

from fleet.models import GearModel, Position, Rental
from fleet.services import ServiceError
from front.workflows import rental_check_in, rental_check_out
from scheduling.models import ThermalHistory
from tests.base import make_location, make_unit

RACERS = 6


def race(action):
    """Run ``action(k)`` in RACERS threads at once; returns (results, errors)."""
    start = threading.Barrier(RACERS)
    results, errors = [], []
    lock = threading.Lock()

    def run(k):
        try:
            start.wait()
            value = action(k)
            with lock:
                results.append(value)
        except ServiceError as exc:
            with lock:
                errors.append(str(exc))
        finally:
            connections.close_all()

    threads = [threading.Thread(target=run, args=(k,)) for k in range(RACERS)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    return results, errors


@pytest.mark.django_db(transaction=True)
def test_racing_desks_make_one_hire_and_count_its_hours_once():
    if connection.vendor == "sqlite" and connection.settings_dict["NAME"].startswith(("file:", ":memory:")):
        pytest.skip("threads need a file database")
    location = make_location()
    model = GearModel.objects.create(maker="Brindle Acoustics", model_name="Pocket 1", year_from=2014, year_to=2016,
                                     internal_rise_k=8)
    Position.objects.create(gear_model=model, designator="C1", capacitance_uf=47, rated_voltage_v=25,
                            rated_temp_c=105, rated_life_h=5000, esr_ohm=0.8, diameter_mm=6.3, length_mm=11)
    unit = make_unit(model, location, asset_tag="PKT-0001", year_made=2014)
    out_at = timezone.now() - dt.timedelta(days=2)

    won, refused = race(lambda k: rental_check_out(unit_id=unit.pk, job_ref=f"JOB-{k}", out_at=out_at))
    assert len(won) == 1 and len(refused) == RACERS - 1
    assert all(message == "PKT-0001 is already out; check it in first." for message in refused)
    assert Rental.objects.filter(unit=unit).count() == 1

    won, refused = race(lambda k: rental_check_in(unit_id=unit.pk, venue_ambient_c=25, powered_hours=10 + k))
    assert len(won) == 1 and len(refused) == RACERS - 1
    assert all(message == "PKT-0001 is not out on hire." for message in refused)
    hire = Rental.objects.get(unit=unit)
    history = ThermalHistory.objects.get(unit=unit)
    assert (history.rentals_counted, history.powered_hours_counted) == (1, hire.powered_hours)
