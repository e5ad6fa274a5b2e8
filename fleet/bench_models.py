"""The workshop's records: bench visits, readings taken at the bench, and
check-outs the desk made against the forecast.

Part of the register (``fleet.models`` imports these), so it knows nothing of
the life engine: a reading stores what was measured, and what the forecast
predicted for it at that moment as the workflow that recorded it passed it in.
Stored units as in ``fleet.models``: ohm, Hz, uF, uA, V, mA.
"""

from django.conf import settings
from django.db import models
from django.db.models import Q

from .audit import AuditTrail


class BenchVisit(models.Model):
    """A unit's stay on the bench: intake, what was found and done, and how it left."""

    class Outcome(models.TextChoices):
        OPEN = "open", "On the bench"
        RELEASED = "released", "Released to available"
        HELD = "held", "Kept held"

    unit = models.ForeignKey("fleet.Unit", on_delete=models.PROTECT, related_name="bench_visits")
    opened_at = models.DateTimeField("taken to the bench")
    opened_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                  related_name="+")
    intake_notes = models.TextField(blank=True)
    came_from = models.CharField("status before", max_length=10)
    closed_at = models.DateTimeField(null=True, blank=True)
    closed_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                  related_name="+")
    outcome = models.CharField(max_length=10, choices=Outcome.choices, default=Outcome.OPEN)
    outcome_notes = models.TextField(blank=True, help_text="Why it stays held, in words the desk can read; "
                                                           "or notes at release.")
    history = AuditTrail()

    class Meta:
        ordering = ["-opened_at", "-id"]
        constraints = [
            models.UniqueConstraint(fields=["unit"], condition=Q(closed_at__isnull=True),
                                    name="benchvisit_one_open_per_unit"),
        ]

    def __str__(self):
        return f"{self.unit_id} bench {self.opened_at:%Y-%m-%d}"


class Reading(models.Model):
    """One measurement at the bench: a capacitor (ESR with its test frequency,
    capacitance, leakage) or a supply rail (name, expected, measured, load)."""

    class Kind(models.TextChoices):
        CAPACITOR = "capacitor", "Capacitor"
        RAIL = "rail", "Supply rail"

    unit = models.ForeignKey("fleet.Unit", on_delete=models.PROTECT, related_name="readings")
    visit = models.ForeignKey(BenchVisit, null=True, blank=True, on_delete=models.SET_NULL, related_name="readings")
    service_record = models.ForeignKey("fleet.ServiceRecord", null=True, blank=True, on_delete=models.SET_NULL,
                                       related_name="readings", help_text="The recap a removed part's reading "
                                                                          "was entered with.")
    kind = models.CharField(max_length=10, choices=Kind.choices)
    taken_at = models.DateTimeField()
    taken_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                 related_name="+")
    # A capacitor.
    position = models.ForeignKey("fleet.Position", null=True, blank=True, on_delete=models.PROTECT,
                                 related_name="+")
    esr_ohm = models.FloatField("ESR", null=True, blank=True, help_text="ohm")
    esr_freq_hz = models.FloatField("ESR test frequency", null=True, blank=True, help_text="Hz")
    capacitance_uf = models.FloatField("capacitance", null=True, blank=True, help_text="uF")
    leakage_ua = models.FloatField("leakage current", null=True, blank=True, help_text="uA")
    part_removed = models.BooleanField(
        default=False, help_text="The part measured has since been replaced: kept as a finding, no longer "
                                 "about the part fitted.")
    predicted_esr_ohm = models.FloatField(null=True, blank=True, help_text="ohm; the forecast's figure when read")
    predicted_capacitance_uf = models.FloatField(null=True, blank=True, help_text="uF; the forecast's figure "
                                                                                  "when read")
    # A supply rail.
    rail_name = models.CharField(max_length=20, blank=True, help_text="e.g. -5V, +15V, B+")
    rail_expected_v = models.FloatField("expected", null=True, blank=True, help_text="V")
    rail_measured_v = models.FloatField("measured", null=True, blank=True, help_text="V")
    rail_load_ma = models.FloatField("load current", null=True, blank=True, help_text="mA")
    rail_input_v = models.FloatField("input rail measured", null=True, blank=True,
                                     help_text="V; the pump's input rail, when measured too")
    pump_position = models.ForeignKey("fleet.Position", null=True, blank=True, on_delete=models.PROTECT,
                                      related_name="+", help_text="The flying capacitor of the charge pump that "
                                                                  "makes this rail.")
    predicted_rail_v = models.FloatField(null=True, blank=True, help_text="V; the forecast's figure when read")
    notes = models.CharField(max_length=200, blank=True)
    history = AuditTrail()

    class Meta:
        ordering = ["-taken_at", "-id"]
        constraints = [
            models.CheckConstraint(condition=Q(esr_ohm__isnull=True) | Q(esr_ohm__gt=0), name="reading_esr_positive"),
            models.CheckConstraint(condition=Q(capacitance_uf__isnull=True) | Q(capacitance_uf__gt=0),
                                   name="reading_capacitance_positive"),
            models.CheckConstraint(condition=Q(leakage_ua__isnull=True) | Q(leakage_ua__gte=0),
                                   name="reading_leakage_nonnegative"),
            models.CheckConstraint(condition=Q(rail_load_ma__isnull=True) | Q(rail_load_ma__gte=0),
                                   name="reading_load_nonnegative"),
            models.CheckConstraint(
                condition=(Q(kind="capacitor") & Q(position__isnull=False))
                | (Q(kind="rail") & Q(rail_measured_v__isnull=False)),
                name="reading_kind_complete"),
        ]
        indexes = [models.Index(fields=["unit", "part_removed"])]

    def __str__(self):
        what = self.position.designator if self.position_id and self.kind == self.Kind.CAPACITOR else self.rail_name
        return f"{self.unit_id} {what} {self.taken_at:%Y-%m-%d}"


class CheckoutOverride(models.Model):
    """A check-out the desk made although the forecast said due or overdue:
    who, when and why, with what the forecast said then."""

    rental = models.OneToOneField("fleet.Rental", on_delete=models.CASCADE, related_name="override")
    unit = models.ForeignKey("fleet.Unit", on_delete=models.PROTECT, related_name="checkout_overrides")
    decided_at = models.DateTimeField()
    decided_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                   related_name="+")
    reason = models.TextField()
    forecast_status = models.CharField(max_length=10)
    forecast_due_date = models.DateField(null=True, blank=True)
    forecast_risk = models.FloatField(null=True, blank=True, help_text="0-1, over the forecast's horizon")

    class Meta:
        ordering = ["-decided_at"]

    def __str__(self):
        return f"{self.unit_id} out against the forecast {self.decided_at:%Y-%m-%d}"
