"""manage.py bench_forecast: speed and memory of the life engine on this database.

Prints figures; checks nothing.  `make bench` builds a synthetic fleet first.
Budgets (issue: life engine): full recompute within 2x the bare SQL read of the
same rows, peak memory under 400 MB, queries independent of fleet size, one
unit under 20 ms.
"""

import statistics
import time
import tracemalloc

from django.core.management.base import BaseCommand, CommandError
from django.db import connection, reset_queries
from django.test.utils import CaptureQueriesContext

from django.utils import timezone

from fleet.models import Unit
from scheduling.loader import load_fleet
from scheduling.services import forecast_refresh


def _loader_sql():
    """The statements the engine's loader runs, captured from one real load."""
    with CaptureQueriesContext(connection) as ctx:
        load_fleet(today=timezone.localdate())
    return [q["sql"] for q in ctx.captured_queries]


def _bare_read(statements):
    """The floor: run the loader's own SQL with a plain cursor and fetch every row."""
    rows = 0
    with connection.cursor() as c:
        for sql in statements:
            c.execute(sql)
            while True:
                chunk = c.fetchmany(20_000)
                if not chunk:
                    break
                rows += len(chunk)
    return rows


class Command(BaseCommand):
    help = "Time a full-fleet forecast against a bare read of the same rows, and one unit's."

    def add_arguments(self, parser):
        parser.add_argument("--repeat", type=int, default=5, help="Runs of each timing (best is reported).")

    def handle(self, *args, **options):
        if options["repeat"] < 1:
            raise CommandError("--repeat must be at least 1.")
        units = Unit.objects.count()
        if not units:
            raise CommandError("The database has no units; run make_fleet first.")

        statements = _loader_sql()
        # Floor and full runs alternate, so that both meet the same state of the
        # machine (page cache, other load); each pair gives a ratio too.
        floor, full, stages = [], [], []
        for _ in range(options["repeat"]):
            t0 = time.perf_counter()
            n_rows = _bare_read(statements)
            t1 = time.perf_counter()
            run = forecast_refresh()
            t2 = time.perf_counter()
            floor.append(t1 - t0)
            full.append(t2 - t1)
            stages.append(run.seconds)
        with CaptureQueriesContext(connection) as ctx:
            forecast_refresh()
        queries = len(ctx.captured_queries)
        reset_queries()

        tracemalloc.start()
        forecast_refresh()
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()

        some = list(Unit.objects.exclude(status=Unit.Status.RETIRED).values_list("pk", flat=True)[:25])
        single = []
        for pk in some:
            t0 = time.perf_counter()
            forecast_refresh(unit_ids=[pk])
            single.append(time.perf_counter() - t0)
        with CaptureQueriesContext(connection) as one:
            forecast_refresh(unit_ids=[some[0]])

        best_floor, best_full = min(floor), min(full)
        ratio = best_full / best_floor
        w = self.stdout.write
        w(f"database            {connection.vendor}")
        w(f"units               {units}")
        w(f"rows read           {n_rows}   ({len(statements)} statements)")
        w(f"bare SQL read       {best_floor:8.3f} s   (the floor: the loader's SQL, rows fetched, nothing done)")
        w(f"full recompute      {best_full:8.3f} s   (load, compute, store)")
        w(f"ratio               {ratio:8.2f}     budget <= 2.0   {'ok' if ratio <= 2 else 'OVER'}   (best full / best floor)")
        pairs = sorted(b / a for a, b in zip(floor, full))
        w(f"ratio per run       {statistics.median(pairs):8.2f}     median of {len(pairs)} alternating floor/full runs "
          f"(range {pairs[0]:.2f}-{pairs[-1]:.2f})")
        best = stages[full.index(best_full)]
        w(f"  of which          load {best['load']:.3f} s, compute {best['compute']:.3f} s, "
          f"store {best['store']:.3f} s   (the best full run)")
        w(f"peak memory         {peak / 2**20:8.1f} MB  budget < 400 MB (tracemalloc, Python + numpy)"
          f"   {'ok' if peak < 400 * 2**20 else 'OVER'}")
        w(f"queries, full       {queries:8d}     (same for any fleet size)")
        w(f"queries, one unit   {len(one.captured_queries):8d}")
        med = statistics.median(single) * 1000
        w(f"one unit, median    {med:8.1f} ms  budget < 20 ms   {'ok' if med < 20 else 'OVER'}"
          f"   (max {max(single) * 1000:.1f} ms over {len(single)} units)")
