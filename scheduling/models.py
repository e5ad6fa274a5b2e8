"""Stored results of the life engine: thermal histories and forecasts.

The per-unit histograms are kept up to date incrementally (check-in adds the
hire, the nightly job adds storage), so a forecast never re-reads a unit's
whole rental history.
"""

import json

from django.db import models

from fleet.models import Unit


class SentencesField(models.TextField):
    """A list of sentences kept as JSON text in a plain text column.

    Not PostgreSQL's jsonb: the fleet refresh writes every unit's reasons
    each night, and parsing them into jsonb took about a third of the
    store's time in the database (85 ms of 260 at 10,000 units, measured on
    the bench database); nothing queries inside them.  Read back as a list."""

    def from_db_value(self, value, expression, connection):
        return self.to_python(value)

    def to_python(self, value):
        if value is None or isinstance(value, list):
            return value
        if isinstance(value, str):
            return json.loads(value) if value else []
        return list(value)

    def get_prep_value(self, value):
        return None if value is None else json.dumps(list(value))

    def value_to_string(self, obj):
        return self.get_prep_value(self.value_from_object(obj))


class ThermalHistory(models.Model):
    """Hours per 1 K bin a unit has spent powered (bin = air inside the case)
    and unpowered (bin = room or store air), up to ``accounted_until``."""

    unit = models.OneToOneField(Unit, on_delete=models.CASCADE, related_name="thermal")
    powered = models.BinaryField(help_text="float64 hours per bin, see scheduling/histogram.py")
    unpowered = models.BinaryField()
    accounted_until = models.DateTimeField(help_text="Storage and hires are counted up to this moment.")
    last_powered_at = models.DateTimeField(null=True, blank=True,
                                           help_text="End of the last hire with powered hours.")
    records_version = models.PositiveIntegerField(
        default=0, help_text="The unit's records_version these histograms were brought up to date with.")
    rentals_counted = models.PositiveIntegerField(
        default=0, help_text="Closed hires counted (those checked out before accounted_until).")
    powered_hours_counted = models.FloatField(default=0.0, help_text="hours; their powered hours summed")
    basis = models.CharField(
        max_length=200, blank=True,
        help_text="The unit's own figures the history was built from (year made, joining date, prior use, the "
                  "model's internal rise); a change means a rebuild.")
    parts = models.BinaryField(default=b"", help_text="The unit's fitted parts, packed (scheduling/parts.py).")
    recent = models.BinaryField(default=b"", help_text="Its recent closed hires, packed (scheduling/recent.py).")
    parts_version = models.IntegerField(
        default=-1, help_text="The unit's records_version the two packs were written at (-1: never).")
    updated_at = models.DateTimeField(auto_now=True)

    def __str__(self):
        return f"thermal history of {self.unit_id}"


class HistogramSnapshot(models.Model):
    """A unit's histograms at the moment parts were fitted: a part fitted on
    ``taken_on`` counts its damage from here on (current minus snapshot).
    Kept by the engine for every date on which one of the unit's fitted parts
    went in (see scheduling/thermal.py)."""

    unit = models.ForeignKey(Unit, on_delete=models.CASCADE, related_name="snapshots")
    taken_on = models.DateField(help_text="Install date of the parts counted from this snapshot.")
    taken_at = models.DateTimeField(help_text="The moment taken as that date's install time (noon, local).")
    powered = models.BinaryField()
    unpowered = models.BinaryField()

    class Meta:
        ordering = ["unit", "taken_on"]
        constraints = [models.UniqueConstraint(fields=["unit", "taken_on"], name="snapshot_one_per_day")]


class UnitForecast(models.Model):
    class Status(models.TextChoices):
        OK = "ok", "OK"
        WATCH = "watch", "Watch"
        DUE = "due", "Due"
        OVERDUE = "overdue", "Overdue"
        INVALID = "invalid", "Cannot forecast"

    unit = models.OneToOneField(Unit, on_delete=models.CASCADE, related_name="forecast")
    computed_at = models.DateTimeField()
    status = models.CharField(max_length=8, choices=Status.choices)
    due_date = models.DateField(null=True, blank=True)
    risk = models.FloatField(null=True, blank=True,
                             help_text="Probability (0-1) that the unit fails within the horizon; empty when the "
                                       "unit cannot be forecast.")
    horizon_days = models.PositiveIntegerField()
    max_damage_ratio = models.FloatField(null=True, blank=True,
                                         help_text="Largest damage / threshold over the positions; empty when the "
                                                   "unit cannot be forecast.")
    storage_reform = models.BooleanField(default=False)
    act_by = models.DateField(null=True, blank=True,
                              help_text="Do the work by this date; never before the day it was computed.")
    priority = models.PositiveIntegerField(null=True, blank=True,
                                           help_text="1 = first among the units that need work; empty: none needed.")
    hire_risk = models.FloatField(default=0.0,
                                  help_text="Probability (0-1) of a fault during the next typical hire, "
                                            "given that the unit works now.")
    score = models.FloatField(default=0.0, help_text="Hire risk weighted by what the failing roles do to a hire.")
    action_roles = models.PositiveIntegerField(
        default=0, help_text="One bit per role code (scheduling.thresholds.ROLE_CODES) of the positions to "
                             "replace or measure.")
    reasons = SentencesField(default=list, help_text="The reasons for the status, in words (a list of sentences).")
    positions = models.BinaryField(help_text="Per-position results, see scheduling/services.py")

    class Meta:
        indexes = [models.Index(fields=["status", "due_date"]), models.Index(fields=["priority"]),
                   # placing one unit among those that need work (services.priorities_place)
                   models.Index(fields=["score"], condition=models.Q(priority__isnull=False),
                                name="forecast_needs_work_by_score")]

    def __str__(self):
        return f"{self.unit_id}: {self.status} {self.due_date}"


class ModelUse(models.Model):
    """A gear model's mean recent use over the units with a year of history,
    kept by the fleet refresh so that a forecast of a few units (a check-in)
    fills units without history exactly as the fleet refresh does."""

    gear_model = models.OneToOneField("fleet.GearModel", on_delete=models.CASCADE, related_name="+")
    as_of = models.DateField(help_text="The day the means were taken for.")
    units = models.PositiveIntegerField(help_text="Units with enough history behind the means.")
    powered_h_per_year = models.FloatField(null=True, help_text="hours; empty: no unit with history")
    out_h_per_year = models.FloatField(null=True, help_text="hours")
    ambient_c = models.FloatField(null=True, help_text="degC, weighted by powered hours")
    hire_units = models.PositiveIntegerField(default=0, help_text="Units with at least one hire in the year.")
    hire_powered_h = models.FloatField(null=True, help_text="hours powered per hire")
    hire_out_h = models.FloatField(null=True, help_text="hours out per hire")
