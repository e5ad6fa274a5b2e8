"""manage.py send_digest [--dry-run]: this week's digest, sent from here."""

import logging
import sys
from types import SimpleNamespace

from django.core.management.base import BaseCommand, CommandError
from django.utils import timezone
from tqdm import tqdm

from reports.digest import delivery as D
from reports.digest.content import digest_content
from reports.digest.period import period_of, period_start
from reports.digest.render import build_message, subject
from reports.models import Digest, DigestDelivery

log = logging.getLogger("reports.digest")


class Command(BaseCommand):
    help = ("Send this week's digest to every subscriber who has not had it (each gets it once a week, whoever "
            "sends it: this command, the schedule or a manager's 'send now'). --dry-run shows it without sending.")

    def add_arguments(self, parser):
        parser.add_argument("--dry-run", action="store_true",
                            help="Work out the digest and show who would get it and its text; write nothing.")
        parser.add_argument("--period", help="The ISO week, e.g. 2026-W49 (default: this week).")

    def handle(self, *args, dry_run, period, **options):
        period = period or period_of(timezone.localdate())
        try:
            period_start(period)
        except ValueError as exc:
            raise CommandError(str(exc)) from None
        if dry_run:
            return self._dry_run(period)
        with tqdm(total=0, unit="mail", desc=f"digest {period}", disable=not sys.stderr.isatty(),
                  file=sys.stderr, leave=False) as bar:
            def progress(done, total):
                bar.total = total
                bar.update(done - bar.n)

            summary = D.digest_send(period=period, inline=True, progress=progress)
        line = (f"send_digest {summary['period']}: {summary['sent']} sent, {summary['failed']} failed, "
                f"{summary['cancelled']} no longer subscribed; "
                f"{'worked out now' if summary['prepared'] else 'worked out earlier'}")
        log.info(line)
        self.stdout.write(line)
        if summary["failed"]:
            raise CommandError(f"{summary['failed']} could not be sent now; the worker tries them again later")

    def _dry_run(self, period):
        existing = Digest.objects.filter(period=period).first()
        if existing is not None:
            content = existing.content
            self.stdout.write(f"The digest of {period} was worked out on {existing.created_at:%Y-%m-%d %H:%M}.")
        else:
            start = period_start(period)
            previous = Digest.objects.filter(period_start__lt=start).order_by("-period_start").first()
            content, _ = digest_content(period=period, previous=previous)
        sent = set(DigestDelivery.objects.filter(period=period, state=DigestDelivery.State.SENT)
                   .values_list("user_id", flat=True))
        recipients = [u for u in D.subscribers() if u.pk not in sent]
        self.stdout.write(f"Subject: {subject(content)}")
        self.stdout.write(f"Would send to {len(recipients)}: " + (", ".join(u.email for u in recipients) or "nobody")
                          + (f" ({len(sent)} had it already)" if sent else ""))
        reader = recipients[0] if recipients else SimpleNamespace(pk=0, get_full_name=lambda: "",
                                                                  get_username=lambda: "subscriber")
        msg = build_message(content=content, attachment=b"", user=reader, email="subscriber@example.invalid")
        self.stdout.write("")
        self.stdout.write(msg.body)
