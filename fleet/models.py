"""The fleet register: where gear is kept, what it is, what is inside it, and
what has happened to it.

Stored units (one per quantity, see docs/nomenclature.md): temperatures in
degC, durations in hours, capacitance in microfarads (uF), voltage in volts,
current in amperes, resistance in ohms, frequency in hertz, sizes in mm.
Rules about a row's own fields live here (``clean``); anything that touches
several rows lives in ``fleet/services.py``.
"""

import math

from django.conf import settings
from django.core.exceptions import ValidationError
from django.core.validators import MaxValueValidator, MinValueValidator, RegexValidator
from django.db import models
from django.db.models import F, Q
from django.utils import timezone

from .audit import AuditTrail
from .dates import EARLIEST_DATE, LATEST_DATE, before_unit, outside_register  # noqa: F401  (imported from here too)

RATED_TEMP_MIN_C = -55.0
RATED_TEMP_MAX_C = 150.0
AMBIENT_MIN_C = -40.0
AMBIENT_MAX_C = 85.0

asset_tag_validator = RegexValidator(
    r"^[A-Z0-9][A-Z0-9-]{1,23}$",
    "Asset tags use capital letters, digits and hyphens (2-24 characters), "
    "so a barcode scanner can type them.",
)
designator_validator = RegexValidator(
    r"^[A-Za-z]{1,4}[0-9]{1,5}[A-Za-z]?$",
    "A reference designator is a letter prefix and a number, such as C12 or VC3.",
)


def _positive(name):
    return MinValueValidator(0.0, message=f"{name} cannot be negative.")


def ambient_validators():
    return [
        MinValueValidator(AMBIENT_MIN_C, f"Ambient below {AMBIENT_MIN_C} degC is outside the model."),
        MaxValueValidator(AMBIENT_MAX_C, f"Ambient above {AMBIENT_MAX_C} degC is outside the model."),
    ]


class Location(models.Model):
    class Kind(models.TextChoices):
        STORE = "store", "Store"
        STUDIO = "studio", "Studio"
        BENCH = "bench", "Bench"

    class Profile(models.TextChoices):
        CONSTANT = "constant", "Constant temperature"
        MONTHLY = "monthly", "Twelve monthly means"
        SAMPLES = "samples", "Imported dated samples"

    name = models.CharField(max_length=80, unique=True)
    kind = models.CharField(max_length=10, choices=Kind.choices, default=Kind.STORE)
    profile = models.CharField(max_length=10, choices=Profile.choices, default=Profile.CONSTANT)
    constant_temp_c = models.FloatField(
        "constant temperature", null=True, blank=True, validators=ambient_validators(),
        help_text="degC; used by the constant profile and as the fallback for missing months.",
    )
    monthly_temps_c = models.JSONField(
        "monthly mean temperatures", null=True, blank=True,
        help_text="Twelve numbers in degC, January first.",
    )
    notes = models.TextField(blank=True)

    class Meta:
        ordering = ["name"]

    def __str__(self):
        return self.name

    def clean(self):
        if self.profile == self.Profile.CONSTANT and self.constant_temp_c is None:
            raise ValidationError({"constant_temp_c": "A constant profile needs a temperature."})
        if self.profile == self.Profile.MONTHLY:
            temps = self.monthly_temps_c
            if not isinstance(temps, list) or len(temps) != 12:
                raise ValidationError({"monthly_temps_c": "Give exactly twelve monthly means, January first."})
            for i, value in enumerate(temps, start=1):
                if not isinstance(value, (int, float)) or isinstance(value, bool):
                    raise ValidationError({"monthly_temps_c": f"Month {i} is not a number."})
                if not AMBIENT_MIN_C <= value <= AMBIENT_MAX_C:
                    raise ValidationError(
                        {"monthly_temps_c": f"Month {i}: {value} degC is outside {AMBIENT_MIN_C}..{AMBIENT_MAX_C}."}
                    )


class TemperatureSample(models.Model):
    """A dated storage-temperature reading imported from a logger."""

    location = models.ForeignKey(Location, on_delete=models.CASCADE, related_name="samples")
    taken_at = models.DateTimeField()
    temp_c = models.FloatField("temperature", validators=ambient_validators(), help_text="degC")

    class Meta:
        ordering = ["location", "taken_at"]
        constraints = [
            models.UniqueConstraint(fields=["location", "taken_at"], name="sample_unique_time"),
        ]

    def __str__(self):
        return f"{self.location} {self.taken_at:%Y-%m-%d %H:%M} {self.temp_c} degC"

    def clean(self):
        if outside_register(self.taken_at):
            raise ValidationError({"taken_at": outside_register(self.taken_at)})


class GearModel(models.Model):
    class Category(models.TextChoices):
        EFFECTS = "effects", "Effects processor"
        SYNTH = "synth", "Synthesiser"
        DRUM = "drum", "Drum machine"
        MIXER = "mixer", "Mixing console"
        AMP = "amp", "Amplifier"
        TAPE = "tape", "Tape machine"
        OUTBOARD = "outboard", "Outboard processor"
        OTHER = "other", "Other"

    maker = models.CharField(max_length=80)
    model_name = models.CharField(max_length=80)
    category = models.CharField(max_length=10, choices=Category.choices, default=Category.OTHER)
    year_from = models.PositiveSmallIntegerField(validators=[MinValueValidator(1930), MaxValueValidator(2100)])
    year_to = models.PositiveSmallIntegerField(validators=[MinValueValidator(1930), MaxValueValidator(2100)])
    internal_rise_k = models.FloatField(
        "internal temperature rise", validators=[_positive("Internal rise"), MaxValueValidator(80)],
        help_text="K above room air inside the case while powered.",
    )
    powered_hours_per_day = models.FloatField(
        "powered hours per rental day", default=8.0,
        validators=[_positive("Powered hours"), MaxValueValidator(24)],
    )
    mains_voltage_v = models.FloatField("mains voltage", default=230.0, validators=[_positive("Mains voltage")],
                                        help_text="V a.c.; 0 for battery or external low-voltage supply.")
    hazard_mains = models.BooleanField("mains-powered", default=True)
    hazard_tube_hv = models.BooleanField("tube high voltage", default=False)
    hazard_smps = models.BooleanField("switch-mode supply", default=False)
    hazard_notes = models.TextField(
        blank=True, help_text="What inside this model can hurt a technician, in words (shown on every unit's "
                              "page and in the workshop), e.g. the B+ voltage of a valve amp.")
    notes = models.TextField(blank=True)

    class Meta:
        ordering = ["maker", "model_name"]
        constraints = [
            models.UniqueConstraint(fields=["maker", "model_name"], name="gearmodel_unique_name"),
            models.CheckConstraint(condition=Q(year_to__gte=F("year_from")), name="gearmodel_years_ordered"),
            models.CheckConstraint(condition=Q(internal_rise_k__gte=0), name="gearmodel_rise_nonnegative"),
        ]

    def __str__(self):
        return f"{self.maker} {self.model_name}"

    def clean(self):
        if self.year_from and self.year_to and self.year_to < self.year_from:
            raise ValidationError({"year_to": "The last year cannot come before the first."})


class Mount(models.TextChoices):
    RADIAL = "radial", "Radial (through-hole)"
    AXIAL = "axial", "Axial (through-hole)"
    SMD = "smd", "Surface mount"


class CapacitorRatings(models.Model):
    """The part itself: what is printed on the can and in its data sheet."""

    capacitance_uf = models.FloatField("capacitance", help_text="uF")
    rated_voltage_v = models.FloatField("rated voltage", help_text="V d.c.")
    rated_temp_c = models.FloatField(
        "rated temperature", help_text="degC (upper category temperature)",
        validators=[MinValueValidator(RATED_TEMP_MIN_C), MaxValueValidator(RATED_TEMP_MAX_C)],
    )
    rated_life_h = models.FloatField("rated endurance", help_text="hours at rated temperature")
    esr_ohm = models.FloatField("initial ESR at 120 Hz", null=True, blank=True, help_text="ohm")
    tan_delta = models.FloatField("tan delta at 120 Hz", null=True, blank=True)
    diameter_mm = models.FloatField("can diameter", help_text="mm")
    length_mm = models.FloatField("can length", help_text="mm")
    mount = models.CharField(max_length=6, choices=Mount.choices, default=Mount.RADIAL)

    class Meta:
        abstract = True

    def clean_ratings(self):
        errors = {}
        for field in ("capacitance_uf", "rated_voltage_v", "rated_life_h", "diameter_mm", "length_mm"):
            value = getattr(self, field)
            if value is not None and value <= 0:
                errors[field] = f"{self._meta.get_field(field).verbose_name.capitalize()} must be above zero."
        if self.rated_temp_c is not None and not RATED_TEMP_MIN_C <= self.rated_temp_c <= RATED_TEMP_MAX_C:
            errors["rated_temp_c"] = f"Rated temperature must lie in {RATED_TEMP_MIN_C:g}..{RATED_TEMP_MAX_C:g} degC."
        if self.esr_ohm is None and self.tan_delta is None:
            errors["esr_ohm"] = "Give the initial ESR or the tan delta at 120 Hz."
        if self.esr_ohm is not None and self.esr_ohm <= 0:
            errors["esr_ohm"] = "ESR must be above zero."
        if self.tan_delta is not None and not 0 < self.tan_delta < 5:
            errors["tan_delta"] = "Tan delta must lie between 0 and 5."
        if not errors:
            errors.update(self.implausible())
        if errors:
            raise ValidationError(errors)

    def implausible(self, ripple_current_a=0.0):
        """{field: message} for figures no real aluminium electrolytic capacitor
        has (see ``fleet/plausibility.py``).  Empty when plausible."""
        from .plausibility import ratings_implausible

        return ratings_implausible(self, ripple_current_a)

    def clean(self):
        self.clean_ratings()

    @property
    def initial_esr_ohm(self):
        """ESR at 120 Hz; from tan delta when no ESR is given (physics.esr_from_tan_delta_ohm)."""
        if self.esr_ohm is not None:
            return self.esr_ohm
        from scheduling.physics import esr_from_tan_delta_ohm

        return esr_from_tan_delta_ohm(self.tan_delta, self.capacitance_uf * 1e-6)


def _ratings_constraints(prefix):
    return [
        models.CheckConstraint(condition=Q(capacitance_uf__gt=0), name=f"{prefix}_capacitance_positive"),
        models.CheckConstraint(condition=Q(rated_voltage_v__gt=0), name=f"{prefix}_voltage_positive"),
        models.CheckConstraint(condition=Q(rated_life_h__gt=0), name=f"{prefix}_life_positive"),
        models.CheckConstraint(
            condition=Q(rated_temp_c__gte=RATED_TEMP_MIN_C) & Q(rated_temp_c__lte=RATED_TEMP_MAX_C),
            name=f"{prefix}_rated_temp_range",
        ),
        models.CheckConstraint(condition=Q(esr_ohm__isnull=False) | Q(tan_delta__isnull=False),
                               name=f"{prefix}_esr_or_tan_delta"),
    ]


class Role(models.TextChoices):
    SUPPLY_RESERVOIR = "supply_reservoir", "Supply reservoir"
    SUPPLY_DECOUPLING = "supply_decoupling", "Supply decoupling"
    PUMP_FLYING = "pump_flying", "Pump flying"
    PUMP_RESERVOIR = "pump_reservoir", "Pump reservoir"
    SIGNAL_COUPLING = "signal_coupling", "Signal coupling"
    TIMING = "timing", "Timing"
    GENERAL = "general", "General"


class Position(CapacitorRatings):
    """One capacitor position of a gear model: the original part and what the
    circuit asks of it.  Units copy these rows when they are created."""

    gear_model = models.ForeignKey(GearModel, on_delete=models.CASCADE, related_name="positions")
    designator = models.CharField(max_length=12, validators=[designator_validator])
    role = models.CharField(max_length=20, choices=Role.choices, default=Role.GENERAL)
    ripple_current_a = models.FloatField("operating ripple current", default=0.0, help_text="A r.m.s.")
    ripple_freq_hz = models.FloatField("ripple frequency", default=120.0, help_text="Hz")
    operating_voltage_v = models.FloatField("operating voltage", default=0.0, help_text="V d.c.")
    # Switched-capacitor inverter (pump roles).
    pump_partner = models.CharField(
        max_length=12, blank=True,
        help_text="Designator of the other pump capacitor (the reservoir for a flying capacitor, and back).",
    )
    pump_input_v = models.FloatField("pump input voltage", null=True, blank=True, help_text="V")
    pump_load_a = models.FloatField("pump load current", null=True, blank=True, help_text="A")
    pump_freq_hz = models.FloatField("pump switching frequency", null=True, blank=True,
                                     help_text="Hz (half the oscillator frequency)")
    pump_switch_ohm = models.FloatField("pump switch resistance", null=True, blank=True,
                                        help_text="ohm, all switches in the path together")
    pump_min_rail_v = models.FloatField("minimum rail magnitude", null=True, blank=True,
                                        help_text="V; the negative rail must stay at least this far below zero")
    # Signal coupling.
    coupling_load_ohm = models.FloatField("coupling load resistance", null=True, blank=True, help_text="ohm")
    coupling_max_corner_hz = models.FloatField("highest allowed corner frequency", null=True, blank=True,
                                               help_text="Hz")
    # Supply reservoir.
    reservoir_load_a = models.FloatField("reservoir load current", null=True, blank=True, help_text="A d.c.")
    reservoir_ripple_freq_hz = models.FloatField("reservoir ripple frequency", null=True, blank=True,
                                                 help_text="Hz (100/120 after a full-wave rectifier)")
    reservoir_ripple_limit_v = models.FloatField("ripple limit", null=True, blank=True, help_text="V peak-to-peak")

    class Meta:
        ordering = ["gear_model", "designator"]
        constraints = [
            models.UniqueConstraint(fields=["gear_model", "designator"], name="position_unique_designator"),
            *_ratings_constraints("position"),
        ]

    def __str__(self):
        return f"{self.gear_model} {self.designator}"

    REQUIRED_BY_ROLE = {
        Role.PUMP_FLYING: ("pump_partner", "pump_input_v", "pump_load_a", "pump_freq_hz", "pump_min_rail_v"),
        Role.PUMP_RESERVOIR: ("pump_partner", "pump_input_v", "pump_load_a", "pump_freq_hz", "pump_min_rail_v"),
        Role.SIGNAL_COUPLING: ("coupling_load_ohm", "coupling_max_corner_hz"),
        Role.SUPPLY_RESERVOIR: ("reservoir_load_a", "reservoir_ripple_freq_hz", "reservoir_ripple_limit_v"),
    }

    #: Circuit figures the life engine divides by, and those it only adds.
    CIRCUIT_POSITIVE = ("pump_freq_hz", "pump_min_rail_v", "coupling_load_ohm", "coupling_max_corner_hz",
                        "reservoir_ripple_freq_hz", "reservoir_ripple_limit_v", "ripple_freq_hz")
    CIRCUIT_NONNEGATIVE = ("pump_input_v", "pump_load_a", "pump_switch_ohm", "reservoir_load_a")

    def clean(self):
        errors = {}
        try:
            self.clean_ratings()
        except ValidationError as exc:
            errors.update(exc.message_dict)
        for field in self.REQUIRED_BY_ROLE.get(self.role, ()):
            if getattr(self, field) in (None, ""):
                verbose = self._meta.get_field(field).verbose_name
                errors[field] = f"A {self.get_role_display().lower()} position needs its {verbose}."
        for field in ("ripple_current_a", "ripple_freq_hz", "operating_voltage_v"):
            value = getattr(self, field)
            if value is not None and value < 0:
                errors[field] = "Cannot be negative."
        if self.operating_voltage_v and self.rated_voltage_v and self.operating_voltage_v > self.rated_voltage_v:
            errors["operating_voltage_v"] = "Operating voltage is above the part's rated voltage."
        for field in self.CIRCUIT_POSITIVE:
            value = getattr(self, field)
            if value is not None and not (math.isfinite(value) and value > 0):
                errors[field] = "Must be above zero."
        for field in self.CIRCUIT_NONNEGATIVE:
            value = getattr(self, field)
            if value is not None and not (math.isfinite(value) and value >= 0):
                errors[field] = "Cannot be negative."
        if not errors and self.ripple_current_a:
            errors.update(self.implausible(ripple_current_a=self.ripple_current_a))
        if errors:
            raise ValidationError(errors)


class Unit(models.Model):
    class Status(models.TextChoices):
        AVAILABLE = "available", "Available"
        OUT = "out", "Out on hire"
        BENCH = "bench", "On the bench"
        HOLD = "hold", "Held"
        RETIRED = "retired", "Retired"

    asset_tag = models.CharField(max_length=24, unique=True, validators=[asset_tag_validator])
    serial = models.CharField(max_length=60, blank=True)
    gear_model = models.ForeignKey(GearModel, on_delete=models.PROTECT, related_name="units")
    year_made = models.PositiveSmallIntegerField(
        "year of manufacture", validators=[MinValueValidator(1930), MaxValueValidator(2100)]
    )
    joined_on = models.DateField("joined the fleet", help_text="Before this date the prior-use assumption applies.")
    home_location = models.ForeignKey(Location, on_delete=models.PROTECT, related_name="units")
    status = models.CharField(max_length=10, choices=Status.choices, default=Status.AVAILABLE)
    hour_meter_h = models.FloatField("hour meter", null=True, blank=True, validators=[_positive("Hour meter")],
                                     help_text="hours; last reading, if the unit has a meter")
    prior_powered_h_per_year = models.FloatField(
        "prior use: powered hours per year", default=300.0,
        validators=[_positive("Prior powered hours"), MaxValueValidator(8766)],
    )
    prior_ambient_c = models.FloatField("prior use: room while powered", default=25.0,
                                        validators=ambient_validators(), help_text="degC")
    prior_storage_c = models.FloatField("prior use: storage temperature", default=20.0,
                                        validators=ambient_validators(), help_text="degC")
    notes = models.TextField(blank=True)
    hold_reason = models.CharField(max_length=300, blank=True,
                                   help_text="Why the unit is held, in words the desk can read.")
    records_version = models.PositiveIntegerField(
        default=1, editable=False,
        help_text="Goes up whenever the records the unit's exposure is worked out from change (a hire closed "
                  "or edited, fitted parts, dates, prior use, home location, the model's internal rise).",
    )
    history = AuditTrail(excluded_fields=["records_version"])

    class Meta:
        ordering = ["asset_tag"]
        constraints = [
            models.CheckConstraint(condition=Q(hour_meter_h__isnull=True) | Q(hour_meter_h__gte=0),
                                   name="unit_meter_nonnegative"),
        ]

    def __str__(self):
        return self.asset_tag

    def clean(self):
        if outside_register(self.joined_on):
            raise ValidationError({"joined_on": outside_register(self.joined_on)})
        if self.joined_on and self.year_made and self.joined_on.year < self.year_made:
            raise ValidationError({"joined_on": "A unit cannot join the fleet before it was made."})


class UnitCapacitor(CapacitorRatings):
    """The part fitted in one position of one unit.  Starts as a copy of the
    gear model's position; a recap replaces the ratings and the install date
    (a replaced part's damage is counted from that date on)."""

    unit = models.ForeignKey(Unit, on_delete=models.CASCADE, related_name="capacitors")
    position = models.ForeignKey(Position, on_delete=models.PROTECT, related_name="fitted")
    installed_on = models.DateField(help_text="Date this part went in (date of manufacture for originals).")
    is_original = models.BooleanField(default=True)
    history = AuditTrail()

    class Meta:
        ordering = ["unit", "position__designator"]
        constraints = [
            models.UniqueConstraint(fields=["unit", "position"], name="unitcap_unique_position"),
            *_ratings_constraints("unitcap"),
        ]

    def __str__(self):
        return f"{self.unit.asset_tag} {self.position.designator}"


class Rental(models.Model):
    class HoursSource(models.TextChoices):
        METER = "meter", "Hour-meter reading"
        ESTIMATE = "estimate", "Estimate"

    unit = models.ForeignKey(Unit, on_delete=models.PROTECT, related_name="rentals")
    job_ref = models.CharField("job reference", max_length=40)
    out_at = models.DateTimeField("checked out")
    expected_ambient_c = models.FloatField("expected venue ambient", default=25.0,
                                           validators=ambient_validators(), help_text="degC")
    checked_out_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                                       on_delete=models.SET_NULL, related_name="+")
    in_at = models.DateTimeField("checked in", null=True, blank=True)
    powered_hours = models.FloatField(null=True, blank=True, help_text="hours powered during the hire")
    hours_source = models.CharField(max_length=10, choices=HoursSource.choices, blank=True)
    meter_reading_h = models.FloatField("hour meter at check-in", null=True, blank=True, help_text="hours")
    venue_ambient_c = models.FloatField("venue ambient", null=True, blank=True,
                                        validators=ambient_validators(), help_text="degC")
    reported_faults = models.TextField(blank=True)
    checked_in_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                                      on_delete=models.SET_NULL, related_name="+")
    history = AuditTrail()

    class Meta:
        ordering = ["-out_at"]
        constraints = [
            models.UniqueConstraint(fields=["unit"], condition=Q(in_at__isnull=True), name="rental_one_open_per_unit"),
            models.CheckConstraint(condition=Q(in_at__isnull=True) | Q(in_at__gt=F("out_at")),
                                   name="rental_in_after_out"),
            models.CheckConstraint(condition=Q(powered_hours__isnull=True) | Q(powered_hours__gte=0),
                                   name="rental_powered_nonnegative"),
            models.CheckConstraint(
                condition=Q(in_at__isnull=True) | (Q(powered_hours__isnull=False) & Q(venue_ambient_c__isnull=False)),
                name="rental_closed_has_hours",
            ),
        ]
        indexes = [
            models.Index(fields=["unit", "out_at"]),
            models.Index(fields=["-out_at"], name="rental_newest"),
            # the few hires open now, oldest first (the desk's "out now"), without a walk over every hire
            models.Index(fields=["out_at"], condition=Q(in_at__isnull=True), name="rental_open_by_out"),
            # hires found by the start of their job reference (the admin's search)
            models.Index(fields=["job_ref"], name="rental_job_ref"),
        ]

    def __str__(self):
        return f"{self.unit.asset_tag} {self.job_ref}"

    @property
    def is_open(self):
        return self.in_at is None

    @property
    def elapsed_hours(self):
        if self.in_at is None:
            return None
        return (self.in_at - self.out_at).total_seconds() / 3600.0

    def clean(self):
        errors = {name: outside_register(getattr(self, name)) for name in ("out_at", "in_at")
                  if outside_register(getattr(self, name))}
        if errors:
            raise ValidationError(errors)
        early = before_unit(self.unit if self.unit_id else None,
                            self.out_at and timezone.localdate(self.out_at), happened="gone out", joined_too=True)
        if early:
            errors["out_at"] = early
        if self.in_at is not None:
            if self.in_at <= self.out_at:
                errors["in_at"] = "Check-in must come after check-out."
            elif self.powered_hours is not None and self.powered_hours > self.elapsed_hours + 1e-9:
                out = self.elapsed_hours
                # Under an hour, to the minute: "0.0 h" would say the unit never left.
                said = f"{out:.1f} h" if out >= 1 else f"{out:.2g} h ({max(out * 60, 0):.0f} min)"
                errors["powered_hours"] = f"{self.powered_hours:g} h powered is more than the {said} the unit was out."
        if self.powered_hours is not None and self.powered_hours < 0:
            errors["powered_hours"] = "Powered hours cannot be negative."
        if errors:
            raise ValidationError(errors)


class ServiceRecord(models.Model):
    class Kind(models.TextChoices):
        RECAP = "recap", "Recap"
        INSPECTION = "inspection", "Inspection"
        REPAIR = "repair", "Repair"
        SAFETY = "safety", "Electrical safety inspection"

    unit = models.ForeignKey(Unit, on_delete=models.PROTECT, related_name="service_records")
    kind = models.CharField(max_length=12, choices=Kind.choices)
    performed_on = models.DateField()
    technician = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                                   on_delete=models.SET_NULL, related_name="+")
    technician_name = models.CharField(max_length=80, blank=True,
                                       help_text="For work done by someone without a login.")
    notes = models.TextField(blank=True)
    signed_off_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                                      on_delete=models.SET_NULL, related_name="+")
    signed_off_at = models.DateTimeField(null=True, blank=True)
    bench_visit = models.ForeignKey("fleet.BenchVisit", null=True, blank=True, on_delete=models.SET_NULL,
                                    related_name="service_records")
    history = AuditTrail()

    class Meta:
        ordering = ["-performed_on", "-id"]

    def __str__(self):
        return f"{self.unit.asset_tag} {self.get_kind_display().lower()} {self.performed_on:%Y-%m-%d}"

    def clean(self):
        problem = outside_register(self.performed_on) or before_unit(
            self.unit if self.unit_id else None, self.performed_on, happened="been serviced")
        if problem:
            raise ValidationError({"performed_on": problem})


class ReplacedPart(CapacitorRatings):
    """A position replaced during a service, with the new part's ratings."""

    service_record = models.ForeignKey(ServiceRecord, on_delete=models.CASCADE, related_name="replaced")
    position = models.ForeignKey(Position, on_delete=models.PROTECT, related_name="+")

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["service_record", "position"], name="replaced_unique_position"),
            *_ratings_constraints("replaced"),
        ]


class Measurement(models.Model):
    class Quantity(models.TextChoices):
        ESR = "esr", "ESR (ohm)"
        CAPACITANCE = "capacitance", "Capacitance (uF)"
        RAIL = "rail", "Rail voltage (V)"

    service_record = models.ForeignKey(ServiceRecord, on_delete=models.CASCADE, related_name="measurements")
    quantity = models.CharField(max_length=12, choices=Quantity.choices)
    position = models.ForeignKey(Position, null=True, blank=True, on_delete=models.PROTECT, related_name="+")
    rail_name = models.CharField(max_length=20, blank=True, help_text="e.g. -15V, +5V, B+")
    value = models.FloatField()
    before_work = models.BooleanField(default=True, help_text="Measured before the parts were replaced.")

    def clean(self):
        if self.quantity == self.Quantity.RAIL and not self.rail_name:
            raise ValidationError({"rail_name": "Name the rail that was measured."})
        if self.quantity != self.Quantity.RAIL and self.position_id is None:
            raise ValidationError({"position": "Say which position was measured."})
        if self.quantity != self.Quantity.RAIL and self.value <= 0:
            raise ValidationError({"value": "ESR and capacitance readings must be above zero."})


# The workshop's records and the maintenance policy live beside this module;
# imported here so the app registers them and callers find them here.
from .bench_models import BenchVisit, CheckoutOverride, Reading  # noqa: E402,F401
from .policy_models import MaintenancePolicy  # noqa: E402,F401
