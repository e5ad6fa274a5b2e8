"""Importing one file, all or nothing."""

from django.db import transaction

from .kinds import HANDLERS
from .records import Records, StructureError
from .reading import CsvImportError, ImportReport, _DryRun, _Errors, _Fatal, _kind_from_header, _lines, _open, \
    _read_header

#: Rows read before a batch is written (lookups, bulk inserts and updates).
BATCH_SIZE = 2000


def import_csv(fileobj_or_path, *, name=None, dry_run=False, progress=None) -> ImportReport:
    """Import one CSV file of the fleet register, all or nothing.

    Parameters
    ----------
    fileobj_or_path : path or file object
        A path, or a file opened in binary mode (an uploaded file); a text-mode
        file object also works.  It is read line by line.
    name : str, optional
        The file's name in messages (default: the file's own name).
    dry_run : bool
        Check and count everything, then roll back.
    progress : callable, optional
        Called with the number of rows read so far after each batch.

    Returns
    -------
    ImportReport

    Raises
    ------
    CsvImportError
        With every problem found (each naming file, row and column); nothing
        of the file has been written.
    """
    f, name, close = _open(fileobj_or_path, name)
    try:
        return _import(f, name, dry_run, progress)
    finally:
        if close:
            f.close()


def _import(f, name, dry_run, progress=None):
    records = Records(_lines(f, name), name)
    header = _read_header(records, name)
    kind = _kind_from_header(header, name)
    width = len(header)
    index = {c.strip().lower(): i for i, c in enumerate(header)}
    report = ImportReport(name=name, kind=kind)
    errors = _Errors()
    try:
        with transaction.atomic():
            handler = HANDLERS[kind](name, errors, report)
            index = {c.name: index[c.name] for c in handler.columns}
            batch = []
            try:
                for number, cells in enumerate(records, start=2):
                    hint = records.check(cells, number, header)
                    if not any(c.strip() for c in cells):
                        continue  # a blank line, or a row of empty cells from a spreadsheet
                    report.rows += 1
                    if len(cells) != width:
                        if len(cells) > width and not any(c.strip() for c in cells[width:]):
                            cells = cells[:width]
                        else:
                            handler.error(number, None, f"the row has {len(cells)} cells, but the header has "
                                                        f"{width} columns: {hint}.")
                            continue
                    values = handler.parse(number, cells, index)
                    if values is None or not handler.check_duplicate(number, values):
                        continue
                    batch.append((number, values))
                    if len(batch) >= BATCH_SIZE:
                        handler.flush(batch)
                        batch = []
                        if progress is not None:
                            progress(report.rows)
            except (_Fatal, StructureError) as exc:
                errors.add(str(exc))
            if batch:
                handler.flush(batch)
            handler.finish()
            if errors.total:
                raise CsvImportError(errors.messages, total=errors.total)
            if dry_run:
                raise _DryRun
    except _DryRun:
        report.dry_run = True
    return report
