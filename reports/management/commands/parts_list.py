"""manage.py parts_list [--csv]: the parts for the top of the due list."""

from django.core.management.base import BaseCommand, CommandError

from reports import formatting as fmt
from reports.duelist import PARTS_UNITS
from reports.files import write_atomically
from reports.services import ReportError, parts_list_csv, parts_list_pdf


class Command(BaseCommand):
    help = ("List the replacement parts for the positions to replace in the first units of the due list, grouped "
            "by capacitance, voltage, temperature rating, can size and mount, with a spares margin.")

    def add_arguments(self, parser):
        parser.add_argument("--csv", action="store_true", help="CSV instead of a table.")
        parser.add_argument("--units", type=int, default=PARTS_UNITS, metavar="N",
                            help=f"How many units from the top of the due list (default {PARTS_UNITS}).")
        parser.add_argument("--out", metavar="FILE", help="Write to FILE (.pdf for a PDF, else text or CSV).")

    def handle(self, *args, csv, units, out, **options):
        try:
            if out and out.lower().endswith(".pdf"):
                pl, data = parts_list_pdf(units=units)
                write_atomically(out, data)
                self.stdout.write(f"Wrote the parts list to {out}: {len(pl.lines)} lines, {pl.to_fit} to fit, "
                                  f"{pl.to_order} to order.")
                return
            pl, text = parts_list_csv(units=units)
            if not csv:
                text = self._table(pl)
            if out:
                write_atomically(out, text)
                self.stdout.write(f"Wrote the parts list to {out}.")
            else:
                self.stdout.write(text, ending="")
        except ReportError as exc:
            raise CommandError(str(exc)) from None

    @staticmethod
    def _table(pl):
        lines = [f"{'to fit':>6} {'spares':>6} {'order':>6} {'measure':>7}  part"]
        for ln in pl.lines:
            lines.append(f"{ln.to_fit:>6} {ln.spares:>6} {ln.order:>6} {ln.to_measure:>7}  {ln.describe()}")
        lines.append(f"{pl.to_fit:>6} {pl.to_order - pl.to_fit:>6} {pl.to_order:>6} "
                     f"{sum(ln.to_measure for ln in pl.lines):>7}  total for {len(pl.unit_tags)} units "
                     f"({fmt.date(pl.today)})")
        return "\n".join(lines) + "\n"
