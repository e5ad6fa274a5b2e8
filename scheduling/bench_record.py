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
