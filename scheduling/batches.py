"""The fleet refresh in batches: memory flat in fleet size, work for many workers.

``forecast_refresh()`` forecasts the whole fleet in one pass, which holds
every unit's arrays at once (about 20 KB a unit).  The nightly job instead
goes through the fleet in batches of consecutive unit ids:

1. a first pass reads each batch's recent use (packed, small) and adds up
   the sums behind each gear model's mean use, which fill units without
   history (``forecast.model_use_sums``); the means are kept (``ModelUse``);
2. each batch is loaded, forecast with the fleet's means and stored, with a
   place-holder priority for each unit that needs work;
3. one statement numbers the priorities across the fleet
   (``services.priorities_rank``).

The result equals one pass over the whole fleet (a test holds it to that).
Step 2 is independent per batch, so ``scheduling.tasks`` can send the
batches to workers on any host that shares the database and Redis.
"""

import logging
import time
from dataclasses import dataclass, field

import numpy as np
from django.db import transaction
from django.db.models import Count
from django.utils import timezone

from fleet.models import GearModel, Unit

from .forecast import model_use_sums
from .gcpause import with_collector_paused
from .heap import keep_freed_memory
from .loader import history_rows, unit_rows, use_arrays
from .models import UnitForecast
from .services import (_options_from, _store, _store_unforecastable, forecast_compute, forecast_tables_vacuum,
                       model_use_store, priorities_rank)
from .thermal import thermal_sync

log = logging.getLogger("scheduling.services")  # one logger for every forecast

#: Units per batch: about 20 KB of arrays each while a batch is forecast.
REFRESH_BATCH_UNITS = 5000
#: Units whose histories one step of the nightly job brings up to date.
NIGHTLY_CHUNK = 2000


def fleet_batches(batch_units=REFRESH_BATCH_UNITS):
    """The fleet (units not retired) as inclusive id ranges of at most
    ``batch_units`` units each: a list of (first id, last id)."""
    if not isinstance(batch_units, int) or batch_units < 1:
        raise ValueError(f"batch_units must be a whole number of at least 1, not {batch_units!r}")
    ids = np.fromiter(Unit.objects.exclude(status=Unit.Status.RETIRED).order_by("pk")
                      .values_list("pk", flat=True).iterator(chunk_size=20000), dtype=np.int64)
    return [(int(ids[k]), int(ids[min(k + batch_units, ids.size) - 1])) for k in range(0, ids.size, batch_units)]


@with_collector_paused
def first_pass_sums(batches, *, today, min_history_days, keep=None):
    """First pass: the sums behind every gear model's mean recent use, batch
    by batch (only each unit's packed recent hires are read).  Returns
    (gear model ids, sums as ``forecast.model_use_sums`` gives).  ``keep``,
    a dict, is given each batch's use arrays (a few floats a unit) for the
    second pass to reuse."""
    keep_freed_memory()  # large freed arrays kept for the next batch (heap.py)
    model_ids = np.array(GearModel.objects.order_by("pk").values_list("pk", flat=True), dtype=np.int64)
    index = {int(m): k for k, m in enumerate(model_ids.tolist())}
    total = None
    for first, last in batches:
        units = unit_rows(id_range=(first, last))
        hist = history_rows(id_range=(first, last), columns=("recent", "parts_version"))
        p, o, a, n = use_arrays(units, hist, today=today, min_history_days=min_history_days)
        if keep is not None:
            keep[(first, last)] = (np.array([u[0] for u in units], dtype=np.int64), p, o, a, n)
        sums = model_use_sums(np.array([index[u[2]] for u in units], dtype=np.int64), model_ids.size, p, o, a, n)
        total = sums if total is None else {k: total[k] + v for k, v in sums.items()}
    if total is None:
        total = model_use_sums(np.zeros(0, dtype=np.int64), model_ids.size, *(np.zeros(0),) * 4)
    return model_ids, total


@with_collector_paused
def forecast_batch(first_id, last_id, *, today, model_means, use=None, **options):
    """Forecast and store the units with ids in [first_id, last_id] (not
    retired) with the fleet's gear-model means; priorities are left as
    place-holders for ``priorities_rank``.  Returns (units forecast, units
    that could not be, seconds by stage)."""
    keep_freed_memory()  # large freed arrays kept for the next batch (heap.py)
    run = forecast_compute(id_range=(first_id, last_id), today=today, model_means=model_means, use=use, **options)
    started = time.perf_counter()
    with transaction.atomic():
        _store(run)
        _store_unforecastable(run)
    run.seconds["store"] = time.perf_counter() - started
    for unit in run.unforecastable:
        log.warning("Cannot forecast %s: %s", unit.asset_tag, "; ".join(unit.reasons))
    return run.fleet.n_units, len(run.unforecastable), run.seconds


@dataclass
class FleetRefresh:
    """What a batched fleet refresh did."""

    today: object
    batches: int = 0
    forecast: int = 0
    cannot_forecast: int = 0
    statuses: dict = field(default_factory=dict)   # status -> units, as stored
    need_work: int = 0
    seconds: dict = field(default_factory=dict)


def fleet_means(*, today, batch_units=REFRESH_BATCH_UNITS, min_history_days=None, batches=None, keep=None):
    """The first pass alone: keep the fleet's gear-model means (``ModelUse``)
    and return them with the batches (for workers to use)."""
    opts = _options_from()
    batches = fleet_batches(batch_units) if batches is None else batches
    model_ids, sums = first_pass_sums(batches, today=today,
                                      min_history_days=min_history_days or opts.min_history_days, keep=keep)
    return batches, model_use_store(model_ids, sums, today)


def fleet_refresh(*, today=None, batch_units=REFRESH_BATCH_UNITS, progress=None, **options):
    """Forecast and store the whole fleet in batches (see the module notes);
    the same stored rows as ``forecast_refresh()``.  ``progress(n_units)``
    is called after each batch.  Histories must be up to date (the nightly
    job syncs them first).  Returns a FleetRefresh."""
    today = today or timezone.localdate()
    report = FleetRefresh(today=today)
    t0 = time.perf_counter()
    use = {}
    batches, means = fleet_means(today=today, batch_units=batch_units,
                                 min_history_days=_options_from(**_engine_only(options)).min_history_days, keep=use)
    report.seconds["means"] = time.perf_counter() - t0
    for first, last in batches:
        n, bad, _ = forecast_batch(first, last, today=today, model_means=means, use=use.pop((first, last), None),
                                   **options)
        report.forecast, report.cannot_forecast = report.forecast + n, report.cannot_forecast + bad
        report.batches += 1
        if progress:
            progress(n + bad)
    t1 = time.perf_counter()
    fleet_finish(rewritten=True)
    report.seconds["rank"] = time.perf_counter() - t1
    report.seconds["total"] = time.perf_counter() - t0
    report.statuses, report.need_work = fleet_summary()
    log.info("Forecast %d units as of %s; %d could not be forecast.", report.forecast, today, report.cannot_forecast)
    return report


def fleet_summary():
    """(units per stored status, units that need work): two small queries."""
    statuses = dict(UnitForecast.objects.order_by().values_list("status").annotate(n=Count("id")))
    return statuses, UnitForecast.objects.filter(priority__isnull=False).count()


def _engine_only(options):
    return {k: v for k, v in options.items() if k in ("law", "activation_energy_ev", "esr_feedback",
                                                      "weibull_shape", "frailty_sigma")}


def fleet_finish(*, rewritten=False):
    """After the batches (and after a check-in, ``tasks.rank_priorities``):
    drop retired units' results, number the priorities; then, on PostgreSQL
    without autovacuum and outside a transaction, vacuum the tables the
    refresh or the renumbering filled with old row versions
    (``services.forecast_tables_vacuum``; ``rewritten``: this process just
    wrote every row, vacuum whatever the statistics say yet)."""
    with transaction.atomic():
        UnitForecast.objects.filter(unit__status=Unit.Status.RETIRED).delete()
        changed = priorities_rank()
    forecast_tables_vacuum(rewritten=rewritten)
    return changed


def fleet_histories_sync(*, now=None, progress=None, chunk=NIGHTLY_CHUNK):
    """Bring every history (and its packs) up to date with the register and
    count storage up to ``now``, in chunks of units.  Returns the totals."""
    now = now or timezone.now()
    ids = list(Unit.objects.exclude(status=Unit.Status.RETIRED).order_by("pk").values_list("pk", flat=True))
    changed = advanced = repacked = 0
    for start in range(0, len(ids), chunk):
        part = ids[start:start + chunk]
        report = thermal_sync(unit_ids=part, until=now, advance_storage=True)
        changed, advanced, repacked = changed + report.changed, advanced + report.advanced, repacked + report.repacked
        if progress:
            progress(len(part))
    return {"changed": changed, "advanced": advanced, "repacked": repacked, "units": len(ids)}


def fleet_nightly_refresh(*, now=None, progress=None, batch_units=REFRESH_BATCH_UNITS):
    """The nightly job in one process: histories (``fleet_histories_sync``),
    then the batched forecast (``fleet_refresh``).  ``progress(n_units)`` is
    called as units are done, in both steps.  Returns (sync totals,
    FleetRefresh)."""
    now = now or timezone.now()
    synced = fleet_histories_sync(now=now, progress=progress)
    return synced, fleet_refresh(today=timezone.localdate(now), batch_units=batch_units, progress=progress)
