"""What the pages keep of their own: a record of every CSV import, for the
manager's start page ("recent imports")."""

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
