"""manage.py service_sheet TAG --out FILE.pdf: one unit's service sheet."""

from django.core.management.base import BaseCommand, CommandError

from reports.services import ReportError, UnknownUnit, sheet_write


class Command(BaseCommand):
    help = "Write the service sheet of one unit (by asset tag) as a PDF."

    def add_arguments(self, parser):
        parser.add_argument("tag", help="Asset tag of the unit, e.g. CB-0008.")
        parser.add_argument("--out", required=True, metavar="FILE.pdf", help="Where to write the PDF.")

    def handle(self, *args, tag, out, **options):
        try:
            sheet = sheet_write(asset_tag=tag, path=out)
        except (UnknownUnit, ReportError) as exc:
            raise CommandError(str(exc)) from None
        counts = sheet.action_counts()
        self.stdout.write(f"Wrote the service sheet of {sheet.asset_tag} ({len(sheet.rows)} capacitors: "
                          f"replace {counts['replace']}, measure {counts['measure']}) to {out}")
