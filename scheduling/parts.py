"""Each unit's fitted parts, packed beside its thermal history.

A full recompute used to re-read every capacitor row (half a million rows of
fourteen columns at 10,000 units), although fitted parts change only when a
unit is populated, recapped, read or imported.  Each of those raises the
unit's ``records_version`` (``fleet.services.units_mark_changed``), and
``thermal.thermal_sync`` then writes the unit's rows again as one packed
array (``ThermalHistory.parts``, with ``parts_version`` the records version it
was packed at).  The loader reads packs with ``np.frombuffer`` and falls back
to the rows for any unit whose pack is missing or older than its records.

``manage.py verify_parts [--repair]`` compares every pack with the rows.
"""

import itertools

import lz4.block
import numpy as np
from django.db import connection

from fleet.models import UnitCapacitor

from .sqlread import reading

#: One capacitor row as packed and as read (NULL ESR or tan delta: -1).
CAPACITOR_ROW = np.dtype([
    ("id", "<i8"), ("unit_id", "<i8"), ("position_id", "<i8"), ("capacitance_uf", "<f8"),
    ("rated_voltage_v", "<f8"), ("rated_temp_c", "<f8"), ("rated_life_h", "<f8"), ("esr_ohm", "<f8"),
    ("tan_delta", "<f8"), ("diameter_mm", "<f8"), ("length_mm", "<f8"), ("installed_day", "<f8"),
    ("is_original", "?"),
])
#: Every pack starts with this tag, then its rows compressed (an lz4 block
#: with its size: about a fifth of the rows' bytes).  Change the tag with
#: CAPACITOR_ROW or the compression, so that a pack of another layout reads
#: as missing (and the rows are read instead; the next sync packs it again).
PACK_TAG = b"CP02"
CHUNK_ROWS = 20_000


def _days_since_epoch_sql(column):
    """SQL for a date column as days since 1970-01-01."""
    if connection.vendor == "postgresql":
        return f"({column} - DATE '1970-01-01')"
    return f"(julianday({column}) - 2440587.5)"


def rows_sql(unit_filter_sql=None):
    """The SELECT of capacitor rows in CAPACITOR_ROW order, by unit then id."""
    qn = connection.ops.quote_name
    select = []
    for name in CAPACITOR_ROW.names:
        col = qn(name)
        if name in ("esr_ohm", "tan_delta"):
            col = f"COALESCE({col}, -1.0)"
        elif name == "installed_day":
            col = _days_since_epoch_sql(qn("installed_on"))  # a number: no per-row date conversion
        select.append(col)
    sql = f"SELECT {', '.join(select)} FROM {qn(UnitCapacitor._meta.db_table)}"
    if unit_filter_sql:
        sql += f" WHERE {qn('unit_id')} IN ({unit_filter_sql})"
    return sql + f" ORDER BY {qn('unit_id')}, {qn('id')}"


def read_rows(unit_ids=None, bare=False):
    """The capacitor rows of ``unit_ids`` (all when None) as one CAPACITOR_ROW
    array, filled chunk by chunk from the cursor.  ``bare=True`` only fetches
    the rows and returns their number (the benchmark's floor)."""
    params = [] if unit_ids is None else list(unit_ids)
    ids_sql = None if unit_ids is None else (", ".join(["%s"] * len(params)) or "NULL")
    if bare:
        return count_rows(rows_sql(ids_sql), params)
    with reading(rows_sql(ids_sql), params) as cursor:
        chunks = iter(lambda: cursor.fetchmany(CHUNK_ROWS), [])
        return np.fromiter(itertools.chain.from_iterable(chunks), dtype=CAPACITOR_ROW)


def count_rows(sql, params=(), *, binary=False):
    """Fetch every row of ``sql`` and return their number, nothing else done
    (the benchmark's floor).  Through Django's own cursor, as the engine used
    to read capacitor rows; ``binary=True``: through ``sqlread.reading``, as
    the engine reads now (psycopg's binary format on PostgreSQL)."""
    if binary:
        with reading(sql, params) as cursor:
            return sum(len(rows) for rows in iter(lambda: cursor.fetchmany(CHUNK_ROWS), []))
    with connection.cursor() as cursor:
        cursor.execute(sql, list(params))
        return sum(len(rows) for rows in iter(lambda: cursor.fetchmany(CHUNK_ROWS), []))


def pack(rows):
    """One unit's rows (a CAPACITOR_ROW array) as bytes."""
    return PACK_TAG + lz4.block.compress(np.ascontiguousarray(rows, dtype=CAPACITOR_ROW), store_size=True)


def packs_of(rows, unit_ids):
    """{unit id: pack} for every one of ``unit_ids`` (a unit without rows gets
    an empty pack, which is not a missing one); ``rows`` sorted by unit."""
    ids = np.asarray(sorted(unit_ids), dtype=np.int64)
    starts = np.searchsorted(rows["unit_id"], ids, "left")
    ends = np.searchsorted(rows["unit_id"], ids, "right")
    return {int(u): pack(rows[a:b]) for u, a, b in zip(ids.tolist(), starts.tolist(), ends.tolist())}


def rows_bytes(blob):
    """The rows' bytes of a pack written with the current layout; None for
    anything else (no pack, another layout, a damaged one)."""
    if not blob or bytes(blob[:len(PACK_TAG)]) != PACK_TAG:
        return None
    try:
        raw = lz4.block.decompress(memoryview(blob)[len(PACK_TAG):])
    except lz4.block.LZ4BlockError:
        return None
    return raw if len(raw) % CAPACITOR_ROW.itemsize == 0 else None


def is_pack(blob):
    """True for a pack written with the current layout."""
    return rows_bytes(blob) is not None


def unpack_many(blobs):
    """Many packs (in unit order) as one CAPACITOR_ROW array."""
    raws = [rows_bytes(b) for b in blobs]
    if any(raw is None for raw in raws):
        raise ValueError("not a pack of fitted parts of the current layout")
    return np.frombuffer(b"".join(raws), dtype=CAPACITOR_ROW)


#: ``columns_of`` joins this many bytes of rows at a time: small enough that
#: the block is still in the processor's cache when its columns are copied out.
COLUMN_BLOCK_BYTES = 512 * 1024


def columns_of(raws, block_bytes=COLUMN_BLOCK_BYTES):
    """Many packs' rows (``rows_bytes`` of each, in order) as the columns
    ``as_columns`` gives of them joined, block by block: joining all of them
    first (48 MB at 10,000 units) and then copying out thirteen columns
    streams the whole array through memory fourteen times; a block of about
    half a megabyte is joined and copied out while it is still in cache
    (about 35 ms instead of 95 ms at 10,000 units)."""
    n = sum(map(len, raws)) // CAPACITOR_ROW.itemsize
    out = {name: np.empty(n, dtype=CAPACITOR_ROW.fields[name][0]) for name in CAPACITOR_ROW.names}
    at, group, size = 0, [], 0

    def copy_out():
        nonlocal at
        rows = np.frombuffer(b"".join(group), dtype=CAPACITOR_ROW)
        for name in CAPACITOR_ROW.names:
            out[name][at:at + rows.size] = rows[name]
        at += rows.size

    for raw in raws:
        group.append(raw)
        size += len(raw)
        if size >= block_bytes:
            copy_out()
            group, size = [], 0
    if group:
        copy_out()
    return _nulls_as_nan(out)


def as_columns(arr):
    """A CAPACITOR_ROW array as contiguous columns, NULL figures as NaN."""
    return _nulls_as_nan({name: np.array(arr[name]) for name in CAPACITOR_ROW.names})


def _nulls_as_nan(columns):
    """The figures packed as -1 for NULL (ESR, tan delta) as NaN, in place."""
    for name in ("esr_ohm", "tan_delta"):
        column = columns[name]
        column[column < 0] = np.nan
    return columns
