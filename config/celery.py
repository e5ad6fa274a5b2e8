"""The Celery application.  Tasks live in each app's tasks.py; the schedule
(the nightly refresh, the weekly digest, the digest retries) lives in the
database (django-celery-beat), made by reports/schedule.py and edited by
managers on the digest page."""

import os

from celery import Celery

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")

app = Celery("recap")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.autodiscover_tasks()
