"""A real worker on a real Redis broker runs the life-engine task against the
test database (integration; needs TEST_REDIS_URL)."""

import datetime as dt
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from celery import Celery
from django.db import connection

from front import workflows as services
from fleet.models import GearModel, Location, Position
from scheduling.models import UnitForecast
from scheduling.tasks import unit_forecast_refresh

ROOT = Path(__file__).resolve().parent.parent


def _database_url():
    s = connection.settings_dict
    if connection.vendor == "sqlite":
        return f"sqlite:///{s['NAME']}"
    return f"postgres://{s['USER']}@{s['HOST'] or '127.0.0.1'}:{s['PORT'] or 5432}/{s['NAME']}"


@pytest.fixture
def unit(transactional_db):
    loc = Location.objects.create(name="Store", constant_temp_c=18)
    model = GearModel.objects.create(maker="Test Maker", model_name="Box", year_from=2000, year_to=2001,
                                     internal_rise_k=8)
    Position.objects.create(gear_model=model, designator="C1", capacitance_uf=47, rated_voltage_v=25,
                            rated_temp_c=105, rated_life_h=2000, esr_ohm=0.8, diameter_mm=6.3, length_mm=11)
    return services.unit_create(asset_tag="RD-1", gear_model=model, year_made=2000, joined_on=dt.date(2024, 1, 1),
                                home_location=loc)


def test_worker_on_redis_stores_a_forecast(redis_url, unit):
    if connection.vendor == "sqlite" and connection.settings_dict["NAME"].startswith(("file:", ":memory:")):
        pytest.skip("the worker needs a file database; set the SQLite TEST NAME")
    env = dict(os.environ, REDIS_URL=redis_url, DATABASE_URL=_database_url(), DJANGO_SETTINGS_MODULE="config.settings")
    worker = subprocess.Popen(
        [sys.executable, "-m", "celery", "-A", "config", "worker", "--pool=solo", "--without-mingle",
         "--without-gossip", "--without-heartbeat", "--loglevel=WARNING", "-n", f"test-{os.getpid()}@%h"],
        cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
    )
    try:
        client = Celery(broker=redis_url, backend=redis_url, set_as_current=False)
        result = client.send_task("scheduling.unit_forecast_refresh", args=[unit.pk])
        assert result.get(timeout=60) == {"forecast": 1}
        assert UnitForecast.objects.filter(unit=unit).exists()
    finally:
        worker.terminate()
        try:
            worker.wait(timeout=20)
        except subprocess.TimeoutExpired:
            worker.kill()


def test_task_refuses_a_bad_unit_id(db):
    with pytest.raises(ValueError, match="unit_id must be a positive whole number"):
        unit_forecast_refresh.delay("HB-0001")


def test_nightly_task_runs_inline(unit):
    from scheduling.tasks import fleet_nightly_refresh

    out = fleet_nightly_refresh.delay().get()
    assert out["forecast"] == 1
    assert UnitForecast.objects.filter(unit=unit).exists()
