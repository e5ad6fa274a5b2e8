"""Background jobs of the life engine: thin wrappers around services.

Arguments are ids or nothing; each task is safe to run twice (the services
overwrite their results), has time limits, and retries on database hiccups.
"""

import datetime as dt

from celery import chord, shared_task
from django.conf import settings
from django.db import OperationalError
from django.utils import timezone

from . import batches
from .services import forecast_refresh

RETRY = dict(autoretry_for=(OperationalError,), retry_backoff=True, max_retries=5, acks_late=True)


@shared_task(name="scheduling.fleet_nightly_refresh", soft_time_limit=1200, time_limit=1320, **RETRY)
def fleet_nightly_refresh():
    """Bring every thermal history up to date with the register and count
    storage up to now, then recompute the whole fleet's forecast: in batches
    spread over the workers (a chord ending in ``rank_priorities``) when
    ``RECAP_PARALLEL_REFRESH`` is on and the fleet has more than one batch,
    else in batches in this worker."""
    now = timezone.now()
    synced = batches.fleet_histories_sync(now=now)
    today = timezone.localdate(now)
    ranges = batches.fleet_batches()
    out = {"changed": synced["changed"], "advanced": synced["advanced"], "batches": len(ranges)}
    if settings.RECAP_PARALLEL_REFRESH and len(ranges) > 1:
        batches.fleet_means(today=today, batches=ranges)  # the first pass; workers read the means kept
        chord(fleet_refresh_batch.s(first, last, today.isoformat()) for first, last in ranges)(rank_priorities.si())
        return {**out, "spread": True}
    report = batches.fleet_refresh(today=today)
    return {**out, "forecast": report.forecast, "cannot_forecast": report.cannot_forecast}


def _whole(name, value):
    if not isinstance(value, int) or isinstance(value, bool) or value <= 0:
        raise ValueError(f"{name} must be a positive whole number, not {value!r}")
    return value


@shared_task(name="scheduling.fleet_refresh_batch", soft_time_limit=600, time_limit=660, **RETRY)
def fleet_refresh_batch(first_id, last_id, today_iso):
    """Forecast and store one batch of the fleet (unit ids first_id to
    last_id) as of ``today_iso`` (YYYY-MM-DD) with the gear-model means the
    first pass kept; safe to run twice."""
    _whole("first_id", first_id)
    _whole("last_id", last_id)
    if last_id < first_id:
        raise ValueError(f"last_id ({last_id}) is before first_id ({first_id})")
    try:
        today = dt.date.fromisoformat(today_iso)
    except (TypeError, ValueError):
        raise ValueError(f"today_iso must be a date written YYYY-MM-DD, not {today_iso!r}") from None
    n, bad, _ = batches.forecast_batch(first_id, last_id, today=today, model_means="stored")
    return {"first_id": first_id, "last_id": last_id, "forecast": n, "cannot_forecast": bad}


@shared_task(name="scheduling.rank_priorities", soft_time_limit=300, time_limit=330, **RETRY)
def rank_priorities(*_results):
    """After the batches: drop retired units' results and number the
    priorities across the fleet."""
    changed = batches.fleet_finish()
    statuses, need = batches.fleet_summary()
    return {"renumbered": changed, "statuses": statuses, "need_work": need}


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
