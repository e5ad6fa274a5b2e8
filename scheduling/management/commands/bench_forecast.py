"""manage.py bench_forecast: speed and memory of the life engine on this database.

Prints figures and writes them to var/bench.json; checks nothing.  `make
bench` builds a synthetic fleet first.  Budgets (issue: performance): the
full recompute at most 1.0x the floor (the bare SQL read of today's capacitor
rows); at least 50x faster than a naive per-object ORM loop that computes
damage only; peak memory under 400 MB at 100,000 units (the batched refresh);
one unit under 20 ms.
"""

import gc
import math
import statistics
import time
import tracemalloc

from django.core.management.base import BaseCommand, CommandError
from django.db import connection, reset_queries
from django.test.utils import CaptureQueriesContext

from fleet.models import Unit
from scheduling import histogram as H
from scheduling.batches import fleet_histories_sync, fleet_refresh
from scheduling.bench_record import record, table_state, vacuumed, yardstick_ms
from scheduling.models import ThermalHistory, UnitForecast
from scheduling.parts import count_rows, read_rows, rows_sql
from scheduling.services import forecast_refresh, forecast_tables_vacuum

RATIO_BUDGET = 1.0
NAIVE_BUDGET = 50.0
PEAK_BUDGET_MB = 400.0
ONE_UNIT_BUDGET_MS = 20.0


def naive_damage(unit_ids):
    """The naive way: per unit, its objects through the ORM, and per part a
    Python loop over the temperature bins with the 10 K rule (damage only:
    no ripple heating, no drift, no risk, nothing stored)."""
    total = 0.0
    for pk in unit_ids:
        unit = Unit.objects.get(pk=pk)
        history = ThermalHistory.objects.get(unit=unit)
        powered, unpowered = H.from_bytes(history.powered), H.from_bytes(history.unpowered)
        for cap in unit.capacitors.all():
            damage = 0.0
            for k, centre in enumerate(H.BIN_CENTRES_C.tolist()):
                for hours, temp in ((powered[k], centre), (unpowered[k], centre)):
                    if hours > 0:
                        damage += hours / (cap.rated_life_h * math.pow(2.0, (cap.rated_temp_c - temp) / 10.0))
            total += damage
    return total


class Command(BaseCommand):
    help = ("Time a full-fleet forecast against a bare read of today's capacitor rows and a naive ORM loop; "
            "peak memory of the batched refresh; one unit's refresh.")

    def add_arguments(self, parser):
        parser.add_argument("--repeat", type=int, default=5, help="Alternating floor/full runs (default 5).")
        parser.add_argument("--memory-only", action="store_true",
                            help="Only the peak memory of the batched refresh (for the 100,000-unit fleet).")
        parser.add_argument("--naive-units", type=int, default=400,
                            help="Units the naive loop runs on; it is timed on a quarter, half and all of them.")

    def handle(self, *args, **options):
        if options["repeat"] < 1:
            raise CommandError("--repeat must be at least 1.")
        if options["naive_units"] < 4:
            raise CommandError("--naive-units must be at least 4.")
        units = Unit.objects.exclude(status=Unit.Status.RETIRED).count()
        if not units:
            raise CommandError("The database has no units; run make_fleet first.")
        w = self.stdout.write
        w(f"database            {connection.vendor}")
        w(f"units               {units}")
        yardstick = yardstick_ms()
        w(f"machine yardstick   {yardstick:8.0f} ms  (bench_record.yardstick_ms: a fixed pure-Python task, to read "
          f"the figures of different runs against; lower is faster)")
        record(yardstick_ms=yardstick)
        t0 = time.perf_counter()
        synced = fleet_histories_sync()
        if synced["changed"] or synced["repacked"]:
            w(f"histories brought up to date first: {synced['changed']} rebuilt or extended, "
              f"{synced['repacked']} packed ({time.perf_counter() - t0:.1f} s, once)")
        peak_mb = self.peak_memory(units)
        key = "peak_mb_100k" if units >= 50_000 else "peak_mb_10k"
        if options["memory_only"]:
            record(**{key + ("" if connection.vendor == "sqlite" else f"_{connection.vendor}"): peak_mb})
            return
        self.speed(units, options, peak_mb, key)

    def peak_memory(self, units):
        gc.collect()
        tracemalloc.start()
        started = time.perf_counter()
        report = fleet_refresh()
        seconds = time.perf_counter() - started
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        peak_mb = peak / 2**20
        self.stdout.write(
            f"peak memory         {peak_mb:8.1f} MB  budget < {PEAK_BUDGET_MB:.0f} MB at 100,000 units   "
            f"{'ok' if peak_mb < PEAK_BUDGET_MB else 'OVER'}   (tracemalloc, the batched refresh: {report.batches} "
            f"batches, {seconds:.1f} s under tracing; {peak / units / 1024:.1f} KB a unit)")
        return peak_mb

    def speed(self, units, options, peak_mb, key):
        w = self.stdout.write
        # Floor and full runs alternate, so both meet the same state of the
        # machine (page cache, other load); each pair gives a ratio too.
        # PostgreSQL: each full run meets the forecast table as the nightly job
        # leaves it after a full refresh (vacuumed, outside the timing); each
        # run rewrites every row, and without it the next run would write
        # past the dead versions of all the runs before it.
        floor, full, stages, vacuums = [], [], [], []
        vacuumed(UnitForecast)
        for _ in range(options["repeat"]):
            t0 = time.perf_counter()
            n_rows = read_rows(bare=True)
            t1 = time.perf_counter()
            run = forecast_refresh()
            t2 = time.perf_counter()
            floor.append(t1 - t0)
            full.append(t2 - t1)
            stages.append(run.seconds)
            # Not held into the next run: a worker holds one run's arrays at a time,
            # and the two together would take the next run's memory fresh from the system.
            run = None
            vacuums.append(vacuumed(UnitForecast))
        batched = []
        for _ in range(max(1, options["repeat"] // 2)):
            t0 = time.perf_counter()
            fleet_refresh()
            batched.append(time.perf_counter() - t0)
        with CaptureQueriesContext(connection) as ctx:
            forecast_refresh()
        queries = len(ctx.captured_queries)
        reset_queries()

        pairs = sorted(b / a for a, b in zip(floor, full))
        ratio = statistics.median(pairs)
        best = stages[full.index(min(full))]
        w(f"capacitor rows      {n_rows}")
        w(f"floor               {statistics.median(floor):8.3f} s   median (best {min(floor):.3f}): bare SQL read of "
          f"today's capacitor rows, fetched, nothing done")
        if connection.vendor == "postgresql":
            binary = []
            for _ in range(options["repeat"]):
                t0 = time.perf_counter()
                count_rows(rows_sql(), binary=True)
                binary.append(time.perf_counter() - t0)
            w(f"  in binary format {statistics.median(binary):8.3f} s   median: the same rows in psycopg's binary "
              f"format (the engine's own reads use it; the budget is set against the floor above)")
        w(f"full recompute      {statistics.median(full):8.3f} s   median (best {min(full):.3f}): one pass, load, "
          f"compute, store")
        w(f"  each pair         floor {', '.join(f'{t:.3f}' for t in floor)} s; full {', '.join(f'{t:.3f}' for t in full)} s "
          f"(in the order run)")
        w(f"  of which          load {best['load']:.3f} s, compute {best['compute']:.3f} s, store {best['store']:.3f} s "
          f"(the best run)")
        if connection.vendor == "postgresql":
            w(f"  between runs      {statistics.median(vacuums):8.3f} s   median, not counted: VACUUM (ANALYZE) of the "
              f"forecast table, as the nightly job does after a full refresh (each run meets the table as it leaves it)")
        w(f"batched refresh     {statistics.median(batched):8.3f} s   median of {len(batched)} (the nightly job's "
          f"forecast step, means first pass and ranking included)")
        verdict = "ok" if ratio <= RATIO_BUDGET else f"OVER by {100 * (ratio / RATIO_BUDGET - 1):.0f} %"
        w(f"ratio full/floor    {ratio:8.2f}     budget <= {RATIO_BUDGET:.1f}   {verdict}   (median of {len(pairs)} "
          f"alternating pairs, range {pairs[0]:.2f}-{pairs[-1]:.2f})")
        if ratio > RATIO_BUDGET:
            w(f"  where the time goes: load {best['load'] / min(full):.0%}, compute {best['compute'] / min(full):.0%},"
              f" store {best['store'] / min(full):.0%} of the full run")
        w(f"queries, full       {queries:8d}     (same for any fleet size)")

        naive_ratio, per_unit = self.naive(units, options["naive_units"], statistics.median(full))
        some = list(Unit.objects.exclude(status=Unit.Status.RETIRED).values_list("pk", flat=True)[:25])
        with CaptureQueriesContext(connection) as one:
            forecast_refresh(unit_ids=[some[0]])
        # PostgreSQL: first as the full refreshes above left the forecast table
        # (the last, forecast_refresh(), vacuums nothing: its old row versions
        # are still there), then as the nightly job leaves it (it vacuums).
        states = [("", None)]
        if connection.vendor == "postgresql":
            states = [("as the full refreshes above left it", None),
                      ("as the nightly job leaves it (vacuumed)", lambda: forecast_tables_vacuum(rewritten=True))]
        figures = {}
        for label, before in states:
            if before:
                before()
            state, _ = table_state(UnitForecast)
            single, parts = [], []
            for pk in some:
                t0 = time.perf_counter()
                run = forecast_refresh(unit_ids=[pk])
                single.append(time.perf_counter() - t0)
                parts.append(run.seconds)
            med = statistics.median(single) * 1000
            verdict = "ok" if med < ONE_UNIT_BUDGET_MS else f"OVER by {100 * (med / ONE_UNIT_BUDGET_MS - 1):.0f} %"
            w(f"one unit, median    {med:8.1f} ms  budget < {ONE_UNIT_BUDGET_MS:.0f} ms   {verdict}"
              f"   (max {max(single) * 1000:.1f} ms over {len(single)} units; {len(one.captured_queries)} queries)")
            if med >= ONE_UNIT_BUDGET_MS:
                stage = {k: statistics.median(p[k] for p in parts) * 1000 for k in ("load", "compute", "store")}
                w(f"  where the time goes: load {stage['load']:.1f} ms, compute {stage['compute']:.1f} ms, "
                  f"store {stage['store']:.1f} ms (medians), the rest (the histories' check is in the load) "
                  f"{med - sum(stage.values()):.1f} ms")
            if state:
                w(f"  the forecast table {label}: {state}")
            # The last state measured is the one recorded: on PostgreSQL the nightly job's.
            figures["one_unit_ms"] = med
            if before is None and state:
                figures["one_unit_ms_unvacuumed"] = med
        figures.update({"floor_s": statistics.median(floor), "full_s": statistics.median(full),
                        "ratio_full_to_floor": ratio, "batched_s": statistics.median(batched),
                        "naive_ratio": naive_ratio, "naive_ms_per_unit": per_unit * 1000})
        # SQLite's figures under the plain names, PostgreSQL's with a suffix
        suffix = "" if connection.vendor == "sqlite" else f"_{connection.vendor}"
        record(**{f"{k}{suffix}": v for k, v in figures.items()}, **{key + suffix: peak_mb})

    def naive(self, units, n, full_s):
        ids = list(Unit.objects.exclude(status=Unit.Status.RETIRED).order_by("?").values_list("pk", flat=True)[:n])
        sizes = [len(ids) // 4, len(ids) // 2, len(ids)]
        times = []
        for size in sizes:
            t0 = time.perf_counter()
            naive_damage(ids[:size])
            times.append(time.perf_counter() - t0)
        per_unit = times[-1] / sizes[-1]
        fleet_s = per_unit * units
        ratio = fleet_s / full_s
        scaling = ", ".join(f"{s} units {t:.2f} s ({t / s * 1000:.1f} ms each)" for s, t in zip(sizes, times))
        self.stdout.write(f"naive ORM loop      {fleet_s:8.1f} s   extrapolated to the fleet from {scaling}: linear")
        verdict = "ok" if ratio >= NAIVE_BUDGET else f"OVER: {NAIVE_BUDGET / ratio:.1f}x short"
        self.stdout.write(f"full vs naive       {ratio:8.1f}x    budget >= {NAIVE_BUDGET:.0f}x   {verdict}   "
                          f"(naive loop computes damage only)")
        return ratio, per_unit
