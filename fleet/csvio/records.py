"""Records of a file and the lines each took: what went wrong in the CSV
structure itself (quotes, line endings, invisible characters), in plain words.

Python's ``csv`` reader is lenient: a double quote that opens a cell and is
never closed makes every later line part of that one cell, and it reports
problems in its own words.  ``Records`` reads through it, keeps the lines of
the record just read, and checks each record against them, so that a stray
quote is caught where it opened (its row, line and column) instead of turning
the rest of the file into one unit's notes.
"""

from __future__ import annotations

import csv
import unicodedata

from ..values import excerpt


class StructureError(Exception):
    """The file's structure is broken from here on; the message names where."""


_NAMED_CHARACTERS = {
    "\ufeff": "a byte-order mark, U+FEFF",
    "\u200b": "a zero-width space, U+200B",
    "\u00a0": "a no-break space, U+00A0",
    "\x00": "a NUL character (a zero byte)",
    "\t": "a tab",
    "\r": "a carriage return (CR)",
    "\n": "a line break",
}


def invisible_character(text: str):
    """Words for the first character of ``text`` a reader cannot see (a
    control or format character), or None."""
    for ch in text:
        if ch in _NAMED_CHARACTERS and ch not in "\n":
            return _NAMED_CHARACTERS[ch]
        if unicodedata.category(ch) in ("Cc", "Cf", "Zl", "Zp"):
            return f"an invisible character, U+{ord(ch):04X}"
    return None


class Records:
    """The records of a CSV file, one list of cells each, with the lines they took.

    ``line_source`` yields decoded lines (each ending in its line break).
    After each record, ``first_line`` and ``last_line`` say which lines it
    took (lines counted from 1).  ``check(cells, number, header)`` raises
    ``StructureError`` when the record shows a broken quote.
    """

    def __init__(self, line_source, name):
        self.name = name
        self._source = iter(line_source)
        self._lines = []
        self.lines_read = 0
        self.first_line = 0
        self.last_line = 0
        self.at_end = False
        self._reader = csv.reader(self._feed())

    def _feed(self):
        for line in self._source:
            self.lines_read += 1
            self._lines.append(line)
            yield line
        self.at_end = True

    def __iter__(self):
        return self

    def __next__(self):
        self._lines = []
        start = self.lines_read + 1
        try:
            cells = next(self._reader)
        except csv.Error as exc:
            raise StructureError(self._csv_error(exc, start)) from None
        self.first_line, self.last_line = start, self.lines_read
        return cells

    # --- what csv itself refuses -----------------------------------------------------

    def _csv_error(self, exc, start):
        text = str(exc)
        lines = self._lines
        if "new-line character" in text:
            line = lines[-1] if lines else ""
            if "\n" not in line and line.count("\r") > 1:
                return (f"{self.name}, line {self.lines_read}: the lines of this file end in a bare carriage "
                        f"return (CR), as some old spreadsheets save them; save it again with ordinary line "
                        f"endings (LF or CR LF), for example as 'CSV UTF-8', and import it again.")
            return (f"{self.name}, line {self.lines_read}: a carriage return (CR) stands alone inside a cell "
                    f"that is not in double quotes; remove it, or put the cell in double quotes.")
        if "field larger than field limit" in text:
            column = self._opening_column(lines[0] if lines else "")
            return (f"{self.name}, line {start}{column}: a double quote opens a cell here and is not closed "
                    f"for more than {csv.field_size_limit() // 1024} KiB, so the lines after it would all be "
                    f"read into that one cell. Close the quote, or write a double quote inside a cell as "
                    f"two (\"\").")
        return f"{self.name}, line {start}: the CSV structure cannot be read here ({text})."

    @staticmethod
    def _opening_column(first_line):
        try:
            cells = next(csv.reader([first_line.rstrip("\r\n") + '"']))
        except (csv.Error, StopIteration):
            return ""
        return f", cell {len(cells)}"

    # --- what csv accepts but the file did not mean ----------------------------------

    def check(self, cells, number, header):
        """Raise ``StructureError`` when the record just read shows a broken quote:
        one that opens a cell and never closes (the rest of the file went into
        it), or one that swallowed lines that are rows of their own.  Returns a
        plain-words hint for a record whose cell count is wrong, or None."""
        width = len(header)
        if not any("\n" in c or "\r" in c for c in cells):  # only a quoted cell holds a line break
            return self._count_hint(cells, width)
        column = next((i for i, c in enumerate(cells) if "\n" in c or "\r" in c), len(cells) - 1)
        where = f"{self.name}, row {number}, column {self._column_name(header, column)}"
        first, last = self.first_line, self.last_line
        quotes = sum(line.count('"') for line in self._lines)
        if quotes % 2 and self.at_end:
            rest = (f", so {_line_range(first + 1, last)} (the rest of the file) "
                    f"{'was' if last == first + 1 else 'were'} read into this one cell" if last > first else "")
            raise StructureError(
                f"{where}: a double quote opens this cell on line {first} and is never closed{rest}. "
                f"Close the quote, or write a double quote inside a cell as two (\"\").")
        # A line swallowed by a stray quote is a row of its own: with its
        # quotes taken away it has a cell for every column.
        rows_inside = [first + k for k, line in enumerate(self._lines[1:], start=1)
                       if _cell_count(line.replace('"', "")) >= width]
        if rows_inside or len(cells) != width:
            if rows_inside:
                one = len(rows_inside) == 1
                joined = (f"{_line_range(rows_inside[0], rows_inside[-1])}, which "
                          f"{'looks like a row of its' if one else 'look like rows of their'} own, became part "
                          f"of this cell")
            else:
                joined = f"{_line_range(first + 1, last)} became part of this row"
            raise StructureError(
                f"{where}: a double quote opens this cell on line {first} and closes only on line {last}, "
                f"so {joined}. Close the quote where the cell ends, or write a double quote inside a cell "
                f"as two (\"\").")
        return None

    @staticmethod
    def _column_name(header, index):
        if index < len(header):
            return header[index].strip().lower() or f"{index + 1}"
        return f"{index + 1} (beyond the last column)"

    @staticmethod
    def _count_hint(cells, width):
        if len(cells) == width:
            return None
        if len(cells) > width:
            return ("a cell that holds a comma must be put in double quotes (\"Cold Annex, North\"), "
                    "or the row has a comma too many")
        return "a separating comma is missing, or the row was cut short"


def _line_range(first, last):
    return f"line {first}" if first == last else f"lines {first}-{last}"


def _cell_count(line):
    try:
        return len(next(csv.reader([line])))
    except (csv.Error, StopIteration):
        return 0


def header_problem(header):
    """Words for a header whose column names hold characters no one can see, or None."""
    for index, raw in enumerate(header, start=1):
        what = invisible_character(raw.strip())
        if what:
            shown = "".join(ch if ch.isprintable() else "?" for ch in excerpt(raw.strip()))
            hint = (" It often comes from joining two files each saved with a byte-order mark."
                    if "byte-order" in what else "")
            return (f"column {index} of the header ('{shown}') holds {what}, which cannot be seen "
                    f"but is part of the name; remove it and import the file again.{hint}")
    return None
