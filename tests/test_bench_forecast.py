"""manage.py bench_forecast on a small synthetic fleet: it runs through,
writes its figures and, on PostgreSQL, vacuums the forecast table between
its full runs (it times; nothing here reads the times against a budget)."""

import io
import json
import re

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError
from django.db import connection

from scheduling import bench_record
from scheduling.models import UnitForecast

pytestmark = pytest.mark.django_db(transaction=True)  # VACUUM cannot run inside a transaction


@pytest.fixture
def bench_file(tmp_path, monkeypatch):
    path = tmp_path / "bench.json"
    monkeypatch.setattr(bench_record, "BENCH_FILE", path)
    return path


def run(*args):
    out = io.StringIO()
    call_command("bench_forecast", *args, stdout=out)
    return out.getvalue()


def last_vacuum():
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_stat_clear_snapshot()")
        cursor.execute("SELECT last_vacuum FROM pg_stat_user_tables WHERE relname = %s",
                       [UnitForecast._meta.db_table])
        return cursor.fetchone()[0]


def test_it_times_the_fleet_and_records_the_figures(bench_file):
    call_command("make_fleet", "--units", "30", "--positions", "6", "--years", "1", "--seed", "5", stdout=io.StringIO())
    text = run("--repeat", "2", "--naive-units", "4")
    figures = json.loads(bench_file.read_text())
    suffix = "" if connection.vendor == "sqlite" else f"_{connection.vendor}"
    for key in ("floor_s", "full_s", "ratio_full_to_floor", "naive_ratio", "peak_mb_10k", "one_unit_ms"):
        assert figures[key + suffix] > 0, key
    # The machine's speed, printed and recorded.
    assert float(re.search(r"machine yardstick\s+(\d+) ms", text).group(1)) == pytest.approx(
        figures["yardstick_ms"], abs=0.5)
    # The ratio printed is the one recorded.
    printed = float(re.search(r"ratio full/floor\s+([\d.]+)", text).group(1))
    assert printed == pytest.approx(figures["ratio_full_to_floor" + suffix], abs=0.006)
    assert UnitForecast.objects.count() == 30
    if connection.vendor == "postgresql":
        assert "between runs" in text and "VACUUM (ANALYZE) of the forecast table" in text
        assert last_vacuum() is not None
    else:
        assert "between runs" not in text


def test_vacuumed_is_nothing_on_sqlite_and_a_vacuum_on_postgresql():
    seconds = bench_record.vacuumed(UnitForecast)
    if connection.vendor == "postgresql":
        assert seconds > 0 and last_vacuum() is not None
    else:
        assert seconds == 0.0


@pytest.mark.parametrize("args, words", [(["--repeat", "0"], "--repeat must be at least 1"),
                                         (["--naive-units", "3"], "--naive-units must be at least 4"),
                                         ([], "no units")])
def test_bad_arguments_are_one_clear_error(bench_file, args, words):
    with pytest.raises(CommandError, match=words):
        run(*args)
    assert not bench_file.exists()


def test_the_yardstick_is_the_fastest_round_in_milliseconds(monkeypatch):
    """``yardstick_ms``: each round timed, the fastest kept, in ms."""
    import time

    ticks = iter([10.0, 10.3, 20.0, 20.1, 30.0, 30.2])  # rounds of 0.3, 0.1 and 0.2 s
    monkeypatch.setattr(time, "perf_counter", lambda: next(ticks))
    assert bench_record.yardstick_ms(rounds=3) == pytest.approx(100.0)
    with pytest.raises(StopIteration):  # every round was timed: no tick left
        next(ticks)
