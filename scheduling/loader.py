"""Load the fleet into numpy arrays for the life engine, one query per table.

The capacitor rows are the bulk (10,000 units x 50 positions is half a million
rows), so they are read with a plain cursor in chunks straight into
preallocated arrays: memory stays at a few arrays of floats, never half a
million model instances or tuples.  Everything else is small.
"""

import datetime as dt
from dataclasses import dataclass, field

import numpy as np
from django.db import connection
from django.db.models import Count, F, FloatField, Func, Sum
from django.utils import timezone

from fleet.models import GearModel, MaintenancePolicy, Position, Reading, Rental, Unit, UnitCapacitor

from . import histogram as H
from . import physics
from .forecast import ROLE_CODES, date_to_day
from . import recent as R
from .models import HistogramSnapshot, ModelUse, ThermalHistory
from .parts import CAPACITOR_ROW, as_columns, columns_of, read_rows, rows_bytes
from .thermal import location_monthly_temps, thermal_sync
from .sqlread import fetch_all



@dataclass
class FleetArrays:
    """The fleet as arrays.  Unit arrays are indexed by unit row u; capacitor
    arrays by capacitor row i, grouped by unit (``unit_index[i]`` ascending)."""

    # units
    unit_id: np.ndarray
    asset_tag: list
    unit_model: np.ndarray          # index into models
    manufactured_day: np.ndarray    # days since 1970-01-01
    joined_day: np.ndarray
    hist_powered: np.ndarray        # (n_units, N_BINS) hours
    hist_unpowered: np.ndarray
    accounted_day: np.ndarray       # float days since epoch; histories count to here
    last_powered_day: np.ndarray    # float days; NaN if never powered in the fleet
    monthly_store_c: np.ndarray     # (n_units, 12) home storage temperature
    use_powered_h_per_year: np.ndarray   # last twelve months (NaN: too little history)
    use_out_h_per_year: np.ndarray
    use_ambient_c: np.ndarray
    use_hires_per_year: np.ndarray       # hires closed in the last twelve months (NaN: too little history)
    # the gear models' mean recent use (forecast.model_use_means); None: from these units
    # gear models
    model_id: np.ndarray
    model_rise_k: np.ndarray
    model_hours_per_day: np.ndarray
    # capacitors
    cap_id: np.ndarray
    unit_index: np.ndarray
    position_index: np.ndarray      # index into positions
    capacitance_f: np.ndarray
    rated_voltage_v: np.ndarray
    rated_temp_c: np.ndarray
    rated_life_h: np.ndarray
    esr0_ohm: np.ndarray
    diameter_mm: np.ndarray
    length_mm: np.ndarray
    installed_day: np.ndarray
    is_original: np.ndarray
    baseline_index: np.ndarray      # index into snapshots, -1 for none
    # positions (the circuit)
    pos_id: np.ndarray
    pos_designator: list
    pos_role: np.ndarray            # role codes, ROLE_CODES
    pos_ripple_a: np.ndarray
    pos_partner: np.ndarray         # index into positions, -1 for none
    pos_circuit: dict = field(default_factory=dict)  # name -> array over positions (NaN if unset)
    model_means: dict = None
    # snapshots
    snap_powered: np.ndarray = None
    snap_unpowered: np.ndarray = None
    # bench readings of the fitted parts (scheduling/readings.py); None: none loaded
    reading_cap: np.ndarray = None        # capacitor row of each capacitor reading
    reading_day: np.ndarray = None        # its date, days since 1970
    reading_snap: np.ndarray = None       # snapshot of that date, -1 none yet
    reading_esr_ohm: np.ndarray = None    # NaN: not measured
    reading_capacitance_f: np.ndarray = None
    rail_fly: np.ndarray = None           # capacitor row of the flying part of the pump read
    rail_day: np.ndarray = None
    rail_snap: np.ndarray = None
    rail_measured_v: np.ndarray = None
    rail_input_v: np.ndarray = None       # NaN: the pump's design input
    rail_load_a: np.ndarray = None

    @property
    def n_units(self):
        return self.unit_id.size

    @property
    def n_caps(self):
        return self.cap_id.size


CIRCUIT_FIELDS = (
    "pump_input_v", "pump_load_a", "pump_freq_hz", "pump_switch_ohm", "pump_min_rail_v",
    "coupling_load_ohm", "coupling_max_corner_hz",
    "reservoir_load_a", "reservoir_ripple_freq_hz", "reservoir_ripple_limit_v",
)


def _f(x):
    return np.nan if x is None else float(x)


def read_capacitors(unit_ids=None, bare=False):
    """The unit capacitor rows as columns (NULL figures as NaN), read with a
    plain cursor in chunks (``parts.read_rows``).  ``bare=True`` only fetches
    the rows and returns their number (the benchmark's floor)."""
    rows = read_rows(unit_ids, bare=bare)
    return rows if bare else as_columns(rows)


class HoursBetween(Func):
    """Hours from the first timestamp to the second, computed in the database."""

    output_field = FloatField()
    arity = 2

    def as_sqlite(self, compiler, connection, **extra):
        return self.as_sql(compiler, connection, template="((julianday(%(expressions)s)) * 24.0)",
                           arg_joiner=") - julianday(", **extra)

    def as_postgresql(self, compiler, connection, **extra):
        return self.as_sql(compiler, connection, template="(EXTRACT(EPOCH FROM (%(expressions)s)) / 3600.0)",
                           arg_joiner=" - ", **extra)


def recent_use(unit_ids, today):
    """Per unit over the last twelve months: powered hours, hours out on hire,
    the powered-hours-weighted venue ambient and the number of hires.  One
    grouped query."""
    since = dt.datetime.combine(today - dt.timedelta(days=365), dt.time(0), tzinfo=dt.timezone.utc)
    qs = Rental.objects.filter(in_at__isnull=False, in_at__gte=since)
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=unit_ids)
    rows = qs.values("unit_id").annotate(
        powered=Sum("powered_hours"),
        weighted=Sum(F("powered_hours") * F("venue_ambient_c")),
        out=Sum(HoursBetween("in_at", "out_at")),
        hires=Count("id"),
    )
    return {r["unit_id"]: (r["powered"] or 0.0, r["out"] or 0.0,
                           (r["weighted"] / r["powered"]) if r["powered"] else np.nan, r["hires"]) for r in rows}


def _raw(sql, params):
    return fetch_all(sql, params)


def _select(model, fields, tail="", params=(), as_text=()):
    """Rows of ``model``'s table, the columns of ``fields`` in order (those
    in ``as_text`` cast to text), through a plain cursor: the ORM's compiling
    of a query costs 0.2-0.6 ms, more than the query on either database, and
    a refresh of one unit (a check-in) reads several.  ``tail``: the SQL
    after the table (WHERE, ORDER BY) with its ``params``."""
    qn = connection.ops.quote_name
    cols = []
    for name in fields:
        col = qn(model._meta.get_field(name).column)
        cols.append(f"CAST({col} AS TEXT)" if name in as_text else col)
    return _raw(f"SELECT {', '.join(cols)} FROM {qn(model._meta.db_table)}{tail}", list(params))


def _days_from_text(values):
    """Dates or timestamps written as text (as both databases cast them) to
    float days since 1970-01-01 (UTC); None gives NaN."""
    out = np.full(len(values), np.nan)
    present = [i for i, v in enumerate(values) if v is not None]
    if present:
        stamps = np.array([values[i][:19].replace(" ", "T") for i in present], dtype="datetime64[s]")
        out[present] = stamps.astype(np.int64) / 86400.0
    return out


def _index_of(sorted_ids, ids):
    """Position of each of ``ids`` in the ascending ``sorted_ids``; -1 where absent."""
    if sorted_ids.size == 0:
        return np.full(ids.shape, -1, dtype=np.int64)
    k = np.clip(np.searchsorted(sorted_ids, ids), 0, sorted_ids.size - 1)
    return np.where(sorted_ids[k] == ids, k, -1).astype(np.int64)


def _id_filter(ids, id_range, column="id"):
    """SQL and parameters restricting ``column`` to some ids (of units, or of
    positions), or to an inclusive id range (a batch of the fleet refresh),
    or nothing."""
    qn = connection.ops.quote_name
    if ids is not None:
        return f" AND {qn(column)} IN ({', '.join(['%s'] * len(ids)) or 'NULL'})", list(ids)
    if id_range is not None:
        return f" AND {qn(column)} BETWEEN %s AND %s", [int(id_range[0]), int(id_range[1])]
    return "", []


def unit_rows(*, unit_ids=None, id_range=None):
    """The units the engine forecasts (not retired), by id: (id, asset tag,
    gear model id, home location id, year made, joined on as text, records
    version)."""
    qn = connection.ops.quote_name
    where, params = _id_filter(unit_ids, id_range)
    return _raw(
        f"SELECT {qn('id')}, {qn('asset_tag')}, {qn('gear_model_id')}, {qn('home_location_id')}, "
        f"{qn('year_made')}, CAST({qn('joined_on')} AS TEXT), {qn('records_version')} "
        f"FROM {qn(Unit._meta.db_table)} WHERE {qn('status')} <> %s{where} ORDER BY {qn('id')}",
        [Unit.Status.RETIRED, *params],
    )


HISTORY_COLUMNS = ("powered", "unpowered", "accounted_until", "last_powered_at", "records_version", "parts", "recent",
                   "parts_version")
_RECORDS_VERSION = HISTORY_COLUMNS.index("records_version")  # its place in a row of history_rows


def history_rows(*, unit_ids=None, id_range=None, columns=HISTORY_COLUMNS):
    """{unit id: row} of the thermal histories (the columns asked for, in order)."""
    qn = connection.ops.quote_name
    where, params = _id_filter(unit_ids, id_range, "unit_id")
    cast = {"accounted_until", "last_powered_at"}
    cols = ", ".join(f"CAST({qn(c)} AS TEXT)" if c in cast else qn(c) for c in columns)
    rows = _raw(f"SELECT {qn('unit_id')}, {cols} FROM {qn(ThermalHistory._meta.db_table)} WHERE 1 = 1{where}",
                params)
    return {r[0]: r[1:] for r in rows}


def use_arrays(units, histories, *, today, min_history_days, joined_day=None):
    """Per unit (rows of ``unit_rows``): powered hours, hours out, venue
    ambient and hires over the last twelve months, NaN for units in the
    fleet less than ``min_history_days``.  From each unit's packed recent
    hires (``histories``: ``history_rows`` with the recent pack and its
    version) when current; the hires table for the rest (one grouped query)."""
    n = len(units)
    joined_day = _days_from_text([u[5] for u in units]) if joined_day is None else joined_day
    since = dt.datetime.combine(today - dt.timedelta(days=365), dt.time(0), tzinfo=dt.timezone.utc)
    since_day = since.timestamp() / 86400.0
    blobs, raws, packed = [], [], np.zeros(n, dtype=bool)
    for k, u in enumerate(units):
        h = histories.get(u[0])
        raw = R.rows_bytes(h[-2]) if h is not None and h[-1] == u[6] else None
        if raw is not None:
            blobs.append(h[-2])
            raws.append(raw)
            packed[k] = True
    use_p, use_o, use_a, use_n = (np.full(n, np.nan) for _ in range(4))
    if blobs:
        complete = R.complete_from_many(blobs) <= since_day
        rows = np.flatnonzero(packed)
        packed[rows[~complete]] = False
        blobs = [b for b, ok in zip(blobs, complete) if ok]
        raws = [b for b, ok in zip(raws, complete) if ok]
        rows = rows[complete]
        use_p[rows], use_o[rows], use_a[rows], use_n[rows] = R.window_sums(blobs, since_day, raws=raws)
        have = rows
    else:
        have = np.zeros(0, dtype=np.int64)
    left = np.flatnonzero(~packed)
    if left.size:
        ids = [units[k][0] for k in left.tolist()]
        use = recent_use(None if len(ids) > 30000 else ids, today)
        for k in left.tolist():
            p, o, a, hires = use.get(units[k][0], (0.0, 0.0, np.nan, 0))
            use_p[k], use_o[k], use_a[k], use_n[k] = p, o, a, hires
        have = np.union1d(have, left)
    settled = (date_to_day(today) - joined_day) >= min_history_days
    for x in (use_p, use_o, use_a, use_n):
        x[~settled] = np.nan
    # Units in the fleet long enough but with no hires: a real zero, not unknown.
    for x in (use_p, use_o, use_n):
        x[settled & np.isnan(x)] = 0.0
    return use_p, use_o, use_a, use_n


def _fitted_parts(units, histories, unit_ids_arr):
    """The capacitor rows of ``units`` as columns, from the packs of units
    whose pack is current, the rows of the rest (one query)."""
    raws, missing = [], []
    for u in units:
        h = histories.get(u[0])
        raw = rows_bytes(h[-3]) if h is not None and h[-1] == u[6] else None
        if raw is not None:
            raws.append(raw)
        else:
            missing.append(u[0])
    if not missing:  # every unit from its own pack, in unit order: its rows are its pack's
        counts = np.fromiter((len(raw) // CAPACITOR_ROW.itemsize for raw in raws), dtype=np.int64, count=len(raws))
        return columns_of(raws), np.repeat(np.arange(len(raws), dtype=np.int64), counts)
    arr = np.frombuffer(b"".join(raws), dtype=CAPACITOR_ROW) if raws else np.zeros(0, dtype=CAPACITOR_ROW)
    rows = read_rows(None if len(missing) > 30000 else missing)
    arr = np.concatenate([arr, rows]) if arr.size else rows
    arr = arr[np.lexsort((arr["id"], arr["unit_id"]))]
    caps = as_columns(arr)
    cap_unit_index = _index_of(unit_ids_arr, caps["unit_id"])
    keep = cap_unit_index >= 0  # capacitors of retired units are left out
    if not keep.all():
        caps = {k: v[keep] for k, v in caps.items()}
        cap_unit_index = cap_unit_index[keep]
    return caps, cap_unit_index


def stored_model_means(model_ids):
    """The gear models' means kept by the last fleet refresh
    (``ModelUse``), as ``forecast.model_use_means`` gives them, or None when
    there are none yet."""
    rows = {r[0]: r[1:] for r in _select(
        ModelUse, ("gear_model", "powered_h_per_year", "out_h_per_year", "ambient_c", "hire_powered_h", "hire_out_h"))}
    if not rows:
        return None
    names = ("powered_h_per_year", "out_h_per_year", "ambient_c", "hire_powered_h", "hire_out_h")
    return {name: np.array([_f(rows.get(m, (None,) * 5)[j]) for m in model_ids], dtype=float)
            for j, name in enumerate(names)}


def history_row_of(history):
    """A ThermalHistory object as ``history_rows`` gives its row (times as the
    databases cast them to text, to the second, UTC)."""
    def text(moment):
        return None if moment is None else moment.astimezone(dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%S")

    return (bytes(history.powered), bytes(history.unpowered), text(history.accounted_until),
            text(history.last_powered_at), history.records_version, bytes(history.parts), bytes(history.recent),
            history.parts_version)


def behind(units, histories):
    """Ids of the units (rows of ``unit_rows``) whose thermal history is
    missing or older than their records, or whose packs are: those
    ``thermal.thermal_sync`` brings up to date."""
    out = []
    for u in units:
        h = histories.get(u[0])
        if h is None or h[_RECORDS_VERSION] != u[6] or h[-1] != u[6]:
            out.append(u[0])
    return out


def load_fleet(*, unit_ids=None, today, min_history_days=180, id_range=None, model_means="stored", use=None,
               known=None, sync=False):
    """Everything the engine needs, as arrays (see FleetArrays).

    ``unit_ids`` (a list) or ``id_range`` (first, last) choose the units;
    all when neither.  ``model_means``: the gear models' mean use to fill
    units without history ("stored": those of the last fleet refresh, for a
    forecast of a few units; None: from the units loaded; or a dict of
    arrays as ``forecast.model_use_means`` gives).  ``use``: the units'
    recent use as a first pass read it (unit ids, then ``use_arrays``'s
    four arrays), taken when the units loaded are the same.  ``known``: what
    the caller's transaction just wrote or read for ``unit_ids``
    (``thermal.CheckInSync``), not read again: when it is the only unit, its
    row and its history; and its home's monthly temperatures.  ``sync``: bring the
    histories of any of the units that are behind their records up to date
    first (``thermal.thermal_sync``), as told by the rows read here: no
    query of its own when none is behind."""
    if (known is not None and known.unit_row is not None and unit_ids is not None
            and list(unit_ids) == [known.history.unit_id] == [known.unit_row[0]]):
        units = [known.unit_row]  # the unit the check-in locked and wrote: not read again
    else:
        units = unit_rows(unit_ids=unit_ids, id_range=id_range)
    ids = [u[0] for u in units]
    filter_ids = None if unit_ids is None and id_range is None else ids
    n = len(units)
    unit_ids_arr = np.array(ids, dtype=np.int64)

    models = _select(GearModel, ("id", "internal_rise_k", "powered_hours_per_day"),
                     f" ORDER BY {connection.ops.quote_name('id')}")
    midx = {m[0]: k for k, m in enumerate(models)}
    if isinstance(model_means, str):
        model_means = (stored_model_means([m[0] for m in models])
                       if unit_ids is not None or id_range is not None else None)

    joined_day = _days_from_text([u[5] for u in units])
    hp = np.zeros((n, H.N_BINS))
    hu = np.zeros((n, H.N_BINS))
    accounted = joined_day.copy()  # a unit without a history counts from joining
    last_powered = np.full(n, np.nan)
    if known is not None and ids == [known.history.unit_id] and unit_ids is not None:
        histories = {known.history.unit_id: history_row_of(known.history)}
    else:
        histories = history_rows(unit_ids=unit_ids, id_range=id_range)
        late = behind(units, histories) if sync else None
        if late:
            thermal_sync(unit_ids=late)
            histories = history_rows(unit_ids=unit_ids, id_range=id_range)
    rows = [(k, histories[uid]) for k, uid in enumerate(ids) if uid in histories]
    if rows:
        k = np.array([r[0] for r in rows], dtype=np.int64)
        hp[k] = H.stack_from_bytes([r[1][0] for r in rows])
        hu[k] = H.stack_from_bytes([r[1][1] for r in rows])
        accounted[k] = _days_from_text([r[1][2] for r in rows])
        last_powered[k] = _days_from_text([r[1][3] for r in rows])

    homes = {u[3] for u in units}
    temps = known.location_temps if known is not None and homes <= set(known.location_temps) \
        else location_monthly_temps(homes)
    monthly = np.array([temps[u[3]] for u in units]).reshape(n, 12)

    if use is not None and np.array_equal(use[0], unit_ids_arr):
        use_p, use_o, use_a, use_n = use[1:]
    else:
        use_p, use_o, use_a, use_n = use_arrays(units, histories, today=today, min_history_days=min_history_days,
                                                joined_day=joined_day)
    caps, cap_unit_index = _fitted_parts(units, histories, unit_ids_arr)
    del histories, rows

    where, params = _id_filter(None if filter_ids is None else sorted(set(caps["position_id"].tolist())), None)
    pos_rows = _select(Position, ("id", "gear_model", "designator", "role", "ripple_current_a", "pump_partner",
                                  *CIRCUIT_FIELDS),
                       f" WHERE 1 = 1{where} ORDER BY {connection.ops.quote_name('id')}", params)
    by_model_designator = {(p[1], p[2]): k for k, p in enumerate(pos_rows)}
    partner = np.array([by_model_designator.get((p[1], p[5]), -1) if p[5] else -1 for p in pos_rows],
                       dtype=np.int64)
    circuit = {name: np.array([_f(p[6 + j]) for p in pos_rows]) for j, name in enumerate(CIRCUIT_FIELDS)}

    readings = _readings(filter_ids)
    baseline_index, sp, su, snap_at = _baselines(caps, filter_ids, extra_units=readings["unit_id"])
    readings = _reading_arrays(readings, caps, snap_at)

    esr0 = caps["esr_ohm"].copy()
    missing = np.isnan(esr0)
    esr0[missing] = physics.esr_from_tan_delta_ohm(caps["tan_delta"][missing], caps["capacitance_uf"][missing] * 1e-6)

    return FleetArrays(
        unit_id=unit_ids_arr,
        asset_tag=[u[1] for u in units],
        unit_model=np.array([midx[u[2]] for u in units], dtype=np.int64),
        manufactured_day=_days_from_text([f"{u[4]:04d}-07-01" for u in units]),
        joined_day=joined_day,
        hist_powered=hp, hist_unpowered=hu, accounted_day=accounted, last_powered_day=last_powered,
        monthly_store_c=monthly,
        use_powered_h_per_year=use_p, use_out_h_per_year=use_o, use_ambient_c=use_a, use_hires_per_year=use_n,
        model_id=np.array([m[0] for m in models], dtype=np.int64),
        model_rise_k=np.array([m[1] for m in models], dtype=float),
        model_hours_per_day=np.array([m[2] for m in models], dtype=float),
        cap_id=caps["id"], unit_index=cap_unit_index,
        position_index=_index_of(np.array([p[0] for p in pos_rows], dtype=np.int64), caps["position_id"]),
        capacitance_f=caps["capacitance_uf"] * 1e-6, rated_voltage_v=caps["rated_voltage_v"],
        rated_temp_c=caps["rated_temp_c"], rated_life_h=caps["rated_life_h"], esr0_ohm=esr0,
        diameter_mm=caps["diameter_mm"], length_mm=caps["length_mm"], installed_day=caps["installed_day"],
        is_original=caps["is_original"],
        baseline_index=baseline_index,
        pos_id=np.array([p[0] for p in pos_rows], dtype=np.int64),
        pos_designator=[p[2] for p in pos_rows],
        pos_role=np.array([ROLE_CODES.get(p[3], 0) for p in pos_rows], dtype=np.int64),
        pos_ripple_a=np.array([_f(p[4]) for p in pos_rows]),
        pos_partner=partner, pos_circuit=circuit,
        snap_powered=sp, snap_unpowered=su, model_means=model_means, **readings,
    )


def _baselines(caps, unit_ids, extra_units=()):
    """Each replaced part's snapshot: the one its unit took on the part's
    install date.  Returns (index into the snapshots or -1, powered,
    unpowered, ``snap_at``: a function from (unit ids, days) to snapshot
    indices).  Snapshots are read for the units with replaced parts and
    ``extra_units`` (units with readings)."""
    replaced = ~caps["is_original"]
    n = caps["id"].size
    wanted = np.union1d(np.unique(caps["unit_id"][replaced]), np.asarray(extra_units, dtype=np.int64))
    if not wanted.size:
        return (np.full(n, -1, dtype=np.int64), np.zeros((0, H.N_BINS)), np.zeros((0, H.N_BINS)),
                lambda units, days: np.full(np.shape(units), -1, dtype=np.int64))
    qn = connection.ops.quote_name
    where, params = _id_filter(None if unit_ids is None else wanted.tolist(), None, "unit_id")
    rows = _select(HistogramSnapshot, ("unit", "taken_on", "powered", "unpowered"),
                   f" WHERE 1 = 1{where} ORDER BY {qn('unit_id')}, {qn('taken_on')}", params, as_text={"taken_on"})
    rows = [(r[0], dt.date.fromisoformat(r[1][:10]), bytes(r[2]), bytes(r[3])) for r in rows]
    sp = H.stack_from_bytes([r[2] for r in rows]) if rows else np.zeros((0, H.N_BINS))
    su = H.stack_from_bytes([r[3] for r in rows]) if rows else np.zeros((0, H.N_BINS))
    # (unit, day) as one sortable key; days since 1970 fit in 2**20 for millennia.
    snap_key = np.array([r[0] * (1 << 20) + (r[1] - _EPOCH).days for r in rows], dtype=np.int64)
    order = np.argsort(snap_key, kind="stable")

    def snap_at(units, days):
        key = np.asarray(units, dtype=np.int64) * (1 << 20) + np.floor(days).astype(np.int64)
        found = _index_of(snap_key[order], key)
        return np.where(found >= 0, order[np.maximum(found, 0)] if order.size else -1, -1).astype(np.int64)

    index = np.where(replaced, snap_at(caps["unit_id"], caps["installed_day"]), -1)
    return index.astype(np.int64), sp, su, snap_at


def _readings(unit_ids):
    """The bench readings of fitted parts (not of parts since replaced) that
    can move the forecast: capacitors with an ESR or a capacitance, negative
    rails of a charge pump under a load.  One query."""
    qn = connection.ops.quote_name
    where, params = _id_filter(unit_ids, None, "unit_id")
    rows = _select(
        Reading, ("unit", "kind", "position", "taken_at", "esr_ohm", "capacitance_uf", "pump_position",
                  "rail_measured_v", "rail_input_v", "rail_load_ma"),
        f" WHERE {qn('part_removed')} = %s AND (({qn('kind')} = %s AND ({qn('esr_ohm')} IS NOT NULL "
        f"OR {qn('capacitance_uf')} IS NOT NULL)) OR ({qn('kind')} = %s AND {qn('pump_position_id')} IS NOT NULL "
        f"AND {qn('rail_load_ma')} > 0)){where} ORDER BY {qn('unit_id')}, {qn('taken_at')}, {qn('id')}",
        [False, Reading.Kind.CAPACITOR, Reading.Kind.RAIL, *params], as_text={"taken_at"})
    # taken_at as both databases write it in text, in UTC (Django's connections
    # keep UTC); the day counted is the local one, as the ORM's aware times gave.
    days = np.array([(timezone.localdate(dt.datetime.strptime(r[3][:19], "%Y-%m-%d %H:%M:%S")
                                         .replace(tzinfo=dt.timezone.utc)) - _EPOCH).days for r in rows], dtype=float)
    return {"rows": rows, "days": days, "unit_id": np.array([r[0] for r in rows], dtype=np.int64)}


def _reading_arrays(readings, caps, snap_at):
    """The readings as FleetArrays fields: capacitor rows found by (unit, position)."""
    rows, days = readings["rows"], readings["days"]
    if not rows:
        return {}
    span = int(caps["position_id"].max()) + 1 if caps["position_id"].size else 1
    cap_key = caps["unit_id"] * span + caps["position_id"]
    order = np.argsort(cap_key, kind="stable")

    def row_of(unit_ids, position_ids):
        k = _index_of(cap_key[order], np.asarray(unit_ids, dtype=np.int64) * span + np.asarray(position_ids))
        return np.where(k >= 0, order[np.maximum(k, 0)] if order.size else -1, -1).astype(np.int64)

    def f(x):
        return np.nan if x is None else float(x)

    is_cap = np.array([r[1] == Reading.Kind.CAPACITOR for r in rows])
    units = readings["unit_id"]
    pos = np.array([(r[2] if r[1] == Reading.Kind.CAPACITOR else r[6]) or 0 for r in rows], dtype=np.int64)
    cap_row = row_of(units, pos)
    ok_c, ok_r = is_cap & (cap_row >= 0), ~is_cap & (cap_row >= 0)
    snaps = snap_at(units, days)
    return {
        "reading_cap": cap_row[ok_c], "reading_day": days[ok_c], "reading_snap": snaps[ok_c],
        "reading_esr_ohm": np.array([f(r[4]) for r in rows])[ok_c],
        "reading_capacitance_f": np.array([f(r[5]) for r in rows])[ok_c] * 1e-6,
        "rail_fly": cap_row[ok_r], "rail_day": days[ok_r], "rail_snap": snaps[ok_r],
        "rail_measured_v": np.array([f(r[7]) for r in rows])[ok_r],
        "rail_input_v": np.array([f(r[8]) for r in rows])[ok_r],
        "rail_load_a": np.array([f(r[9]) for r in rows])[ok_r] / 1000.0,
    }


_EPOCH = dt.date(1970, 1, 1)


def active_policy():
    policy = MaintenancePolicy.objects.filter(active=True).first()
    return policy or MaintenancePolicy(name="built-in defaults")
