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
from django.db.models import DurationField, ExpressionWrapper, F, Sum

from fleet.models import GearModel, MaintenancePolicy, Position, Rental, Unit, UnitCapacitor

from . import histogram as H
from .models import HistogramSnapshot, ThermalHistory
from .thermal import joined_at, location_monthly_temps

CHUNK_ROWS = 20_000
ROLE_CODES = {
    "general": 0, "supply_decoupling": 1, "timing": 2, "supply_reservoir": 3,
    "pump_flying": 4, "pump_reservoir": 5, "signal_coupling": 6,
}
ROLE_NAMES = {v: k for k, v in ROLE_CODES.items()}
EPOCH = dt.date(1970, 1, 1)


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


def _day(value):
    if value is None:
        return np.nan
    if isinstance(value, dt.datetime):
        return (value - dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)).total_seconds() / 86400.0
    if isinstance(value, str):
        value = dt.date.fromisoformat(value[:10])
    return float((value - EPOCH).days)


def _f(x):
    return np.nan if x is None else float(x)


def _capacitor_sql(unit_filter_sql):
    t = UnitCapacitor._meta.db_table
    cols = ("id", "unit_id", "position_id", "capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h",
            "esr_ohm", "tan_delta", "diameter_mm", "length_mm", "installed_on", "is_original", "baseline_id")
    qn = connection.ops.quote_name
    sql = f"SELECT {', '.join(qn(c) for c in cols)} FROM {qn(t)}"
    if unit_filter_sql:
        sql += f" WHERE {qn('unit_id')} IN ({unit_filter_sql})"
    sql += f" ORDER BY {qn('unit_id')}, {qn('id')}"
    return sql


def capacitor_count(unit_ids=None):
    qs = UnitCapacitor.objects.all()
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=unit_ids)
    return qs.count()


def read_capacitors(unit_ids=None, bare=False):
    """Read the unit capacitor rows in chunks.  ``bare=True`` only fetches (the
    benchmark's floor); otherwise returns a dict of arrays."""
    ids_sql = None
    params = []
    if unit_ids is not None:
        ids_sql = ", ".join(["%s"] * len(unit_ids)) or "NULL"
        params = list(unit_ids)
    n = capacitor_count(unit_ids)
    out = None
    if not bare:
        out = {
            "id": np.empty(n, np.int64), "unit_id": np.empty(n, np.int64), "position_id": np.empty(n, np.int64),
            "capacitance_uf": np.empty(n), "rated_voltage_v": np.empty(n), "rated_temp_c": np.empty(n),
            "rated_life_h": np.empty(n), "esr_ohm": np.empty(n), "tan_delta": np.empty(n),
            "diameter_mm": np.empty(n), "length_mm": np.empty(n), "installed_day": np.empty(n),
            "is_original": np.empty(n, bool), "baseline_id": np.empty(n, np.int64),
        }
    pos = 0
    with connection.cursor() as cursor:
        cursor.execute(_capacitor_sql(ids_sql), params)
        while True:
            rows = cursor.fetchmany(CHUNK_ROWS)
            if not rows:
                break
            if bare:
                pos += len(rows)
                continue
            k = len(rows)
            if pos + k > n:  # rows added since the count: grow
                for key, arr in out.items():
                    out[key] = np.concatenate([arr, np.empty(pos + k - n, arr.dtype)])
                n = pos + k
            cols = list(zip(*rows))
            sl = slice(pos, pos + k)
            out["id"][sl] = cols[0]
            out["unit_id"][sl] = cols[1]
            out["position_id"][sl] = cols[2]
            for j, key in enumerate(("capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h"), start=3):
                out[key][sl] = cols[j]
            out["esr_ohm"][sl] = np.array(cols[7], dtype=float)  # None -> nan
            out["tan_delta"][sl] = np.array(cols[8], dtype=float)
            out["diameter_mm"][sl] = cols[9]
            out["length_mm"][sl] = cols[10]
            out["installed_day"][sl] = [_day(d) for d in cols[11]]
            out["is_original"][sl] = cols[12]
            out["baseline_id"][sl] = [-1 if b is None else b for b in cols[13]]
            pos += k
    if bare:
        return pos
    return {key: arr[:pos] for key, arr in out.items()}


def recent_use(unit_ids, today):
    """Per unit over the last twelve months: powered hours, hours out on hire,
    and the powered-hours-weighted venue ambient.  One grouped query."""
    since = dt.datetime.combine(today - dt.timedelta(days=365), dt.time(0), tzinfo=dt.timezone.utc)
    qs = Rental.objects.filter(in_at__isnull=False, in_at__gte=since)
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=unit_ids)
    rows = qs.values("unit_id").annotate(
        powered=Sum("powered_hours"),
        weighted=Sum(F("powered_hours") * F("venue_ambient_c")),
        out=Sum(ExpressionWrapper(F("in_at") - F("out_at"), output_field=DurationField())),
    )
    return {r["unit_id"]: (r["powered"] or 0.0, r["out"].total_seconds() / 3600.0 if r["out"] else 0.0,
                           (r["weighted"] / r["powered"]) if r["powered"] else np.nan) for r in rows}


def load_fleet(*, unit_ids=None, today, min_history_days=180):
    """Everything the engine needs, as arrays (see FleetArrays)."""
    units_qs = Unit.objects.exclude(status=Unit.Status.RETIRED).order_by("pk")
    if unit_ids is not None:
        units_qs = units_qs.filter(pk__in=unit_ids)
    units = list(units_qs.values_list("pk", "asset_tag", "gear_model_id", "home_location_id", "year_made",
                                      "joined_on"))
    ids = [u[0] for u in units]
    filter_ids = None if unit_ids is None else ids
    n = len(units)
    uidx = {uid: k for k, uid in enumerate(ids)}

    models = list(GearModel.objects.values_list("pk", "internal_rise_k", "powered_hours_per_day"))
    midx = {m[0]: k for k, m in enumerate(models)}

    hp = np.zeros((n, H.N_BINS))
    hu = np.zeros((n, H.N_BINS))
    accounted = np.array([_day(joined_at(u[5])) for u in units]) if n else np.zeros(0)
    last_powered = np.full(n, np.nan)
    th = ThermalHistory.objects.all()
    if filter_ids is not None:
        th = th.filter(unit_id__in=filter_ids)
    for unit_id, p, q, acc, lp in th.values_list("unit_id", "powered", "unpowered", "accounted_until",
                                                 "last_powered_at").iterator(chunk_size=2000):
        k = uidx.get(unit_id)
        if k is None:
            continue
        hp[k] = np.frombuffer(bytes(p), dtype=H.DTYPE)
        hu[k] = np.frombuffer(bytes(q), dtype=H.DTYPE)
        accounted[k] = _day(acc)
        last_powered[k] = _day(lp)

    temps = location_monthly_temps({u[3] for u in units})
    monthly = np.array([temps[u[3]] for u in units]).reshape(n, 12)

    use = recent_use(filter_ids, today)
    today_day = _day(today)
    joined_day = np.array([_day(u[5]) for u in units]) if n else np.zeros(0)
    use_p = np.full(n, np.nan)
    use_o = np.full(n, np.nan)
    use_a = np.full(n, np.nan)
    for unit_id, (p, o, a) in use.items():
        k = uidx.get(unit_id)
        if k is not None and today_day - joined_day[k] >= min_history_days:
            use_p[k], use_o[k], use_a[k] = p, o, a
    # Units in the fleet long enough but with no hires: a real zero, not unknown.
    settled = (today_day - joined_day) >= min_history_days
    use_p[settled & np.isnan(use_p)] = 0.0
    use_o[settled & np.isnan(use_o)] = 0.0

    caps = read_capacitors(filter_ids)
    cap_unit_index = np.array([uidx.get(u, -1) for u in caps["unit_id"].tolist()], dtype=np.int64)
    keep = cap_unit_index >= 0  # capacitors of retired units are left out
    caps = {k: v[keep] for k, v in caps.items()}
    cap_unit_index = cap_unit_index[keep]

    pos_rows = list(Position.objects.filter(pk__in=set(caps["position_id"].tolist())).values_list(
        "pk", "gear_model_id", "designator", "role", "ripple_current_a", "pump_partner", *CIRCUIT_FIELDS))
    pidx = {p[0]: k for k, p in enumerate(pos_rows)}
    by_model_designator = {(p[1], p[2]): k for k, p in enumerate(pos_rows)}
    partner = np.array([by_model_designator.get((p[1], p[5]), -1) if p[5] else -1 for p in pos_rows],
                       dtype=np.int64)
    circuit = {name: np.array([_f(p[6 + j]) for p in pos_rows]) for j, name in enumerate(CIRCUIT_FIELDS)}

    snap_ids = sorted({b for b in caps["baseline_id"].tolist() if b >= 0})
    sidx = {s: k for k, s in enumerate(snap_ids)}
    sp = np.zeros((len(snap_ids), H.N_BINS))
    su = np.zeros((len(snap_ids), H.N_BINS))
    if snap_ids:
        for sid, p, q in HistogramSnapshot.objects.filter(pk__in=snap_ids).values_list("pk", "powered", "unpowered"):
            sp[sidx[sid]] = np.frombuffer(bytes(p), dtype=H.DTYPE)
            su[sidx[sid]] = np.frombuffer(bytes(q), dtype=H.DTYPE)

    esr0 = caps["esr_ohm"].copy()
    missing = np.isnan(esr0)
    # ESR from tan delta at 120 Hz: ESR = tan d / (2 pi f C)
    esr0[missing] = caps["tan_delta"][missing] / (2 * np.pi * 120.0 * caps["capacitance_uf"][missing] * 1e-6)

    return FleetArrays(
        unit_id=np.array(ids, dtype=np.int64),
        asset_tag=[u[1] for u in units],
        unit_model=np.array([midx[u[2]] for u in units], dtype=np.int64),
        manufactured_day=np.array([_day(dt.date(u[4], 7, 1)) for u in units]) if n else np.zeros(0),
        joined_day=joined_day,
        hist_powered=hp, hist_unpowered=hu, accounted_day=accounted, last_powered_day=last_powered,
        monthly_store_c=monthly,
        use_powered_h_per_year=use_p, use_out_h_per_year=use_o, use_ambient_c=use_a,
        model_id=np.array([m[0] for m in models], dtype=np.int64),
        model_rise_k=np.array([m[1] for m in models], dtype=float),
        model_hours_per_day=np.array([m[2] for m in models], dtype=float),
        cap_id=caps["id"], unit_index=cap_unit_index,
        position_index=np.array([pidx[p] for p in caps["position_id"].tolist()], dtype=np.int64),
        capacitance_f=caps["capacitance_uf"] * 1e-6, rated_voltage_v=caps["rated_voltage_v"],
        rated_temp_c=caps["rated_temp_c"], rated_life_h=caps["rated_life_h"], esr0_ohm=esr0,
        diameter_mm=caps["diameter_mm"], length_mm=caps["length_mm"], installed_day=caps["installed_day"],
        is_original=caps["is_original"],
        baseline_index=np.array([sidx.get(b, -1) for b in caps["baseline_id"].tolist()], dtype=np.int64),
        pos_id=np.array([p[0] for p in pos_rows], dtype=np.int64),
        pos_designator=[p[2] for p in pos_rows],
        pos_role=np.array([ROLE_CODES.get(p[3], 0) for p in pos_rows], dtype=np.int64),
        pos_ripple_a=np.array([_f(p[4]) for p in pos_rows]),
        pos_partner=partner, pos_circuit=circuit,
        snap_powered=sp, snap_unpowered=su,
    )


def active_policy():
    policy = MaintenancePolicy.objects.filter(active=True).first()
    return policy or MaintenancePolicy(name="built-in defaults")
