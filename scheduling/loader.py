"""Load the fleet into numpy arrays for the life engine, one query per table.

The capacitor rows are the bulk (10,000 units x 50 positions is half a million
rows), so they are read with a plain cursor in chunks straight into
preallocated arrays: memory stays at a few arrays of floats, never half a
million model instances or tuples.  Everything else is small.
"""

import datetime as dt
import itertools
from dataclasses import dataclass, field

import numpy as np
from django.db import connection
from django.db.models import Count, F, FloatField, Func, Q, Sum
from django.utils import timezone

from fleet.models import GearModel, MaintenancePolicy, Position, Reading, Rental, Unit, UnitCapacitor

from . import histogram as H
from . import physics
from .forecast import ROLE_CODES, date_to_day
from .models import HistogramSnapshot, ThermalHistory
from .thermal import location_monthly_temps

CHUNK_ROWS = 20_000


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


#: One capacitor row as read from the database (NULLs come back as -1).
CAPACITOR_ROW = np.dtype([
    ("id", "<i8"), ("unit_id", "<i8"), ("position_id", "<i8"), ("capacitance_uf", "<f8"),
    ("rated_voltage_v", "<f8"), ("rated_temp_c", "<f8"), ("rated_life_h", "<f8"), ("esr_ohm", "<f8"),
    ("tan_delta", "<f8"), ("diameter_mm", "<f8"), ("length_mm", "<f8"), ("installed_day", "<f8"),
    ("is_original", "?"),
])


def _days_since_epoch_sql(column):
    """SQL for a date column as days since 1970-01-01."""
    if connection.vendor == "postgresql":
        return f"({column} - DATE '1970-01-01')"
    return f"(julianday({column}) - 2440587.5)"


def _capacitor_sql(unit_filter_sql):
    qn = connection.ops.quote_name
    t = UnitCapacitor._meta.db_table
    select = []
    for name in CAPACITOR_ROW.names:
        col = qn(name)
        if name in ("esr_ohm", "tan_delta"):
            col = f"COALESCE({col}, -1.0)"
        elif name == "installed_day":
            col = _days_since_epoch_sql(qn("installed_on"))  # a number: no per-row date conversion
        select.append(col)
    sql = f"SELECT {', '.join(select)} FROM {qn(t)}"
    if unit_filter_sql:
        sql += f" WHERE {qn('unit_id')} IN ({unit_filter_sql})"
    sql += f" ORDER BY {qn('unit_id')}, {qn('id')}"
    return sql


def read_capacitors(unit_ids=None, bare=False):
    """Read the unit capacitor rows in chunks into one structured array.

    The chunks go from the cursor straight into one numpy array
    (``np.fromiter`` over the row tuples), so memory is the array plus one
    chunk of tuples.
    ``bare=True`` only fetches the rows (the benchmark's floor) and returns
    their number.
    """
    ids_sql = None
    params = []
    if unit_ids is not None:
        ids_sql = ", ".join(["%s"] * len(unit_ids)) or "NULL"
        params = list(unit_ids)
    with connection.cursor() as cursor:
        cursor.execute(_capacitor_sql(ids_sql), params)
        chunks = iter(lambda: cursor.fetchmany(CHUNK_ROWS), [])
        if bare:
            return sum(len(rows) for rows in chunks)
        # One array filled straight from the chunks as they arrive (numpy grows
        # it); only one chunk of row tuples exists at a time.
        arr = np.fromiter(itertools.chain.from_iterable(chunks), dtype=CAPACITOR_ROW)
    out = {name: np.ascontiguousarray(arr[name]) for name in CAPACITOR_ROW.names}
    for name in ("esr_ohm", "tan_delta"):
        out[name] = np.where(out[name] < 0, np.nan, out[name])
    return out


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
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return cursor.fetchall()


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


def load_fleet(*, unit_ids=None, today, min_history_days=180):
    """Everything the engine needs, as arrays (see FleetArrays)."""
    qn = connection.ops.quote_name
    ids_sql, params = "", []
    if unit_ids is not None:
        ids_sql = f" AND {qn('id')} IN ({', '.join(['%s'] * len(unit_ids)) or 'NULL'})"
        params = list(unit_ids)
    units = _raw(
        f"SELECT {qn('id')}, {qn('asset_tag')}, {qn('gear_model_id')}, {qn('home_location_id')}, "
        f"{qn('year_made')}, CAST({qn('joined_on')} AS TEXT) FROM {qn(Unit._meta.db_table)} "
        f"WHERE {qn('status')} <> %s{ids_sql} ORDER BY {qn('id')}",
        [Unit.Status.RETIRED, *params],
    )
    ids = [u[0] for u in units]
    filter_ids = None if unit_ids is None else ids
    n = len(units)
    unit_ids_arr = np.array(ids, dtype=np.int64)

    models = list(GearModel.objects.values_list("pk", "internal_rise_k", "powered_hours_per_day"))
    midx = {m[0]: k for k, m in enumerate(models)}

    joined_day = _days_from_text([u[5] for u in units])
    hp = np.zeros((n, H.N_BINS))
    hu = np.zeros((n, H.N_BINS))
    accounted = joined_day.copy()  # a unit without a history counts from joining
    last_powered = np.full(n, np.nan)
    th_sql = (f"SELECT {qn('unit_id')}, {qn('powered')}, {qn('unpowered')}, CAST({qn('accounted_until')} AS TEXT), "
              f"CAST({qn('last_powered_at')} AS TEXT) FROM {qn(ThermalHistory._meta.db_table)}")
    th_params = []
    if filter_ids is not None:
        th_sql += f" WHERE {qn('unit_id')} IN ({', '.join(['%s'] * len(filter_ids)) or 'NULL'})"
        th_params = list(filter_ids)
    rows = _raw(th_sql, th_params)
    if rows:
        k = _index_of(unit_ids_arr, np.array([r[0] for r in rows], dtype=np.int64))
        ok = k >= 0
        rows = [r for r, keep in zip(rows, ok) if keep]
        k = k[ok]
        if rows:
            hp[k] = H.stack_from_bytes([r[1] for r in rows])
            hu[k] = H.stack_from_bytes([r[2] for r in rows])
            accounted[k] = _days_from_text([r[3] for r in rows])
            last_powered[k] = _days_from_text([r[4] for r in rows])

    temps = location_monthly_temps({u[3] for u in units})
    monthly = np.array([temps[u[3]] for u in units]).reshape(n, 12)

    use = recent_use(filter_ids, today)
    today_day = date_to_day(today)
    uidx = {uid: k for k, uid in enumerate(ids)}
    use_p = np.full(n, np.nan)
    use_o = np.full(n, np.nan)
    use_a = np.full(n, np.nan)
    use_n = np.full(n, np.nan)
    for unit_id, (p, o, a, hires) in use.items():
        k = uidx.get(unit_id)
        if k is not None and today_day - joined_day[k] >= min_history_days:
            use_p[k], use_o[k], use_a[k], use_n[k] = p, o, a, hires
    # Units in the fleet long enough but with no hires: a real zero, not unknown.
    settled = (today_day - joined_day) >= min_history_days
    use_p[settled & np.isnan(use_p)] = 0.0
    use_o[settled & np.isnan(use_o)] = 0.0
    use_n[settled & np.isnan(use_n)] = 0.0

    caps = read_capacitors(filter_ids)
    cap_unit_index = _index_of(unit_ids_arr, caps["unit_id"])
    keep = cap_unit_index >= 0  # capacitors of retired units are left out
    if not keep.all():
        caps = {k: v[keep] for k, v in caps.items()}
        cap_unit_index = cap_unit_index[keep]

    pos_qs = Position.objects.order_by("pk")
    if filter_ids is not None:
        pos_qs = pos_qs.filter(pk__in=set(caps["position_id"].tolist()))
    pos_rows = list(pos_qs.values_list(
        "pk", "gear_model_id", "designator", "role", "ripple_current_a", "pump_partner", *CIRCUIT_FIELDS))
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
        snap_powered=sp, snap_unpowered=su, **readings,
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
    qs = HistogramSnapshot.objects.order_by("unit_id", "taken_on")
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=wanted.tolist())
    rows = list(qs.values_list("unit_id", "taken_on", "powered", "unpowered"))
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
    qs = Reading.objects.filter(part_removed=False).filter(
        Q(kind=Reading.Kind.CAPACITOR, esr_ohm__isnull=False) | Q(kind=Reading.Kind.CAPACITOR,
                                                                  capacitance_uf__isnull=False)
        | Q(kind=Reading.Kind.RAIL, pump_position__isnull=False, rail_load_ma__gt=0))
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=unit_ids)
    rows = list(qs.order_by("unit_id", "taken_at", "id").values_list(
        "unit_id", "kind", "position_id", "taken_at", "esr_ohm", "capacitance_uf", "pump_position_id",
        "rail_measured_v", "rail_input_v", "rail_load_ma"))
    days = np.array([(timezone.localdate(r[3]) - _EPOCH).days for r in rows], dtype=float)
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
