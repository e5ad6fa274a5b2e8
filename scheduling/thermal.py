"""Thermal-history services: keep each unit's temperature-time histograms.

A unit's history runs from its date of manufacture (1 July of the year made):
- before it joined the fleet: the unit's prior-use assumption (powered hours
  per year at a room temperature plus the model's internal rise; the rest of the
  time unpowered at a storage temperature);
- in the fleet: each closed hire (powered hours at venue ambient plus internal
  rise; the rest of the hire unpowered at venue ambient), and storage between
  hires at the home location's temperature for that calendar month.

The register never calls the engine.  It raises a unit's ``records_version``
whenever the records its exposure comes from change; ``thermal_sync`` compares
that with the version each history was brought up to date with, and for each
unit that differs (or has no history yet) either adds the hires closed since
the history's end (the usual case: a check-in) or rebuilds the history from
the records (a late-entered or edited hire, new dates, another home, an
import).  It also keeps a snapshot for every date on which one of the unit's
fitted parts went in, and packs the unit's fitted parts and recent hires
beside the history (``thermal_repack``; scheduling/parts.py and recent.py)
for the loader to read instead of the rows.  The nightly job adds storage up
to now (``thermal_advance_storage``).

The incremental steps and the from-scratch ``thermal_rebuild`` give the same
histograms; a test holds them to it.  Queries are per table, never per unit.
The arithmetic of filling the histograms, with no queries, is in
scheduling/exposure.py.
"""

import datetime as dt
from collections import defaultdict
from dataclasses import dataclass

import numpy as np
from django.db import transaction
from django.db.models import Avg, Count, F, Q, Sum
from django.db.models.functions import ExtractMonth
from django.utils import timezone

from fleet.models import Location, Reading, Rental, TemperatureSample, Unit, UnitCapacitor

from . import histogram as H
from . import parts as P
from . import recent as R
from .exposure import (add_prior_use, add_rental, add_storage, build_history, counted_rentals, exposure_basis,
                       fitted_at, joined_at)
from .models import HistogramSnapshot, ThermalHistory

# --- location temperatures -------------------------------------------------

def location_monthly_temps(location_ids, *, locations=None):
    """Mean storage temperature for each calendar month, per location [degC].

    Returns ``{location_id: ndarray(12)}``.  Sample profiles average the
    imported samples by calendar month (one grouped query for all locations);
    a month with no samples takes the location's constant temperature, or the
    mean of the months that have samples.  ``locations``: the locations as
    the caller read them (their id, profile and temperatures), not read again.
    """
    if locations is None:
        locations = list(Location.objects.filter(pk__in=set(location_ids)))
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


# --- services ----------------------------------------------------------------

def snapshot_days(unit_ids):
    """{unit id: dates a snapshot is wanted for}: the install date of every
    replaced part, and the date of every bench reading of the parts fitted
    (a reading's part counts its damage since the reading from there)."""
    days = defaultdict(set)
    for unit_id, day in (UnitCapacitor.objects.filter(unit_id__in=unit_ids, is_original=False)
                         .values_list("unit_id", "installed_on").distinct()):
        days[unit_id].add(day)
    for unit_id, taken_at in (Reading.objects.filter(unit_id__in=unit_ids, part_removed=False)
                              .values_list("unit_id", "taken_at")):
        days[unit_id].add(timezone.localdate(taken_at))
    return days


@dataclass
class SyncReport:
    """What :func:`thermal_sync` did, in numbers."""

    started: int = 0       # histories created from the prior-use assumption alone
    extended: int = 0      # histories that took the hires closed since their end
    rebuilt: int = 0       # histories rebuilt from the records
    snapshots: int = 0     # snapshots written for newly fitted parts
    advanced: int = 0      # histories whose storage was counted up to ``until``
    repacked: int = 0      # histories whose packed parts and hires were written again

    @property
    def changed(self):
        return self.started + self.extended + self.rebuilt


def _units(unit_ids):
    return list(Unit.objects.filter(pk__in=unit_ids).select_related("gear_model"))


def _history_fields(history, unit, powered, unpowered, accounted, last_powered, counted, internal_rise_k=None):
    history.powered, history.unpowered = H.to_bytes(powered), H.to_bytes(unpowered)
    history.accounted_until, history.last_powered_at = accounted, last_powered
    history.rentals_counted, history.powered_hours_counted = counted
    history.records_version = unit.records_version
    rise = unit.gear_model.internal_rise_k if internal_rise_k is None else internal_rise_k
    history.basis = exposure_basis(unit, rise)


@transaction.atomic(savepoint=False)
def thermal_sync(*, unit_ids=None, until=None, advance_storage=False, hire_closed=False):
    """Bring the engine's histories up to date with the register.

    For every unit (of ``unit_ids``; all when None) that is not retired and
    whose history is missing or older than its records (``records_version``):

    - no history and no closed hire: start one from the prior-use assumption;
    - the hires counted so far unchanged (same number and powered hours): add
      the hires closed since, in order, with the storage between them;
    - otherwise: rebuild from the records up to ``until`` (default now; a unit
      out on hire up to its check-out).

    Snapshots are written for install dates of fitted parts and dates of
    bench readings that have none.
    With ``advance_storage`` every history not out on hire then counts storage
    up to ``until`` (the nightly job).  Idempotent; a fixed number of queries
    whatever the number of units, plus one small one per unit changed.

    ``hire_closed``: the caller's transaction changed these units' records
    only by closing a hire each (``fleet.services.rental_close``, one step
    of ``records_version``).  A history, or a pack of fitted parts, that was
    current one step before then already has every snapshot its unit needs
    and the parts it has (a hire moves neither a part nor a reading): the
    dates of its snapshots and its capacitor rows are not read again.  Any
    other unit is brought up to date in full.

    No savepoint of its own: inside a caller's transaction (a check-in, a
    recap) a failure fails the whole of it.
    """
    until = until or timezone.now()
    report = SyncReport()
    units = Unit.objects.exclude(status=Unit.Status.RETIRED).filter(
        Q(thermal__isnull=True) | ~Q(thermal__records_version=F("records_version"))
        | ~Q(thermal__parts_version=F("records_version")))
    if unit_ids is not None:
        units = units.filter(pk__in=list(unit_ids))
    stale = list(units.select_related("gear_model", "thermal"))
    behind = [u for u in stale if not hasattr(u, "thermal") or u.thermal.records_version != u.records_version]
    # Only a hire closed since these were current: snapshots and packed parts stand (see above).
    snapshots_stand = {u.pk for u in behind if hire_closed and hasattr(u, "thermal")
                       and u.thermal.records_version == u.records_version - 1}
    whole = all(hasattr(u, "thermal") for u in stale)
    # A check-in's extended history is written once, with its packs (one UPDATE, not two).
    written_with_packs = {} if hire_closed and whole else None
    if behind:
        _sync_units(behind, until, report, snapshots_stand=snapshots_stand, defer=written_with_packs)
    if stale:
        if whole:
            # Each history was read above and kept its row; the unit's version is the one to mark.
            known = {u.pk: (u.thermal.pk, u.records_version) for u in stale}
            parts = {u.pk: bytes(u.thermal.parts) for u in stale if hire_closed
                     and u.thermal.parts_version == u.records_version - 1 and P.is_pack(u.thermal.parts)}
            report.repacked = thermal_repack(unit_ids=list(known), known=known, parts=parts,
                                             histories=written_with_packs)
        else:
            report.repacked = thermal_repack(unit_ids=[u.pk for u in stale])
    if advance_storage:
        report.advanced = thermal_advance_storage(unit_ids=unit_ids, until=until)
    return report


#: Units whose packs one step of ``thermal_repack`` writes (memory: their rows).
REPACK_CHUNK = 2000


def thermal_repack(*, unit_ids=None, known=None, parts=None, histories=None):
    """Write each unit's packed fitted parts and recent hires (see
    scheduling/parts.py, recent.py) from the rows, marked with the unit's
    ``records_version``.  All units with a history when ``unit_ids`` is
    None.  Three queries per step of REPACK_CHUNK units; returns the number
    of histories written.  ``known``: {unit id: (history id, records_version)}
    read by the caller in this transaction (``thermal_sync``), which spares
    the two queries that would look them up; ``parts``: {unit id: pack} of
    units whose fitted parts the caller knows did not change since their
    pack was written (their capacitor rows are not read); ``histories``:
    {unit id: ThermalHistory} changed by the caller and not yet saved, each
    written whole with its packs.  No savepoint of its own: a failure fails
    the caller's transaction."""
    with transaction.atomic(savepoint=False):
        return _repack(unit_ids, known, parts or {}, histories or {})


def _repack(unit_ids, known, kept, changed):
    now = timezone.now()
    since = now - dt.timedelta(days=R.KEEP_DAYS)
    complete_from = since.timestamp() / 86400.0
    if known is not None:
        pks = {unit_id: known[unit_id][0] for unit_id in sorted(known)}
    else:
        qs = ThermalHistory.objects.order_by("unit_id")
        if unit_ids is not None:
            qs = qs.filter(unit_id__in=list(unit_ids))
        pks = dict(qs.values_list("unit_id", "id"))
    ids = list(pks)
    done = 0
    for start in range(0, len(ids), REPACK_CHUNK):
        chunk = ids[start:start + REPACK_CHUNK]
        if known is not None:
            versions = {unit_id: known[unit_id][1] for unit_id in chunk}
        else:
            versions = dict(Unit.objects.filter(pk__in=chunk).values_list("pk", "records_version"))
        unread = [unit_id for unit_id in chunk if unit_id not in kept]
        parts = {**(P.packs_of(P.read_rows(unread), unread) if unread else {}),
                 **{unit_id: kept[unit_id] for unit_id in chunk if unit_id in kept}}
        hires = defaultdict(list)
        for unit_id, out_at, in_at, powered, ambient in (
                Rental.objects.filter(unit_id__in=chunk, in_at__gte=since).order_by("in_at")
                .values_list("unit_id", "out_at", "in_at", "powered_hours", "venue_ambient_c")):
            hires[unit_id].append(R.hire_row(out_at, in_at, powered, ambient))
        rows = []
        for unit_id in chunk:
            packed = np.array(hires.get(unit_id, []), dtype=R.HIRE_ROW)
            packs = {"parts": parts[unit_id], "recent": R.pack(packed, complete_from),
                     "parts_version": versions.get(unit_id, -1)}
            history = changed.get(unit_id)
            if history is not None:
                for name, value in packs.items():
                    setattr(history, name, value)
                history.save()  # the history's own fields and its packs in one UPDATE
            else:
                rows.append(ThermalHistory(pk=pks[unit_id], unit_id=unit_id, **packs))
        ThermalHistory.objects.bulk_update(rows, ["parts", "recent", "parts_version"], batch_size=500)
        done += len(rows) + sum(1 for unit_id in chunk if unit_id in changed)
    return done


def _sync_units(units, until, report, snapshots_stand=frozenset(), defer=None):
    """``snapshots_stand``: units whose snapshots are known complete (see
    ``thermal_sync``'s ``hire_closed``); their dates are not read.  ``defer``,
    a dict: the histories extended are put there unsaved, by unit id, for
    the caller to write with their packs."""
    ids = [u.pk for u in units]
    histories = {h.unit_id: h for h in ThermalHistory.objects.select_for_update().filter(unit_id__in=ids)}
    # The hires each history counts now: same number and powered hours as when
    # it was last brought up to date means only hires after its end are new.
    counted = {
        row["unit_id"]: (row["n"], row["p"] or 0.0)
        for row in Rental.objects.filter(unit_id__in=ids, in_at__isnull=False, unit__thermal__isnull=False,
                                         out_at__lt=F("unit__thermal__accounted_until"))
        .values("unit_id").annotate(n=Count("id"), p=Sum("powered_hours")).order_by()
    }
    without = [unit_id for unit_id in ids if unit_id not in histories]
    # Only a unit without a history asks whether it has closed hires.
    has_closed = set(Rental.objects.filter(unit_id__in=without, in_at__isnull=False)
                     .values_list("unit_id", flat=True).distinct()) if without else set()
    looked = [unit_id for unit_id in ids if unit_id not in snapshots_stand]
    wanted = snapshot_days(looked) if looked else {}  # unit -> install dates of its replaced parts, reading dates
    have = defaultdict(set)
    if looked:
        for unit_id, day in HistogramSnapshot.objects.filter(unit_id__in=looked).values_list("unit_id", "taken_on"):
            have[unit_id].add(day)

    start, extend, rebuild = [], [], []
    for unit in units:
        h = histories.get(unit.pk)
        if h is None:
            (rebuild if unit.pk in has_closed else start).append(unit)
            continue
        n, p = counted.get(unit.pk, (0, 0.0))
        same = (n == h.rentals_counted and abs(p - h.powered_hours_counted) <= 1e-6 * max(1.0, abs(p))
                and h.basis == exposure_basis(unit, unit.gear_model.internal_rise_k))
        (extend if same else rebuild).append(unit)

    if start:
        report.started = thermal_start(unit_ids=[u.pk for u in start])
    for unit in extend:
        if not _extend(unit, histories[unit.pk], save=defer is None):
            rebuild.append(unit)
        else:
            report.extended += 1
            if defer is not None:
                defer[unit.pk] = histories[unit.pk]
    if rebuild:
        report.rebuilt = thermal_rebuild(unit_ids=[u.pk for u in rebuild], until=until)
    rebuilt = {u.pk for u in rebuild}
    for unit in units:
        if unit.pk in rebuilt:
            continue  # the rebuild wrote every snapshot the unit needs
        missing = sorted(wanted.get(unit.pk, set()) - have.get(unit.pk, set()))
        for day in missing:
            thermal_snapshot(unit_id=unit.pk, on=day)
            report.snapshots += 1


def _extend(unit, history, save=True):
    """Add the unit's hires closed since its history's end; False if one
    starts before that end (the history must be rebuilt instead).  With
    ``save=False`` the history is changed but not written."""
    new = list(Rental.objects.filter(unit_id=unit.pk, in_at__isnull=False, out_at__gte=history.accounted_until)
               .order_by("out_at").only("out_at", "in_at", "powered_hours", "venue_ambient_c"))
    temps = location_monthly_temps([unit.home_location_id])[unit.home_location_id]
    if not _extend_with(unit, history, new, temps, unit.gear_model.internal_rise_k):
        return False
    if save:
        history.save()
    return True


def _extend_with(unit, history, rentals, temps, internal_rise_k):
    """Add closed ``rentals`` (in order of check-out) to ``history`` in
    memory, with the storage between them at the home's monthly ``temps``;
    False, and the history untouched, if one starts before the history's end."""
    powered, unpowered = H.from_bytes(history.powered), H.from_bytes(history.unpowered)
    accounted, last_powered = history.accounted_until, history.last_powered_at
    n, p = history.rentals_counted, history.powered_hours_counted
    for rental in rentals:
        if rental.out_at < accounted:  # overlapping hires among the new ones
            return False
        add_storage(unpowered, accounted, rental.out_at, temps)
        add_rental(powered, unpowered, rental.elapsed_hours, rental.powered_hours, rental.venue_ambient_c,
                   internal_rise_k)
        accounted = rental.in_at
        n, p = n + 1, p + rental.powered_hours
        if rental.powered_hours > 0:
            last_powered = rental.in_at
    _history_fields(history, unit, powered, unpowered, accounted, last_powered, (n, p), internal_rise_k)
    return True


#: The fields of a location its monthly temperatures come from.
HOME_FIELDS = ("profile", "constant_temp_c", "monthly_temps_c")


def thermal_check_in(unit, rental, *, before_general=None):
    """The check-in's sync of the one unit whose hire ``rental`` the caller's
    transaction has just closed (``fleet.services.rental_close``, which
    returns ``unit`` locked and one step of ``records_version`` on).

    When the unit's history and packs were current one step before (the
    usual case: nothing else changed while it was out) only this hire is
    new: it is added to the history and to the packed recent hires read
    from the row itself, and the row is written once, without its unchanged
    packed parts: two queries (the history locked with its home's
    temperatures, the history written), three for a home kept as dated
    samples (their monthly means).  Anything else goes the general way,
    ``thermal_sync(hire_closed=True)``.  Either way the row ends as a full
    sync would write it (a test holds them equal).  Returns, when the short
    way was taken, what the forecast that follows would read again: a
    ``CheckInSync`` (the history as written, the home's monthly
    temperatures); else None.

    ``before_general``: called before the general way, which reads the
    unit's row from the table (the check-in writes the unit row there
    first, when it has left it for later)."""
    if not transaction.get_connection().in_atomic_block:
        raise ValueError("thermal_check_in needs the caller's transaction that closed the hire.")
    version = unit.records_version
    # The history locked, read with its gear model's internal rise and its
    # home's temperatures (one query; the home is not read again below).
    history = (ThermalHistory.objects.select_for_update(of=("self",))
               .annotate(rise_k=F("unit__gear_model__internal_rise_k"), **{
                   f"home_{name}": F(f"unit__home_location__{name}") for name in HOME_FIELDS})
               .filter(unit_id=unit.pk).first())
    if (history is None or not isinstance(version, int) or history.records_version != version - 1
            or history.parts_version != version - 1 or not P.is_pack(history.parts)
            or not R.is_pack(history.recent) or rental.in_at is None
            or history.basis != exposure_basis(unit, history.rise_k)):
        return _general_way(unit, rental, before_general)
    home = Location(pk=unit.home_location_id, **{name: getattr(history, f"home_{name}") for name in HOME_FIELDS})
    temps = location_monthly_temps([home.pk], locations=[home])[home.pk]
    if not _extend_with(unit, history, [rental], temps, history.rise_k):
        return _general_way(unit, rental, before_general)
    # The recent hires: those of the pack still within KEEP_DAYS, then this one
    # (what thermal_repack reads from the hires table, without reading it).
    complete_from = (timezone.now() - dt.timedelta(days=R.KEEP_DAYS)).timestamp() / 86400.0
    kept = R.rows_of(history.recent)
    added = np.array([R.hire_row(rental.out_at, rental.in_at, rental.powered_hours, rental.venue_ambient_c)],
                     dtype=R.HIRE_ROW)
    hires = np.concatenate([kept[kept["in_day"] >= complete_from], added])
    history.recent = R.pack(hires[np.argsort(hires["in_day"], kind="stable")], complete_from)
    history.parts_version = version
    history.save(update_fields=["powered", "unpowered", "accounted_until", "last_powered_at", "rentals_counted",
                                "powered_hours_counted", "records_version", "basis", "recent", "parts_version",
                                "updated_at"])
    return CheckInSync(history=history, location_temps={unit.home_location_id: temps}, unit_row=unit_row_of(unit))


def unit_row_of(unit):
    """The locked ``unit`` as ``loader.unit_rows`` reads a unit's row (its
    records version as the caller's transaction holds it), or None for a
    retired unit (which the engine does not forecast)."""
    if unit.status == unit.Status.RETIRED:
        return None
    return (unit.pk, unit.asset_tag, unit.gear_model_id, unit.home_location_id, unit.year_made,
            unit.joined_on.isoformat(), unit.records_version)


def _general_way(unit, rental, before_general):
    if before_general is not None:
        before_general()
    thermal_sync(unit_ids=[unit.pk], until=rental.in_at, hire_closed=True)
    return None


@dataclass
class CheckInSync:
    """What ``thermal_check_in`` wrote and read, for the forecast that follows
    in the same transaction (``loader.load_fleet``'s ``known``)."""

    history: ThermalHistory
    location_temps: dict  # {location id: monthly temperatures [degC], ndarray(12)}
    unit_row: tuple = None  # the unit locked and written, as ``loader.unit_rows`` reads it


@transaction.atomic
def thermal_start(*, unit_ids):
    """Create the thermal history of units that have none (prior use only,
    counted up to the day each joined the fleet)."""
    have = set(ThermalHistory.objects.filter(unit_id__in=unit_ids).values_list("unit_id", flat=True))
    rows = []
    for unit in _units([u for u in unit_ids if u not in have]):
        powered, unpowered = H.empty(), H.empty()
        add_prior_use(powered, unpowered, unit, unit.gear_model.internal_rise_k)
        h = ThermalHistory(unit=unit)
        _history_fields(h, unit, powered, unpowered, joined_at(unit.joined_on), None, (0, 0.0))
        rows.append(h)
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
def thermal_snapshot(*, unit_id, on):
    """Store the unit's histograms at the install time of parts fitted on ``on``
    (a date), built from its records; replaces an earlier one for that date."""
    at = fitted_at(on)
    unit = _units([unit_id])[0]
    rentals = list(Rental.objects.filter(unit_id=unit_id, in_at__isnull=False, out_at__lt=at).order_by("out_at"))
    temps = location_monthly_temps([unit.home_location_id])[unit.home_location_id]
    _, _, _, _, snaps = build_history(unit, unit.gear_model.internal_rise_k, rentals, temps, at, [at])
    powered, unpowered = snaps[at]
    snapshot, _ = HistogramSnapshot.objects.update_or_create(
        unit_id=unit_id, taken_on=on,
        defaults={"taken_at": at, "powered": H.to_bytes(powered), "unpowered": H.to_bytes(unpowered)})
    return snapshot


@transaction.atomic
def thermal_rebuild(*, unit_ids=None, until=None):
    """Rebuild histories and snapshots from the records.

    ``until`` defaults to now; a unit out on hire is counted to its check-out.
    A snapshot is kept for every install date of the unit's replaced parts
    and every date of a bench reading of its fitted parts.
    Six queries whatever the number of units, plus the bulk writes.
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
    days_by_unit = snapshot_days(ids)
    snaps_by_unit = defaultdict(dict)
    for s in HistogramSnapshot.objects.filter(unit_id__in=ids).only("id", "unit_id", "taken_on", "taken_at"):
        snaps_by_unit[s.unit_id][s.taken_on] = s
    temps = location_monthly_temps({u.home_location_id for u in units})
    existing = {h.unit_id: h for h in ThermalHistory.objects.filter(unit_id__in=ids).only("id", "unit_id")}
    new_rows, changed, new_snaps, changed_snaps = [], [], [], []
    for unit in units:
        end = min(until, open_out.get(unit.pk, until))
        days = sorted(days_by_unit.get(unit.pk, ()))
        moments = {day: fitted_at(day) for day in days}
        rentals = rentals_by_unit.get(unit.pk, [])
        powered, unpowered, accounted, last_powered, snap_hists = build_history(
            unit, unit.gear_model.internal_rise_k, rentals, temps[unit.home_location_id], end,
            list(moments.values()),
        )
        for day, at in moments.items():
            s = snaps_by_unit[unit.pk].get(day) or HistogramSnapshot(unit_id=unit.pk, taken_on=day)
            s.taken_at = at
            s.powered, s.unpowered = (H.to_bytes(x) for x in snap_hists[at])
            (changed_snaps if s.pk else new_snaps).append(s)
        h = existing.get(unit.pk) or ThermalHistory(unit_id=unit.pk)
        _history_fields(h, unit, powered, unpowered, accounted, last_powered, counted_rentals(rentals, accounted))
        (changed if h.pk else new_rows).append(h)
    ThermalHistory.objects.bulk_create(new_rows, batch_size=1000)
    ThermalHistory.objects.bulk_update(
        changed, ["powered", "unpowered", "accounted_until", "last_powered_at", "rentals_counted",
                  "powered_hours_counted", "records_version", "basis"], batch_size=1000)
    HistogramSnapshot.objects.bulk_create(new_snaps, batch_size=1000)
    HistogramSnapshot.objects.bulk_update(changed_snaps, ["taken_at", "powered", "unpowered"], batch_size=1000)
    return len(units)


def parts_verify(*, unit_ids=None, repair=False):
    """Compare each history's packed fitted parts with the capacitor rows.

    Returns the ids of units whose pack is missing, of another layout, or
    differs from the rows; with ``repair`` those are packed again.  Goes
    through the fleet REPACK_CHUNK units at a time (two queries each)."""
    qs = ThermalHistory.objects.order_by("unit_id")
    if unit_ids is not None:
        qs = qs.filter(unit_id__in=list(unit_ids))
    ids = list(qs.values_list("unit_id", flat=True))
    wrong = []
    for start in range(0, len(ids), REPACK_CHUNK):
        chunk = ids[start:start + REPACK_CHUNK]
        rows = P.packs_of(P.read_rows(chunk), chunk)
        for unit_id, blob in ThermalHistory.objects.filter(unit_id__in=chunk).values_list("unit_id", "parts"):
            if P.rows_bytes(blob) != P.rows_bytes(rows[unit_id]):
                wrong.append(unit_id)
    if repair and wrong:
        thermal_repack(unit_ids=wrong)
    return wrong
