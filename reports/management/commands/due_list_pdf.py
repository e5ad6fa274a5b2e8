"""manage.py due_list_pdf --out FILE.pdf: the due list in triage order as a PDF."""

from django.core.management.base import BaseCommand, CommandError

from reports.files import write_atomically
from reports.services import ReportError, due_list_pdf


class Command(BaseCommand):
    help = ("Write the due list (the units that need work by priority, then those due within the horizon) as a "
            "PDF, from the stored forecasts.")

    def add_arguments(self, parser):
        parser.add_argument("--out", required=True, metavar="FILE.pdf", help="Where to write the PDF.")
        parser.add_argument("--limit", type=int, default=None, metavar="N", help="Print the first N units only.")
        parser.add_argument("--within", type=int, default=None, metavar="DAYS",
                            help="Units due within this many days (default: the policy horizon).")

    def handle(self, *args, out, limit, within, **options):
        try:
            dl, data = due_list_pdf(limit=limit, within_days=within)
            write_atomically(out, data)
        except ReportError as exc:
            raise CommandError(str(exc)) from None
        self.stdout.write(f"Wrote the due list to {out}: {dl.need_work} units need work, "
                          f"{dl.due_only} more due within {dl.within_days} days"
                          + (f", {dl.cannot_forecast} cannot be forecast" if dl.cannot_forecast else "")
                          + (f" (first {len(dl.rows)} of {dl.total})" if dl.total > len(dl.rows) else "") + ".")
