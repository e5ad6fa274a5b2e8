"""manage.py due_list: the due-for-recap list in triage order (priority 1 first)."""

import csv
import datetime as dt

from django.core.management.base import BaseCommand, CommandError

from fleet.csvio.cells import guard_formula
from fleet.models import Unit
from scheduling.services import forecast_refresh, forecast_tables_vacuum

from ._engine_args import add_engine_arguments, engine_options

COLUMNS = ["priority", "asset_tag", "maker", "model", "location", "unit_status", "forecast", "act_by", "due_date",
           "risk", "hire_risk", "reasons"]


class Command(BaseCommand):
    help = ("List the units that need work (by priority, 1 first), then those due for a recap within a "
            "number of days.")

    def add_arguments(self, parser):
        parser.add_argument("--within", type=int, default=None, metavar="DAYS",
                            help="Units due within this many days (default: the policy horizon). "
                                 "Overdue units are always listed.")
        parser.add_argument("--csv", action="store_true", help="Write CSV instead of a table.")
        add_engine_arguments(parser)

    def handle(self, *args, **options):
        within = options["within"]
        if within is not None and within < 0:
            raise CommandError("--within must be zero or more days.")
        try:
            run = forecast_refresh(**engine_options(options))
        except ValueError as exc:
            raise CommandError(str(exc)) from None
        forecast_tables_vacuum(rewritten=True)  # every row rewritten: a server without autovacuum keeps the old
        days = within if within is not None else int(run.policy.horizon_days)
        limit = run.today + dt.timedelta(days=days)
        units = {u.pk: u for u in Unit.objects.select_related("gear_model", "home_location")}
        rows = []
        # Units that cannot be forecast come first: their figures need a technician.
        for bad in run.unforecastable:
            unit = units[bad.unit_id]
            rows.append(["", bad.asset_tag, unit.gear_model.maker, unit.gear_model.model_name,
                         unit.home_location.name, unit.status, "cannot forecast", "", "", "", "",
                         " | ".join(bad.reasons)])
        for u in run.urgency_order():
            d = run.unit_dict(u, with_positions=False)
            due_soon = d["due_date"] is not None and dt.date.fromisoformat(d["due_date"]) <= limit
            if not d["priority"] and not due_soon:
                continue
            unit = units[int(run.fleet.unit_id[u])]
            rows.append([d["priority"] or "", d["asset_tag"], unit.gear_model.maker, unit.gear_model.model_name,
                         unit.home_location.name, unit.status, d["status"], d["act_by"] or "", d["due_date"],
                         f"{d['risk']:.3f}", f"{d['hire_risk']:.4f}", " | ".join(d["reasons"])])
        if options["csv"]:
            writer = csv.writer(self.stdout)
            writer.writerow(COLUMNS)
            # Managers open this in a spreadsheet: no cell may run as a formula.
            writer.writerows([guard_formula(str(cell)) for cell in row] for row in rows)
            return
        for r in rows:
            if r[6] == "cannot forecast":
                self.stdout.write(f"     {r[1]:<12} cannot forecast: check its figures  {r[2]} {r[3]} ({r[4]})")
            else:
                self.stdout.write(f"{str(r[0]):>4} {r[1]:<12} {r[6]:<8} act by {r[7] or '-':<10} {r[2]} {r[3]} "
                                  f"({r[4]})")
            for reason in r[11].split(" | ") if r[11] else []:
                self.stdout.write(f"       {reason}")
        need = sum(1 for r in rows if r[0] != "")
        cannot = len(run.unforecastable)
        text = (f"{need} units need work (priority 1 first); {len(rows) - need - cannot} more due by "
                f"{limit.isoformat()}")
        if cannot:
            text += f"; {cannot} cannot be forecast (listed first)"
        self.stdout.write(text + ".")
