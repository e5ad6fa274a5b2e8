"""manage.py recap TAG (--positions C4,C5 | --all-electrolytics) [--technician USERNAME]

Replaces the positions with the suggested parts (same capacitance, rated
voltage at least the original's, 105 degC, endurance at least the original's
and 2,000 h, a can no wider), signed off by the technician, and recomputes the
forecast.
"""

from django.core.management.base import BaseCommand, CommandError

from fleet.services import ServiceError
from front.bench import ALL_ELECTROLYTICS, bench_recap, recap_positions

from ._bench_args import add_technician, one_line, technician_or_error, unit_or_error


class Command(BaseCommand):
    help = "Recap a unit on the bench with the suggested replacement parts and recompute its forecast."

    def add_arguments(self, parser):
        parser.add_argument("tag", help="The unit's asset tag.")
        which = parser.add_mutually_exclusive_group(required=True)
        which.add_argument("--positions", metavar="C4,C5", help="Comma-separated designators.")
        which.add_argument("--all-electrolytics", action="store_true", help="Every capacitor position.")
        parser.add_argument("--notes", default="", help="Notes for the service record.")
        add_technician(parser)

    def handle(self, *args, **o):
        unit = unit_or_error(o["tag"])
        user = technician_or_error(o["technician"])
        try:
            if o["all_electrolytics"]:
                caps = recap_positions(unit_id=unit.pk, choice=ALL_ELECTROLYTICS)
            else:
                caps = recap_positions(unit_id=unit.pk, choice="pick", designators=o["positions"].split(","))
            record = bench_recap(unit_id=unit.pk, replacements={c.position.designator: {} for c in caps},
                                 user=user, technician_name="" if user else "command line", notes=o["notes"],
                                 signed_off=user is not None)
        except ServiceError as exc:
            raise CommandError(one_line(exc)) from None
        names = ", ".join(sorted(p.position.designator for p in record.replaced.all()))
        signed = f"signed off by {user.get_username()}" if user else "not signed off (no --technician)"
        self.stdout.write(f"{unit.asset_tag}: recap recorded ({names}), {signed}; forecast recomputed.")
