"""What the pages keep of their own: a record of every CSV import, for the
manager's start page ("recent imports"), and CSV imports run in the background.

An upload too large to import while the manager's browser waits becomes an
``ImportJob``: its files are kept here until a background worker imports
them (``front.tasks.import_job_run``), and the job keeps its state, how far
it got and its result for the page the manager opens.
"""

from django.conf import settings
from django.db import models


class ImportRecord(models.Model):
    """One register file imported (or refused), by the page or the command."""

    class Source(models.TextChoices):
        UPLOAD = "upload", "Upload page"
        COMMAND = "command", "Command"

    at = models.DateTimeField(auto_now_add=True)
    user = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                             related_name="+")
    source = models.CharField(max_length=8, choices=Source.choices, default=Source.UPLOAD)
    file_name = models.CharField(max_length=255)
    kind = models.CharField(max_length=40, blank=True)
    ok = models.BooleanField(help_text="False: the file was refused and nothing from it was saved.")
    summary = models.CharField(max_length=500, help_text="What the import did, or its first error.")
    error_count = models.PositiveIntegerField(default=0)

    class Meta:
        ordering = ["-at", "-id"]
        indexes = [models.Index(fields=["-at"])]

    def __str__(self):
        return f"{self.file_name} ({'imported' if self.ok else 'refused'})"


class ImportJob(models.Model):
    class State(models.TextChoices):
        QUEUED = "queued", "Waiting for the background worker"
        RUNNING = "running", "Importing"
        DONE = "done", "Finished"
        FAILED = "failed", "Stopped"

    created_at = models.DateTimeField(auto_now_add=True)
    created_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
                                   related_name="+")
    state = models.CharField(max_length=8, choices=State.choices, default=State.QUEUED)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    files_done = models.PositiveIntegerField(default=0, help_text="Files imported so far.")
    current_file = models.CharField(max_length=255, blank=True, help_text="The file being imported now.")
    outcome = models.JSONField(default=dict, blank=True,
                               help_text="As the import page shows it: imported, failed, skipped, order.")

    class Meta:
        ordering = ["-created_at"]

    def __str__(self):
        return f"import {self.pk} ({self.state})"

    @property
    def finished(self):
        return self.state in (self.State.DONE, self.State.FAILED)


class ImportJobFile(models.Model):
    """One uploaded file of a job, kept until the job has run."""

    job = models.ForeignKey(ImportJob, on_delete=models.CASCADE, related_name="files")
    position = models.PositiveIntegerField(help_text="Order in which it was chosen.")
    name = models.CharField(max_length=255)
    size = models.PositiveBigIntegerField(help_text="bytes")
    data = models.BinaryField()

    class Meta:
        ordering = ["job", "position"]
        constraints = [models.UniqueConstraint(fields=["job", "position"], name="importjobfile_unique_position")]

    def __str__(self):
        return self.name
