"""Reading a file: lines, the header, the kind, and the errors and report of an import."""

from __future__ import annotations

import codecs
import os
from dataclasses import dataclass, field

from .columns import KINDS
from .records import Records, StructureError, header_problem

MAX_ERRORS_KEPT = 1000
ERRORS_SHOWN = 20
MAX_LINE_BYTES = 1 << 20


class CsvImportError(Exception):
    """A file was refused; nothing of it was written.

    ``errors`` holds the messages (at most ``MAX_ERRORS_KEPT``), each naming
    the file, the row (the header is row 1) and the column; ``total`` counts
    every problem found, including those not kept.
    """

    def __init__(self, errors, total=None):
        self.errors = list(errors)
        self.total = max(total if total is not None else 0, len(self.errors))
        super().__init__(self.errors)

    def __str__(self):
        shown = self.errors[:ERRORS_SHOWN]
        lines = list(shown)
        more = self.total - len(shown)
        if more > 0:
            lines.append(f"... and {more} more")
        return "\n".join(lines)


@dataclass
class ImportReport:
    """What one imported file did."""

    name: str
    kind: str
    rows: int = 0
    created: int = 0
    updated: int = 0
    unchanged: int = 0
    capacitors_fitted: int = 0
    histories_started: int = 0
    histories_rebuilt: int = 0
    dry_run: bool = False
    notes: list = field(default_factory=list)

    def summary(self) -> str:
        kind = self.kind.replace("_", " ")
        rows = "1 row" if self.rows == 1 else f"{self.rows} rows"
        text = (f"{self.name} ({kind}): {rows}: {self.created} created, {self.updated} updated, "
                f"{self.unchanged} unchanged")
        extras = []
        if self.capacitors_fitted:
            extras.append(f"{self.capacitors_fitted} capacitor rows fitted")
        if self.histories_started:
            extras.append(f"{self.histories_started} thermal histories started")
        if self.histories_rebuilt:
            extras.append(f"{self.histories_rebuilt} thermal histories rebuilt")
        if extras:
            text += "; " + ", ".join(extras)
        if self.dry_run:
            text += " (dry run: nothing was saved)"
        text += "."
        for note in self.notes:
            text += " " + note
        return text


class _Fatal(Exception):
    """A problem after which the rest of the file cannot be read."""


class _DryRun(Exception):
    pass


def _open(fileobj_or_path, name):
    if isinstance(fileobj_or_path, (str, os.PathLike)):
        path = os.fspath(fileobj_or_path)
        return open(path, "rb"), name or os.path.basename(path), True
    given = getattr(fileobj_or_path, "name", None)
    return fileobj_or_path, name or (os.path.basename(str(given)) if given else "") or "uploaded file", False


def _lines(f, name):
    """Decoded lines of a binary (or text) file, each at most MAX_LINE_BYTES long."""
    offset = 0
    lineno = 0
    while True:
        try:
            raw = f.readline(MAX_LINE_BYTES + 1)
        except UnicodeDecodeError as exc:  # a text-mode file object
            raise _Fatal(f"{name}: the file is not UTF-8 text ({exc.reason}); save it as UTF-8 "
                         f"(in a spreadsheet: CSV UTF-8) and import it again.") from None
        if not raw:
            return
        lineno += 1
        if isinstance(raw, str):
            yield raw.lstrip("\ufeff") if lineno == 1 else raw
            continue
        if len(raw) > MAX_LINE_BYTES:
            if raw.count(b"\r") > 1:
                raise _Fatal(f"{name}, line {lineno}: the lines of this file end in a bare carriage return "
                             f"(CR), as some old spreadsheets save them; save it again with ordinary line "
                             f"endings (LF or CR LF), for example as 'CSV UTF-8', and import it again.")
            raise _Fatal(f"{name}, line {lineno}: the line is longer than {MAX_LINE_BYTES // 1024} KiB; "
                         f"is this a CSV file?")
        start = offset
        offset += len(raw)
        if lineno == 1 and raw.startswith(codecs.BOM_UTF8):
            raw = raw[len(codecs.BOM_UTF8):]
            start += len(codecs.BOM_UTF8)
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise _Fatal(
                f"{name}, line {lineno}, byte offset {start + exc.start}: byte 0x{raw[exc.start]:02X} is not "
                f"UTF-8 text; save the file as UTF-8 (in a spreadsheet: CSV UTF-8) and import it again."
            ) from None
        yield text


def _kind_from_header(header, name):
    cols = [c.strip().lower() for c in header]
    where = f"{name}, row 1"
    if not any(cols):
        raise CsvImportError([f"{where}: the first row must be the header naming the columns, but it is empty."])
    problem = header_problem(header)
    if problem:
        raise CsvImportError([f"{where}: {problem}"])
    seen, twice = set(), []
    for c in cols:
        if c in seen and c not in twice:
            twice.append(c)
        seen.add(c)
    if twice:
        raise CsvImportError([f"{where}: column {', '.join(twice)} appears more than once in the header."])
    given = set(cols)
    for kind, names in KINDS.items():
        if given == set(names):
            return kind
    best = max(KINDS, key=lambda k: (len(given & set(KINDS[k])) - len(given - set(KINDS[k])),
                                     len(given & set(KINDS[k]))))
    expected = KINDS[best]
    if not given & set(expected):
        raise CsvImportError([
            f"{where}: the header names none of the known columns, so the kind of file is not known. "
            f"The first row must name the columns of one of: {', '.join(KINDS)} (see docs/csv-format.md)."
        ])
    missing = [c for c in expected if c not in given]
    extra = [c for c in cols if c not in expected and c]
    parts = []
    if missing:
        parts.append(f"missing column{'s' if len(missing) > 1 else ''}: {', '.join(missing)}")
    if extra:
        parts.append(f"unknown column{'s' if len(extra) > 1 else ''}: {', '.join(extra)}")
    if "" in cols:
        parts.append("a column has no name")
    raise CsvImportError([f"{where}: the header looks like a {best} file, but {'; '.join(parts)}."])


def _read_header(records, name):
    """The first row of ``records`` (a ``Records``); an empty file (or one with
    only blank lines) is refused."""
    try:
        header = next(records, None)
        if header is not None and not any(c.strip() for c in header):
            while header is not None and not any(c.strip() for c in header):
                header = next(records, None)
            if header is not None:
                raise CsvImportError([f"{name}, row 1: the first row must be the header naming the columns, "
                                      f"but it is empty."])
        if header is not None and any("\n" in c or "\r" in c for c in header):
            raise CsvImportError([f"{name}, row 1: a double quote opens a column name in the header and is not "
                                  f"closed on that line; column names are written without quotes."])
    except (_Fatal, StructureError) as exc:
        raise CsvImportError([str(exc)]) from None
    if header is None:
        raise CsvImportError([f"{name}: the file is empty; the first row must name the columns."])
    return header


def detect_kind(fileobj_or_path, *, name=None) -> str:
    """The kind of a CSV file, from its header row alone.  Raises ``CsvImportError``."""
    f, name, close = _open(fileobj_or_path, name)
    try:
        return _kind_from_header(_read_header(Records(_lines(f, name), name), name), name)
    finally:
        if close:
            f.close()


# --- importing ---------------------------------------------------------------------

class _Errors:
    def __init__(self):
        self.messages = []
        self.total = 0

    def add(self, message):
        self.total += 1
        if len(self.messages) < MAX_ERRORS_KEPT:
            self.messages.append(message)
