"""manage.py bench_workers: the nightly forecast on one worker process against two.

Starts Celery worker processes on the Redis at --redis (a database of its
own), sends the fleet's batches as a chord ending in the ranking, and times
it to the end, first with one worker, then with two (alternating, repeated).
Prints figures and writes them to var/bench.json; checks nothing.  On this
2-core machine two workers share the cores with the database, so the gain
shows what one more host would bring only roughly; see the README.
"""

import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

from celery import Celery, chord, signature
from django.core.management.base import BaseCommand, CommandError
from django.db import connection
from django.utils import timezone

from fleet.models import Unit
from scheduling.batches import REFRESH_BATCH_UNITS, fleet_batches, fleet_histories_sync, fleet_means
from scheduling.bench_record import record

ROOT = Path(__file__).resolve().parents[3]


def _database_url():
    s = connection.settings_dict
    if connection.vendor == "sqlite":
        return f"sqlite:///{s['NAME']}"
    return f"postgres://{s['USER'] or 'postgres'}@{s['HOST'] or '127.0.0.1'}:{s['PORT'] or 5432}/{s['NAME']}"


class Command(BaseCommand):
    help = "Time the batched nightly forecast spread over one worker process, then two."

    def add_arguments(self, parser):
        parser.add_argument("--redis", default="redis://127.0.0.1:6379/13", help="Redis for broker and results.")
        parser.add_argument("--repeat", type=int, default=2, help="Runs of each (default 2).")
        parser.add_argument("--batch-units", type=int, default=REFRESH_BATCH_UNITS)

    def handle(self, *args, redis, repeat, batch_units, **options):
        if repeat < 1 or batch_units < 1:
            raise CommandError("--repeat and --batch-units must be at least 1.")
        units = Unit.objects.exclude(status=Unit.Status.RETIRED).count()
        if not units:
            raise CommandError("The database has no units; run make_fleet first.")
        fleet_histories_sync()
        client = Celery(broker=redis, backend=redis, set_as_current=False)
        try:
            client.connection_for_write().ensure_connection(max_retries=1)
        except Exception as exc:  # noqa: BLE001 - any broker failure means: cannot run
            raise CommandError(f"No Redis at {redis}: {exc}") from None
        times = {1: [], 2: []}
        for _ in range(repeat):
            for n in (1, 2):
                times[n].append(self.run_with(n, redis, client, batch_units))
        one, two = statistics.median(times[1]), statistics.median(times[2])
        w = self.stdout.write
        w(f"database            {connection.vendor}, {units} units in batches of {batch_units}")
        w(f"one worker          {one:8.1f} s   median of {repeat} (runs: {', '.join(f'{t:.1f}' for t in times[1])})")
        w(f"two workers         {two:8.1f} s   median of {repeat} (runs: {', '.join(f'{t:.1f}' for t in times[2])})")
        w(f"speed-up            {one / two:8.2f}x   ({os.cpu_count()} cores here, shared with the database)")
        record(workers_1_s=one, workers_2_s=two, workers_speedup=one / two, workers_units=units)

    def run_with(self, n, redis, client, batch_units):
        env = dict(os.environ, REDIS_URL=redis, DATABASE_URL=_database_url(), RECAP_PARALLEL_REFRESH="true")
        workers = [subprocess.Popen(
            [sys.executable, "-m", "celery", "-A", "config", "worker", "--pool=solo", "--without-mingle",
             "--without-gossip", "--without-heartbeat", "--loglevel=WARNING", "-n", f"bench{k}-{os.getpid()}@%h"],
            cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL) for k in range(n)]
        try:
            time.sleep(3)  # let them connect
            today = timezone.localdate()
            started = time.perf_counter()
            ranges = fleet_batches(batch_units)
            fleet_means(today=today, batches=ranges)
            header = [signature("scheduling.fleet_refresh_batch", args=(a, b, today.isoformat()), app=client)
                      for a, b in ranges]
            chord(header, app=client)(signature("scheduling.rank_priorities", app=client)).get(timeout=3600)
            return time.perf_counter() - started
        finally:
            for w in workers:
                w.terminate()
            for w in workers:
                try:
                    w.wait(timeout=30)
                except subprocess.TimeoutExpired:
                    w.kill()
