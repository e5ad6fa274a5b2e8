from django.apps import AppConfig
from django.db.models.signals import post_migrate


def _default_schedule(sender, using="default", **kwargs):
    from .schedule import ensure_default_schedule

    ensure_default_schedule()


class ReportsConfig(AppConfig):
    name = "reports"
    verbose_name = "Reports"

    def ready(self):
        # After every migrate: the default schedule entries that are missing.
        post_migrate.connect(_default_schedule, sender=self, dispatch_uid="reports.default_schedule")
