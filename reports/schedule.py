"""The schedule of the background jobs, kept in the database
(django-celery-beat's ``DatabaseScheduler``) so managers edit it in the app.

- the nightly forecast refresh (``scheduling.fleet_nightly_refresh``), daily at
  02:30 by default;
- the weekly digest (``reports.digest_send``), Mondays at 07:00 by default;
- the digest retries (``reports.digest_sweep``) every few minutes;
- on a new installation, a first digest shortly after start, so a new user
  sees one without waiting a week (``schedule_first_digest``).

``ensure_default_schedule`` creates the entries that are missing (after every
``migrate``), never changing one a manager edited; a manager turns a job off
rather than deleting it.  Times are local (``settings.TIME_ZONE``).
"""

import datetime as dt

from django.conf import settings
from django.db import transaction
from django.utils import timezone
from django_celery_beat.models import ClockedSchedule, CrontabSchedule, IntervalSchedule, PeriodicTask

NIGHTLY = "Nightly forecast refresh"
DIGEST = "Weekly digest"
SWEEP = "Digest retries"
FIRST_DIGEST = "First digest"
NIGHTLY_TASK, DIGEST_TASK, SWEEP_TASK = "scheduling.fleet_nightly_refresh", "reports.digest_send", "reports.digest_sweep"
DEFAULT_NIGHTLY = dt.time(2, 30)
DEFAULT_DIGEST_WEEKDAY, DEFAULT_DIGEST_TIME = 0, dt.time(7, 0)    # Monday
SWEEP_MINUTES = 5
#: Weekdays as Python numbers them (Monday 0) and as cron does (Sunday 0).
WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")


def _cron_weekday(weekday):
    return str((weekday + 1) % 7)


def _crontab(at, weekday=None):
    schedule, _ = CrontabSchedule.objects.get_or_create(
        minute=str(at.minute), hour=str(at.hour), day_of_week="*" if weekday is None else _cron_weekday(weekday),
        day_of_month="*", month_of_year="*", timezone=settings.TIME_ZONE)
    return schedule


def ensure_default_schedule():
    """Create the default entries that are missing; returns their names."""
    made = []
    with transaction.atomic():
        if not PeriodicTask.objects.filter(name=NIGHTLY).exists():
            PeriodicTask.objects.create(name=NIGHTLY, task=NIGHTLY_TASK, crontab=_crontab(DEFAULT_NIGHTLY),
                                        description="Count storage up to now and recompute every forecast.")
            made.append(NIGHTLY)
        if not PeriodicTask.objects.filter(name=DIGEST).exists():
            PeriodicTask.objects.create(name=DIGEST, task=DIGEST_TASK,
                                        crontab=_crontab(DEFAULT_DIGEST_TIME, DEFAULT_DIGEST_WEEKDAY),
                                        description="Send the week's digest to its subscribers (once each).")
            made.append(DIGEST)
        if not PeriodicTask.objects.filter(name=SWEEP).exists():
            every, _ = IntervalSchedule.objects.get_or_create(every=SWEEP_MINUTES, period=IntervalSchedule.MINUTES)
            PeriodicTask.objects.create(name=SWEEP, task=SWEEP_TASK, interval=every,
                                        description="Try again the digest deliveries that failed or were cut off.")
            made.append(SWEEP)
    return made


def schedule_first_digest(*, delay=dt.timedelta(minutes=1)):
    """On an installation that has never sent a digest, send one ``delay``
    from now (once); returns the moment, or None when not needed."""
    from .models import Digest

    if Digest.objects.exists():
        return None
    when = timezone.now() + delay
    with transaction.atomic():
        task = PeriodicTask.objects.filter(name=FIRST_DIGEST).first()
        if task is not None and task.enabled:
            return task.clocked.clocked_time if task.clocked_id else None
        clocked = ClockedSchedule.objects.create(clocked_time=when)
        if task is None:
            PeriodicTask.objects.create(name=FIRST_DIGEST, task=DIGEST_TASK, clocked=clocked, one_off=True,
                                        description="The first digest of a new installation.")
        else:  # ran before without a digest left (e.g. an emptied database): once more
            task.clocked, task.enabled, task.last_run_at = clocked, True, None
            task.save()
    return when


def _time_of(crontab):
    try:
        return dt.time(int(crontab.hour), int(crontab.minute))
    except (TypeError, ValueError):
        return None


def schedule_state():
    """What the schedule page shows: for the digest and the nightly refresh,
    whether it runs, when, and when it last ran."""
    tasks = {t.name: t for t in PeriodicTask.objects.filter(name__in=[NIGHTLY, DIGEST, SWEEP])
             .select_related("crontab", "interval")}
    nightly, digest = tasks.get(NIGHTLY), tasks.get(DIGEST)
    weekday = None
    if digest is not None and digest.crontab and digest.crontab.day_of_week.isdigit():
        weekday = (int(digest.crontab.day_of_week) - 1) % 7
    return {
        "nightly_enabled": bool(nightly and nightly.enabled),
        "nightly_time": _time_of(nightly.crontab) if nightly and nightly.crontab else None,
        "nightly_last_run": nightly.last_run_at if nightly else None,
        "digest_enabled": bool(digest and digest.enabled),
        "digest_weekday": weekday,
        "digest_weekday_name": WEEKDAYS[weekday] if weekday is not None else "",
        "digest_time": _time_of(digest.crontab) if digest and digest.crontab else None,
        "digest_last_run": digest.last_run_at if digest else None,
        "time_zone": settings.TIME_ZONE,
    }


def schedule_update(*, digest_weekday, digest_time, digest_enabled, nightly_time, nightly_enabled):
    """Set when the digest and the nightly refresh run (local times)."""
    if digest_weekday not in range(7):
        raise ValueError("the digest's day must be Monday to Sunday")
    ensure_default_schedule()
    with transaction.atomic():
        for name, crontab, enabled in ((DIGEST, _crontab(digest_time, digest_weekday), digest_enabled),
                                       (NIGHTLY, _crontab(nightly_time), nightly_enabled)):
            task = PeriodicTask.objects.select_for_update().get(name=name)
            task.crontab, task.enabled = crontab, bool(enabled)
            task.save()  # django-celery-beat notes the change; beat picks it up
    return schedule_state()
