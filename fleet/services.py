"""Services of the fleet register: everything that writes more than one row.

Views, forms, the admin, CSV import and commands call these; none of them
writes the models directly.  Each service runs in one transaction, so a failure
leaves nothing half-written.
"""

import datetime as dt

from django.core.exceptions import ValidationError
from django.db import IntegrityError, transaction
from django.utils import timezone

from .models import Position, Rental, ReplacedPart, ServiceRecord, Unit, UnitCapacitor

RATING_FIELDS = (
    "capacitance_uf", "rated_voltage_v", "rated_temp_c", "rated_life_h", "esr_ohm", "tan_delta",
    "diameter_mm", "length_mm", "mount",
)


class ServiceError(Exception):
    """A request the fleet rules refuse; the message is meant for the user."""


def _manufacture_date(unit):
    return dt.date(unit.year_made, 7, 1)


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
    return len(rows)


@transaction.atomic
def unit_create(**fields):
    """Create a unit, copy its model's capacitor population and start its thermal history."""
    unit = Unit(**fields)
    unit.full_clean()
    unit.save()
    unit_populate(units=[unit])
    from scheduling.thermal import thermal_start

    thermal_start(unit_ids=[unit.pk])
    return unit


def _open_rental(unit_id):
    return Rental.objects.select_for_update().filter(unit_id=unit_id, in_at__isnull=True).first()


@transaction.atomic
def rental_check_out(*, unit_id, job_ref, out_at=None, expected_ambient_c=25.0, user=None):
    """Check a unit out on a hire.  Refuses a unit that is already out, retired,
    held or on the bench.  Brings the unit's storage history up to ``out_at``."""
    from scheduling.thermal import thermal_advance_storage

    unit = Unit.objects.select_for_update().get(pk=unit_id)
    out_at = out_at or timezone.now()
    if _open_rental(unit.pk) is not None:
        raise ServiceError(f"{unit.asset_tag} is already out; check it in first.")
    if unit.status != Unit.Status.AVAILABLE:
        raise ServiceError(f"{unit.asset_tag} is {unit.get_status_display().lower()}, not available for hire.")
    last = Rental.objects.filter(unit_id=unit.pk, in_at__isnull=False).order_by("-in_at").first()
    if last is not None and out_at < last.in_at:
        raise ServiceError(f"{unit.asset_tag} came back at {last.in_at:%Y-%m-%d %H:%M}; it cannot go out before that.")
    rental = Rental(unit=unit, job_ref=job_ref.strip(), out_at=out_at, expected_ambient_c=expected_ambient_c,
                    checked_out_by=user)
    rental.full_clean()
    thermal_advance_storage(unit_ids=[unit.pk], until=out_at)
    try:
        rental.save()
    except IntegrityError:
        raise ServiceError(f"{unit.asset_tag} is already out; check it in first.") from None
    unit.status = Unit.Status.OUT
    unit.save(update_fields=["status"])
    return rental


@transaction.atomic
def rental_check_in(*, unit_id, in_at=None, venue_ambient_c, powered_hours=None, meter_reading_h=None,
                    reported_faults="", user=None):
    """Check a unit back in and add the hire to its thermal history.

    Give either ``powered_hours`` (an estimate) or ``meter_reading_h`` (the
    unit's hour meter now; powered hours are the difference from the last
    reading).  Powered hours may not exceed the time out; the meter may not run
    backwards.  A unit with reported faults goes on hold for the bench.
    """
    from scheduling.thermal import thermal_add_rental

    unit = Unit.objects.select_for_update().get(pk=unit_id)
    rental = _open_rental(unit.pk)
    if rental is None:
        raise ServiceError(f"{unit.asset_tag} is not out on hire.")
    in_at = in_at or timezone.now()
    if in_at <= rental.out_at:
        raise ServiceError("Check-in must come after check-out "
                           f"({timezone.localtime(rental.out_at):%Y-%m-%d %H:%M}).")
    if meter_reading_h is not None:
        if unit.hour_meter_h is None:
            raise ServiceError(f"{unit.asset_tag} has no earlier meter reading; enter powered hours instead.")
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
    try:
        rental.full_clean()
    except ValidationError as exc:
        raise ServiceError("; ".join(m for msgs in exc.message_dict.values() for m in msgs)) from None
    rental.save()
    if meter_reading_h is not None:
        unit.hour_meter_h = meter_reading_h
    unit.status = Unit.Status.HOLD if rental.reported_faults else Unit.Status.AVAILABLE
    unit.save(update_fields=["status", "hour_meter_h"])
    thermal_add_rental(rental=rental, internal_rise_k=unit.gear_model.internal_rise_k)
    # The desk must know at once whether the unit may go out again.
    from scheduling.services import forecast_refresh

    run = forecast_refresh(unit_ids=[unit.pk], today=timezone.localdate(in_at))
    # A unit the forecast calls due or overdue is held for a recap, like a
    # unit that came back with a fault: the desk must not hire it out again.
    if unit.status == Unit.Status.AVAILABLE and run.fleet.n_units and run.result.status[0] in ("due", "overdue"):
        unit.status = Unit.Status.HOLD
        unit.save(update_fields=["status"])
    return rental


@transaction.atomic
def service_record_recap(*, unit_id, performed_on, replacements, technician=None, technician_name="", notes="",
                         kind=ServiceRecord.Kind.RECAP):
    """Record a service in which positions were replaced.

    ``replacements`` maps a designator to a dict of the new part's ratings
    (any rating left out is kept from the part that came out).  The unit's
    capacitor rows take the new ratings and install date, and their damage is
    counted afresh from a snapshot of the unit's thermal history.
    """
    from scheduling.thermal import thermal_snapshot

    unit = Unit.objects.select_for_update().get(pk=unit_id)
    fitted = {
        c.position.designator: c
        for c in UnitCapacitor.objects.filter(unit_id=unit.pk).select_related("position")
    }
    unknown = sorted(set(replacements) - set(fitted))
    if unknown:
        raise ServiceError(f"{unit.asset_tag} has no position {', '.join(unknown)}.")
    record = ServiceRecord(unit=unit, kind=kind, performed_on=performed_on, technician=technician,
                           technician_name=technician_name, notes=notes)
    record.full_clean()
    record.save()
    when = timezone.make_aware(dt.datetime.combine(performed_on, dt.time(12, 0)))
    snapshot = thermal_snapshot(unit_id=unit.pk, at=when) if replacements else None
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
        cap.baseline = snapshot
        cap.save()
    ReplacedPart.objects.bulk_create(parts)
    return record
