"""The people and the fleet of the digest tests (all invented)."""

from types import SimpleNamespace

from django.utils import timezone

from fleet.roles import DESK, MANAGER, TECHNICIAN
from reports.digest.delivery import subscription_set
from reports.digest.period import period_of
from scheduling.services import forecast_refresh
from tests.base import make_user

from .factories import make_bench_model, make_bench_unit


def make_digest_world(units=3):
    """A manager and a technician who take the digest; a desk clerk who asked
    for it (the desk does not get it) and a manager without an address."""
    manager = make_user(MANAGER, "mara.manager", email="mara@fennick.example", first_name="Mara")
    technician = make_user(TECHNICIAN, "teo.tech", email="teo@fennick.example", first_name="Teo")
    desk = make_user(DESK, "dee.desk", email="dee@fennick.example")
    no_mail = make_user(MANAGER, "nomail.manager")
    for user in (manager, technician, desk, no_mail):
        subscription_set(user=user, active=True)
    gm = make_bench_model()
    made = [make_bench_unit(gm, tag=f"FT-{k:04d}", year_made=1978 + 4 * k, serial=f"FA-{k}")
            for k in range(1, units + 1)]
    forecast_refresh()
    return SimpleNamespace(manager=manager, technician=technician, desk=desk, no_mail=no_mail,
                           subscribers=[manager, technician], units=made, gear_model=gm,
                           period=period_of(timezone.localdate()))
