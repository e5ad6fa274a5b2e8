"""Services of the fleet register: everything that writes more than one row.

The register knows nothing of the life engine.  Whatever changes the records
a unit's exposure is worked out from (a hire closed, parts fitted, dates,
prior use, home location, a model's internal rise or a location's
temperatures) raises the unit's ``records_version`` through
:func:`units_mark_changed`; the engine compares it with the version its own
state was built from and brings itself up to date.

Workflows that span the register and the engine (check-in with its verdict,
a recap with a fresh forecast, an import followed by the histories) live in
``front.workflows`` and call these.  Each service runs in one transaction, so
a failure leaves nothing half-written.
"""

import datetime as dt

from django.core.exceptions import ValidationError
from django.db import IntegrityError, transaction
from django.db.models import F, Q
from django.utils import timezone

from .models import CheckoutOverride, Position, Reading, Rental, ReplacedPart, ServiceRecord, Unit, UnitCapacitor

RATING_FIELDS = (
    "capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h", "esr_ohm", "tan_delta",
    "diameter_mm", "length_mm", "mount",
)


class ServiceError(Exception):
    """A request the fleet rules refuse; the message is meant for the user."""


def _by(obj, user):
    """Name ``user`` as the author of ``obj``'s next saved version (audit trail)."""
    if user is not None and getattr(user, "is_authenticated", False):
        obj._history_user = user
    return obj


def _manufacture_date(unit):
    return dt.date(unit.year_made, 7, 1)


def units_mark_changed(*, unit_ids=None, gear_model_ids=None, location_ids=None):
    """Raise ``records_version`` of the units whose exposure records changed.

    Give the units themselves, or every unit of some gear models (their
    internal rise changed), or every unit stored at some locations (their
    temperatures changed).  One UPDATE; returns the number of units marked.
    """
    which = Q()
    if unit_ids:
        which |= Q(pk__in=list(unit_ids))
    if gear_model_ids:
        which |= Q(gear_model_id__in=list(gear_model_ids))
    if location_ids:
        which |= Q(home_location_id__in=list(location_ids))
    if not which:
        return 0
    return Unit.objects.filter(which).update(records_version=F("records_version") + 1)


def unit_populate(*, units, positions_by_model=None):
    """Give each unit without capacitor rows a copy of its gear model's population.

    Installed date is the date of manufacture (1 July of the year made).  Runs
    one query for the positions of all the models involved and one bulk insert.
    Returns the number of capacitor rows written.
    """
    units = [u for u in units]
    if not units:
        return 0
    if positions_by_model is None:
        positions_by_model = {}
        model_ids = {u.gear_model_id for u in units}
        for pos in Position.objects.filter(gear_model_id__in=model_ids).order_by("designator"):
            positions_by_model.setdefault(pos.gear_model_id, []).append(pos)
    have = set(
        UnitCapacitor.objects.filter(unit__in=[u.pk for u in units]).values_list("unit_id", flat=True).distinct()
    )
    rows = []
    for unit in units:
        if unit.pk in have:
            continue
        installed = _manufacture_date(unit)
        for pos in positions_by_model.get(unit.gear_model_id, ()):
            rows.append(
                UnitCapacitor(
                    unit_id=unit.pk, position_id=pos.pk, installed_on=installed, is_original=True,
                    **{f: getattr(pos, f) for f in RATING_FIELDS},
                )
            )
    UnitCapacitor.objects.bulk_create(rows, batch_size=2000)
    if rows:  # fitted parts are exposure records: the engine repacks them
        units_mark_changed(unit_ids={r.unit_id for r in rows})
    return len(rows)


@transaction.atomic
def unit_add(**fields):
    """Create a unit and copy its model's capacitor population into it."""
    unit = Unit(**fields)
    unit.full_clean()
    unit.save()
    unit_populate(units=[unit])
    return unit


def _open_rental(unit_id):
    return Rental.objects.select_for_update().filter(unit_id=unit_id, in_at__isnull=True).first()


@transaction.atomic(savepoint=False)
def rental_open(*, unit_id, job_ref, out_at=None, expected_ambient_c=25.0, user=None, override=None):
    """Record a unit going out on a hire.  Refuses a unit that is already out,
    retired, held or on the bench, and a check-out before the last return.

    ``override``: the desk sends the unit out against its forecast; a dict of
    ``reason`` and what the forecast said (``forecast_status``,
    ``forecast_due_date``, ``forecast_risk``), stored with who and when.

    No savepoint of its own, as ``rental_close``: inside a caller's
    transaction (the desk's check-out) a refusal fails the whole of it."""
    unit = Unit.objects.select_for_update().get(pk=unit_id)
    out_at = out_at or timezone.now()
    if _open_rental(unit.pk) is not None:
        raise ServiceError(f"{unit.asset_tag} is already out; check it in first.")
    if unit.status != Unit.Status.AVAILABLE:
        why = f" ({unit.hold_reason})" if unit.status == Unit.Status.HOLD and unit.hold_reason else ""
        raise ServiceError(f"{unit.asset_tag} is {unit.get_status_display().lower()}{why}, not available for hire; "
                           "the workshop must release it first.")
    last = Rental.objects.filter(unit_id=unit.pk, in_at__isnull=False).order_by("-in_at").first()
    if last is not None and out_at < last.in_at:
        back = timezone.localtime(last.in_at)
        raise ServiceError(f"{unit.asset_tag} came back at {back.day} {back:%b %Y %H:%M}; "
                           f"it cannot go out before that.")
    rental = Rental(unit=unit, job_ref=job_ref.strip(), out_at=out_at, expected_ambient_c=expected_ambient_c,
                    checked_out_by=user)
    # As in rental_close: the unit exists (locked above) and so does the
    # signed-in user, and the table's constraints are held here in Python
    # (one open hire per unit, checked under the lock just above; the check
    # constraints concern a closed hire) and by the database on save.  Django
    # would spend two queries on the references and three statements on each
    # constraint (14 of a check-out's 29).
    rental.full_clean(exclude=["unit", "checked_out_by", "checked_in_by"], validate_constraints=False)
    _by(rental, user)
    try:
        rental.save()
    except IntegrityError:
        raise ServiceError(f"{unit.asset_tag} is already out; check it in first.") from None
    if override is not None:
        reason = (override.get("reason") or "").strip()
        if not reason:
            raise ServiceError("Give the reason for sending the unit out against its forecast.")
        CheckoutOverride.objects.create(
            rental=rental, unit=unit, decided_at=rental.out_at, decided_by=user, reason=reason,
            forecast_status=override.get("forecast_status", ""), forecast_due_date=override.get("forecast_due_date"),
            forecast_risk=override.get("forecast_risk"))
    unit.status = Unit.Status.OUT
    _by(unit, user).save(update_fields=["status"])
    return rental


@transaction.atomic(savepoint=False)
def rental_close(*, unit_id, in_at=None, venue_ambient_c, powered_hours=None, meter_reading_h=None,
                 reported_faults="", user=None, unit_written=True):
    """Record a unit coming back from its hire.

    Give either ``powered_hours`` (an estimate) or ``meter_reading_h`` (the
    unit's hour meter now; powered hours are the difference from the last
    reading).  A unit without an earlier reading may be given both: the
    estimate counts, and the reading is kept as its first.  Powered hours
    may not exceed the time out; the meter may not run backwards.  A unit
    with reported faults goes on hold for the bench, any other becomes
    available.  Marks the unit's records changed.

    No savepoint of its own (two round trips fewer on the desk's check-in):
    inside a caller's transaction a refusal fails the whole of it, as the
    check-in workflow wants.

    ``unit_written=False``: the unit row (locked, returned as ``rental.unit``
    with its new status, meter, hold reason and records version) is left for
    the caller's transaction to write once with ``unit_write_closed``, after
    it has decided whether the unit goes on hold (the check-in: one write and
    one audit record instead of two).
    """
    # The open hire and its unit, both locked, in one query.
    rental = (Rental.objects.select_for_update(of=("self", "unit")).select_related("unit")
              .filter(unit_id=unit_id, in_at__isnull=True).first())
    if rental is None:
        raise ServiceError(f"{Unit.objects.get(pk=unit_id).asset_tag} is not out on hire.")
    unit = rental.unit
    in_at = in_at or timezone.now()
    if in_at <= rental.out_at:
        raise ServiceError("Check-in must come after check-out "
                           f"({timezone.localtime(rental.out_at):%Y-%m-%d %H:%M}).")
    first_reading = meter_reading_h is not None and unit.hour_meter_h is None
    if first_reading:
        # The meter's first reading: it cannot count this hire's hours, the
        # estimate does; the reading is kept for the next check-in.
        if powered_hours is None:
            raise ServiceError(f"{unit.asset_tag} has no earlier meter reading, so the meter cannot tell this hire's "
                               "hours: give the hours powered as well; the reading is kept as its first.")
        source = Rental.HoursSource.ESTIMATE
    elif meter_reading_h is not None:
        if meter_reading_h < unit.hour_meter_h:
            raise ServiceError(
                f"The hour meter cannot run backwards: last reading {unit.hour_meter_h:g} h, now {meter_reading_h:g} h."
            )
        if powered_hours is not None and abs(powered_hours - (meter_reading_h - unit.hour_meter_h)) > 0.05:
            raise ServiceError("Powered hours and the meter reading disagree; give one of them.")
        powered_hours = meter_reading_h - unit.hour_meter_h
        source = Rental.HoursSource.METER
    elif powered_hours is None:
        raise ServiceError("Give the hours powered or the hour-meter reading.")
    else:
        source = Rental.HoursSource.ESTIMATE
    rental.in_at = in_at
    rental.powered_hours = float(powered_hours)
    rental.hours_source = source
    rental.meter_reading_h = meter_reading_h
    rental.venue_ambient_c = venue_ambient_c
    rental.reported_faults = reported_faults.strip()
    rental.checked_in_by = user
    if venue_ambient_c is None:
        raise ServiceError("Give the venue ambient temperature.")
    try:
        # The unit and users exist (the unit is locked, the users signed in),
        # and the table's check constraints are the rules clean() checks in
        # Python (and the database holds on save): no query for either.
        rental.full_clean(exclude=["unit", "checked_out_by", "checked_in_by"], validate_constraints=False)
    except ValidationError as exc:
        raise ServiceError("; ".join(m for msgs in exc.message_dict.values() for m in msgs)) from None
    _by(rental, user).save(update_fields=["in_at", "powered_hours", "hours_source", "meter_reading_h",
                                          "venue_ambient_c", "reported_faults", "checked_in_by"])
    if meter_reading_h is not None:
        unit.hour_meter_h = meter_reading_h
    unit.status = Unit.Status.HOLD if rental.reported_faults else Unit.Status.AVAILABLE
    unit.hold_reason = f"Fault reported on return: {rental.reported_faults}"[:300] if rental.reported_faults else ""
    # The row is locked: no one else moves its records version.
    unit.records_version += 1
    if unit_written:
        unit_write_closed(unit, user=user)
    return rental


#: The unit's fields a hire's close changes (``rental_close``).
CLOSED_UNIT_FIELDS = ["status", "hour_meter_h", "records_version", "hold_reason"]


def unit_write_closed(unit, *, user=None):
    """Write the unit row ``rental_close(unit_written=False)`` left to the
    caller (locked in the caller's transaction), with its audit record."""
    if not transaction.get_connection().in_atomic_block:
        raise ServiceError("unit_write_closed needs the caller's transaction that locked the unit.")
    _by(unit, user).save(update_fields=CLOSED_UNIT_FIELDS)


@transaction.atomic
def unit_hold(*, unit_id, reason="", user=None):
    """Put an available unit on hold (the desk must not hire it out), with the
    reason in words the desk can read.  Returns True if the status changed."""
    unit = Unit.objects.select_for_update().filter(pk=unit_id, status=Unit.Status.AVAILABLE).first()
    if unit is None:
        return False
    return unit_hold_locked(unit, reason=reason, user=user)


def unit_hold_locked(unit, *, reason="", user=None):
    """``unit_hold`` for a unit whose row the caller's transaction has locked
    and holds as it stands (``rental_close`` returns it with the hire): the
    row is not looked up again.  Returns True if the status changed."""
    if not transaction.get_connection().in_atomic_block:
        raise ServiceError("unit_hold_locked needs the caller's transaction that locked the unit.")
    if unit.status != Unit.Status.AVAILABLE:
        return False
    unit.status, unit.hold_reason = Unit.Status.HOLD, reason[:300]
    _by(unit, user).save(update_fields=["status", "hold_reason"])
    return True


@transaction.atomic
def recap_record(*, unit_id, performed_on, replacements, technician=None, technician_name="", notes="",
                 kind=ServiceRecord.Kind.RECAP, signed_off_by=None, bench_visit=None):
    """Record a service in which positions were replaced.

    ``replacements`` maps a designator to a dict of the new part's ratings
    (any rating left out is kept from the part that came out).  The unit's
    capacitor rows take the new ratings and the install date ``performed_on``;
    the unit's records are marked changed when any part was replaced.  Bench
    readings of the parts taken out (and of a replaced charge pump's rail)
    are kept as findings, no longer about the parts fitted.  ``signed_off_by``
    signs the record off now.
    """
    unit = Unit.objects.select_for_update().get(pk=unit_id)
    fitted = {
        c.position.designator: c
        for c in UnitCapacitor.objects.filter(unit_id=unit.pk).select_related("position")
    }
    unknown = sorted(set(replacements) - set(fitted))
    if unknown:
        raise ServiceError(f"{unit.asset_tag} has no position {', '.join(unknown)}.")
    record = ServiceRecord(unit=unit, kind=kind, performed_on=performed_on, technician=technician,
                           technician_name=technician_name, notes=notes, bench_visit=bench_visit,
                           signed_off_by=signed_off_by, signed_off_at=timezone.now() if signed_off_by else None)
    record.full_clean()
    _by(record, technician).save()
    parts = []
    for designator, new in sorted(replacements.items()):
        cap = fitted[designator]
        unknown_fields = set(new) - set(RATING_FIELDS)
        if unknown_fields:
            raise ServiceError(f"{designator}: unknown rating {', '.join(sorted(unknown_fields))}.")
        ratings = {f: new.get(f, getattr(cap, f)) for f in RATING_FIELDS}
        if "esr_ohm" in new and "tan_delta" not in new:
            ratings["tan_delta"] = None
        part = ReplacedPart(service_record=record, position=cap.position, **ratings)
        try:
            part.clean_ratings()
        except ValidationError as exc:
            msgs = "; ".join(m for ms in exc.message_dict.values() for m in ms)
            raise ServiceError(f"{designator}: {msgs}") from None
        parts.append(part)
        for f, v in ratings.items():
            setattr(cap, f, v)
        cap.installed_on = performed_on
        cap.is_original = False
        _by(cap, technician).save()
    ReplacedPart.objects.bulk_create(parts)
    if replacements:
        replaced_ids = [fitted[d].position_id for d in replacements]
        Reading.objects.filter(unit_id=unit.pk, part_removed=False).filter(
            Q(position_id__in=replaced_ids) | Q(pump_position_id__in=replaced_ids)
            | Q(pump_position__pump_partner__in=list(replacements), kind=Reading.Kind.RAIL)
        ).update(part_removed=True)
        units_mark_changed(unit_ids=[unit.pk])
    return record
