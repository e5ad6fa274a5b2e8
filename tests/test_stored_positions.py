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

    monkeypatch.setattr(services, "STORE_STATEMENT_UNITS", 3)
    services.forecast_refresh(today=first)  # over the rows of the later day
    assert _stored_rows() == in_one_first
    UnitForecast.objects.all().delete()
    services.forecast_refresh(today=later)
    assert _stored_rows() == in_one_later
