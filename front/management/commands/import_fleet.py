"""Import fleet register CSV files: ``manage.py import_fleet FILE...``.

Each file's kind is recognised from its header, and the files are imported in
the order locations, temperature samples, gear models, positions, units
(whatever the order on the command line), so a file can refer to records of
an earlier kind.  Each file is imported all or nothing in its own transaction.
If a file is refused, its errors go to stderr, the files after it are not
imported (those before it stay imported) and the command exits non-zero.
"""

import os

from django.core.management.base import BaseCommand, CommandError

from fleet.csvio import IMPORT_ORDER, CsvImportError, detect_kind
from front.workflows import import_csv


class Command(BaseCommand):
    help = ("Import fleet register CSV files (locations, temperature_samples, gear_models, positions, units; "
            "see docs/csv-format.md), in that order, each file all or nothing.")

    def add_arguments(self, parser):
        parser.add_argument("files", nargs="+", metavar="FILE", help="CSV files, in any order")

    def handle(self, *args, files, **options):
        problems, found = [], []
        for position, path in enumerate(files):
            if not os.path.isfile(path):
                problems.append(f"{path}: no such file.")
                continue
            try:
                found.append((IMPORT_ORDER.index(detect_kind(path)), position, path))
            except CsvImportError as exc:
                problems.extend(exc.errors)
        if problems:
            for line in problems:
                self.stderr.write(line)
            raise CommandError("No file was imported: fix the files above and run the command again.")

        ordered = [path for _, _, path in sorted(found)]
        done = []
        for i, path in enumerate(ordered):
            try:
                report = import_csv(path, source="command")
            except CsvImportError as exc:
                for line in exc.errors:
                    self.stderr.write(line)
                if exc.total > len(exc.errors):
                    self.stderr.write(f"... and {exc.total - len(exc.errors)} more")
                name = os.path.basename(path)
                message = f"{name} was not imported ({exc.total} problem{'s' if exc.total != 1 else ''})"
                rest = [os.path.basename(p) for p in ordered[i + 1:]]
                if rest:
                    message += f"; not imported either: {', '.join(rest)}"
                if done:
                    message += f"; already imported: {', '.join(done)}"
                raise CommandError(message + ".")
            self.stdout.write(report.summary())
            done.append(os.path.basename(path))
