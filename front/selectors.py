"""Read-only queries for the pages.

Every function here reads; none writes.  Each list query fetches its related
rows with ``select_related``/``prefetch_related`` so a page costs the same
number of queries whatever the size of the fleet.
"""

from django.db.models import Case, Count, IntegerField, Prefetch, Q, When

from scheduling.models import UnitForecast

from fleet.models import (
    CheckoutOverride,
    GearModel,
    Location,
    Measurement,
    Reading,
    Rental,
    ReplacedPart,
    ServiceRecord,
    Unit,
    UnitCapacitor,
)

RENTAL_HISTORY_LENGTH = 20

#: Forecast states that need the workshop: the recap list.
ATTENTION = [UnitForecast.Status.INVALID, UnitForecast.Status.OVERDUE, UnitForecast.Status.DUE]

# Forecast filter values for the unit list: a status, "none" (not yet
# forecast) or "attention" (due, overdue or cannot be forecast: the recap list).
FORECAST_FILTERS = [
    ("attention", "Due, overdue or cannot forecast"),
    *UnitForecast.Status.choices,
    ("none", "Not yet forecast"),
]


def normalise_tag(raw):
    """An asset tag as typed or scanned: spaces removed, capitals."""
    return "".join((raw or "").split()).upper()


def tagged(units, tag):
    """The unit of the queryset ``units`` with the normalised asset ``tag``,
    or None.  Looked up by the tag's unique index; in any case only when that
    finds none (a tag stored in small letters around the validator, by SQL
    say): a case-blind match reads every unit."""
    return units.filter(asset_tag=tag).first() or units.filter(asset_tag__iexact=tag).first()


def unit_by_tag(raw, *, related=True):
    """The unit with this asset tag (any case, spaces ignored), or None; with
    its gear model and home location read with it (``related``) for pages
    that show them.  The desk's forms need the unit alone (the join took as
    long again as the lookup: 2.0-2.6 ms against 1.1-1.3 ms on PostgreSQL,
    1.0 against 0.5 ms on SQLite)."""
    tag = normalise_tag(raw)
    if not tag:
        return None
    return tagged(Unit.objects.select_related("gear_model", "home_location") if related else Unit.objects.all(), tag)


def open_rental_for(unit):
    return Rental.objects.filter(unit=unit, in_at__isnull=True).first()


def last_meter_reading(unit):
    """The unit's last hour-meter reading and when it was taken (the check-in
    that read it), or ``None`` when it has none: ``{"hours", "on"}``."""
    if unit.hour_meter_h is None:
        return None
    read = (Rental.objects.filter(unit=unit, meter_reading_h__isnull=False, in_at__isnull=False)
            .order_by("-in_at").values_list("in_at", flat=True).first())
    return {"hours": unit.hour_meter_h, "on": read}


def forecast_for(unit_id):
    """The unit's stored forecast read fresh from the database, or None."""
    return UnitForecast.objects.filter(unit_id=unit_id).first()


def unit_list(*, q="", status="", gear_model=None, location=None, forecast=""):
    """Units for the list page, filtered; related rows joined in one query."""
    qs = Unit.objects.select_related("gear_model", "home_location", "forecast")
    q = (q or "").strip()
    if q:
        words = q.split()
        for word in words:
            qs = qs.filter(
                Q(asset_tag__icontains=word)
                | Q(serial__icontains=word)
                | Q(gear_model__maker__icontains=word)
                | Q(gear_model__model_name__icontains=word)
            )
    if status:
        qs = qs.filter(status=status)
    if gear_model:
        qs = qs.filter(gear_model=gear_model)
    if location:
        qs = qs.filter(home_location=location)
    if forecast == "attention":
        qs = qs.filter(forecast__status__in=ATTENTION)
    elif forecast == "none":
        qs = qs.filter(forecast__isnull=True)
    elif forecast:
        qs = qs.filter(forecast__status=forecast)
    return qs.order_by("asset_tag")


def gear_model_choices():
    return GearModel.objects.order_by("maker", "model_name")


def location_choices():
    return Location.objects.order_by("name")


def unit_detail(asset_tag):
    """One unit with everything its page shows, or None.

    Fixed number of queries: the unit (with model, location and forecast),
    its capacitors with their positions, its latest rentals, and its service
    records with their replaced parts and measurements.
    """
    unit = tagged(Unit.objects.select_related("gear_model", "home_location", "forecast"), normalise_tag(asset_tag))
    if unit is None:
        return None
    capacitors = list(
        UnitCapacitor.objects.filter(unit=unit).select_related("position").order_by("position__designator")
    )
    rentals = list(
        Rental.objects.filter(unit=unit)
        .select_related("checked_out_by", "checked_in_by")
        .order_by("-out_at")[:RENTAL_HISTORY_LENGTH]
    )
    records = list(
        ServiceRecord.objects.filter(unit=unit)
        .select_related("technician", "signed_off_by")
        .prefetch_related(
            Prefetch("replaced", queryset=_replaced_qs()),
            Prefetch("measurements", queryset=_measurements_qs()),
        )
    )
    return {"unit": unit, "capacitors": capacitors, "rentals": rentals, "service_records": records}


def _replaced_qs():
    return ReplacedPart.objects.select_related("position").order_by("position__designator")


def _measurements_qs():
    return Measurement.objects.select_related("position").order_by("quantity", "position__designator", "rail_name")


def units_out_now():
    """Open hires, oldest first, with their units and models."""
    return (
        Rental.objects.filter(in_at__isnull=True)
        .select_related("unit", "unit__gear_model", "checked_out_by")
        .order_by("out_at")
    )


def units_in_workshop():
    """Units held or on the bench, with model, location and forecast."""
    return (
        Unit.objects.filter(status__in=[Unit.Status.HOLD, Unit.Status.BENCH])
        .select_related("gear_model", "home_location", "forecast")
        .order_by("status", "asset_tag")
    )


def recap_list():
    """Forecasts that are due or overdue, most urgent first, after the units
    that cannot be forecast (their figures need a technician first)."""
    cannot = Case(When(status=UnitForecast.Status.INVALID, then=0), default=1, output_field=IntegerField())
    return (
        UnitForecast.objects.filter(status__in=ATTENTION)
        .exclude(unit__status=Unit.Status.RETIRED)
        .select_related("unit", "unit__gear_model", "unit__home_location")
        .order_by(cannot, "due_date", "unit__asset_tag")
    )


def fleet_counts():
    """Counts for the manager's start page: units by status and by forecast."""
    by_status = {
        row["status"]: row["n"] for row in Unit.objects.order_by().values("status").annotate(n=Count("id"))
    }
    by_forecast = {
        row["status"]: row["n"]
        for row in UnitForecast.objects.exclude(unit__status=Unit.Status.RETIRED)
        .order_by()
        .values("status")
        .annotate(n=Count("id"))
    }
    active = Unit.objects.exclude(status=Unit.Status.RETIRED).count()
    not_forecast = active - sum(by_forecast.values())
    return {
        "status": [(value, label, by_status.get(value, 0)) for value, label in Unit.Status.choices],
        "forecast": [(value, label, by_forecast.get(value, 0)) for value, label in UnitForecast.Status.choices],
        "not_forecast": max(not_forecast, 0),
        "total": sum(by_status.values()),
    }


def attention_count():
    return recap_list().count()


READINGS_SHOWN = 100


def unit_capacitors(unit):
    """The unit's fitted capacitors with their positions, C2 before C10."""
    from .bench import _designator_key

    caps = list(UnitCapacitor.objects.filter(unit=unit).select_related("position", "unit"))
    return sorted(caps, key=lambda c: _designator_key(c.position.designator))


def unit_readings(unit, limit=READINGS_SHOWN):
    """The unit's bench readings, latest first (one query)."""
    return list(Reading.objects.filter(unit=unit).select_related("position", "pump_position", "taken_by")
                .order_by("-taken_at", "-id")[:limit])


def unit_overrides(unit):
    """Check-outs against the forecast, latest first (one query)."""
    return list(CheckoutOverride.objects.filter(unit=unit).select_related("rental", "decided_by"))
