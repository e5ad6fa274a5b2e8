"""manage.py release TAG [--keep-held REASON]: the unit leaves the bench."""

from django.core.management.base import BaseCommand, CommandError

from fleet.services import ServiceError
from front.bench import bench_release

from ._bench_args import add_technician, one_line, technician_or_error, unit_or_error


class Command(BaseCommand):
    help = "Release a unit from the bench to available, or keep it held with a reason the desk can read."

    def add_arguments(self, parser):
        parser.add_argument("tag", help="The unit's asset tag.")
        parser.add_argument("--keep-held", metavar="REASON", default="", help="Keep it held, and why.")
        parser.add_argument("--notes", default="", help="Notes at release.")
        add_technician(parser)

    def handle(self, *args, **o):
        unit = unit_or_error(o["tag"])
        user = technician_or_error(o["technician"])
        try:
            bench_release(unit_id=unit.pk, keep_held_reason=o["keep_held"], notes=o["notes"], user=user)
        except ServiceError as exc:
            raise CommandError(one_line(exc)) from None
        unit.refresh_from_db()
        if unit.status == "hold":
            self.stdout.write(f"{unit.asset_tag} stays held: {unit.hold_reason}")
        else:
            self.stdout.write(f"{unit.asset_tag} is released: available for hire.")
