"""The printed reports as services: pages, commands and tasks call these.

Each returns PDF (or CSV) bytes, or writes them all-or-nothing to a path
(``reports.files.write_atomically``); bad input raises ``UnknownUnit`` or
``ReportError`` with a one-line message.
"""

import csv
import io

from fleet.csvio.cells import guard_formula

from .duelist import PARTS_UNITS, due_list, parts_csv_rows, parts_list
from .files import ReportError, write_atomically
from .pdf.lists import due_list_pdf_bytes, parts_list_pdf_bytes
from .pdf.sheet import sheet_pdf_bytes
from .sheets import UnknownUnit, unit_sheet

__all__ = ["ReportError", "UnknownUnit", "sheet_pdf", "sheet_write", "due_list_pdf", "parts_list_pdf",
           "parts_list_csv"]


def sheet_pdf(*, asset_tag=None, unit_id=None, today=None):
    """(UnitSheet, PDF bytes) of one unit's service sheet."""
    sheet = unit_sheet(asset_tag=asset_tag, unit_id=unit_id, today=today)
    return sheet, sheet_pdf_bytes(sheet)


def sheet_write(*, asset_tag, path, today=None):
    """Write one unit's service sheet to ``path``; returns the UnitSheet."""
    sheet, data = sheet_pdf(asset_tag=asset_tag, today=today)
    write_atomically(path, data)
    return sheet


def due_list_pdf(*, limit=None, within_days=None, today=None):
    """(DueList, PDF bytes) of the due list in triage order."""
    if limit is not None and limit < 1:
        raise ReportError("the limit must be at least 1")
    if within_days is not None and within_days < 0:
        raise ReportError("the number of days must be zero or more")
    dl = due_list(limit=limit, within_days=within_days, today=today)
    return dl, due_list_pdf_bytes(dl)


def _parts(units, today):
    try:
        return parts_list(units=units, today=today)
    except ValueError as exc:
        raise ReportError(str(exc)) from None


def parts_list_pdf(*, units=None, today=None):
    """(PartsList, PDF bytes) for the top ``units`` units of the due list."""
    pl = _parts(units if units is not None else PARTS_UNITS, today)
    return pl, parts_list_pdf_bytes(pl)


def parts_list_csv(*, units=None, today=None):
    """(PartsList, CSV text) for the top ``units`` units of the due list."""
    pl = _parts(units if units is not None else PARTS_UNITS, today)
    out = io.StringIO()
    # Managers open this in a spreadsheet: no cell may run as a formula.
    csv.writer(out, lineterminator="\n").writerows([guard_formula(str(cell)) for cell in row]
                                                   for row in parts_csv_rows(pl))
    return pl, out.getvalue()
