"""Benchmark figures kept for comparison over time: ``var/bench.json``.

Each benchmark command merges its figures into one JSON object (keys such as
``floor_s``, ``full_s``, ``ratio_full_to_floor``, ``naive_ratio``,
``peak_mb_10k``, ``peak_mb_100k``, ``checkin_p95_ms_sqlite``,
``checkin_p95_ms_postgres``), so that ``make bench`` leaves one file with the
latest figure of each.  ``.ci/bench`` appends a copy to
``var/bench-history.jsonl`` at the end of a run.
"""

import datetime as dt
import json
import os
from pathlib import Path

BENCH_FILE = Path(os.environ.get("RECAP_BENCH_FILE", "var/bench.json"))


def record(**figures):
    """Merge ``figures`` (name -> number) into ``var/bench.json``; returns the
    whole object.  A missing or unreadable file starts afresh."""
    try:
        data = json.loads(BENCH_FILE.read_text())
        if not isinstance(data, dict):
            data = {}
    except (OSError, ValueError):
        data = {}
    data.update({k: (round(v, 4) if isinstance(v, float) else v) for k, v in figures.items()})
    data["recorded_at"] = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")
    BENCH_FILE.parent.mkdir(parents=True, exist_ok=True)
    tmp = BENCH_FILE.with_suffix(".tmp")
    tmp.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n")
    tmp.replace(BENCH_FILE)
    return data


def table_state(model):
    """How the table of ``model`` stands on PostgreSQL, for a benchmark to
    print beside its figures: ``(words, dead row versions)``; ``("", None)``
    on another database.  A server without autovacuum keeps the old version
    of every row a refresh rewrote until something vacuums the table, and
    reads slow down with them."""
    from django.db import connection

    if connection.vendor != "postgresql":
        return "", None
    table = model._meta.db_table
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_stat_clear_snapshot()")
        cursor.execute("SELECT n_live_tup, n_dead_tup, GREATEST(last_vacuum, last_autovacuum), "
                       "pg_total_relation_size(relid), current_setting('autovacuum') "
                       "FROM pg_stat_user_tables WHERE relname = %s", [table])
        row = cursor.fetchone()
    if row is None:
        return "", None
    live, dead, vacuumed, size, auto = row
    when = "never vacuumed" if vacuumed is None else f"last vacuumed {vacuumed:%Y-%m-%d %H:%M} UTC"
    return (f"{table}: {live:,} live rows, {dead:,} dead row versions, {size / 2**20:.0f} MB, {when}, "
            f"autovacuum {auto}"), dead


def vacuumed(*models):
    """PostgreSQL: ``VACUUM (ANALYZE)`` the tables of ``models`` whatever the
    server's autovacuum setting, and return the seconds it took; 0.0 on
    another database.  A benchmark that rewrites every row again and again
    calls it between runs, so that each run meets the table as the nightly
    job (``services.forecast_tables_vacuum``) or autovacuum leaves it after a
    full refresh, not with the dead versions of every run before it."""
    import time

    from django.db import connection

    if connection.vendor != "postgresql":
        return 0.0
    started = time.perf_counter()
    with connection.cursor() as cursor:
        cursor.execute(f"VACUUM (ANALYZE) {', '.join(connection.ops.quote_name(m._meta.db_table) for m in models)}")
    return time.perf_counter() - started


def yardstick_ms(rounds=5):
    """How fast this machine runs Python just now, to read figures of
    different runs against: the fastest of ``rounds`` runs of a fixed
    pure-Python task (a million additions in a loop, then sorting 200,000
    floats) [ms]; lower is faster.  The desk's check-in is mostly Python,
    and a machine shared with others changes speed from hour to hour: a
    figure missed with a yardstick twice the usual tells a slow machine,
    not slower code.  Not a budget."""
    import random
    import time

    rng = random.Random(12)
    values = [rng.random() for _ in range(200_000)]
    best = float("inf")
    for _ in range(rounds):
        started = time.perf_counter()
        total = 0
        for k in range(1_000_000):
            total += k
        sorted(values)
        best = min(best, time.perf_counter() - started)
    return best * 1000
