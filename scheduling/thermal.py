"""Thermal-history services: keep each unit's temperature-time histograms.

A unit's history runs from its date of manufacture (1 July of the year made):
- before it joined the fleet: the unit's prior-use assumption (powered hours
  per year at a room temperature plus the model's internal rise; the rest of the
  time unpowered at a storage temperature);
- in the fleet: each closed hire (powered hours at venue ambient plus internal
  rise; the rest of the hire unpowered at venue ambient), and storage between
  hires at the home location's temperature for that calendar month.

The incremental services (``thermal_add_rental``, ``thermal_advance_storage``)
and the from-scratch ``thermal_rebuild`` give the same histograms; a test holds
them to it.  Queries are per table, never per unit.
"""

import datetime as dt
from collections import defaultdict

import numpy as np
from django.db import transaction
from django.db.models import Avg
from django.db.models.functions import ExtractMonth
from django.utils import timezone

from fleet.models import Location, Rental, TemperatureSample, Unit

from . import histogram as H
from .models import HistogramSnapshot, ThermalHistory

HOURS_PER_YEAR = 8766.0  # 365.25 days


def manufactured_at(year_made):
    """The moment the model takes as a unit's date of manufacture: 1 July, noon, UTC."""
    return dt.datetime(year_made, 7, 1, 12, 0, tzinfo=dt.timezone.utc)


def joined_at(joined_on):
    return dt.datetime.combine(joined_on, dt.time(0, 0), tzinfo=dt.timezone.utc)


# --- location temperatures -------------------------------------------------

def location_monthly_temps(location_ids):
    """Mean storage temperature for each calendar month, per location [degC].

    Returns ``{location_id: ndarray(12)}``.  Sample profiles average the
    imported samples by calendar month (one grouped query for all locations);
    a month with no samples takes the location's constant temperature, or the
    mean of the months that have samples.
    """
    location_ids = set(location_ids)
    locations = list(Location.objects.filter(pk__in=location_ids))
    sample_ids = [loc.pk for loc in locations if loc.profile == Location.Profile.SAMPLES]
    sample_means = defaultdict(dict)
    if sample_ids:
        rows = (
            TemperatureSample.objects.filter(location_id__in=sample_ids)
            .annotate(month=ExtractMonth("taken_at", tzinfo=dt.timezone.utc))
            .values("location_id", "month")
            .annotate(mean=Avg("temp_c"))
        )
        for row in rows:
            sample_means[row["location_id"]][row["month"]] = row["mean"]
    out = {}
    for loc in locations:
        if loc.profile == Location.Profile.MONTHLY and loc.monthly_temps_c:
            temps = np.asarray(loc.monthly_temps_c, dtype=float)
        elif loc.profile == Location.Profile.SAMPLES and sample_means.get(loc.pk):
            known = sample_means[loc.pk]
            fallback = loc.constant_temp_c if loc.constant_temp_c is not None else float(np.mean(list(known.values())))
            temps = np.array([known.get(m, fallback) for m in range(1, 13)], dtype=float)
        else:
            temps = np.full(12, loc.constant_temp_c if loc.constant_temp_c is not None else 20.0)
        out[loc.pk] = temps
    return out


def month_hours(start, end):
    """Hours of [start, end) falling in each calendar month: ndarray(12), January first."""
    out = np.zeros(12)
    if end <= start:
        return out
    cursor = start
    while cursor < end:
        nxt = (cursor.replace(year=cursor.year + 1, month=1, day=1, hour=0, minute=0, second=0, microsecond=0)
               if cursor.month == 12
               else cursor.replace(month=cursor.month + 1, day=1, hour=0, minute=0, second=0, microsecond=0))
        stop = min(nxt, end)
        out[cursor.month - 1] += (stop - cursor).total_seconds() / 3600.0
        cursor = stop
    return out


# --- the pure accumulation -------------------------------------------------

def add_storage(unpowered, start, end, monthly_temps_c):
    """Add storage from ``start`` to ``end`` at the month's temperature."""
    if end > start:
        H.add_hours(unpowered, monthly_temps_c, month_hours(start, end))


def add_rental(powered, unpowered, elapsed_h, powered_h, venue_ambient_c, internal_rise_k):
    H.add_hours(powered, venue_ambient_c + internal_rise_k, powered_h)
    H.add_hours(unpowered, venue_ambient_c, max(elapsed_h - powered_h, 0.0))


def add_prior_use(powered, unpowered, unit, internal_rise_k):
    """Before the unit joined the fleet: the unit's prior-use assumption."""
    start = manufactured_at(unit.year_made)
    end = joined_at(unit.joined_on)
    total_h = max((end - start).total_seconds() / 3600.0, 0.0)
    powered_h = min(unit.prior_powered_h_per_year * total_h / HOURS_PER_YEAR, total_h)
    H.add_hours(powered, unit.prior_ambient_c + internal_rise_k, powered_h)
    H.add_hours(unpowered, unit.prior_storage_c, total_h - powered_h)


def build_history(unit, internal_rise_k, rentals, monthly_temps_c, until, snapshot_times=()):
    """A unit's histograms from manufacture to ``until``, from its records alone.

    ``rentals`` are the unit's closed hires in order of check-out.  Returns
    ``(powered, unpowered, accounted_until, last_powered_at, snapshots)`` where
    ``snapshots`` maps each of ``snapshot_times`` to the (powered, unpowered)
    histograms at that moment.
    """
    powered, unpowered = H.empty(), H.empty()
    add_prior_use(powered, unpowered, unit, internal_rise_k)
    cursor = joined_at(unit.joined_on)
    last_powered = None
    pending = sorted(snapshot_times)
    snaps = {}

    def take_until(moment):
        nonlocal cursor
        while pending and pending[0] <= moment:
            t = pending.pop(0)
            if t > cursor:
                add_storage(unpowered, cursor, t, monthly_temps_c)
                cursor = t
            snaps[t] = (powered.copy(), unpowered.copy())

    for r in rentals:
        if r.out_at >= until:
            break
        take_until(r.out_at)
        add_storage(unpowered, cursor, r.out_at, monthly_temps_c)
        elapsed = (r.in_at - r.out_at).total_seconds() / 3600.0
        add_rental(powered, unpowered, elapsed, r.powered_hours, r.venue_ambient_c, internal_rise_k)
        cursor = max(cursor, r.in_at)
        if r.powered_hours > 0:
            last_powered = r.in_at
    take_until(until)
    if until > cursor:
        add_storage(unpowered, cursor, until, monthly_temps_c)
        cursor = until
    for t in pending:  # snapshots before manufacture or in a hire: what was known then
        snaps[t] = (powered.copy(), unpowered.copy())
    return powered, unpowered, cursor, last_powered, snaps


# --- services ----------------------------------------------------------------

def _units(unit_ids):
    return list(Unit.objects.filter(pk__in=unit_ids).select_related("gear_model"))


@transaction.atomic
def thermal_start(*, unit_ids):
    """Create the thermal history of units that have none (prior use only)."""
    have = set(ThermalHistory.objects.filter(unit_id__in=unit_ids).values_list("unit_id", flat=True))
    rows = []
    for unit in _units([u for u in unit_ids if u not in have]):
        powered, unpowered = H.empty(), H.empty()
        add_prior_use(powered, unpowered, unit, unit.gear_model.internal_rise_k)
        rows.append(ThermalHistory(unit=unit, powered=H.to_bytes(powered), unpowered=H.to_bytes(unpowered),
                                   accounted_until=joined_at(unit.joined_on)))
    ThermalHistory.objects.bulk_create(rows, batch_size=1000)
    return len(rows)


@transaction.atomic
def thermal_advance_storage(*, unit_ids=None, until=None):
    """Count storage up to ``until`` for units that are not out on hire.

    ``unit_ids=None`` means the whole fleet (the nightly job).  Idempotent:
    a unit already accounted to ``until`` is left alone.  Returns the number
    of histories advanced.
    """
    until = until or timezone.now()
    qs = ThermalHistory.objects.filter(accounted_until__lt=until).select_related("unit")
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=unit_ids)
    open_units = set(Rental.objects.filter(in_at__isnull=True).values_list("unit_id", flat=True))
    histories = [h for h in qs if h.unit_id not in open_units]
    temps = location_monthly_temps({h.unit.home_location_id for h in histories})
    for h in histories:
        unpowered = H.from_bytes(h.unpowered)
        add_storage(unpowered, h.accounted_until, until, temps[h.unit.home_location_id])
        h.unpowered = H.to_bytes(unpowered)
        h.accounted_until = until
    ThermalHistory.objects.bulk_update(histories, ["unpowered", "accounted_until"], batch_size=1000)
    return len(histories)


@transaction.atomic
def thermal_add_rental(*, rental, internal_rise_k):
    """Add a closed hire to its unit's histograms (the check-in step).

    A hire that starts before what is already counted (entered late) makes
    the unit's history be rebuilt from its records instead.
    """
    history = ThermalHistory.objects.select_for_update().filter(unit_id=rental.unit_id).first()
    if history is None or rental.out_at < history.accounted_until:
        thermal_rebuild(unit_ids=[rental.unit_id])
        return
    unit = Unit.objects.get(pk=rental.unit_id)
    temps = location_monthly_temps([unit.home_location_id])[unit.home_location_id]
    powered, unpowered = H.from_bytes(history.powered), H.from_bytes(history.unpowered)
    add_storage(unpowered, history.accounted_until, rental.out_at, temps)
    add_rental(powered, unpowered, rental.elapsed_hours, rental.powered_hours, rental.venue_ambient_c, internal_rise_k)
    history.powered, history.unpowered = H.to_bytes(powered), H.to_bytes(unpowered)
    history.accounted_until = rental.in_at
    if rental.powered_hours > 0:
        history.last_powered_at = rental.in_at
    history.save()


@transaction.atomic
def thermal_snapshot(*, unit_id, at):
    """Store the unit's histograms as they were at ``at`` (parts replaced then)."""
    unit = _units([unit_id])[0]
    rentals = list(Rental.objects.filter(unit_id=unit_id, in_at__isnull=False, out_at__lt=at).order_by("out_at"))
    temps = location_monthly_temps([unit.home_location_id])[unit.home_location_id]
    _, _, _, _, snaps = build_history(unit, unit.gear_model.internal_rise_k, rentals, temps, at, [at])
    powered, unpowered = snaps[at]
    return HistogramSnapshot.objects.create(unit_id=unit_id, taken_at=at, powered=H.to_bytes(powered),
                                            unpowered=H.to_bytes(unpowered))


@transaction.atomic
def thermal_rebuild(*, unit_ids=None, until=None):
    """Rebuild histories (and the units' snapshots) from the records.

    ``until`` defaults to now; a unit out on hire is counted to its check-out.
    Four queries whatever the number of units, plus the bulk writes.
    """
    until = until or timezone.now()
    units = list(Unit.objects.select_related("gear_model") if unit_ids is None else _units(unit_ids))
    ids = [u.pk for u in units]
    rentals_by_unit = defaultdict(list)
    open_out = {}
    for r in Rental.objects.filter(unit_id__in=ids).order_by("out_at").only(
        "unit_id", "out_at", "in_at", "powered_hours", "venue_ambient_c"
    ):
        if r.in_at is None:
            open_out[r.unit_id] = r.out_at
        else:
            rentals_by_unit[r.unit_id].append(r)
    snaps_by_unit = defaultdict(list)
    for s in HistogramSnapshot.objects.filter(unit_id__in=ids).only("id", "unit_id", "taken_at"):
        snaps_by_unit[s.unit_id].append(s)
    temps = location_monthly_temps({u.home_location_id for u in units})
    existing = {h.unit_id: h for h in ThermalHistory.objects.filter(unit_id__in=ids).only("id", "unit_id")}
    new_rows, changed, changed_snaps = [], [], []
    for unit in units:
        end = min(until, open_out.get(unit.pk, until))
        snaps = snaps_by_unit.get(unit.pk, [])
        powered, unpowered, accounted, last_powered, snap_hists = build_history(
            unit, unit.gear_model.internal_rise_k, rentals_by_unit.get(unit.pk, []),
            temps[unit.home_location_id], end, [s.taken_at for s in snaps],
        )
        for s in snaps:
            s.powered, s.unpowered = (H.to_bytes(x) for x in snap_hists[s.taken_at])
            changed_snaps.append(s)
        h = existing.get(unit.pk) or ThermalHistory(unit_id=unit.pk)
        h.powered, h.unpowered = H.to_bytes(powered), H.to_bytes(unpowered)
        h.accounted_until, h.last_powered_at = accounted, last_powered
        (changed if h.pk else new_rows).append(h)
    ThermalHistory.objects.bulk_create(new_rows, batch_size=1000)
    ThermalHistory.objects.bulk_update(changed, ["powered", "unpowered", "accounted_until", "last_powered_at"],
                                       batch_size=1000)
    HistogramSnapshot.objects.bulk_update(changed_snaps, ["powered", "unpowered"], batch_size=1000)
    return len(units)
