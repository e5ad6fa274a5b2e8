"""The maintenance policy: the house's limits the life engine works to (risk
over a horizon, damage, calendar age, storage).  Part of the register
(``fleet.models`` imports it); edited in the admin, with its history kept."""

from django.core.validators import MaxValueValidator, MinValueValidator
from django.db import models
from django.db.models import Q

from .audit import AuditTrail


class MaintenancePolicy(models.Model):
    name = models.CharField(max_length=80, unique=True)
    active = models.BooleanField(default=False)
    risk_limit = models.FloatField(
        default=0.10, validators=[MinValueValidator(0.0001), MaxValueValidator(0.9999)],
        help_text="Largest acceptable probability that the unit fails within the horizon (0-1).",
    )
    horizon_days = models.PositiveIntegerField(default=90, validators=[MinValueValidator(1), MaxValueValidator(3650)])
    damage_limit = models.FloatField(
        default=1.0, validators=[MinValueValidator(0.01), MaxValueValidator(10)],
        help_text="Recap when any position's damage reaches this fraction of its threshold.",
    )
    calendar_age_years = models.FloatField(
        default=30.0, validators=[MinValueValidator(1), MaxValueValidator(100)],
        help_text="Recap original capacitors older than this, whatever the model says.",
    )
    storage_reform_months = models.FloatField(
        default=24.0, validators=[MinValueValidator(1), MaxValueValidator(240)],
        help_text="Reform (bring up slowly) units unpowered for longer than this.",
    )
    watch_days = models.PositiveIntegerField(
        default=180, help_text="A unit due within this many days is on the watch list."
    )
    history = AuditTrail()

    class Meta:
        verbose_name_plural = "maintenance policies"
        constraints = [
            models.UniqueConstraint(fields=["active"], condition=Q(active=True), name="policy_one_active"),
            models.CheckConstraint(condition=Q(risk_limit__gt=0) & Q(risk_limit__lt=1), name="policy_risk_range"),
        ]

    def __str__(self):
        return self.name + (" (active)" if self.active else "")
