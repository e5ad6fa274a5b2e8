"""The per-position results kept with each stored forecast: compressed with
LZ4, read back exactly; the older uncompressed layout still reads; a damaged
blob reads as empty instead of failing the page that shows it.  Also the
reasons' JSON text the store writes beside them."""

import json
from types import SimpleNamespace

import lz4.block
import numpy as np
import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from scheduling.services import (OLD_POSITION_LAYOUT, POSITION_DTYPE, POSITION_LAYOUT, _json_words,
                                 pack_positions, stored_positions)
from scheduling.sqlread import fetch_all


def _records(n, seed=7):
    rng = np.random.default_rng(seed)
    rec = np.zeros(n, dtype=POSITION_DTYPE)
    rec["capacitor_id"] = rng.integers(1, 2**40, n)
    for name in ("damage", "esr_ohm", "capacitance_f", "threshold", "reaches_day", "rate_per_day", "rate_factor"):
        rec[name] = rng.random(n).astype(np.float32)
    rec["measured_day"] = np.where(rng.random(n) < 0.5, np.nan, 20000.0)
    rec["action"], rec["why"] = rng.integers(0, 3, n), rng.integers(0, 6, n)
    return rec


@pytest.mark.parametrize("n", [0, 1, 50, 400])
def test_positions_come_back_exactly_as_stored(n):
    rec = _records(n)
    blob = pack_positions(rec)
    assert blob.startswith(POSITION_LAYOUT)
    back = stored_positions(SimpleNamespace(positions=blob))
    assert back.dtype == POSITION_DTYPE and len(back) == n
    # byte for byte, NaNs included
    assert back.tobytes() == rec.tobytes()


def test_the_older_uncompressed_layout_still_reads():
    rec = _records(12)
    back = stored_positions(SimpleNamespace(positions=OLD_POSITION_LAYOUT + rec.tobytes()))
    assert back.tobytes() == rec.tobytes()


@pytest.mark.parametrize("blob", [
    b"", None, b"XX99" + b"\x00" * 42,                      # empty, missing, another layout
    POSITION_LAYOUT + b"\xff\xff\xff\x7f garbage",           # a size no block can have
    POSITION_LAYOUT + lz4.block.compress(b"\x01" * 41),      # a whole number of records it is not
    OLD_POSITION_LAYOUT + b"\x00" * 41,
])
def test_a_damaged_or_foreign_blob_reads_as_no_positions(blob):
    assert len(stored_positions(SimpleNamespace(positions=blob))) == 0


@pytest.mark.django_db
def test_engine_reads_are_counted_and_bring_bytes_on_every_database():
    from fleet.models import Unit  # noqa: F401 - the tables exist
    from scheduling.models import ThermalHistory

    qn = connection.ops.quote_name
    with CaptureQueriesContext(connection) as ctx:
        rows = fetch_all(f"SELECT {qn('unit_id')}, {qn('powered')} FROM {qn(ThermalHistory._meta.db_table)} "
                         f"WHERE {qn('unit_id')} IN (%s, %s)", [1, 2])
    assert rows == []
    assert len(ctx.captured_queries) == 1
    with CaptureQueriesContext(connection) as ctx:
        (value,) = fetch_all("SELECT CAST(%s AS " + ("BYTEA" if connection.vendor == "postgresql" else "BLOB") + ")",
                             [b"\x00\x01\xfe"])[0]
    assert bytes(value) == b"\x00\x01\xfe"
    assert len(ctx.captured_queries) == 1


@pytest.mark.parametrize("words", [
    [], ["one"], ["C12 signal coupling: bass roll-off would rise above 40 Hz by Mar 2027", "two"],
    ['quote " and backslash \\ and tab \t', "non-ASCII: 25 \u00b0C, \u00b5F, \u2264 10 %", "\U0001f50c plug", ""],
])
def test_the_reasons_are_written_as_json_writes_them(words):
    """The store writes each unit's reasons with its own JSON writer (no
    encoder made per unit); the text is exactly the standard library's, so
    both databases read back the same list."""
    text = _json_words(words)
    assert text == json.dumps(words) and json.loads(text) == words


def _stored_rows():
    from scheduling.models import UnitForecast

    rows = list(UnitForecast.objects.order_by("unit_id").values())
    for row in rows:
        row.pop("id"), row.pop("computed_at")
        row["positions"] = bytes(row["positions"])
    return rows


@pytest.mark.django_db
def test_a_store_sent_in_many_statements_writes_what_one_statement_writes(monkeypatch):
    """On PostgreSQL a large store goes in pipelined statements of
    STORE_STATEMENT_UNITS units; here three units a statement over seven
    units, first over rows already there (the update), then into an empty
    table (the insert).  The reference is the store in one statement."""
    import datetime as dt

    from scheduling import services
    from scheduling.models import UnitForecast
    from tests.base import build_fleet, make_unit

    f = build_fleet()
    for k in range(2, 8):
        make_unit(f.gear_model, f.location, asset_tag=f"NMB-000{k}", serial=f"BA-80-200{k}",
                  year_made=1976 + k, joined_on=dt.date(2016 + k // 2, k, 3))
    first, later = dt.date(2026, 6, 1), dt.date(2027, 2, 1)
    services.forecast_refresh(today=first)
    in_one_first = _stored_rows()
    services.forecast_refresh(today=later)
    in_one_later = _stored_rows()
    assert len(in_one_later) == 7 and in_one_later != in_one_first
    assert all(isinstance(row["reasons"], list) for row in in_one_later)

    from scheduling import store

    monkeypatch.setattr(store, "STORE_STATEMENT_UNITS", 3)
    services.forecast_refresh(today=first)  # over the rows of the later day
    assert _stored_rows() == in_one_first
    UnitForecast.objects.all().delete()
    services.forecast_refresh(today=later)
    assert _stored_rows() == in_one_later


@pytest.mark.django_db
def test_each_stored_row_holds_the_runs_own_values():
    """Whatever form the store sends them in (on PostgreSQL, binary arrays
    built by numpy, scheduling/pgarrays.py), each stored row holds the run's
    values exactly: dates (none as empty), priority (none as empty), the
    figures to the last bit, the reasons.  The reference is the run's arrays."""
    import datetime as dt

    from scheduling import services, store
    from scheduling.days import day_to_date
    from scheduling.models import UnitForecast
    from tests.base import build_fleet, make_unit

    f = build_fleet()
    for k, year in enumerate((1979, 2019, 1985), start=2):
        make_unit(f.gear_model, f.location, asset_tag=f"NMB-000{k}", serial=f"BA-80-200{k}", year_made=year,
                  joined_on=dt.date(max(year, 2015), 3, 1))
    # and a young unit of long-lived parts, which needs nothing yet
    from fleet.models import Position
    from tests.base import make_gear_model

    sturdy = make_gear_model(model_name="Larkspur 2", year_from=2024, year_to=2026)
    Position.objects.filter(gear_model=sturdy).update(rated_life_h=20000, rated_temp_c=105)
    Position.objects.filter(gear_model=sturdy, designator="C12").update(capacitance_uf=2.2)  # corner 7 Hz
    make_unit(sturdy, f.location, asset_tag="NMB-0009", serial="LK-25-0009", year_made=2025,
              joined_on=dt.date(2025, 9, 1))
    run = services.forecast_refresh(today=dt.date(2026, 6, 1))
    fa, r = run.fleet, run.result
    stored = {row.unit_id: row for row in UnitForecast.objects.all()}
    roles = services.action_role_masks(run)

    def day(x):
        return None if np.isnan(x) else day_to_date(x)

    def same(a, b):
        return (a is None and np.isnan(b)) or np.float64(a).tobytes() == np.float64(b).tobytes()

    for u, unit_id in enumerate(fa.unit_id.tolist()):
        row = stored[unit_id]
        assert (row.status, row.due_date, row.act_by) == (r.status[u], day(r.due_day[u]), day(r.act_by_day[u]))
        assert row.priority == (int(r.priority[u]) or None)
        assert row.storage_reform is bool(r.storage_reform[u]) and row.action_roles == roles[u]
        for name, values in (("risk", r.risk), ("max_damage_ratio", r.max_damage_ratio),
                             ("hire_risk", r.hire_risk), ("score", r.score)):
            assert same(getattr(row, name), values[u]), name
        assert row.reasons == list(r.reasons[u])
        assert stored_positions(row).tobytes() == store._position_records(run)[run._starts[u]:run._ends[u]].tobytes()
    # both kinds of row are here: with and without a due date, with and without a priority
    # both kinds of row are here: with a priority and without (a unit that needs nothing yet)
    assert {row.priority is None for row in stored.values()} == {True, False}
    assert {row.status for row in stored.values()} == {"ok", "overdue"}


def test_the_postgresql_stores_whole_days_are_the_dates_of_the_other_store():
    """Dates go to PostgreSQL as whole days since 1970 (none: NO_DAY) and to
    SQLite as dates: the same day for every figure, none for NaN.  The
    reference is Python's own calendar (date + timedelta)."""
    import datetime as dt

    from scheduling.store import NO_DAY, _day_dates, _day_numbers

    days = np.array([0.0, 0.999, -0.5, 20000.25, 29599.9999, np.nan, -3652.0, 1e6])
    numbers = _day_numbers(days).tolist()
    for n, date in zip(numbers, _day_dates(days)):
        assert (None if n == NO_DAY else dt.date(1970, 1, 1) + dt.timedelta(days=n)) == date
    assert numbers[5] == NO_DAY and numbers[2] == -1
