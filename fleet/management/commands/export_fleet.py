"""Export the fleet register as CSV files: ``manage.py export_fleet DIR``.

Writes locations.csv, temperature_samples.csv, gear_models.csv, positions.csv
and units.csv into DIR (created if missing), in the format ``import_fleet``
reads (docs/csv-format.md).  Each file is written under a temporary name and
then renamed, so a failed export never leaves a half-written file.
"""

import os

from django.core.management.base import BaseCommand, CommandError

from fleet.csvio import IMPORT_ORDER, export_csv


class Command(BaseCommand):
    help = "Write the fleet register as CSV files (one per kind) into DIR."

    def add_arguments(self, parser):
        parser.add_argument("directory", metavar="DIR")

    def handle(self, *args, directory, **options):
        try:
            os.makedirs(directory, exist_ok=True)
        except OSError as exc:
            raise CommandError(f"Cannot create {directory}: {exc.strerror}.") from None
        for kind in IMPORT_ORDER:
            path = os.path.join(directory, f"{kind}.csv")
            partial = path + ".part"
            try:
                with open(partial, "w", encoding="utf-8", newline="") as f:
                    count = export_csv(kind, f)
                os.replace(partial, path)
            except OSError as exc:
                raise CommandError(f"Cannot write {path}: {exc.strerror}.") from None
            finally:
                if os.path.exists(partial):
                    os.remove(partial)
            self.stdout.write(f"{path}: {count} row{'s' if count != 1 else ''}.")
