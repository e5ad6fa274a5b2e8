"""Sending the digest exactly once per subscriber and period.

- ``digest_prepare`` works out a period's content once; a second caller (a
  second beat tick, a retried task, a manager's "send now") finds the row the
  unique ``period`` made and uses it.
- ``deliveries_create`` adds one ``DigestDelivery`` per subscriber; the unique
  (user, period) constraint makes a second call add nothing.
- ``delivery_send`` claims a delivery with one conditional UPDATE (pending;
  failed and due for another try; or "sending" for longer than the lease, the
  mark a killed worker leaves), so two workers never both send it; it commits
  the claim before talking to the mail server, and marks it sent right after
  the server took the message.  A failure marks it failed with the time of the
  next try (backoff doubling from ``DIGEST_RETRY_BASE_SECONDS`` up to an
  hour); the task retries it then, and the sweep (every few minutes) picks up
  any that a worker dropped, for ``KEEP_TRYING_DAYS``.
- What SMTP cannot promise: if a worker dies after the server took a message
  but before the "sent" mark is written (milliseconds), the next try sends it
  again.  Both carry the same Message-ID, so mail programs that deduplicate
  show it once.
"""

import datetime as dt
import logging
import smtplib

from django.conf import settings
from django.contrib.auth import get_user_model
from django.core.mail import get_connection
from django.db import IntegrityError, transaction
from django.db.models import F, Q
from django.utils import timezone

from fleet.roles import MANAGER, TECHNICIAN

from ..models import Digest, DigestDelivery, DigestSubscription
from ..pdf.lists import due_list_pdf_bytes
from ..duelist import due_list
from .content import digest_content
from .period import period_of, period_start
from .render import build_message, message_id

log = logging.getLogger("reports.digest")

#: Rows of the due list attached to the digest.
ATTACHMENT_ROWS = 100
#: How long failed deliveries keep being tried.
KEEP_TRYING_DAYS = 14
RETRY_CAP_SECONDS = 3600
#: Roles that may take the digest (a superuser counts as every role).
DIGEST_ROLES = (MANAGER, TECHNICIAN)
State = DigestDelivery.State


class SendFailed(Exception):
    """The mail server did not take the message; it is tried again at ``retry_at``."""

    def __init__(self, message, retry_at):
        super().__init__(message)
        self.retry_at = retry_at


def backoff_seconds(attempts):
    """Seconds before the next try after ``attempts`` tries: base, 2x, 4x ..., at most an hour."""
    base = max(int(settings.DIGEST_RETRY_BASE_SECONDS), 1)
    return min(base * 2 ** max(attempts - 1, 0), RETRY_CAP_SECONDS)


def lease():
    return dt.timedelta(seconds=max(int(settings.DIGEST_LEASE_SECONDS), 1))


def subscribers():
    """Active users with an e-mail address and a digest role who opted in."""
    User = get_user_model()
    role = Q(is_superuser=True) | Q(groups__name__in=DIGEST_ROLES)
    return (User.objects.filter(is_active=True, digest_subscription__active=True).exclude(email="")
            .filter(role).distinct().order_by("pk"))


def subscription_set(*, user, active, email=None):
    """Opt ``user`` in or out (and set the address the digest goes to)."""
    with transaction.atomic():
        if email is not None and email != user.email:
            user.email = email
            user.save(update_fields=["email"])
        sub, _ = DigestSubscription.objects.get_or_create(user=user, defaults={"active": active})
        if sub.active != active:
            sub.active = active
            sub.save(update_fields=["active", "changed_at"])
    return sub


def subscription_default(*, user):
    """Subscribe ``user`` unless they have chosen either way already."""
    return DigestSubscription.objects.get_or_create(user=user, defaults={"active": True})[0]


def is_subscribed(user):
    return DigestSubscription.objects.filter(user=user, active=True).exists()


def digest_prepare(*, period=None, today=None):
    """(Digest, created) for ``period`` (default: this week)."""
    today = today or timezone.localdate()
    period = period or period_of(today)
    start = period_start(period)
    found = Digest.objects.filter(period=period).first()
    if found is not None:
        return found, False
    previous = Digest.objects.filter(period_start__lt=start).order_by("-period_start").first()
    content, snapshot = digest_content(period=period, previous=previous, today=today)
    attachment = due_list_pdf_bytes(due_list(limit=ATTACHMENT_ROWS, today=today), title=f"Due list, week {period}")
    try:
        with transaction.atomic():
            digest = Digest.objects.create(period=period, period_start=start, content=content, snapshot=snapshot,
                                           attachment=attachment)
    except IntegrityError:  # another worker made it first
        return Digest.objects.get(period=period), False
    return digest, True


def deliveries_create(digest):
    """One delivery per current subscriber (none twice); returns the ids of
    the digest's deliveries not yet sent."""
    rows = [DigestDelivery(digest=digest, user=u, period=digest.period, email=u.email) for u in subscribers()]
    DigestDelivery.objects.bulk_create(rows, ignore_conflicts=True)
    return list(DigestDelivery.objects.filter(digest=digest).exclude(state=State.SENT).values_list("pk", flat=True))


def _due(now):
    return (Q(state=State.PENDING) | Q(state=State.FAILED, next_attempt_at__lte=now)
            | Q(state=State.SENDING, claimed_at__lt=now - lease()))


def delivery_claim(delivery_id, now=None):
    """Take a delivery for sending; False when it is sent, in flight or not yet due."""
    now = now or timezone.now()
    return DigestDelivery.objects.filter(pk=delivery_id).filter(_due(now)).update(
        state=State.SENDING, claimed_at=now, attempts=F("attempts") + 1) == 1


def delivery_send(delivery_id, *, connection=None):
    """Send one delivery if it is due; returns "sent", "cancelled" (unsubscribed
    since) or "skipped" (sent already, or another worker has it).  Raises
    :class:`SendFailed` when the mail server fails."""
    if not delivery_claim(delivery_id):
        return "skipped"
    d = DigestDelivery.objects.select_related("digest", "user").get(pk=delivery_id)
    if not DigestSubscription.objects.filter(user_id=d.user_id, active=True).exists() or not d.user.is_active:
        DigestDelivery.objects.filter(pk=d.pk).delete()  # a later subscription gets this period's digest again
        return "cancelled"
    msg = build_message(content=d.digest.content, attachment=d.digest.attachment, user=d.user, email=d.email,
                        connection=connection)
    try:
        msg.send()
    except (smtplib.SMTPException, OSError) as exc:
        retry_at = timezone.now() + dt.timedelta(seconds=backoff_seconds(d.attempts))
        error = f"{type(exc).__name__}: {exc}"[:300]
        DigestDelivery.objects.filter(pk=d.pk, state=State.SENDING).update(
            state=State.FAILED, last_error=error, next_attempt_at=retry_at)
        log.warning("digest %s to %s failed (try %d), next try %s: %s", d.period, d.email, d.attempts,
                    retry_at.isoformat(timespec="seconds"), error)
        raise SendFailed(error, retry_at) from exc
    DigestDelivery.objects.filter(pk=d.pk).update(state=State.SENT, sent_at=timezone.now(), last_error="",
                                                  next_attempt_at=None, message_id=message_id(d.period, d.user_id))
    return "sent"


def deliveries_due(now=None):
    """Ids of deliveries a sweep should try: pending, failed and due, or left
    "sending" by a worker that died; digests of the last ``KEEP_TRYING_DAYS``."""
    now = now or timezone.now()
    recent = Q(digest__created_at__gte=now - dt.timedelta(days=KEEP_TRYING_DAYS))
    return list(DigestDelivery.objects.filter(recent).filter(_due(now)).order_by("pk").values_list("pk", flat=True))


def enqueue(ids):
    """Queue a send task per delivery once the current transaction commits."""
    from ..tasks import digest_deliver

    ids = list(ids)
    transaction.on_commit(lambda: [digest_deliver.delay(i) for i in ids])
    return len(ids)


def digest_send(*, period=None, today=None, inline=False, progress=None):
    """Prepare this period's digest, add a delivery per subscriber and send
    them: queued for the worker (``inline=False``) or here, one after the
    other (the command; ``progress(done, total)`` after each).  Returns a
    summary dict."""
    digest, created = digest_prepare(period=period, today=today)
    ids = deliveries_create(digest)
    summary = {"period": digest.period, "prepared": created, "to_send": len(ids), "sent": 0, "failed": 0,
               "skipped": 0, "cancelled": 0, "queued": 0}
    if not inline:
        summary["queued"] = enqueue(ids)
    else:
        connection = get_connection()
        for k, i in enumerate(ids, start=1):
            try:
                summary[delivery_send(i, connection=connection)] += 1
            except SendFailed:
                summary["failed"] += 1
            if progress:
                progress(k, len(ids))
    log.info("digest %(period)s: prepared now %(prepared)s, %(to_send)d to send, %(sent)d sent, %(failed)d failed, "
             "%(queued)d queued", summary)
    return summary


def delivery_counts(digests):
    """{digest id: {state: count}} for a page listing digests."""
    out = {d.pk: {s: 0 for s in State.values} for d in digests}
    rows = (DigestDelivery.objects.filter(digest__in=list(digests)).values_list("digest_id", "state")
            .order_by())
    for digest_id, state in rows:
        out[digest_id][state] += 1
    return out
