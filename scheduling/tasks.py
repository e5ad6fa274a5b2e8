"""Background jobs of the life engine: thin wrappers around services.

Arguments are ids or nothing; each task is safe to run twice (the services
overwrite their results), has time limits, and retries on database hiccups.
"""

from celery import shared_task
from django.db import OperationalError
from django.utils import timezone

from . import services
from .services import forecast_refresh

RETRY = dict(autoretry_for=(OperationalError,), retry_backoff=True, max_retries=5, acks_late=True)


@shared_task(name="scheduling.fleet_nightly_refresh", soft_time_limit=1200, time_limit=1320, **RETRY)
def fleet_nightly_refresh():
    """Bring every thermal history up to date with the register and count
    storage up to now, then recompute the whole fleet's forecast."""
    synced, run = services.fleet_nightly_refresh(now=timezone.now())
    return {"changed": synced["changed"], "advanced": synced["advanced"], "forecast": run.fleet.n_units,
            "cannot_forecast": len(run.unforecastable)}


@shared_task(name="scheduling.unit_forecast_refresh", soft_time_limit=60, time_limit=90, **RETRY)
def unit_forecast_refresh(unit_id):
    """Bring one unit's thermal history up to date with its records and
    recompute its forecast, in the background.

    Nothing in the app queues it: a check-in, a recorded recap and an edit
    in the admin recompute the unit at once in their own request, and an
    import brings the histories up to date and leaves the forecasts to the
    nightly refresh (``fleet_nightly_refresh``) or ``manage.py forecast``.
    It is for an operator or another service (``celery call``,
    ``send_task``) that wants one unit brought up to date now.
    """
    if not isinstance(unit_id, int) or isinstance(unit_id, bool) or unit_id <= 0:
        raise ValueError(f"unit_id must be a positive whole number, not {unit_id!r}")
    run = forecast_refresh(unit_ids=[unit_id])
    return {"forecast": run.fleet.n_units}
