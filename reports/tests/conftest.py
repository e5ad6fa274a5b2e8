"""Fixtures of the report tests: an invented bench unit of 120 positions.

Maker "Fennick Audio Works", model "Tallow 120": made up.  C1 and C2 are
high-voltage reservoirs (C1 100 uF rated 400 V, the worked value of
references.md §7); C3/C4 a switched-capacitor inverter laid out as
the classic converter data sheet's instance (references.md §6: C1 = C2 =
10 uF, 5 kHz pump, 46 ohm of switches); the rest small general parts, some
of them surface mount.
"""

import os
from types import SimpleNamespace

import pytest

from scheduling.services import forecast_refresh
from tests.base import make_role_users

from .factories import N_POSITIONS, TODAY, make_bench_model, make_bench_unit  # noqa: F401


@pytest.fixture(autouse=True)
def _tasks_run_inline():
    """Tasks run in the test's process (the worker tests start real workers)."""
    from config.celery import app

    app.conf.task_always_eager = True
    app.conf.task_eager_propagates = True
    yield


@pytest.fixture
def redis_url():
    """TEST_REDIS_URL if a server answers there; else skipped (failed on CI),
    as in tests/conftest.py."""
    from tests.conftest import _reachable

    url = os.environ.get("TEST_REDIS_URL", "")
    if not url or not _reachable(url):
        message = f"Redis not reachable at TEST_REDIS_URL={url or '(unset)'}"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(message + " (CI must provide it)")
        pytest.skip(message)
    return url


@pytest.fixture
def bench_unit(db):
    gm = make_bench_model()
    unit = make_bench_unit(gm)
    forecast_refresh(today=TODAY)
    return SimpleNamespace(unit=unit, gear_model=gm, today=TODAY)


@pytest.fixture
def users(db):
    return make_role_users()


@pytest.fixture(autouse=True)
def plain_http(settings):
    settings.SECURE_SSL_REDIRECT = False
