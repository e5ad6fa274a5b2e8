"""The digest in one process (mail kept in memory): what it says, that each
subscriber gets it once a period whatever repeats, that a failed send waits
for its next try and is then sent once, and the command."""

import datetime as dt
import io
import re
import smtplib

import pytest
import time_machine
from django.core import mail, signing
from django.core.mail.backends.locmem import EmailBackend as LocmemBackend
from django.core.management import CommandError, call_command
from django.utils import timezone

from fleet.models import ServiceRecord, Unit
from fleet.services import rental_open, unit_hold
from reports.digest import delivery as D
from reports.digest.content import digest_content
from reports.digest.render import UNSUBSCRIBE_SALT, unsubscribe_token, user_from_token
from reports.duelist import parts_list
from reports.models import Digest, DigestDelivery
from scheduling.models import UnitForecast

from .digest_world import make_digest_world


@pytest.fixture
def world(db):
    return make_digest_world()


class FlakyBackend(LocmemBackend):
    """Locmem mail that drops the connection on its first ``failures`` sends."""

    failures = 0

    def send_messages(self, messages):
        if FlakyBackend.failures > 0:
            FlakyBackend.failures -= 1
            raise smtplib.SMTPServerDisconnected("connection unexpectedly closed")
        return super().send_messages(messages)


def test_the_content_is_the_databases(world):
    content, snapshot = digest_content(period=world.period)
    counts = {v: n for v, _, n in content["counts"]["forecast"]}
    for status in ("ok", "watch", "due", "overdue"):
        assert counts[status] == UnitForecast.objects.filter(status=status).count()
    assert content["counts"]["total"] == Unit.objects.count() == len(snapshot)
    expected = list(UnitForecast.objects.filter(priority__isnull=False).order_by("priority")
                    .values_list("unit__asset_tag", flat=True))
    assert [r["tag"] for r in content["top"] if r["priority"]] == expected[:10]
    assert content["need_work"] == len(expected)
    pl = parts_list(units=20)
    assert (content["parts"]["to_fit"], content["parts"]["to_order"]) == (pl.to_fit, pl.to_order)
    kinds = [ln for ln in pl.lines if ln.to_fit]
    assert len(content["parts"]["lines"]) + content["parts"]["more_lines"] == len(kinds)
    orders = [p["order"] for p in content["parts"]["lines"]]
    assert orders == sorted(orders, reverse=True), "the most needed first"
    assert sum(bar["count"] for bar in content["chart"]) == UnitForecast.objects.filter(act_by__isnull=False).count()
    assert content["chart"][0]["label"] == "this month" and len(content["chart"]) == 13
    assert content["changes"]["first"]


def test_what_changed_since_the_last_digest(world):
    first, _ = D.digest_prepare(period="2026-W40", today=dt.date(2026, 10, 1))
    held, released = world.units[0], world.units[1]
    unit_hold(unit_id=held.pk, reason="customer reported hum on the B channel")
    Unit.objects.filter(pk=released.pk).update(status=Unit.Status.HOLD)
    # the earlier digest saw the second unit held; now it is back in use
    snap = dict(first.snapshot)
    snap[str(released.pk)] = [released.asset_tag, Unit.Status.HOLD, snap[str(released.pk)][2]]
    Digest.objects.filter(pk=first.pk).update(snapshot=snap)
    Unit.objects.filter(pk=released.pk).update(status=Unit.Status.AVAILABLE)
    ServiceRecord.objects.create(unit=world.units[2], kind=ServiceRecord.Kind.RECAP,
                                 performed_on=timezone.localdate(), technician_name="Teo")
    out = world.units[2]
    rental_open(unit_id=out.pk, job_ref="J-0042", user=world.manager,
                override={"reason": "only unit of its kind free for the festival", "forecast_status": "overdue"})
    second, created = D.digest_prepare(period="2026-W41", today=dt.date(2026, 10, 8))
    changes = second.content["changes"]
    assert created and not changes["first"]
    assert changes["newly_held"]["items"] == [[held.asset_tag, "customer reported hum on the B channel"]]
    (override,) = changes["overrides"]["items"]
    assert override[0] == out.asset_tag and override[2] == "Mara"
    assert override[3] == "only unit of its kind free for the festival"
    assert changes["released"]["items"] == [released.asset_tag]
    assert [r[0] for r in changes["recapped"]["items"]] == [world.units[2].asset_tag]


def test_each_subscriber_gets_it_once_whatever_repeats(world, settings):
    settings.EMAIL_BACKEND = "django.core.mail.backends.locmem.EmailBackend"
    first = D.digest_send(inline=True)
    assert (first["prepared"], first["sent"]) == (True, 2)
    again = D.digest_send(inline=True)  # a second tick, a retried task, a manager's "send now"
    assert (again["prepared"], again["to_send"], again["sent"]) == (False, 0, 0)
    for d in DigestDelivery.objects.all():
        assert D.delivery_send(d.pk) == "skipped"
    assert sorted(m.to[0] for m in mail.outbox) == sorted(u.email for u in world.subscribers)
    assert Digest.objects.count() == 1
    assert DigestDelivery.objects.filter(state=DigestDelivery.State.SENT).count() == 2


def test_two_workers_cannot_both_take_a_delivery(world):
    digest, _ = D.digest_prepare()
    ids = D.deliveries_create(digest)
    assert D.deliveries_create(digest) == ids, "the unique (subscriber, period) adds nothing twice"
    assert D.delivery_claim(ids[0]) is True
    assert D.delivery_claim(ids[0]) is False
    # a claim left by a worker that died is taken again once the lease has run out
    later = timezone.now() + D.lease() + dt.timedelta(seconds=1)
    assert D.delivery_claim(ids[0], now=later) is True


def test_a_failed_send_waits_for_its_next_try_and_is_sent_once(world, settings):
    settings.EMAIL_BACKEND = "reports.tests.test_digest.FlakyBackend"
    settings.DIGEST_RETRY_BASE_SECONDS = 60
    FlakyBackend.failures = 1
    digest, _ = D.digest_prepare()
    first_id = D.deliveries_create(digest)[0]
    with pytest.raises(D.SendFailed):
        D.delivery_send(first_id)
    failed = DigestDelivery.objects.get(pk=first_id)
    assert failed.state == DigestDelivery.State.FAILED and failed.attempts == 1
    assert "SMTPServerDisconnected" in failed.last_error
    assert D.delivery_send(first_id) == "skipped", "not before its next try"
    assert first_id not in D.deliveries_due()
    with time_machine.travel(failed.next_attempt_at + dt.timedelta(seconds=1)):
        assert first_id in D.deliveries_due()
        assert D.delivery_send(first_id) == "sent"
    sent = DigestDelivery.objects.get(pk=first_id)
    assert (sent.state, sent.attempts, sent.last_error) == (DigestDelivery.State.SENT, 2, "")
    assert [m.to[0] for m in mail.outbox].count(sent.email) == 1


def test_the_backoff_doubles_up_to_an_hour(settings):
    settings.DIGEST_RETRY_BASE_SECONDS = 60
    assert [D.backoff_seconds(n) for n in (1, 2, 3, 4)] == [60, 120, 240, 480]
    assert D.backoff_seconds(20) == 3600


def test_who_gets_it(world):
    subs = list(D.subscribers())
    assert subs == sorted(world.subscribers, key=lambda u: u.pk)
    D.subscription_set(user=world.technician, active=False)
    assert list(D.subscribers()) == [world.manager]


def test_a_subscriber_who_left_before_the_send_is_not_mailed(world):
    digest, _ = D.digest_prepare()
    ids = D.deliveries_create(digest)
    D.subscription_set(user=world.technician, active=False)
    outcomes = sorted(D.delivery_send(i) for i in ids)
    assert outcomes == ["cancelled", "sent"]
    assert [m.to[0] for m in mail.outbox] == [world.manager.email]
    D.subscription_set(user=world.technician, active=True)  # back within the week: gets this week's
    assert D.digest_send(inline=True)["sent"] == 1
    assert sorted(m.to[0] for m in mail.outbox) == sorted(u.email for u in world.subscribers)


def test_the_message_reads_in_both_parts_and_carries_its_unsubscribe_link(world):
    D.digest_send(inline=True)
    msg = next(m for m in mail.outbox if m.to == [world.manager.email])
    html = msg.alternatives[0][0]
    assert msg.alternatives[0][1] == "text/html"
    for heading in ("UNITS BY FORECAST", "WHAT CHANGED", "TOP OF THE TRIAGE LIST", "PARTS TO ORDER",
                    "UNITS BY ACT-BY MONTH"):
        assert heading in msg.body
    for heading in ("Units by forecast", "What changed", "Top of the triage list", "Parts to order",
                    "Units by act-by month"):
        assert heading in html
    assert "Hello Mara" in msg.body and "Hello Mara" in html
    (name, data, kind), = msg.attachments
    assert kind == "application/pdf" and data.startswith(b"%PDF") and name.startswith("due-list-")
    # The token carries its signing time, so it is read from the header, not
    # made again (a second may have passed).
    token = re.fullmatch(r"<.*/digest/unsubscribe/([^/]+)/>", msg.extra_headers["List-Unsubscribe"]).group(1)
    assert token in msg.body and token in html
    assert signing.loads(unsubscribe_token(world.manager.pk), salt=UNSUBSCRIBE_SALT) == signing.loads(
        token, salt=UNSUBSCRIBE_SALT)
    assert user_from_token(token) == world.manager.pk
    with pytest.raises(signing.BadSignature):
        user_from_token(token[:-2] + ("AA" if not token.endswith("AA") else "BB"))
    assert "local electrical codes" in msg.body


def test_send_digest_dry_run_writes_and_sends_nothing(world):
    out = io.StringIO()
    call_command("send_digest", "--dry-run", stdout=out)
    text = out.getvalue()
    assert "Subject: Recap digest" in text and "Would send to 2: " in text
    assert "TOP OF THE TRIAGE LIST" in text
    assert not Digest.objects.exists() and not DigestDelivery.objects.exists() and not mail.outbox


def test_send_digest_sends_once_and_says_so(world):
    out = io.StringIO()
    call_command("send_digest", stdout=out)
    assert f"send_digest {world.period}: 2 sent, 0 failed" in out.getvalue()
    out = io.StringIO()
    call_command("send_digest", stdout=out)
    assert f"send_digest {world.period}: 0 sent, 0 failed" in out.getvalue()
    assert len(mail.outbox) == 2
    with pytest.raises(CommandError, match=r"^a period is an ISO week like 2026-W49, not '49'$"):
        call_command("send_digest", "--period", "49")


def test_send_digest_fails_loudly_when_mail_cannot_go(world, settings):
    settings.EMAIL_BACKEND = "reports.tests.test_digest.FlakyBackend"
    FlakyBackend.failures = 5
    with pytest.raises(CommandError, match="2 could not be sent now; the worker tries them again later"):
        call_command("send_digest", stdout=io.StringIO())
    assert DigestDelivery.objects.filter(state=DigestDelivery.State.FAILED).count() == 2
    FlakyBackend.failures = 0


def test_the_recaps_and_readings_of_the_period_name_who_did_them(world):
    """A recap by a login with a full name prints the name; one by a login without a name its
    username; one typed by name only that name.  Readings of the period are listed by unit, day
    and technician, with what was read; a reading before the last digest is not."""
    from django.contrib.auth import get_user_model

    from fleet.models import Position, Reading
    from tests.base import make_user

    first, _ = D.digest_prepare(period="2026-W40", today=dt.date(2026, 10, 1))
    Reading.objects.create(unit=world.units[0], kind=Reading.Kind.CAPACITOR, esr_ohm=9.0,
                           position=Position.objects.get(gear_model=world.gear_model, designator="C1"),
                           taken_at=first.created_at - dt.timedelta(hours=1), taken_by=world.technician)
    nameless = make_user("technician", "jbench")
    u0, u1, u2 = world.units
    ServiceRecord.objects.create(unit=u0, kind=ServiceRecord.Kind.RECAP, performed_on=timezone.localdate(),
                                 technician=world.technician)
    ServiceRecord.objects.create(unit=u1, kind=ServiceRecord.Kind.RECAP, performed_on=timezone.localdate(),
                                 technician=nameless)
    ServiceRecord.objects.create(unit=u2, kind=ServiceRecord.Kind.RECAP, performed_on=timezone.localdate(),
                                 technician_name="Wren (visiting)")
    pos = {p.designator: p for p in Position.objects.filter(gear_model=world.gear_model)}
    now = timezone.now()
    for des in ("C2", "C1"):
        Reading.objects.create(unit=u0, kind=Reading.Kind.CAPACITOR, position=pos[des], esr_ohm=3.0, taken_at=now,
                               taken_by=world.technician)
    Reading.objects.create(unit=u0, kind=Reading.Kind.RAIL, rail_name="-5V", rail_measured_v=-3.9, taken_at=now,
                           taken_by=world.technician)
    Reading.objects.create(unit=u1, kind=Reading.Kind.CAPACITOR, position=pos["C3"], capacitance_uf=8.0,
                           taken_at=now, taken_by=nameless)
    second, _ = D.digest_prepare(period="2026-W41", today=dt.date(2026, 10, 8))
    changes = second.content["changes"]
    today = fmt_date(timezone.localdate())
    assert sorted(changes["recapped"]["items"]) == sorted([[u0.asset_tag, today, "Teo"], [u1.asset_tag, today, "jbench"],
                                                           [u2.asset_tag, today, "Wren (visiting)"]])
    assert get_user_model().objects.get(username="teo.tech").get_full_name() == "Teo"
    assert changes["readings"]["items"] == [[u0.asset_tag, today, "Teo", "C1, C2, rail -5V"],
                                            [u1.asset_tag, today, "jbench", "C3"]]
    from reports.digest.render import build_message

    msg = build_message(content=second.content, attachment=b"", user=world.manager, email="m@x.example")
    text = msg.body
    html = msg.alternatives[0][0]
    for part in (text, html):
        assert f"{u0.asset_tag} on {today} by Teo" in part
        assert f"{u1.asset_tag} on {today} by jbench" in part
        assert f"{u2.asset_tag} on {today} by Wren (visiting)" in part
        assert f"{u0.asset_tag} C1, C2, rail -5V on {today} by Teo" in part
        assert f"{u1.asset_tag} C3 on {today} by jbench" in part
    assert "Bench readings (2)" in text


def fmt_date(d):
    from reports import formatting as fmt

    return fmt.date(d)


def test_the_digest_names_the_units_held_now_and_why(world):
    u0, u1, _ = world.units
    unit_hold(unit_id=u0.pk, reason="came back with a dead -5V rail")
    Unit.objects.filter(pk=u1.pk).update(status=Unit.Status.HOLD, hold_reason="")
    digest, _ = D.digest_prepare(period="2026-W40", today=dt.date(2026, 10, 1))
    changes = digest.content["changes"]
    assert changes["held_now"] == 2
    assert sorted(changes["held_list"]["items"]) == sorted([[u0.asset_tag, "came back with a dead -5V rail"],
                                                           [u1.asset_tag, ""]])
    from reports.digest.render import build_message

    msg = build_message(content=digest.content, attachment=b"", user=world.manager, email="m@x.example")
    for part in (msg.body, msg.alternatives[0][0]):
        assert f"{u0.asset_tag} (came back with a dead -5V rail)" in part
