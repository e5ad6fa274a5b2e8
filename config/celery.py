"""The Celery application and its schedule.  Tasks live in each app's tasks.py."""

import os

from celery import Celery
from celery.schedules import crontab

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")

app = Celery("recap")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()

app.conf.beat_schedule = {
    "nightly-fleet-refresh": {
        "task": "scheduling.fleet_nightly_refresh",
        "schedule": crontab(hour=2, minute=30),
    },
}
