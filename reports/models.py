"""What the reports keep: who takes the digest, each period's digest, one
delivery record per (subscriber, period), and batches of service sheets."""

from django.conf import settings
from django.db import models
from django.db.models import Q


class DigestSubscription(models.Model):
    """A manager's or technician's choice to receive the weekly digest."""

    user = models.OneToOneField(settings.AUTH_USER_MODEL, on_delete=models.CASCADE,
                                related_name="digest_subscription")
    active = models.BooleanField(default=True)
    changed_at = models.DateTimeField(auto_now=True)

    def __str__(self):
        return f"{self.user} ({'subscribed' if self.active else 'unsubscribed'})"


class Digest(models.Model):
    """One period's digest: what it says is worked out once, when the period's
    first send starts, so every subscriber (and every retry) gets the same."""

    period = models.CharField(max_length=10, unique=True, help_text="ISO week, e.g. 2026-W49.")
    period_start = models.DateField()
    created_at = models.DateTimeField(auto_now_add=True)
    content = models.JSONField(help_text="Counts, changes, the top of the triage list, parts, the chart.")
    snapshot = models.JSONField(default=dict, help_text="Each unit's status and forecast then, for the next "
                                                        "digest's 'what changed'.")
    attachment = models.BinaryField(help_text="The due list as a PDF.")

    class Meta:
        ordering = ["-period_start"]

    def __str__(self):
        return f"digest {self.period}"


class DigestDelivery(models.Model):
    """The digest of one period for one subscriber: sent at most once.

    The unique (user, period) constraint makes a second beat tick or a retried
    task find the row already there; the state moves pending -> sending
    (claimed by one worker with a conditional update) -> sent, or -> failed
    (tried again later, with backoff) and back to sending.
    """

    class State(models.TextChoices):
        PENDING = "pending", "Waiting to be sent"
        SENDING = "sending", "Being sent"
        SENT = "sent", "Sent"
        FAILED = "failed", "Failed, will be tried again"

    digest = models.ForeignKey(Digest, on_delete=models.CASCADE, related_name="deliveries")
    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="digest_deliveries")
    period = models.CharField(max_length=10)
    email = models.EmailField()
    state = models.CharField(max_length=8, choices=State.choices, default=State.PENDING)
    attempts = models.PositiveIntegerField(default=0)
    claimed_at = models.DateTimeField(null=True, blank=True)
    next_attempt_at = models.DateTimeField(null=True, blank=True)
    sent_at = models.DateTimeField(null=True, blank=True)
    last_error = models.CharField(max_length=300, blank=True)
    message_id = models.CharField(max_length=200, blank=True)

    class Meta:
        ordering = ["-digest__period_start", "email"]
        constraints = [
            models.UniqueConstraint(fields=["user", "period"], name="digest_once_per_subscriber_period"),
            models.CheckConstraint(condition=~Q(state="sent") | Q(sent_at__isnull=False), name="digest_sent_has_time"),
        ]
        indexes = [models.Index(fields=["state", "next_attempt_at"])]

    def __str__(self):
        return f"{self.period} to {self.email}: {self.state}"


class SheetBatch(models.Model):
    """Service sheets for many units in one PDF, built by the worker."""

    class State(models.TextChoices):
        QUEUED = "queued", "Queued"
        RUNNING = "running", "Being built"
        DONE = "done", "Ready"
        FAILED = "failed", "Failed"

    requested_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                     related_name="+")
    created_at = models.DateTimeField(auto_now_add=True)
    title = models.CharField(max_length=120)
    unit_ids = models.JSONField(help_text="The units, in the order their sheets are printed.")
    state = models.CharField(max_length=8, choices=State.choices, default=State.QUEUED)
    done = models.PositiveIntegerField(default=0, help_text="Sheets gathered and drawn so far.")
    total = models.PositiveIntegerField(default=0)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    pdf = models.BinaryField(null=True, blank=True, help_text="The sheets once ready (in the database, so a "
                                                              "worker on any host can hand it to the web).")
    error = models.CharField(max_length=300, blank=True)

    class Meta:
        ordering = ["-created_at"]

    def __str__(self):
        return f"{self.title} ({self.state})"

    @property
    def percent(self):
        return int(100 * self.done / self.total) if self.total else 0
