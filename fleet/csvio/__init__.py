"""CSV import and export of the fleet register.

The format is our own and is described column by column in
``docs/csv-format.md``.  In short:

* one file per kind of record: ``locations``, ``temperature_samples``,
  ``gear_models``, ``positions``, ``units``; UTF-8 (a byte-order mark is
  allowed), comma-separated, a header row naming the columns;
* the kind is recognised from the header: its set of column names must be
  exactly one kind's (any order);
* an empty cell means "not given": the field's default, or no value;
* rows are matched to existing records by natural key (location name;
  maker + model name; maker + model name + designator; asset tag;
  location + time) and created, updated or left unchanged, so importing the
  same file twice changes nothing.  Nothing is ever deleted.

Each file is imported all or nothing, in one transaction.  The file is read
row by row and written in batches of ``importer.BATCH_SIZE`` rows (one query
per table per batch for the lookups, bulk inserts and updates), so memory does
not grow with the file; only the natural keys already seen are kept, to catch
duplicates.  Problems are collected (up to ``MAX_ERRORS_KEPT`` messages)
rather than stopping at the first, and raised together as ``CsvImportError``;
once a problem is found no further batch is written, and the transaction is
rolled back at the end.

What an import does besides writing the rows:

* new units get their capacitor rows (``fleet.services.unit_populate``);
* a unit whose joining date or prior-use assumption changes, and every unit of
  a gear model whose internal temperature rise changes, is marked changed
  (``fleet.services.units_mark_changed``): the life engine rebuilds its thermal
  history (``front.workflows.import_csv`` does so at once);
* changing a position's ratings changes the gear model's template only:
  capacitors already fitted in units keep the ratings they were given (they
  may have been replaced since); a new position is not added to units that
  already exist.  The report says when either happens.

An import refuses to change a unit's gear model or year of manufacture
(its capacitor population and their dates come from them), and never changes
an existing unit's status or a meter reading already taken: those belong to
the rental desk and the workshop (a new unit cannot be ``out``).

Export guards text cells a spreadsheet would run as formulas with a leading
single quote, and import takes it off again (``cells.guard_formula``).

The package, by concern: ``columns`` (the columns of each kind), ``cells``
(reading and writing one cell), ``records`` (the records and the lines each
took: broken quotes, line endings, invisible characters in plain words),
``reading`` (lines, header, errors, report),
``handlers`` (what every kind shares), ``kinds`` (one reader per kind),
``importer`` (one file, all or nothing) and ``writer`` (export).
"""

from .columns import COLUMNS, IMPORT_ORDER, KINDS
from .importer import BATCH_SIZE, import_csv
from .reading import MAX_ERRORS_KEPT, MAX_LINE_BYTES, CsvImportError, ImportReport, detect_kind
from .writer import export_csv

__all__ = [
    "BATCH_SIZE",
    "COLUMNS",
    "IMPORT_ORDER",
    "KINDS",
    "MAX_ERRORS_KEPT",
    "MAX_LINE_BYTES",
    "CsvImportError",
    "ImportReport",
    "detect_kind",
    "export_csv",
    "import_csv",
]
