"""Background jobs of the printed output: thin wrappers around the services.

Arguments are ids (or a period name); each task is safe to run twice (the
digest's rows and the delivery claim see to it; a batch that is done is left
alone), has soft and hard time limits, and retries on database hiccups.  A
failed mail send is retried with backoff at the time the delivery records.
"""

import logging

from celery import shared_task
from django.db import OperationalError
from django.utils import timezone

from .digest import delivery as D

log = logging.getLogger("reports.tasks")
RETRY = dict(autoretry_for=(OperationalError,), retry_backoff=True, max_retries=5, acks_late=True)


@shared_task(name="reports.digest_send", soft_time_limit=600, time_limit=660, **RETRY)
def digest_send(period=None):
    """Prepare the period's digest (default: this week) and queue a send per
    subscriber; a second run adds only subscribers who have none yet."""
    if period is not None and not isinstance(period, str):
        raise ValueError(f"period must be an ISO week like 2026-W49, not {period!r}")
    return D.digest_send(period=period)


@shared_task(bind=True, name="reports.digest_deliver", soft_time_limit=60, time_limit=90, acks_late=True,
             max_retries=10, autoretry_for=(OperationalError,), retry_backoff=True)
def digest_deliver(self, delivery_id):
    """Send one subscriber's digest (at most once); on a mail failure, try
    again at the time the delivery records."""
    if not isinstance(delivery_id, int) or isinstance(delivery_id, bool) or delivery_id <= 0:
        raise ValueError(f"delivery_id must be a positive whole number, not {delivery_id!r}")
    try:
        return D.delivery_send(delivery_id)
    except D.SendFailed as exc:
        wait = max((exc.retry_at - timezone.now()).total_seconds(), 0.0)
        if self.request.retries >= self.max_retries:
            log.warning("digest delivery %s: giving the task up; the sweep keeps trying", delivery_id)
            return "failed"
        raise self.retry(countdown=wait, exc=exc)


@shared_task(name="reports.digest_sweep", soft_time_limit=120, time_limit=180, **RETRY)
def digest_sweep():
    """Queue the deliveries that are due again (failed earlier, or left
    half-done by a worker that stopped)."""
    ids = D.deliveries_due()
    for i in ids:
        digest_deliver.delay(i)
    return {"queued": len(ids)}


@shared_task(name="reports.sheet_batch_build", soft_time_limit=1500, time_limit=1560, **RETRY)
def sheet_batch_build(batch_id):
    """Build one batch of service sheets (see reports.batches)."""
    if not isinstance(batch_id, int) or isinstance(batch_id, bool) or batch_id <= 0:
        raise ValueError(f"batch_id must be a positive whole number, not {batch_id!r}")
    from .batches import batch_build

    return batch_build(batch_id)
