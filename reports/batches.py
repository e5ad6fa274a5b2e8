"""Service sheets for many units in one PDF, built by the worker with its
progress in the database (the page polls it).

``batch_create`` checks the units and queues the build after the transaction
commits; ``batch_build`` claims a queued batch with one conditional update (a
second delivery of the task finds it taken or done and does nothing; a
database hiccup puts it back in the queue for the task's retry), gathers
each unit's sheet and draws them, writing how far it got every few units, and
stores the PDF on the row (so a worker on any host hands it to the web).
"""

import logging

from django.db import OperationalError, transaction
from django.utils import timezone

from fleet.models import Unit
from scheduling.models import UnitForecast

from .models import SheetBatch
from .pdf.sheet import batch_pdf_bytes
from .sheets import UnknownUnit, unit_sheet

log = logging.getLogger("reports.batches")

#: Most sheets in one batch.
MAX_UNITS = 500
State = SheetBatch.State


class BatchError(ValueError):
    """The batch cannot be made; the message says why, in one line."""


def top_unit_ids(n):
    """The first ``n`` units of the triage list (priority 1 first)."""
    return list(UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED).filter(priority__isnull=False)
                .order_by("priority").values_list("unit_id", flat=True)[:n])


def unit_ids_for_tags(text):
    """Unit ids for asset tags typed or pasted (spaces, commas or lines apart),
    in the order given, each once; ``BatchError`` naming the unknown ones."""
    tags, seen = [], set()
    for raw in text.replace(",", " ").split():
        tag = raw.strip().upper()
        if tag and tag not in seen:
            seen.add(tag)
            tags.append(tag)
    if not tags:
        raise BatchError("name at least one asset tag")
    found = dict(Unit.objects.filter(asset_tag__in=tags).values_list("asset_tag", "pk"))
    unknown = [t for t in tags if t not in found]
    if unknown:
        raise BatchError(f"no unit has the asset tag{'s' if len(unknown) > 1 else ''} {', '.join(unknown[:10])}"
                         + (" ..." if len(unknown) > 10 else ""))
    return [found[t] for t in tags]


def batch_create(*, unit_ids, title, user=None, enqueue=True):
    """A queued batch of the given units' sheets (in that order)."""
    unit_ids = list(dict.fromkeys(int(i) for i in unit_ids))
    if not unit_ids:
        raise BatchError("the batch has no units")
    if len(unit_ids) > MAX_UNITS:
        raise BatchError(f"a batch holds at most {MAX_UNITS} units, not {len(unit_ids)}")
    batch = SheetBatch.objects.create(title=title[:120], unit_ids=unit_ids, total=2 * len(unit_ids),
                                      requested_by=user)
    if enqueue:
        from .tasks import sheet_batch_build

        transaction.on_commit(lambda: sheet_batch_build.delay(batch.pk))
    return batch


def _progress(batch_id, every):
    state = {"done": 0}

    def step(_=None):
        state["done"] += 1
        if state["done"] % every == 0:
            SheetBatch.objects.filter(pk=batch_id).update(done=state["done"])

    return step


def batch_build(batch_id):
    """Build a queued batch; returns its state afterwards."""
    now = timezone.now()
    if not SheetBatch.objects.filter(pk=batch_id, state=State.QUEUED).update(state=State.RUNNING, started_at=now,
                                                                             done=0):
        batch = SheetBatch.objects.filter(pk=batch_id).only("state").first()
        return batch.state if batch else "missing"
    batch = SheetBatch.objects.defer("pdf").get(pk=batch_id)
    n = len(batch.unit_ids)
    step = _progress(batch.pk, max(1, n // 50))
    try:
        sheets = []
        for unit_id in batch.unit_ids:
            try:
                sheets.append(unit_sheet(unit_id=unit_id))
            except UnknownUnit:  # removed since the batch was asked for: left out
                pass
            step()
        data = batch_pdf_bytes(sheets, on_draw=step)
    except OperationalError:  # the database let go: queued again for the task's retry
        SheetBatch.objects.filter(pk=batch.pk).update(state=State.QUEUED, done=0)
        raise
    except Exception as exc:  # keep the reason on the row for the page, then let the task see it
        SheetBatch.objects.filter(pk=batch.pk).update(state=State.FAILED, error=f"{type(exc).__name__}: {exc}"[:300],
                                                      finished_at=timezone.now())
        log.exception("sheet batch %s failed", batch.pk)
        raise
    SheetBatch.objects.filter(pk=batch.pk).update(state=State.DONE, pdf=data, done=batch.total,
                                                  finished_at=timezone.now())
    log.info("sheet batch %s: %d sheets, %d bytes, %.1f s", batch.pk, len(sheets), len(data),
             (timezone.now() - now).total_seconds())
    return State.DONE
