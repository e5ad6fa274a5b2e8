"""manage.py verify_parts: check each unit's packed fitted parts against its capacitor rows."""

from django.core.management.base import BaseCommand, CommandError

from fleet.models import Unit
from scheduling.thermal import parts_verify


class Command(BaseCommand):
    help = ("Compare every unit's packed fitted parts (kept beside its thermal history for fast forecasts) with "
            "its capacitor rows; --repair packs the ones that differ again.  Exits 1 when any differ and were "
            "not repaired.")

    def add_arguments(self, parser):
        parser.add_argument("tags", nargs="*", help="Asset tags to check (default: every unit).")
        parser.add_argument("--repair", action="store_true", help="Pack again the units whose pack differs.")

    def handle(self, *args, tags=(), repair=False, **options):
        unit_ids = None
        if tags:
            found = dict(Unit.objects.filter(asset_tag__in=tags).values_list("asset_tag", "pk"))
            unknown = sorted(set(tags) - set(found))
            if unknown:
                raise CommandError(f"No unit with asset tag {', '.join(unknown)}.")
            unit_ids = list(found.values())
        wrong = parts_verify(unit_ids=unit_ids, repair=repair)
        names = dict(Unit.objects.filter(pk__in=wrong).values_list("pk", "asset_tag"))
        listed = ", ".join(names[u] for u in wrong[:20]) + (" ..." if len(wrong) > 20 else "")
        if not wrong:
            self.stdout.write("verify_parts: every pack matches its capacitor rows.")
        elif repair:
            self.stdout.write(f"verify_parts: {len(wrong)} packs differed and were packed again: {listed}")
        else:
            self.stdout.write(f"verify_parts: {len(wrong)} packs differ from the rows: {listed} "
                              f"(run with --repair to pack them again)")
            raise SystemExit(1)
