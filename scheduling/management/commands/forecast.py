"""manage.py forecast: recompute the life forecast, store it and print it."""

import json

from django.core.management.base import BaseCommand, CommandError

from fleet.models import Unit
from scheduling.services import forecast_refresh, forecast_tables_vacuum

from ._engine_args import add_engine_arguments, engine_options


class Command(BaseCommand):
    help = "Recompute capacitor damage, risk and due dates, store them, and print them."

    def add_arguments(self, parser):
        parser.add_argument("--unit", metavar="TAG", help="Only this unit (asset tag).")
        parser.add_argument("--json", action="store_true", help="Print JSON, one object per unit.")
        add_engine_arguments(parser)

    def handle(self, *args, **options):
        unit_ids = None
        if options["unit"]:
            tag = options["unit"].strip().upper()
            unit = Unit.objects.filter(asset_tag=tag).first()
            if unit is None:
                raise CommandError(f"No unit has the asset tag {tag!r}.")
            if unit.status == Unit.Status.RETIRED:
                raise CommandError(f"{tag} is retired; retired units are not forecast.")
            unit_ids = [unit.pk]
        try:
            run = forecast_refresh(unit_ids=unit_ids, **engine_options(options))
        except ValueError as exc:
            raise CommandError(str(exc)) from None
        if unit_ids is None:
            forecast_tables_vacuum(rewritten=True)  # every row rewritten: a server without autovacuum keeps the old
        order = run.urgency_order()
        if options["json"]:
            cannot = [{"asset_tag": u.asset_tag, "status": "invalid", "reasons": u.reasons}
                      for u in run.unforecastable]
            self.stdout.write(json.dumps(cannot + [run.unit_dict(u) for u in order], indent=2))
            return
        for unit in run.unforecastable:
            self.stdout.write(f"{unit.asset_tag:<12} cannot forecast")
            for reason in unit.reasons:
                self.stdout.write(f"    {reason}")
        for u in order:
            d = run.unit_dict(u, with_positions=False)
            self.stdout.write(
                f"{d['asset_tag']:<12} {d['status']:<8} due {d['due_date'] or '-':<10} "
                f"risk {d['risk']:6.1%} over {d['horizon_days']} d"
            )
            for reason in d["reasons"]:
                self.stdout.write(f"    {reason}")
        text = f"{len(order)} units forecast as of {run.today.isoformat()}"
        if run.unforecastable:
            text += f"; {len(run.unforecastable)} cannot be forecast (see above)"
        self.stdout.write(text + ".")
