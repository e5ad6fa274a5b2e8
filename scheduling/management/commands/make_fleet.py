"""``manage.py make_fleet``: a large synthetic fleet for benchmarks.

    manage.py make_fleet --units 10000 --positions 50 --years 2 --seed 1

Writes synthetic gear models ("Synthetic Model 001", ...) with ``--positions``
capacitor positions each (supply reservoirs, a charge-pump pair on every
third model, coupling, decoupling, timing and general positions, so every
role's threshold is exercised), the units and their capacitor rows, two to
four hires per unit per calendar month over the last ``--years`` years, and
each unit's thermal history.

Everything is written in bulk, a statement per few thousand rows, never a
query per unit.  The thermal histories are accumulated in numpy straight from
the generated hires with the same rules as ``scheduling.exposure.build_history``
(prior use, hires, storage at the home store's monthly temperature); a test
holds them equal to ``thermal_rebuild``.  Hires never cross a calendar month
(UTC), which is what lets storage be counted per month as "hours of the month
minus hours on hire".
"""

import datetime as dt
import time

import numpy as np
from django.core.management.base import BaseCommand, CommandError
from django.db import connection, transaction
from django.utils import timezone

from fleet.models import GearModel, Location, Position, Rental, Role, Unit, UnitCapacitor
from fleet.services import RATING_FIELDS
from scheduling import histogram as H
from scheduling.models import ThermalHistory
from scheduling.exposure import add_prior_use, exposure_basis, joined_at, month_hours

MAKER = "Synthetic Works"
TAG_PREFIX = "SYN-"
STORES = (
    ("Synthetic cool store", [11.0, 11.0, 12.0, 13.0, 14.0, 15.5, 16.5, 16.5, 15.0, 14.0, 12.5, 11.5]),
    ("Synthetic warm store", [17.0, 18.0, 20.0, 23.0, 27.0, 31.0, 34.0, 33.0, 29.0, 24.0, 20.0, 18.0]),
)
LIMITS = {"units": (1, 1_000_000), "positions": (1, 500), "years": (1, 20), "models": (1, 9999)}


def _part(rng, role):
    """Ratings and circuit fields of one synthetic position of ``role``."""
    def pick(*values):
        return values[int(rng.integers(len(values)))]

    if role == Role.SUPPLY_RESERVOIR:
        uf = pick(2200.0, 3300.0, 4700.0)
        return dict(capacitance_uf=uf, rated_voltage_v=35.0, rated_temp_c=85.0, rated_life_h=2000.0,
                    tan_delta=0.14, diameter_mm=18.0, length_mm=35.5, ripple_current_a=pick(0.5, 0.8, 1.2),
                    ripple_freq_hz=100.0, operating_voltage_v=24.0, reservoir_load_a=pick(0.3, 0.5, 0.7),
                    reservoir_ripple_freq_hz=100.0, reservoir_ripple_limit_v=pick(3.0, 3.5, 4.0))
    if role == Role.PUMP_FLYING:
        return dict(capacitance_uf=10.0, rated_voltage_v=16.0, rated_temp_c=85.0, rated_life_h=1000.0,
                    esr_ohm=pick(3.0, 3.5, 4.0), diameter_mm=5.0, length_mm=11.0, ripple_current_a=0.04,
                    ripple_freq_hz=5000.0, operating_voltage_v=5.0)
    if role == Role.PUMP_RESERVOIR:
        return dict(capacitance_uf=47.0, rated_voltage_v=16.0, rated_temp_c=85.0, rated_life_h=1000.0,
                    esr_ohm=1.2, diameter_mm=6.3, length_mm=11.0, ripple_current_a=0.04, ripple_freq_hz=5000.0,
                    operating_voltage_v=5.0)
    if role == Role.SIGNAL_COUPLING:
        return dict(capacitance_uf=pick(1.0, 2.2, 4.7, 10.0), rated_voltage_v=50.0, rated_temp_c=85.0,
                    rated_life_h=1000.0, tan_delta=0.10, diameter_mm=5.0, length_mm=11.0, ripple_current_a=0.001,
                    ripple_freq_hz=1000.0, operating_voltage_v=7.5, coupling_load_ohm=pick(10e3, 22e3, 47e3),
                    coupling_max_corner_hz=20.0)
    if role == Role.SUPPLY_DECOUPLING:
        return dict(capacitance_uf=pick(10.0, 47.0, 100.0), rated_voltage_v=25.0, rated_temp_c=85.0,
                    rated_life_h=pick(1000.0, 2000.0), tan_delta=0.14, diameter_mm=6.3, length_mm=11.0,
                    ripple_current_a=0.02, ripple_freq_hz=100.0, operating_voltage_v=15.0)
    if role == Role.TIMING:
        return dict(capacitance_uf=pick(1.0, 2.2, 4.7), rated_voltage_v=50.0, rated_temp_c=85.0,
                    rated_life_h=1000.0, tan_delta=0.10, diameter_mm=5.0, length_mm=11.0, operating_voltage_v=5.0)
    return dict(capacitance_uf=pick(10.0, 22.0, 47.0, 100.0), rated_voltage_v=pick(16.0, 25.0), rated_temp_c=85.0,
                rated_life_h=pick(1000.0, 2000.0), tan_delta=0.16, diameter_mm=6.3, length_mm=11.0,
                operating_voltage_v=9.0)


ROLE_CYCLE = (Role.SIGNAL_COUPLING, Role.SUPPLY_DECOUPLING, Role.GENERAL, Role.SIGNAL_COUPLING,
              Role.SUPPLY_DECOUPLING, Role.GENERAL, Role.TIMING, Role.GENERAL)
PUMP = dict(pump_input_v=5.0, pump_load_a=0.02, pump_freq_hz=5000.0, pump_switch_ohm=46.0, pump_min_rail_v=3.25)


def population_roles(positions, with_pump):
    """Roles of a synthetic model's positions C1..Cn: reservoirs, pump pair, then a mix."""
    roles = [Role.SUPPLY_RESERVOIR] * min(2, positions)
    if with_pump and positions - len(roles) >= 2:
        roles += [Role.PUMP_FLYING, Role.PUMP_RESERVOIR]
    roles += [ROLE_CYCLE[i % len(ROLE_CYCLE)] for i in range(positions - len(roles))]
    return roles


def _insert_rows(model, fields, rows, chunk=20000):
    """Plain multi-row insert of ready-made, already adapted values (no model instances)."""
    qn = connection.ops.quote_name
    meta = model._meta
    columns = ", ".join(qn(meta.get_field(name).column) for name in fields)
    sql = f"INSERT INTO {qn(meta.db_table)} ({columns}) VALUES ({', '.join(['%s'] * len(fields))})"
    with connection.cursor() as cursor:
        for start in range(0, len(rows), chunk):
            cursor.executemany(sql, rows[start:start + chunk])


def _db_datetimes(seconds):
    """UTC epoch seconds (int64 array) as values the database adapter accepts for a DateTimeField."""
    stamps = seconds.astype("datetime64[s]")
    if connection.vendor == "sqlite":  # what Django's SQLite adapter stores: naive UTC text
        return np.char.replace(np.datetime_as_string(stamps, unit="s"), "T", " ").tolist()
    return [d.replace(tzinfo=dt.timezone.utc) for d in stamps.astype(object).tolist()]


class Command(BaseCommand):
    help = "Build a large synthetic fleet (models, units, capacitors, hires, thermal histories) for benchmarks."

    def add_arguments(self, parser):
        parser.add_argument("--units", type=int, default=10000, help="Number of units (default 10000).")
        parser.add_argument("--positions", type=int, default=50, help="Capacitor positions per model (default 50).")
        parser.add_argument("--years", type=int, default=2, help="Years of hire history (default 2).")
        parser.add_argument("--models", type=int, default=None,
                            help="Number of gear models (default: one per 200 units, 3 to 50).")
        parser.add_argument("--seed", type=int, default=1, help="Random seed (default 1).")
        parser.add_argument("--force-add", action="store_true",
                            help="Add the synthetic fleet even if the database already has units.")

    def handle(self, *args, units, positions, years, models, seed, force_add, **options):
        if models is None:
            models = min(units, max(3, min(50, units // 200)))
        for name, value in (("units", units), ("positions", positions), ("years", years), ("models", models)):
            low, high = LIMITS[name]
            if not low <= value <= high:
                raise CommandError(f"--{name} must be between {low} and {high}, not {value}.")
        if models > units:
            raise CommandError(f"--models ({models}) cannot be more than --units ({units}).")
        existing = Unit.objects.count()
        if existing and not force_add:
            raise CommandError(f"The database already has {existing} units.  make_fleet fills an empty "
                               "register; use a scratch database, or --force-add to add to this one.")
        started = time.perf_counter()
        with transaction.atomic():
            counts = self.build(units=units, positions=positions, years=years, n_models=models, seed=seed)
        self.stdout.write(self.style.SUCCESS(
            f"Made {counts['units']} units of {counts['models']} models, {counts['capacitors']} capacitor rows, "
            f"{counts['rentals']} hires and {counts['histories']} thermal histories "
            f"in {time.perf_counter() - started:.1f} s."
        ))

    def step(self, label, started):
        now = time.perf_counter()
        self.stdout.write(f"  {label}: {now - started:.1f} s")
        return now

    def build(self, *, units, positions, years, n_models, seed):
        rng = np.random.default_rng(seed)
        until = timezone.now().replace(microsecond=0).astimezone(dt.timezone.utc)
        t = time.perf_counter()

        # Stores.
        stores = []
        for name, temps in STORES:
            loc, _ = Location.objects.get_or_create(
                name=name, defaults=dict(kind=Location.Kind.STORE, profile=Location.Profile.MONTHLY,
                                         monthly_temps_c=temps, constant_temp_c=float(np.mean(temps))))
            stores.append(loc)

        # Gear models and positions.
        first_model = GearModel.objects.filter(maker=MAKER).count() + 1
        gear_models = []
        for i in range(n_models):
            year_from = int(rng.integers(1975, 1993))
            gear_models.append(GearModel(
                maker=MAKER, model_name=f"Synthetic Model {first_model + i:03d}",
                category=GearModel.Category.OTHER, year_from=year_from, year_to=year_from + int(rng.integers(1, 6)),
                internal_rise_k=float(rng.integers(5, 26)), powered_hours_per_day=float(rng.integers(5, 11)),
                hazard_tube_hv=i % 7 == 3, hazard_smps=i % 5 == 4,
            ))
        GearModel.objects.bulk_create(gear_models)
        position_rows = []
        for i, gm in enumerate(gear_models):
            roles = population_roles(positions, with_pump=i % 3 == 0)
            for n, role in enumerate(roles, start=1):
                fields = _part(rng, role)
                if role == Role.PUMP_FLYING:
                    fields.update(PUMP, pump_partner=f"C{n + 1}")
                elif role == Role.PUMP_RESERVOIR:
                    fields.update(PUMP, pump_partner=f"C{n - 1}")
                position_rows.append(Position(gear_model=gm, designator=f"C{n}", role=role, **fields))
        Position.objects.bulk_create(position_rows, batch_size=500)
        by_model = {}
        for pos in Position.objects.filter(gear_model__in=gear_models).order_by("gear_model_id", "id"):
            by_model.setdefault(pos.gear_model_id, []).append(pos)
        t = self.step(f"{n_models} gear models, {len(position_rows)} positions", t)

        # Units: joined in the half year before the hire window opens.
        window_start = (until - dt.timedelta(days=round(365.25 * years))).date()
        last = Unit.objects.filter(asset_tag__startswith=TAG_PREFIX).order_by("-asset_tag").first()
        first_tag = int(last.asset_tag[len(TAG_PREFIX):]) + 1 if last else 1
        model_of = rng.integers(0, n_models, size=units)
        model_of[:n_models] = np.arange(n_models)  # every model has a unit
        store_of = rng.integers(0, len(stores), size=units)
        joined_offset = rng.integers(1, 183, size=units)
        prior_h = rng.integers(150, 701, size=units)
        unit_objs = []
        for k in range(units):
            gm = gear_models[model_of[k]]
            unit_objs.append(Unit(
                asset_tag=f"{TAG_PREFIX}{first_tag + k:07d}", serial=f"S{seed}-{k:07d}", gear_model=gm,
                year_made=int(rng.integers(gm.year_from, gm.year_to + 1)),
                joined_on=window_start - dt.timedelta(days=int(joined_offset[k])),
                home_location=stores[store_of[k]], prior_powered_h_per_year=float(prior_h[k]),
            ))
        Unit.objects.bulk_create(unit_objs, batch_size=2000)
        if unit_objs[0].pk is None:  # a backend that cannot return ids from a bulk insert
            pks = dict(Unit.objects.filter(asset_tag__in=[u.asset_tag for u in unit_objs])
                       .values_list("asset_tag", "pk"))
            for u in unit_objs:
                u.pk = u.id = pks[u.asset_tag]
        t = self.step(f"{units} units", t)

        # Capacitor rows: a copy of each model's positions, installed on the date of manufacture.
        cap_fields = ("unit", "position", "installed_on", "is_original", *RATING_FIELDS)
        template = {gm.pk: [(p.pk, *(getattr(p, f) for f in RATING_FIELDS)) for p in by_model[gm.pk]]
                    for gm in gear_models}
        adapt_date = connection.ops.adapt_datefield_value
        cap_rows = []
        for u in unit_objs:
            installed = adapt_date(dt.date(u.year_made, 7, 1))
            cap_rows.extend((u.pk, row[0], installed, True, *row[1:]) for row in template[u.gear_model_id])
        _insert_rows(UnitCapacitor, cap_fields, cap_rows)
        n_caps = len(cap_rows)
        del cap_rows
        t = self.step(f"{n_caps} capacitor rows", t)

        # Hires: 2-4 per unit per calendar month, each inside its month and slot.
        first_month = dt.datetime(window_start.year, window_start.month, 1, tzinfo=dt.timezone.utc)
        month_starts = []
        cursor = first_month
        while True:
            cursor = (cursor + dt.timedelta(days=32)).replace(day=1)
            nxt = (cursor + dt.timedelta(days=32)).replace(day=1)
            if nxt > until:
                break
            month_starts.append(cursor)
        n_months = len(month_starts)
        month_epoch = np.array([int(m.timestamp()) for m in month_starts], dtype=np.int64)
        month_days = np.array([((m + dt.timedelta(days=32)).replace(day=1) - m).days for m in month_starts])
        month_no = np.array([m.month for m in month_starts])
        per = rng.integers(2, 5, size=(units, n_months))
        r_unit = np.repeat(np.arange(units), per.sum(axis=1))
        r_month = np.repeat(np.tile(np.arange(n_months), units), per.ravel())
        r_k = np.repeat(per.ravel(), per.ravel())
        ends = np.cumsum(per.ravel())
        r_slot = np.arange(ends[-1] if len(ends) else 0) - np.repeat(ends - per.ravel(), per.ravel())
        n_rentals = len(r_unit)
        slot_len = month_days[r_month] // r_k
        days = np.minimum(rng.integers(1, 8, size=n_rentals), slot_len - 1)
        offset = (rng.random(n_rentals) * (slot_len - days)).astype(np.int64)
        start_day = r_slot * slot_len + offset
        out_h = rng.integers(9, 13, size=n_rentals)
        in_h = rng.integers(10, 19, size=n_rentals)
        out_s = month_epoch[r_month] + start_day * 86400 + out_h * 3600
        in_s = out_s + days * 86400 + (in_h - out_h) * 3600
        elapsed = (in_s - out_s) / 3600.0
        hpd = np.array([gm.powered_hours_per_day for gm in gear_models])[model_of[r_unit]]
        powered = np.round(np.minimum(days * hpd * rng.uniform(0.45, 1.1, n_rentals), 0.9 * elapsed), 1)
        summer = (1 - np.cos(2 * np.pi * (month_no[r_month] - 1) / 12)) / 2
        venue = np.clip(rng.normal(21.0 + 4.5 * summer, 1.8), 18.0, 32.0)
        festival = (summer > 0.7) & (rng.random(n_rentals) < 0.3)
        venue = np.where(festival, rng.uniform(28.0, 35.0, n_rentals), venue)
        venue = np.round(venue * 2) / 2
        rental_fields = ("unit", "job_ref", "out_at", "expected_ambient_c", "in_at", "powered_hours",
                         "hours_source", "venue_ambient_c", "reported_faults")
        unit_pk = np.array([u.pk for u in unit_objs], dtype=np.int64)
        rental_rows = list(zip(
            unit_pk[r_unit].tolist(), [f"SYN-J{seed}-{i:08d}" for i in range(n_rentals)], _db_datetimes(out_s),
            np.where(festival, 30.0, 25.0).tolist(), _db_datetimes(in_s), powered.tolist(),
            [Rental.HoursSource.ESTIMATE] * n_rentals, venue.tolist(), [""] * n_rentals,
        ))
        _insert_rows(Rental, rental_fields, rental_rows)
        del rental_rows
        t = self.step(f"{n_rentals} hires", t)

        # Thermal histories, as build_history would accumulate them.
        n_bins = H.N_BINS
        powered_h = np.zeros((units, n_bins))
        unpowered_h = np.zeros((units, n_bins))
        rise = np.array([gm.internal_rise_k for gm in gear_models])[model_of]
        for k, u in enumerate(unit_objs):
            add_prior_use(powered_h[k], unpowered_h[k], u, rise[k])
        flat_p, flat_u = powered_h.reshape(-1), unpowered_h.reshape(-1)
        np.add.at(flat_p, r_unit * n_bins + H.bin_index(venue + rise[r_unit]), powered)
        np.add.at(flat_u, r_unit * n_bins + H.bin_index(venue), np.maximum(elapsed - powered, 0.0))
        # Storage: hours of each calendar month in [joined, until) minus the hours on hire.
        storage = np.zeros((units, 12))
        span_cache = {}
        for k, u in enumerate(unit_objs):
            if u.joined_on not in span_cache:
                span_cache[u.joined_on] = month_hours(joined_at(u.joined_on), until)
            storage[k] = span_cache[u.joined_on]
        np.add.at(storage, (r_unit, month_no[r_month] - 1), -elapsed)
        temps = np.array([s.monthly_temps_c for s in stores], dtype=float)[store_of]  # (units, 12)
        np.add.at(flat_u, (np.arange(units)[:, None] * n_bins + H.bin_index(temps)).ravel(),
                  np.maximum(storage, 0.0).ravel())
        last_powered = np.full(units, -1, dtype=np.int64)
        np.maximum.at(last_powered, r_unit[powered > 0], in_s[powered > 0])
        # What the engine checks to see that nothing changed since (thermal_sync).
        counted = per.sum(axis=1).tolist()
        counted_h = np.bincount(r_unit, weights=powered, minlength=units).tolist()
        histories = [
            ThermalHistory(
                unit_id=u.pk, powered=H.to_bytes(powered_h[k]), unpowered=H.to_bytes(unpowered_h[k]),
                accounted_until=until,
                last_powered_at=(dt.datetime.fromtimestamp(int(last_powered[k]), tz=dt.timezone.utc)
                                 if last_powered[k] >= 0 else None),
                records_version=u.records_version, rentals_counted=counted[k], powered_hours_counted=counted_h[k],
                basis=exposure_basis(u, rise[k]),
            )
            for k, u in enumerate(unit_objs)
        ]
        ThermalHistory.objects.bulk_create(histories, batch_size=1000)
        self.step(f"{len(histories)} thermal histories", t)
        return {"models": n_models, "units": units, "capacitors": n_caps, "rentals": n_rentals,
                "histories": len(histories)}
