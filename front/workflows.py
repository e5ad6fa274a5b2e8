"""Workflows that span the register and the life engine.

Each is one function that pages, management commands, Celery tasks and tests
call alike, in one transaction:

- ``unit_create``: add a unit with its capacitor population and start its
  thermal history; ``unit_refresh``: bring one unit's history and forecast
  up to date after an edit;
- ``rental_check_out``: the desk hands a unit out; only with a recorded
  reason when the forecast says it matters (``checkout_reason_needed``);
- ``rental_check_in``: the unit comes back: close the hire, add its exposure,
  recompute the unit's forecast at once and hold it when it is due, overdue or
  came back with a fault; ``return_verdict`` words the answer for the desk;
- ``service_record_recap``: record replaced parts, bring the history and its
  snapshots up to date and recompute the forecast;
- ``import_csv``: import one register file, then bring every history it made
  stale up to date.

The workshop's loop (bench intake, readings, recap at the bench, release)
is in ``front.bench``.

The register (``fleet``) knows nothing of the engine; the engine
(``scheduling``) reads the register.  Only this layer calls both.
"""

from django.db import transaction
from django.utils import timezone

from fleet import csvio
from fleet import services as register
from fleet.models import ServiceRecord, Unit
from fleet.services import ServiceError  # noqa: F401  (raised through here; callers catch it from either)
from reports import formatting as fmt
from scheduling.loader import active_policy
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh, rows_as_stored
from scheduling.thermal import thermal_check_in, thermal_sync


@transaction.atomic
def unit_create(**fields):
    """Create a unit, copy its model's capacitor population and start its thermal history."""
    unit = register.unit_add(**fields)
    thermal_sync(unit_ids=[unit.pk])
    unit.refresh_from_db()
    return unit


@transaction.atomic
def unit_refresh(*, unit_id):
    """Bring one unit's thermal history up to date with its records and
    recompute its forecast (after an edit of its dates or prior use)."""
    forecast_refresh(unit_ids=[unit_id])


#: Forecasts a check-out may go against with a recorded reason: a reason given for one of these is kept
#: with who, when and what the forecast said.  Whether one is *needed* is ``checkout_reason_needed``.
OVERRIDE_STATUSES = (UnitForecast.Status.DUE, UnitForecast.Status.OVERDUE, UnitForecast.Status.INVALID)


class OverrideNeeded(ServiceError):
    """The forecast says the hire is a real risk: the check-out needs a recorded reason."""


def checkout_reason_needed(forecast, policy=None):
    """Why a check-out needs a recorded reason, in words for the desk, or ""
    when it does not.

    In vintage gear nearly every original part is past its rated life, so
    "due" or "overdue" alone (a part past its damage limit, an original part
    past the calendar-age limit) says the workshop should recap the unit, not
    that it will fail on this hire: the triage's act-by date is "now" for every
    overdue unit.  A reason is needed only when

    - the unit's forecast cannot be worked out (no one can say what it risks), or
    - its chance of a fault within the policy horizon, given that it works
      today (the forecast's risk), has reached the house limit
      (``MaintenancePolicy.risk_limit``): the unit is likely to fail soon.

    Otherwise the desk is shown the forecast as information
    (:func:`checkout_forecast_note`).
    """
    if forecast is None:
        return ""
    if forecast.status == UnitForecast.Status.INVALID:
        return "its forecast cannot be worked out"
    if forecast.status not in OVERRIDE_STATUSES or forecast.risk is None:
        return ""
    policy = policy or active_policy()
    if forecast.risk >= policy.risk_limit:
        return (f"its chance of a fault within {forecast.horizon_days} days is {fmt.percent(forecast.risk)}, "
                f"at or above the house limit of {fmt.percent(policy.risk_limit)}")
    return ""


def checkout_forecast_note(forecast, policy=None, today=None):
    """What the desk is told about a unit that may go out without a reason
    but whose recap is coming or due: "Recap overdue: the workshop would take
    it now (priority 14). If it works today, chance of a fault within 90 days
    6.1 %, below the house limit of 10 %: it may go out; send it to the
    workshop when it comes back."  "" for a unit with nothing to say."""
    if forecast is None or checkout_reason_needed(forecast, policy):
        return ""
    today = today or timezone.localdate()
    policy = policy or active_policy()
    if forecast.status in (UnitForecast.Status.DUE, UnitForecast.Status.OVERDUE):
        when = "now" if forecast.act_by is None or forecast.act_by <= today else f"by {fmt.date(forecast.act_by)}"
        prio = f", priority {forecast.priority}" if forecast.priority else ""
        return (f"Recap {forecast.get_status_display().lower()}: the workshop would take it {when}{prio}. "
                f"If it works today, chance of a fault within {forecast.horizon_days} days "
                f"{fmt.percent(forecast.risk)}, below the house limit of {fmt.percent(policy.risk_limit)}: "
                "it may go out; the workshop sees it when it comes back.")
    if forecast.status == UnitForecast.Status.WATCH and forecast.due_date:
        return f"Recap coming up by {fmt.date_ahead(forecast.due_date, today)}; it may go out."
    return ""


@transaction.atomic
def rental_check_out(*, unit_id, job_ref, out_at=None, expected_ambient_c=25.0, user=None, override_reason=""):
    """Check a unit out on a hire (see ``fleet.services.rental_open``).

    A unit for which :func:`checkout_reason_needed` says a reason is needed
    goes out only with ``override_reason`` (``OverrideNeeded`` otherwise).  A
    reason given for a unit whose forecast is due, overdue or cannot be
    worked out is stored with who, when and what the forecast said; one given
    for a unit the forecast does not question is not recorded.
    """
    forecast = UnitForecast.objects.filter(unit_id=unit_id).first()
    override = None
    if forecast is not None and forecast.status in OVERRIDE_STATUSES:
        unit = Unit.objects.get(pk=unit_id)
        why = checkout_reason_needed(forecast)
        reason = (override_reason or "").strip()
        if unit.status == Unit.Status.AVAILABLE and why and not reason:
            raise OverrideNeeded(
                f"{unit.asset_tag}: {why}; it should stay in for the workshop.  To send it out anyway, give the "
                "reason (it is recorded with your name).")
        if reason:
            override = {"reason": override_reason, "forecast_status": forecast.status,
                        "forecast_due_date": forecast.due_date, "forecast_risk": forecast.risk}
    return register.rental_open(unit_id=unit_id, job_ref=job_ref, out_at=out_at,
                                expected_ambient_c=expected_ambient_c, user=user, override=override)


@transaction.atomic
def rental_check_in(*, unit_id, in_at=None, venue_ambient_c, powered_hours=None, meter_reading_h=None,
                    reported_faults="", user=None):
    """Check a unit back in: the desk must know at once whether it may go out again.

    Closes the hire (``fleet.services.rental_close``: powered hours from the
    estimate or the hour meter, faults put the unit on hold), adds the hire to
    the unit's thermal history, recomputes its forecast as of the check-in day
    and puts a unit the forecast calls due or overdue on hold for a recap.
    Returns the closed rental, its ``forecast_now`` the unit's forecast row
    as just stored (built from the refresh, not read back; None when the unit
    has none), for the verdict.
    """
    # The unit row is locked here and written once below, with the status the
    # forecast decides (one write and one audit record, not "available" and
    # then "hold").
    rental = register.rental_close(unit_id=unit_id, in_at=in_at, venue_ambient_c=venue_ambient_c,
                                   powered_hours=powered_hours, meter_reading_h=meter_reading_h,
                                   reported_faults=reported_faults, user=user, unit_written=False)
    unit = rental.unit
    # Only the hire closed just above changed the unit's records: the sync
    # adds it to the history and the packed recent hires (the snapshot dates
    # and fitted parts stand).  Its general way (it then returns None) reads
    # the unit's row from the table: written first.
    synced = thermal_check_in(unit, rental, before_general=lambda: register.unit_write_closed(unit, user=user))
    # Synced just above: the refresh need not look again, nor read again the
    # unit's row, the history just written and the home's temperatures just read.
    run = forecast_refresh(unit_ids=[unit_id], today=timezone.localdate(rental.in_at), sync=False, known=synced)
    if (unit.status == Unit.Status.AVAILABLE and run.fleet.n_units
            and run.result.status[0] in ("due", "overdue")):
        reasons = run.result.reasons[0]  # what the refresh just stored
        reason = f"The forecast says {run.result.status[0]} for a recap" + (f": {reasons[0]}" if reasons else ".")
        if synced is None:  # written already: the hold is a second write
            # The unit row rental_close locked in this transaction: not looked up again.
            register.unit_hold_locked(unit, user=user, reason=reason)
        else:
            unit.status, unit.hold_reason = Unit.Status.HOLD, reason[:300]
    if synced is not None:
        register.unit_write_closed(unit, user=user)
    rental.forecast_now = rows_as_stored(run, [unit_id]).get(unit_id)
    return rental


def return_verdict(rental, forecast):
    """May the unit that just came back go out again?

    Reported faults hold it for the bench.  Otherwise the forecast decides:
    ok or watch may go out (watch with the date the recap is coming up by),
    due or overdue hold it for a recap; no forecast yet lets it go out; a unit
    whose figures cannot be forecast is for the workshop to judge ("check with
    the workshop", ``ask``).
    """
    tag = rental.unit.asset_tag
    if rental.reported_faults:
        return {
            "go": False,
            "headline": f"{tag}: hold for the bench",
            "details": ["Faults were reported on return:", rental.reported_faults,
                        "The unit is on hold until a technician has looked at it."],
        }
    if forecast is None:
        return {"go": True, "headline": f"{tag}: may go out again (no forecast yet)", "details": []}
    if forecast.status == UnitForecast.Status.INVALID:
        return {
            "go": False, "ask": True,
            "headline": f"{tag}: check with the workshop before it goes out again",
            "details": ["Its forecast cannot be worked out:", *(forecast.reasons or []),
                        "A technician must correct its figures; until then ask the workshop before hiring it out."],
        }
    if forecast.status == UnitForecast.Status.OK:
        return {"go": True, "headline": f"{tag}: may go out again", "details": []}
    if forecast.status == UnitForecast.Status.WATCH:
        when = f" by {fmt.date(forecast.due_date)}" if forecast.due_date else " soon"
        return {"go": True, "headline": f"{tag}: may go out again; recap coming up{when}",
                "details": list(forecast.reasons or [])}
    return {
        "go": False,
        "headline": f"{tag}: hold for recap",
        "details": list(forecast.reasons or [])
        or [f"The forecast says the unit is {forecast.get_status_display().lower()}."],
    }


@transaction.atomic
def service_record_recap(*, unit_id, performed_on, replacements, technician=None, technician_name="", notes="",
                         kind=ServiceRecord.Kind.RECAP, refresh=True, signed_off_by=None, bench_visit=None):
    """Record a service in which positions were replaced, then bring the unit's
    thermal history (and the snapshot the new parts count from) up to date and,
    with ``refresh``, recompute its forecast.  Returns the service record."""
    record = register.recap_record(unit_id=unit_id, performed_on=performed_on, replacements=replacements,
                                   technician=technician, technician_name=technician_name, notes=notes, kind=kind,
                                   signed_off_by=signed_off_by, bench_visit=bench_visit)
    thermal_sync(unit_ids=[unit_id])
    if refresh:
        forecast_refresh(unit_ids=[unit_id], sync=False)  # synced just above
    return record


class _Rollback(Exception):
    pass


def import_csv(fileobj_or_path, *, name=None, dry_run=False, user=None, source="upload", progress=None):
    """Import one register CSV file (``fleet.csvio.import_csv``), then bring
    the thermal histories it made stale up to date, all in one transaction.

    The report counts the histories started and rebuilt.  With ``dry_run``
    everything is checked and counted, then rolled back.  Raises
    ``fleet.csvio.CsvImportError`` with every problem found; nothing is written.
    Every import that is not a dry run is recorded (``ImportRecord``), a
    refused one too, after its own transaction.  ``progress(rows)`` is told
    the rows read after each batch (a background import's page shows it).
    """
    from .models import ImportRecord

    file_name = name or getattr(fileobj_or_path, "name", None) or str(fileobj_or_path)
    try:
        with transaction.atomic():
            report = csvio.import_csv(fileobj_or_path, name=name, progress=progress)
            synced = thermal_sync()
            report.histories_started += synced.started
            report.histories_rebuilt += synced.rebuilt + synced.extended
            if dry_run:
                report.dry_run = True
                raise _Rollback
    except _Rollback:
        pass
    except csvio.CsvImportError as exc:
        errors = [str(e) for e in (getattr(exc, "errors", None) or [str(exc)])]
        ImportRecord.objects.create(user=user, source=source, file_name=str(file_name)[:255], ok=False,
                                    summary=(errors[0] if errors else "refused")[:500],
                                    error_count=max(getattr(exc, "total", 0) or 0, len(errors)))
        raise
    if not dry_run:
        ImportRecord.objects.create(user=user, source=source, file_name=str(file_name)[:255], kind=report.kind,
                                    ok=True, summary=report.summary()[:500])
    return report
