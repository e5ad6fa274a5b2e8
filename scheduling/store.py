"""The stored forecast rows: their per-position blob and the fleet store.

``_store`` upserts one ``UnitForecast`` row per unit of a ForecastRun
(``services.forecast_refresh`` and the nightly batches call it; nothing else
writes forecast rows).  ``pack_positions`` and ``stored_positions`` are the
only writer and reader of the per-position blob.
"""

import contextlib
import time
from json.encoder import encode_basestring_ascii

import lz4.block
import numpy as np
from django.db import DEFAULT_DB_ALIAS, connection, connections, transaction
from django.utils import timezone

from . import pgarrays
from .models import UnitForecast
from .triage import LEAVE

#: Layout of the per-position results stored in UnitForecast.positions.
#: Single precision keeps six significant digits, more than the model's
#: inputs carry, and halves what a nightly refresh writes.
#: Each unit's blob starts with this tag; change it with the layout, so a blob
#: written with another layout reads as empty until the next refresh.  After
#: the tag: the records, LZ4-compressed (a block with its size in front).  A
#: nightly refresh of 10,000 units then writes 8 MB of positions instead of
#: 21 MB, and each blob (about 0.8 KB) stays inside its row on PostgreSQL
#: instead of going out to a TOAST table; decompressing all of them takes
#: about 20 ms.  ``OLD_POSITION_LAYOUT`` (the same records, uncompressed) is
#: still read, so nothing reads as empty after an upgrade.
POSITION_LAYOUT = b"RP05"
OLD_POSITION_LAYOUT = b"RP04"
POSITION_DTYPE = np.dtype([
    ("capacitor_id", "<i8"), ("damage", "<f4"), ("esr_ohm", "<f4"), ("capacitance_f", "<f4"),
    ("threshold", "<f4"), ("reaches_day", "<f4"), ("action", "i1"), ("why", "i1"), ("rate_per_day", "<f4"),
    # bench readings: the date of the reading the damage comes from (NaN: none), the rate factor
    ("measured_day", "<f4"), ("rate_factor", "<f4"),
])


def _day_dates(days):
    """Float days since 1970-01-01 (NaN: none) to a list of datetime.date or None."""
    days = np.asarray(days, dtype=float)
    out = np.floor(np.nan_to_num(days)).astype("int64").astype("datetime64[D]").tolist()
    return [None if missing else d for d, missing in zip(out, np.isnan(days).tolist())]


def _json_words(words):
    """``json.dumps`` of a list of strings, as it writes it (ASCII, ", "
    between items), about three times faster: no encoder made per call."""
    return "[" + ", ".join(map(encode_basestring_ascii, words)) + "]"


def action_role_masks(run):
    """Per unit: one bit per role code (``1 << ROLE_CODES[role]``) of the
    positions whose action is replace or measure, for filtering by role."""
    fa, r = run.fleet, run.result
    masks = np.zeros(fa.n_units, dtype=np.int64)
    if fa.n_caps:
        act = np.flatnonzero(r.action != LEAVE)
        bits = np.left_shift(1, fa.pos_role[fa.position_index[act]].astype(np.int64))
        np.bitwise_or.at(masks, fa.unit_index[act], bits)
    return masks


#: A store of more units than this raises PostgreSQL's work_mem for its
#: transaction to STORE_WORK_MEM_MB (enough for 50,000 units at once).
STORE_WORK_MEM_FROM_UNITS = 2000
STORE_WORK_MEM_MB = 64
#: PostgreSQL: a store of many units goes in statements of this many units,
#: pipelined (psycopg's pipeline mode): the server writes one while this
#: process makes the next, instead of one waiting for the other.
STORE_STATEMENT_UNITS = 1250

_STORE_COLUMNS = ["unit_id", "computed_at", "status", "due_date", "risk", "horizon_days", "max_damage_ratio",
                  "storage_reform", "reasons", "positions", "act_by", "priority", "hire_risk", "score",
                  "action_roles"]


def _store_sql():
    """The upsert of forecast rows: its INSERT head and ON CONFLICT tail."""
    qn = connection.ops.quote_name
    table = qn(UnitForecast._meta.db_table)
    updates = ", ".join(f"{qn(c)} = excluded.{qn(c)}" for c in _STORE_COLUMNS[1:])
    return (f"INSERT INTO {table} ({', '.join(qn(c) for c in _STORE_COLUMNS)}) ",
            f"ON CONFLICT ({qn('unit_id')}) DO UPDATE SET {updates}")


def _position_records(run):
    """Every position's results in unit order, one POSITION_DTYPE record
    array; each unit's are a slice of it."""
    fa, r = run.fleet, run.result
    order = run._order  # capacitor rows grouped by unit, units in order
    # The loader's rows come grouped by unit already: then no gather, a copy.
    grouped = order.size == 0 or bool(np.all(order[1:] > order[:-1]))

    def rows(a):
        return a if grouped else a[order]

    packed = np.empty(order.size, dtype=POSITION_DTYPE)
    packed["capacitor_id"] = rows(fa.cap_id)
    for name in ("damage", "esr_ohm", "capacitance_f", "threshold", "reaches_day", "action", "why",
                 "rate_per_day"):
        packed[name] = rows(getattr(r, name))
    packed["measured_day"] = rows(r.readings.measured_day)
    packed["rate_factor"] = rows(r.readings.rate_factor)
    return packed


def _positions_packed(run, packed, units):
    """The stored positions of the units of the slice ``units``: each
    unit's records are a slice of ``packed``, packed where they lie."""
    return [pack_positions(packed[a:b]) for a, b in zip(run._starts[units].tolist(), run._ends[units].tolist())]


def _store_values(run, packed, roles, units):
    """The values of the units of the slice ``units`` for _STORE_COLUMNS
    less computed_at and horizon_days (the same for every row), in that
    order, as the run holds them: arrays for the figures (dates as float
    days, NaN for none; priority 0 for none), lists for the status, the
    reasons' JSON and the positions' blobs.  ``packed``: every position's
    record (``_position_records``); ``roles``: ``action_role_masks``."""
    fa, r = run.fleet, run.result
    return [fa.unit_id[units], list(r.status[units]), r.due_day[units], r.risk[units], r.max_damage_ratio[units],
            r.storage_reform[units], [_json_words(words) for words in r.reasons[units]],
            _positions_packed(run, packed, units), r.act_by_day[units], r.priority[units], r.hire_risk[units],
            r.score[units], roles[units]]


#: A day that is none (NULL), in the whole days the PostgreSQL store sends.
NO_DAY = -2**31


def _day_numbers(days):
    """Float days since 1970-01-01 to whole days (the day they fall in),
    NO_DAY where there is none (NaN)."""
    days = np.asarray(days, dtype=float)
    whole = np.isfinite(days)
    return np.where(whole, np.floor(np.where(whole, days, 0.0)), NO_DAY).astype(np.int64)


#: How the PostgreSQL store sends each of ``_store_values``: as a binary
#: array of this element type ("day": ``_day_numbers`` as int4), or as the
#: list it is (None).
_PG_FORMS = ("int8", None, "day", "float8", "float8", "bool", None, None, "day", "int4", "float8", "float8", "int4")


def _store_arrays(run, packed, roles, units):
    """``_store_values`` as the PostgreSQL store sends them (``_PG_FORMS``)."""
    def sent(values, form):
        if form is None:
            return values
        if form == "day":
            return pgarrays.binary_array(_day_numbers(values), "int4")
        return pgarrays.binary_array(values, form)

    return [sent(v, form) for v, form in zip(_store_values(run, packed, roles, units), _PG_FORMS)]


def _store(run):
    """Upsert one UnitForecast row per unit.

    PostgreSQL: ``INSERT ... SELECT FROM unnest(arrays) ON CONFLICT``, the
    arrays in binary; up to STORE_STATEMENT_UNITS units a statement, the
    statements pipelined.  SQLite: one prepared ``INSERT ... ON CONFLICT``
    run over the rows (``executemany``, in-process, no round trips).
    """
    now = timezone.now()
    run.stored_at = now  # the rows' computed_at (``rows_as_stored``)
    packed = _position_records(run)
    n = run.fleet.n_units
    roles = action_role_masks(run)
    horizon = int(run.policy.horizon_days)
    insert, conflict = _store_sql()
    with transaction.atomic(savepoint=False):
        if connection.vendor == "postgresql":
            _store_postgresql(run, packed, roles, now, horizon, insert, conflict)
            return n
        with connection.cursor() as cursor:
            conn = connections[DEFAULT_DB_ALIAS]
            computed_at = UnitForecast._meta.get_field("computed_at").get_db_prep_save(now, conn)
            u, s, due, risk, ratio, reform, reasons, positions, act_by, priority, hire_risk, score, masks = (
                _store_values(run, packed, roles, slice(0, n)))

            def texts(days):
                return [None if d is None else d.isoformat() for d in _day_dates(days)]

            def floats(x):
                return x.astype(float).tolist()

            cursor.executemany(
                insert + f"VALUES ({', '.join(['%s'] * len(_STORE_COLUMNS))}) " + conflict,
                [(uid, computed_at, st, d, rk, horizon, m, f, j, p, a, o, h, c, k)
                 for uid, st, d, rk, m, f, j, p, a, o, h, c, k
                 in zip(u.tolist(), s, texts(due), floats(risk), floats(ratio), reform.astype(bool).tolist(),
                        reasons, positions, texts(act_by), [p or None for p in priority.tolist()],
                        floats(hire_risk), floats(score), masks.tolist())],
            )
    return n


def _store_postgresql(run, packed, roles, now, horizon, insert, conflict):
    """The PostgreSQL half of ``_store``: server-side binding with binary
    parameters (the arrays travel as they are, not quoted into the SQL
    text), a statement per STORE_STATEMENT_UNITS units, pipelined."""
    import psycopg

    n = run.fleet.n_units
    # The numeric columns go as numpy-built binary arrays (scheduling/pgarrays.py):
    # dates as whole days since 1970 (NO_DAY: none), priority 0 for none.
    day = f"DATE '1970-01-01' + NULLIF({{}}, {NO_DAY})"
    sql = (insert + f"SELECT u, %b, s, {day.format('d')}, r, %b::integer, m, f, j, p, {day.format('a')}, "
           "NULLIF(o, 0), h, c, k FROM unnest("
           "%b::bigint[], %b::text[], %b::integer[], %b::float8[], %b::float8[], %b::bool[], %b::text[], "
           "%b::bytea[], %b::integer[], %b::integer[], %b::float8[], %b::float8[], %b::integer[]) "
           "AS x(u, s, d, r, m, f, j, p, a, o, h, c, k) " + conflict)
    conn = connection.connection
    raw = psycopg.Cursor(conn)
    pgarrays.register(raw.adapters)
    started = time.monotonic()
    try:
        if n > STORE_WORK_MEM_FROM_UNITS:
            # The unnested rows (about 1 KB a unit) stay in memory instead
            # of spilling to a temporary file past the default 4 MB.
            raw.execute(f"SET LOCAL work_mem = '{STORE_WORK_MEM_MB}MB'")
        bounds = list(range(0, n, STORE_STATEMENT_UNITS)) + [n]
        with conn.pipeline() if len(bounds) > 2 else contextlib.nullcontext():
            for first, last in zip(bounds[:-1], bounds[1:]):
                u, *rest = _store_arrays(run, packed, roles, slice(first, last))
                raw.execute(sql, [now, horizon, u, *rest])
    finally:
        raw.close()
    if connection.queries_logged:  # a raw cursor: log it as Django's own cursors do
        connection.queries_log.append({
            "sql": f"INSERT INTO {UnitForecast._meta.db_table} ... unnest ({max(len(bounds) - 1, 1)} statements)",
            "time": f"{time.monotonic() - started:.3f}"})


def _unforecastable_row(run, unit, now):
    return UnitForecast(unit_id=unit.unit_id, computed_at=now, status=UnitForecast.Status.INVALID, due_date=None,
                        risk=None, horizon_days=int(run.policy.horizon_days), max_damage_ratio=None,
                        storage_reform=False, reasons=list(unit.reasons), positions=b"")


def _store_unforecastable(run):
    """Upsert the rows of the units that could not be forecast: the status
    "cannot forecast", the reasons, and no figures (one statement)."""
    if not run.unforecastable:
        return
    now = getattr(run, "stored_at", None) or timezone.now()
    rows = [_unforecastable_row(run, u, now) for u in run.unforecastable]
    fields = [f.name for f in UnitForecast._meta.concrete_fields if f.name not in ("id", "unit")]
    UnitForecast.objects.bulk_create(rows, update_conflicts=True, unique_fields=["unit"], update_fields=fields)


def rows_as_stored(run, unit_ids):
    """{unit id: UnitForecast}: the rows ``_store`` and
    ``_store_unforecastable`` wrote for ``unit_ids`` from ``run``, as
    unsaved instances built from the run (not read back), with the places
    ``priorities_place`` gave (``run.places``) where it placed them.  A unit
    of neither has no row (retired: its row was removed)."""
    fa, r = run.fleet, run.result
    now = run.stored_at
    horizon = int(run.policy.horizon_days)
    index = {u: k for k, u in enumerate(fa.unit_id.tolist())}
    places = getattr(run, "places", {})
    rows = {}
    wanted = [index[u] for u in unit_ids if u in index]
    if wanted:
        packed, roles = _position_records(run), action_role_masks(run)
    for k in wanted:
        u, s, due, risk, ratio, reform, _, positions, act_by, priority, hire_risk, score, masks = (
            _store_values(run, packed, roles, slice(k, k + 1)))
        unit_id = int(u[0])
        rows[unit_id] = UnitForecast(
            unit_id=unit_id, computed_at=now, status=s[0], due_date=_day_dates(due)[0], risk=float(risk[0]),
            horizon_days=horizon, max_damage_ratio=float(ratio[0]), storage_reform=bool(reform[0]),
            reasons=list(r.reasons[k]), positions=positions[0], act_by=_day_dates(act_by)[0],
            priority=places.get(unit_id, int(priority[0]) or None), hire_risk=float(hire_risk[0]),
            score=float(score[0]), action_roles=int(masks[0]))
    for unit in run.unforecastable:
        if unit.unit_id in unit_ids:
            rows[unit.unit_id] = _unforecastable_row(run, unit, now)
    return rows


def pack_positions(records):
    """Per-position results (a POSITION_DTYPE array) as stored in
    UnitForecast.positions: the tag, then the records compressed."""
    if not (isinstance(records, np.ndarray) and records.dtype == POSITION_DTYPE and records.flags.c_contiguous):
        records = np.ascontiguousarray(records, dtype=POSITION_DTYPE)
    return POSITION_LAYOUT + lz4.block.compress(records)  # read in place: no copy of the records


def stored_positions(forecast):
    """The per-position results of a stored UnitForecast as a structured array."""
    blob = bytes(forecast.positions or b"")
    tag = len(POSITION_LAYOUT)
    if blob[:tag] == POSITION_LAYOUT:
        try:
            blob = lz4.block.decompress(memoryview(blob)[tag:])
        except lz4.block.LZ4BlockError:
            blob = b"-"  # damaged: read as empty below
        offset = 0
    elif blob[:tag] == OLD_POSITION_LAYOUT:
        offset = tag
    else:
        blob, offset = b"-", 0
    if (len(blob) - offset) % POSITION_DTYPE.itemsize:
        # Written with another layout, or damaged: show nothing until the next refresh rewrites it.
        return np.zeros(0, dtype=POSITION_DTYPE)
    return np.frombuffer(blob, dtype=POSITION_DTYPE, offset=offset)
