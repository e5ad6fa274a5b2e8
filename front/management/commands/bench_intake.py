"""manage.py bench_intake TAG [--notes TEXT]: take a unit to the bench."""

from django.core.management.base import BaseCommand, CommandError
from django.utils import timezone

from fleet.services import ServiceError
from front.bench import bench_intake

from ._bench_args import add_technician, one_line, technician_or_error, unit_or_error


class Command(BaseCommand):
    help = "Take a unit to the bench (from hold, or any unit not out on hire), with intake notes."

    def add_arguments(self, parser):
        parser.add_argument("tag", help="The unit's asset tag.")
        parser.add_argument("--notes", default="", help="Intake notes.")
        add_technician(parser)

    def handle(self, *args, **options):
        unit = unit_or_error(options["tag"])
        user = technician_or_error(options["technician"])
        try:
            visit = bench_intake(unit_id=unit.pk, notes=options["notes"], user=user)
        except ServiceError as exc:
            raise CommandError(one_line(exc)) from None
        self.stdout.write(f"{unit.asset_tag} is on the bench since "
                          f"{timezone.localtime(visit.opened_at):%Y-%m-%d %H:%M} (was {visit.came_from}).")
