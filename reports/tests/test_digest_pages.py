"""The digest page (subscribe, the manager's schedule and "send now"), the
unsubscribe link, the editable schedule and the first digest of a new
installation, and `manage.py refresh_forecasts`."""

import datetime as dt
import io

import pytest
from django.core import mail
from django.core.management import call_command
from django.urls import reverse
from django_celery_beat.models import PeriodicTask

from reports import schedule
from reports.digest.render import unsubscribe_token
from reports.models import Digest, DigestDelivery, DigestSubscription
from scheduling.models import ThermalHistory, UnitForecast

from .digest_world import make_digest_world


@pytest.fixture
def world(db):
    return make_digest_world()


def test_a_technician_subscribes_and_leaves(client, world):
    client.force_login(world.technician)
    url = reverse("digest_settings")
    page = client.get(url)
    assert page.status_code == 200 and "You receive the digest at" in page.content.decode()
    assert "schedule-heading" not in page.content.decode(), "the schedule is the managers'"
    client.post(url, {"form": "subscription", "email": "teo.new@fennick.example"})
    sub = DigestSubscription.objects.get(user=world.technician)
    world.technician.refresh_from_db()
    assert not sub.active and world.technician.email == "teo.new@fennick.example"
    bad = client.post(url, {"form": "subscription", "subscribed": "on", "email": "not an address"})
    assert bad.status_code == 400 and not DigestSubscription.objects.get(user=world.technician).active


def test_the_desk_has_no_digest_page(client, world):
    client.force_login(world.desk)
    assert client.get(reverse("digest_settings")).status_code == 403


def test_the_unsubscribe_link_asks_then_unsubscribes_without_a_login(client, world):
    url = reverse("digest_unsubscribe", args=[unsubscribe_token(world.manager.pk)])
    page = client.get(url)
    assert page.status_code == 200 and "Stop sending the weekly digest" in page.content.decode()
    assert DigestSubscription.objects.get(user=world.manager).active, "following the link alone changes nothing"
    done = client.post(url)
    assert "Unsubscribed." in done.content.decode()
    assert not DigestSubscription.objects.get(user=world.manager).active
    forged = client.get(reverse("digest_unsubscribe", args=["bm9wZQ:forged:sig"]))
    assert forged.status_code == 400


def test_a_manager_edits_the_schedule(client, world):
    schedule.ensure_default_schedule()
    client.force_login(world.manager)
    url = reverse("digest_settings")
    assert "Send this week's digest now" in client.get(url).content.decode()
    client.post(url, {"form": "schedule", "digest_enabled": "on", "digest_weekday": "4", "digest_time": "16:45",
                      "nightly_time": "03:15"})
    state = schedule.schedule_state()
    assert (state["digest_weekday"], state["digest_time"], state["digest_enabled"]) == (4, dt.time(16, 45), True)
    assert (state["nightly_time"], state["nightly_enabled"]) == (dt.time(3, 15), False)
    digest = PeriodicTask.objects.get(name=schedule.DIGEST)
    assert (digest.crontab.day_of_week, digest.crontab.hour, digest.crontab.minute) == ("5", "16", "45")  # cron: Fri
    bad = client.post(url, {"form": "schedule", "digest_weekday": "9", "digest_time": "25:00", "nightly_time": "x"})
    assert bad.status_code == 400 and schedule.schedule_state()["digest_time"] == dt.time(16, 45)


def test_send_now_sends_once_a_week(client, world, django_capture_on_commit_callbacks):
    client.force_login(world.manager)
    with django_capture_on_commit_callbacks(execute=True):
        client.post(reverse("digest_send_now"))
    assert len(mail.outbox) == 2
    again = client.post(reverse("digest_send_now"), follow=True)
    assert "has had the digest of week" in again.content.decode()
    assert len(mail.outbox) == 2 and Digest.objects.count() == 1
    client.force_login(world.technician)
    assert client.post(reverse("digest_send_now")).status_code == 403


def test_the_default_schedule_is_made_once_and_edits_stay(db):
    made = schedule.ensure_default_schedule()
    assert set(made) <= {schedule.NIGHTLY, schedule.DIGEST, schedule.SWEEP}
    assert PeriodicTask.objects.filter(name__in=[schedule.NIGHTLY, schedule.DIGEST, schedule.SWEEP]).count() == 3
    PeriodicTask.objects.filter(name=schedule.DIGEST).update(enabled=False)
    assert schedule.ensure_default_schedule() == []
    assert not PeriodicTask.objects.get(name=schedule.DIGEST).enabled
    tasks = dict(PeriodicTask.objects.values_list("name", "task"))
    assert tasks[schedule.NIGHTLY] == "scheduling.fleet_nightly_refresh"
    assert tasks[schedule.DIGEST] == "reports.digest_send"


def test_a_new_installation_gets_a_first_digest_soon(world):
    when = schedule.schedule_first_digest()
    assert when is not None
    first = PeriodicTask.objects.get(name=schedule.FIRST_DIGEST)
    assert first.one_off and first.enabled and first.task == "reports.digest_send"
    assert schedule.schedule_first_digest() == first.clocked.clocked_time, "asked twice: still one"
    assert PeriodicTask.objects.filter(name=schedule.FIRST_DIGEST).count() == 1
    Digest.objects.create(period="2026-W01", period_start=dt.date(2025, 12, 29), content={}, attachment=b"")
    assert schedule.schedule_first_digest() is None


def test_refresh_forecasts_does_the_nightly_job(world):
    UnitForecast.objects.all().delete()
    out = io.StringIO()
    call_command("refresh_forecasts", stdout=out)
    line = out.getvalue().strip()
    assert line.startswith(f"refresh_forecasts: {len(world.units)} units forecast in ")
    assert UnitForecast.objects.count() == len(world.units)
    assert ThermalHistory.objects.count() == len(world.units)
    assert "\n" not in line, "one line"


def test_no_delivery_without_a_digest_role(world):
    from reports.digest.delivery import digest_send

    digest_send(inline=True)
    assert set(DigestDelivery.objects.values_list("user__username", flat=True)) == {"mara.manager", "teo.tech"}
