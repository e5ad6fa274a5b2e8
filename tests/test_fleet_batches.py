"""The fleet refresh in batches (scheduling/batches.py) stores exactly what
one pass over the whole fleet stores; a forecast of one unit stores what the
fleet refresh stored for it; priorities stay numbered 1..K across the fleet
after any refresh.  Reference: the project's own one-pass refresh, whose
figures the rest of the suite checks against published sources; here the
batched and single-unit paths must reproduce it exactly."""

import datetime as dt
import math
import os
import subprocess
import sys
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np

import pytest
from django.core.management import call_command
from django.db import connection
from django.utils import timezone

from fleet.models import Unit, UnitCapacitor
from fleet.services import units_mark_changed
from front import workflows
from scheduling import batches, tasks
from scheduling.models import ModelUse, UnitForecast
from scheduling.services import forecast_refresh, priorities_rank, stored_positions

ROOT = Path(__file__).resolve().parent.parent
FIELDS = ["unit_id", "status", "due_date", "risk", "horizon_days", "max_damage_ratio", "storage_reform", "reasons",
          "positions", "act_by", "priority", "hire_risk", "score", "action_roles"]


FLOATS = ("risk", "max_damage_ratio", "hire_risk", "score")


def stored():
    return {r["unit_id"]: {**r, "positions": bytes(r["positions"] or b"")}
            for r in UnitForecast.objects.values(*FIELDS)}


def _same(name, a, b):
    """Equal, floats to a relative 1e-9 and the per-position single-precision
    figures to one unit in their last place: numpy's sums over arrays of other
    lengths may differ in the last bits (about 1e-15), and the hire risk, a
    difference of two hazards, carries that to about 1e-12."""
    if name in FLOATS and a is not None and b is not None:
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-300)
    if name == "positions":
        x, y = stored_positions(SimpleNamespace(positions=a)), stored_positions(SimpleNamespace(positions=b))
        if x.dtype != y.dtype or x.shape != y.shape:
            return False
        return all(np.array_equal(x[f], y[f]) if x.dtype[f].kind in "iub"
                   else np.allclose(x[f], y[f], rtol=3e-7, atol=0, equal_nan=True) for f in x.dtype.names)
    return a == b


def assert_same(got, want):
    """Equal stored rows; on failure name the units and fields that differ."""
    assert set(got) == set(want)
    differ = {u: {k: (got[u][k], want[u][k]) if k != "positions" else "differ" for k in FIELDS
                  if not _same(k, got[u][k], want[u][k])} for u in got}
    differ = {u: d for u, d in differ.items() if d}
    assert not differ, differ


def _small_fleet():
    call_command("make_fleet", units=23, positions=6, years=2, models=4, seed=5, stdout=open(os.devnull, "w"))
    units = list(Unit.objects.order_by("pk"))
    # Two units too new for their own history: they take their model's means.
    Unit.objects.filter(pk__in=[units[3].pk, units[11].pk]).update(joined_on=timezone.localdate() - dt.timedelta(days=30))
    # One unit the engine cannot use: it is set aside, the rest are forecast.
    UnitCapacitor.objects.filter(unit=units[7]).update(capacitance_uf=1e-6)
    # One retired unit: never forecast.
    Unit.objects.filter(pk=units[20].pk).update(status=Unit.Status.RETIRED)
    units_mark_changed(unit_ids=[units[k].pk for k in (3, 7, 11)])
    batches.fleet_histories_sync()
    return units


@pytest.fixture
def small_fleet(db):
    return _small_fleet()


def test_batches_store_what_one_pass_stores(small_fleet):
    one = forecast_refresh()
    assert len(one.unforecastable) == 1 and one.fleet.n_units == 21
    whole = stored()
    means = {m.gear_model_id: m.powered_h_per_year for m in ModelUse.objects.all()}
    UnitForecast.objects.all().delete()
    ModelUse.objects.all().delete()
    report = batches.fleet_refresh(batch_units=4)
    assert report.batches == 6 and (report.forecast, report.cannot_forecast) == (21, 1)
    assert_same(stored(), whole)
    assert {m.gear_model_id: m.powered_h_per_year for m in ModelUse.objects.all()} == means
    assert sum(report.statuses.values()) == 22 and report.need_work == sum(1 for r in whole.values() if r["priority"])


def test_one_unit_refreshed_alone_stores_what_the_fleet_refresh_stored(small_fleet):
    batches.fleet_refresh(batch_units=5)
    whole = stored()
    for unit in (small_fleet[3], small_fleet[4], small_fleet[12]):
        forecast_refresh(unit_ids=[unit.pk], sync=False)
        assert_same(stored(), whole), unit.asset_tag


def _ranked_in_python():
    rows = list(UnitForecast.objects.filter(priority__isnull=False).values_list("unit_id", "score", "act_by"))
    rows.sort(key=lambda r: (-r[1], r[2] is None, r[2] or dt.date.min, r[0]))
    return {unit_id: k + 1 for k, (unit_id, _, _) in enumerate(rows)}


def test_a_refresh_of_the_whole_fleet_stores_the_numbers_the_renumbering_gives(small_fleet):
    """A refresh of the whole fleet does not renumber: triage numbered the
    units that need work in the renumbering's order, and a unit set aside or
    retired keeps no number.  (Ties on score: ``triage``'s order is checked
    against the renumbering's in tests/test_triage.py.)"""
    # A number left from an earlier run on the unit that can no longer be forecast.
    forecast_refresh()
    UnitForecast.objects.filter(unit=small_fleet[7]).update(priority=4)
    first = UnitForecast.objects.filter(priority__isnull=False).order_by("unit_id").first()
    forecast_refresh()
    stored_numbers = dict(UnitForecast.objects.filter(priority__isnull=False).values_list("unit_id", "priority"))
    assert small_fleet[7].pk not in stored_numbers and small_fleet[20].pk not in stored_numbers
    assert stored_numbers == _ranked_in_python()
    assert sorted(stored_numbers.values()) == list(range(1, len(stored_numbers) + 1))
    assert priorities_rank() == 0
    assert first.unit_id in stored_numbers


def test_priorities_stay_numbered_across_the_fleet_after_a_check_in(small_fleet, django_capture_on_commit_callbacks):
    batches.fleet_refresh(batch_units=7)
    before = {u: p for u, p in UnitForecast.objects.filter(priority__isnull=False).values_list("unit_id", "priority")}
    assert before == _ranked_in_python() and sorted(before.values()) == list(range(1, len(before) + 1))
    # A unit back from a long hot hire: its forecast, and so the order, moves.
    unit = next(u for u in small_fleet if u.pk not in (small_fleet[7].pk, small_fleet[20].pk)
                and not Unit.objects.get(pk=u.pk).rentals.filter(in_at__isnull=True).exists())
    out = timezone.now() - dt.timedelta(hours=2)
    workflows.rental_check_out(unit_id=unit.pk, job_ref="HOT-1", out_at=out, override_reason="test hire")
    with django_capture_on_commit_callbacks(execute=True) as queued:  # the renumbering job, run inline
        workflows.rental_check_in(unit_id=unit.pk, in_at=out + dt.timedelta(hours=1), venue_ambient_c=45.0,
                                  powered_hours=1.0)
    assert len(queued) == 1
    after = {u: p for u, p in UnitForecast.objects.filter(priority__isnull=False).values_list("unit_id", "priority")}
    assert after == _ranked_in_python() and sorted(after.values()) == list(range(1, len(after) + 1))
    # The first in line whose parts, not its circuit, are the trouble is recapped
    # throughout: its score drops and the order changes.
    first = next(u for u, _ in sorted(after.items(), key=lambda x: x[1])
                 if "new part" not in " ".join(UnitForecast.objects.get(unit_id=u).reasons))
    score = UnitForecast.objects.get(unit_id=first).score
    designators = list(UnitCapacitor.objects.filter(unit_id=first).values_list("position__designator", flat=True))
    with django_capture_on_commit_callbacks(execute=True):
        workflows.service_record_recap(unit_id=first, performed_on=timezone.localdate(),
                                       replacements={d: {} for d in designators})
    final = {u: p for u, p in UnitForecast.objects.filter(priority__isnull=False).values_list("unit_id", "priority")}
    assert UnitForecast.objects.get(unit_id=first).score < score and final.get(first) != after[first]
    assert final == _ranked_in_python() and sorted(final.values()) == list(range(1, len(final) + 1))
    assert priorities_rank() == 0  # nothing left to renumber


def test_a_unit_refreshed_alone_takes_its_place_at_once(small_fleet):
    """Before the renumbering job runs, the unit refreshed already stands
    where the full ranking puts it (others may share a number meanwhile)."""
    batches.fleet_refresh(batch_units=7)
    needing = UnitForecast.objects.filter(priority__isnull=False)
    last = needing.order_by("-priority").first()
    # The three first in line drop behind it (their scores change, their numbers not yet).
    ahead = list(needing.order_by("priority").values_list("unit_id", flat=True)[:3])
    UnitForecast.objects.filter(unit_id__in=ahead).update(score=0.0)
    forecast_refresh(unit_ids=[last.unit_id], sync=False)
    place = UnitForecast.objects.get(unit_id=last.unit_id).priority
    assert place == _ranked_in_python()[last.unit_id] == last.priority - 3


def test_a_unit_refreshed_alone_takes_its_place_among_units_of_the_same_score(small_fleet):
    """Ties on score: an earlier act-by date first (none last), then the lower
    unit id; the place the unit is given at once is the full ranking's."""
    batches.fleet_refresh(batch_units=7)
    needing = UnitForecast.objects.filter(priority__isnull=False)
    ids = list(needing.order_by("unit_id").values_list("unit_id", flat=True))
    assert len(ids) >= 8
    dated = list(needing.filter(act_by__isnull=False).order_by("unit_id").values_list("unit_id", flat=True))
    assert len(dated) >= 2
    # Units with an act-by date of their own (the fleet's all have one), in the middle of the ids.
    for unit in (dated[len(dated) // 2], dated[len(dated) // 2 + 1]):
        # Its score as a refresh of it alone writes it (the fleet's may differ in the last bits).
        forecast_refresh(unit_ids=[unit], sync=False)
        mine = UnitForecast.objects.get(unit_id=unit)
        day = mine.act_by or timezone.localdate()
        others = [u for u in ids if u != unit]
        # Same score as the unit: some with its act-by date, some earlier, some later, some with none.
        UnitForecast.objects.filter(unit_id__in=others).update(score=mine.score)
        for k, u in enumerate(others):
            when = (day, day - dt.timedelta(days=3), None, day - dt.timedelta(days=5),
                    day + dt.timedelta(days=3))[k % 5]
            UnitForecast.objects.filter(unit_id=u).update(act_by=when)
        forecast_refresh(unit_ids=[unit], sync=False)  # writes its own score and act-by date again
        got = UnitForecast.objects.get(unit_id=unit)
        assert (got.score, got.act_by) == (mine.score, mine.act_by)
        assert 1 < got.priority < len(ids) and got.priority == _ranked_in_python()[unit]


@pytest.mark.django_db(transaction=True)
def test_the_fleet_refresh_vacuums_the_tables_it_rewrote_on_a_postgresql_server_without_autovacuum():
    """A server without autovacuum keeps every old row version the nightly
    refresh leaves behind; the refresh vacuums its two tables itself (a
    server with autovacuum is left to it)."""
    from scheduling.services import forecast_tables_vacuum

    _small_fleet()
    if connection.vendor != "postgresql":
        batches.fleet_refresh(batch_units=7)
        assert forecast_tables_vacuum() == []  # nothing to do on SQLite
        return

    def vacuums():
        with connection.cursor() as cursor:
            cursor.execute("SELECT pg_stat_clear_snapshot()")
            cursor.execute("SELECT relname, vacuum_count FROM pg_stat_user_tables "
                           "WHERE relname IN ('scheduling_unitforecast', 'scheduling_thermalhistory')")
            return dict(cursor.fetchall())

    with connection.cursor() as cursor:
        cursor.execute("SHOW autovacuum")
        autovacuum = cursor.fetchone()[0] == "on"
    before = vacuums()
    batches.fleet_refresh(batch_units=7)
    after = vacuums()
    assert set(after) == {"scheduling_unitforecast", "scheduling_thermalhistory"}
    if autovacuum:
        assert after == before  # the server's own autovacuum's work
    else:
        assert all(after[t] > before.get(t, 0) for t in after), (before, after)
