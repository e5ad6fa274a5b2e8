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
row by row and written in batches of ``BATCH_SIZE`` rows (one query per table
per batch for the lookups, bulk inserts and updates), so memory does not grow
with the file; only the natural keys already seen are kept, to catch
duplicates.  Problems are collected (up to ``MAX_ERRORS_KEPT`` messages)
rather than stopping at the first, and raised together as ``CsvImportError``;
once a problem is found no further batch is written, and the transaction is
rolled back at the end.

What an import does besides writing the rows:

* new units get their capacitor rows (``fleet.services.unit_populate``) and
  their thermal histories (``scheduling.thermal.thermal_start``), per batch;
* a unit whose joining date or prior-use assumption changes, and every unit of
  a gear model whose internal temperature rise changes, has its thermal
  history rebuilt from its records (``scheduling.thermal.thermal_rebuild``);
* changing a position's ratings changes the gear model's template only:
  capacitors already fitted in units keep the ratings they were given (they
  may have been replaced since); a new position is not added to units that
  already exist.  The report says when either happens.

An import refuses to change a unit's gear model or year of manufacture
(its capacitor population and their dates come from them), and to set or clear
the status ``out``, which only check-out and check-in set.
"""

from __future__ import annotations

import codecs
import csv
import datetime as dt
import io
import os
from dataclasses import dataclass, field

from django.core.exceptions import NON_FIELD_ERRORS, FieldDoesNotExist, ValidationError
from django.db import IntegrityError, transaction
from django.utils import timezone

from . import values as V
from .models import (
    RATED_TEMP_MAX_C,
    RATED_TEMP_MIN_C,
    GearModel,
    Location,
    Mount,
    Position,
    Role,
    TemperatureSample,
    Unit,
)
from .services import unit_populate

__all__ = [
    "BATCH_SIZE",
    "IMPORT_ORDER",
    "KINDS",
    "CsvImportError",
    "ImportReport",
    "detect_kind",
    "export_csv",
    "import_csv",
]

BATCH_SIZE = 2000
MAX_ERRORS_KEPT = 1000
ERRORS_SHOWN = 20
MAX_LINE_BYTES = 1 << 20
IMPORT_ORDER = ("locations", "temperature_samples", "gear_models", "positions", "units")


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


# --- columns ---------------------------------------------------------------------

@dataclass(frozen=True)
class Column:
    """One CSV column.  ``type`` says how a cell is read and written;
    ``field`` is the model field it fills (``None``: a lookup column such as
    ``maker``, ``location``)."""

    name: str
    type: str
    field: str | None = ""
    unit: str | None = None
    required: bool = False
    choices: type | None = None

    @property
    def model_field(self):
        return self.name if self.field == "" else self.field


def _col(name, type_, **kw):
    return Column(name, type_, **kw)


_POSITION_NUMBERS = (
    ("rated_voltage_v", "V", True), ("rated_life_h", "h", True), ("esr_ohm", "ohm", False),
    ("tan_delta", None, False), ("diameter_mm", "mm", True), ("length_mm", "mm", True),
)

COLUMNS = {
    "locations": (
        _col("name", "key", required=True),
        _col("kind", "choice", choices=Location.Kind),
        _col("profile", "choice", choices=Location.Profile),
        _col("constant_temp_c", "temp"),
        _col("monthly_temps_c", "monthly"),
        _col("notes", "notes"),
    ),
    "temperature_samples": (
        _col("location", "key", field=None, required=True),
        _col("taken_at", "datetime", required=True),
        _col("temp_c", "temp", required=True),
    ),
    "gear_models": (
        _col("maker", "key", required=True),
        _col("model_name", "key", required=True),
        _col("category", "choice", choices=GearModel.Category),
        _col("year_from", "whole", required=True),
        _col("year_to", "whole", required=True),
        _col("internal_rise_k", "number", unit="K", required=True),
        _col("powered_hours_per_day", "number", unit="h"),
        _col("mains_voltage_v", "number", unit="V"),
        _col("hazard_mains", "bool"),
        _col("hazard_tube_hv", "bool"),
        _col("hazard_smps", "bool"),
        _col("notes", "notes"),
    ),
    "positions": (
        _col("maker", "key", field=None, required=True),
        _col("model_name", "key", field=None, required=True),
        _col("designator", "key", required=True),
        _col("role", "choice", choices=Role),
        _col("capacitance", "capacitance", field="capacitance_uf", required=True),
        _col("rated_voltage_v", "number", unit="V", required=True),
        _col("rated_temp_c", "rated_temp", required=True),
        _col("rated_life_h", "number", unit="h", required=True),
        _col("esr_ohm", "number", unit="ohm"),
        _col("tan_delta", "number"),
        _col("diameter_mm", "number", unit="mm", required=True),
        _col("length_mm", "number", unit="mm", required=True),
        _col("mount", "choice", choices=Mount),
        _col("ripple_current_a", "number", unit="A"),
        _col("ripple_freq_hz", "number", unit="Hz"),
        _col("operating_voltage_v", "number", unit="V"),
        _col("pump_partner", "key"),
        _col("pump_input_v", "number", unit="V"),
        _col("pump_load_a", "number", unit="A"),
        _col("pump_freq_hz", "number", unit="Hz"),
        _col("pump_switch_ohm", "number", unit="ohm"),
        _col("pump_min_rail_v", "number", unit="V"),
        _col("coupling_load_ohm", "number", unit="ohm"),
        _col("coupling_max_corner_hz", "number", unit="Hz"),
        _col("reservoir_load_a", "number", unit="A"),
        _col("reservoir_ripple_freq_hz", "number", unit="Hz"),
        _col("reservoir_ripple_limit_v", "number", unit="V"),
    ),
    "units": (
        _col("asset_tag", "key", required=True),
        _col("serial", "key"),
        _col("maker", "key", field=None, required=True),
        _col("model_name", "key", field=None, required=True),
        _col("year_made", "whole", required=True),
        _col("joined_on", "date", required=True),
        _col("home_location", "key", field=None, required=True),
        _col("status", "choice", choices=Unit.Status),
        _col("hour_meter_h", "number", unit="h"),
        _col("prior_powered_h_per_year", "number", unit="h"),
        _col("prior_ambient_c", "temp"),
        _col("prior_storage_c", "temp"),
        _col("notes", "notes"),
    ),
}
KINDS = {kind: tuple(c.name for c in cols) for kind, cols in COLUMNS.items()}
MODELS = {
    "locations": Location, "temperature_samples": TemperatureSample, "gear_models": GearModel,
    "positions": Position, "units": Unit,
}


def _label(model, column):
    """A human name for a column's quantity: the model field's verbose name."""
    if column.model_field:
        try:
            return str(model._meta.get_field(column.model_field).verbose_name)
        except FieldDoesNotExist:
            pass
    return column.name.replace("_", " ")


# --- reading cells ---------------------------------------------------------------

def _parse_choice(choices, text):
    wanted = text.strip().lower()
    for value, label in choices.choices:
        if wanted in (value.lower(), str(label).lower()):
            return value
    raise ValueError(f"'{text}' is not one of: {', '.join(v for v, _ in choices.choices)}.")


def _parse_datetime(text):
    s = text.strip()
    if len(s) < 16 or s[10] not in "Tt ":
        raise ValueError(f"'{text}' is not a date and time: write ISO 8601, e.g. 2024-07-15T08:00:00Z "
                         f"or 2024-07-15 09:00 (local time).")
    try:
        value = dt.datetime.fromisoformat(s)
    except ValueError:
        raise ValueError(f"'{text}' is not a date and time: write ISO 8601, e.g. 2024-07-15T08:00:00Z "
                         f"or 2024-07-15 09:00 (local time).") from None
    if value.tzinfo is None:
        tz = timezone.get_current_timezone()
        first, second = value.replace(tzinfo=tz, fold=0), value.replace(tzinfo=tz, fold=1)
        if first.utcoffset() != second.utcoffset():
            raise ValueError(f"'{text}' falls in a clock change in {tz}: add the UTC offset, "
                             f"e.g. {s}+01:00 or {s}Z.")
        value = first
    return value.astimezone(dt.timezone.utc)


def _parse_date(text):
    try:
        return dt.date.fromisoformat(text.strip())
    except ValueError:
        raise ValueError(f"'{text}' is not a date: write YYYY-MM-DD, e.g. 2019-03-01.") from None


def _parse_monthly(text):
    parts = text.split(";")
    if len(parts) != 12:
        raise ValueError(f"give twelve monthly means in degC separated by ';', January first "
                         f"(found {len(parts)}).")
    temps = []
    for month, part in enumerate(parts, start=1):
        try:
            temps.append(V.parse_temperature_c(part))
        except ValueError as exc:
            raise ValueError(f"month {month}: {exc}") from None
    return temps


def _parse_rated_temp(text):
    value = V.parse_temperature_c(text)
    if not RATED_TEMP_MIN_C <= value <= RATED_TEMP_MAX_C:
        raise ValueError(f"Rated temperature must lie in {RATED_TEMP_MIN_C:g}..{RATED_TEMP_MAX_C:g} degC "
                         f"(got '{text}').")
    return value


def _parse_cell(column, label, text):
    t = column.type
    if t == "key":
        return text.strip()
    if t == "notes":
        return text
    if t == "choice":
        return _parse_choice(column.choices, text)
    if t == "temp":
        return V.parse_temperature_c(text)
    if t == "rated_temp":
        return _parse_rated_temp(text)
    if t == "number":
        return V.parse_number(text, label, column.unit)
    if t == "whole":
        return V.parse_whole_number(text, label)
    if t == "bool":
        return V.parse_bool(text, label)
    if t == "date":
        return _parse_date(text)
    if t == "datetime":
        return _parse_datetime(text)
    if t == "capacitance":
        return V.parse_capacitance_uf(text)
    if t == "monthly":
        return _parse_monthly(text)
    raise AssertionError(f"unknown column type {t}")


# --- writing cells ---------------------------------------------------------------

def _format_float(value):
    """Shortest text that reads back as the same float (whole numbers without '.0')."""
    if value is None:
        return ""
    value = float(value)
    if value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return repr(value)


def _format_cell(column, value):
    if value is None:
        return ""
    t = column.type
    if t in ("temp", "rated_temp", "number"):
        return _format_float(value)
    if t == "whole":
        return str(int(value))
    if t == "bool":
        return "yes" if value else "no"
    if t == "date":
        return value.isoformat()
    if t == "datetime":
        return value.astimezone(dt.timezone.utc).isoformat()
    if t == "capacitance":
        return V.format_rkm(value, milli=False)  # 2200u, not 2m2: as the cans are marked
    if t == "monthly":
        return ";".join(_format_float(v) for v in value)
    return str(value)


# --- reading the file --------------------------------------------------------------

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


def _read_header(reader, name):
    """The first row; an empty file (or one with only blank lines) is refused."""
    try:
        header = next(reader, None)
        if header is not None and not any(c.strip() for c in header):
            while header is not None and not any(c.strip() for c in header):
                header = next(reader, None)
            if header is not None:
                raise CsvImportError([f"{name}, row 1: the first row must be the header naming the columns, "
                                      f"but it is empty."])
    except _Fatal as exc:
        raise CsvImportError([str(exc)]) from None
    except csv.Error as exc:
        raise CsvImportError([f"{name}, row 1: {exc}"]) from None
    if header is None:
        raise CsvImportError([f"{name}: the file is empty; the first row must name the columns."])
    return header


def detect_kind(fileobj_or_path, *, name=None) -> str:
    """The kind of a CSV file, from its header row alone.  Raises ``CsvImportError``."""
    f, name, close = _open(fileobj_or_path, name)
    try:
        return _kind_from_header(_read_header(csv.reader(_lines(f, name)), name), name)
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


class _Handler:
    """The rules of one kind of file.  Subclasses say how a row is keyed, how
    its references are looked up and what happens after a batch is written."""

    kind = ""
    fk_columns = {}  # model field of a reference -> the column named in its messages
    rebuild_fields = ()

    def __init__(self, name, errors, report):
        self.name = name
        self.errors = errors
        self.report = report
        self.model = MODELS[self.kind]
        self.columns = COLUMNS[self.kind]
        self.labels = {c.name: _label(self.model, c) for c in self.columns}
        self.defaults = {}
        for c in self.columns:
            if c.model_field and not c.required:
                self.defaults[c.name] = self.model._meta.get_field(c.model_field).get_default()
        self.field_to_column = {c.model_field: c.name for c in self.columns if c.model_field}
        self.field_to_column.update(self.fk_columns)
        self.seen = {}
        self.update_fields = [c.model_field for c in self.columns if c.model_field] + [
            f"{f}_id" for f in self.fk_columns
        ]

    # messages
    def error(self, number, column, message):
        where = f"{self.name}, row {number}" + (f", column {column}" if column else "")
        self.errors.add(f"{where}: {message}")

    # rows
    def parse(self, number, cells, index):
        values, ok = {}, True
        for c in self.columns:
            text = cells[index[c.name]]
            if text.strip() == "":
                if c.required:
                    self.error(number, c.name, f"no value given; the {self.labels[c.name]} is required.")
                    ok = False
                else:
                    values[c.name] = self.defaults.get(c.name)
                continue
            try:
                values[c.name] = _parse_cell(c, self.labels[c.name], text)
            except ValueError as exc:
                message = str(exc)
                prefix = f"{self.labels[c.name]}: "  # the column is named already
                self.error(number, c.name, message[len(prefix):] if message.startswith(prefix) else message)
                ok = False
        return values if ok else None

    def key(self, values):
        raise NotImplementedError

    def key_column(self):
        return self.columns[0].name

    def describe_key(self, key):
        return " ".join(str(k) for k in key) if isinstance(key, tuple) else str(key)

    def check_duplicate(self, number, values):
        key = self.key(values)
        first = self.seen.get(key)
        if first is not None:
            self.error(number, self.key_column(),
                       f"{self.describe_key(key)} appears twice in the file (first on row {first}).")
            return False
        self.seen[key] = number
        return True

    def prepare(self, batch):
        """Look up references and existing rows for a batch (one query per table)."""

    def resolve(self, number, values):
        """References of a row as ``{field_id: pk}``, or None after reporting the problem."""
        return {}

    def existing(self, values, refs):
        raise NotImplementedError

    def check(self, number, obj, fields, changed):
        """Extra rules for a new (``obj is None``) or changed row; False to refuse it."""
        return True

    def validate(self, number, obj):
        try:
            obj.full_clean(exclude=list(self.fk_columns), validate_unique=False, validate_constraints=False)
        except ValidationError as exc:
            if hasattr(exc, "error_dict"):
                for fld, messages in exc.message_dict.items():
                    column = None if fld == NON_FIELD_ERRORS else self.field_to_column.get(fld)
                    self.error(number, column, " ".join(messages))
            else:
                self.error(number, None, " ".join(exc.messages))
            return False
        return True

    def build(self, number, values):
        refs = self.resolve(number, values)
        if refs is None:
            return None
        fields = {c.model_field: values[c.name] for c in self.columns if c.model_field}
        fields.update(refs)
        obj = self.existing(values, refs)
        if obj is None:
            if not self.check(number, None, fields, list(fields)):
                return None
            obj, state, changed = self.model(**fields), "new", list(fields)
        else:
            changed = [f for f, v in fields.items() if getattr(obj, f) != v]
            if not changed:
                return obj, "same", changed
            if not self.check(number, obj, fields, changed):
                return None
            for f in changed:
                setattr(obj, f, fields[f])
            state = "changed"
        if not self.validate(number, obj):
            return None
        return obj, state, changed

    def flush(self, batch):
        self.prepare(batch)
        created, updated, changed_fields = [], [], []
        for number, values in batch:
            result = self.build(number, values)
            if result is None:
                continue
            obj, state, changed = result
            if state == "new":
                created.append(obj)
                self.report.created += 1
            elif state == "changed":
                updated.append(obj)
                changed_fields.append(changed)
                self.report.updated += 1
            else:
                self.report.unchanged += 1
        if self.errors.total:
            return
        first, last = batch[0][0], batch[-1][0]
        try:
            with transaction.atomic():
                self.model.objects.bulk_create(created, batch_size=BATCH_SIZE)
                if updated:
                    self.model.objects.bulk_update(updated, self.update_fields, batch_size=500)
                self.after_write(created, updated, changed_fields)
        except IntegrityError as exc:
            self.errors.add(f"{self.name}, rows {first}-{last}: the database refused these rows ({exc}); "
                            f"was the same data being changed at the same time? Try again.")

    def after_write(self, created, updated, changed_fields):
        pass

    def finish(self):
        pass


def _gear_model_label(key):
    return f"{key[0]} {key[1]}"


class _GearModelLookup:
    """Gear models by (maker, model_name), cached for the file."""

    def __init__(self):
        self.cache = {}

    def load(self, keys):
        wanted = {k for k in keys if k not in self.cache}
        if not wanted:
            return
        makers = {k[0] for k in wanted}
        names = {k[1] for k in wanted}
        for pk, maker, model_name in GearModel.objects.filter(maker__in=makers, model_name__in=names).values_list(
            "pk", "maker", "model_name"
        ):
            self.cache[(maker, model_name)] = pk
        for k in wanted:
            self.cache.setdefault(k, None)


class _LocationLookup:
    def __init__(self):
        self.cache = {}

    def load(self, names):
        wanted = {n for n in names if n not in self.cache}
        if not wanted:
            return
        for pk, name in Location.objects.filter(name__in=wanted).values_list("pk", "name"):
            self.cache[name] = pk
        for n in wanted:
            self.cache.setdefault(n, None)


def _unknown_location(name):
    return (f"unknown location '{name}': check the spelling, or import it first in a locations file.")


def _unknown_model(key):
    return (f"unknown gear model '{_gear_model_label(key)}' (maker '{key[0]}', model_name '{key[1]}'): "
            f"check the spelling, or import it first in a gear_models file.")


class _Locations(_Handler):
    kind = "locations"

    def key(self, values):
        return values["name"]

    def describe_key(self, key):
        return f"location '{key}'"

    def prepare(self, batch):
        names = [v["name"] for _, v in batch]
        self.found = {loc.name: loc for loc in Location.objects.filter(name__in=names)}

    def existing(self, values, refs):
        return self.found.get(values["name"])


class _Samples(_Handler):
    kind = "temperature_samples"
    fk_columns = {"location": "location"}
    _EPOCH = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)

    def __init__(self, *args):
        super().__init__(*args)
        self.locations = _LocationLookup()

    def key(self, values):
        return values["location"], (values["taken_at"] - self._EPOCH) // dt.timedelta(microseconds=1)

    def key_column(self):
        return "taken_at"

    def describe_key(self, key):
        moment = self._EPOCH + dt.timedelta(microseconds=key[1])
        return f"a sample of '{key[0]}' at {moment.isoformat()}"

    def prepare(self, batch):
        self.locations.load(v["location"] for _, v in batch)
        ids = {self.locations.cache[v["location"]] for _, v in batch} - {None}
        times = {v["taken_at"] for _, v in batch}
        self.found = {
            (s.location_id, s.taken_at): s
            for s in TemperatureSample.objects.filter(location_id__in=ids, taken_at__in=times)
        }

    def resolve(self, number, values):
        pk = self.locations.cache.get(values["location"])
        if pk is None:
            self.error(number, "location", _unknown_location(values["location"]))
            return None
        return {"location_id": pk}

    def existing(self, values, refs):
        return self.found.get((refs["location_id"], values["taken_at"]))


class _GearModels(_Handler):
    kind = "gear_models"

    def __init__(self, *args):
        super().__init__(*args)
        self.rise_changed = set()

    def key(self, values):
        return values["maker"], values["model_name"]

    def key_column(self):
        return "model_name"

    def describe_key(self, key):
        return f"gear model '{_gear_model_label(key)}'"

    def prepare(self, batch):
        makers = {v["maker"] for _, v in batch}
        names = {v["model_name"] for _, v in batch}
        self.found = {
            (g.maker, g.model_name): g for g in GearModel.objects.filter(maker__in=makers, model_name__in=names)
        }

    def existing(self, values, refs):
        return self.found.get((values["maker"], values["model_name"]))

    def after_write(self, created, updated, changed_fields):
        for obj, changed in zip(updated, changed_fields):
            if "internal_rise_k" in changed:
                self.rise_changed.add(obj.pk)

    def finish(self):
        if self.errors.total or not self.rise_changed:
            return
        from scheduling.thermal import thermal_rebuild

        ids = list(Unit.objects.filter(gear_model_id__in=self.rise_changed).order_by("pk")
                   .values_list("pk", flat=True))
        for start in range(0, len(ids), BATCH_SIZE):
            self.report.histories_rebuilt += thermal_rebuild(unit_ids=ids[start:start + BATCH_SIZE])


class _Positions(_Handler):
    kind = "positions"
    fk_columns = {"gear_model": "model_name"}

    def __init__(self, *args):
        super().__init__(*args)
        self.models = _GearModelLookup()
        self.partners = []  # (row, gear_model_id, designator, partner)
        self.models_with_new = set()
        self.changed_ratings = 0

    def key(self, values):
        return values["maker"], values["model_name"], values["designator"]

    def key_column(self):
        return "designator"

    def describe_key(self, key):
        return f"position {key[2]} of '{key[0]} {key[1]}'"

    def prepare(self, batch):
        self.models.load((v["maker"], v["model_name"]) for _, v in batch)
        ids = {self.models.cache[(v["maker"], v["model_name"])] for _, v in batch} - {None}
        designators = {v["designator"] for _, v in batch}
        self.found = {
            (p.gear_model_id, p.designator): p
            for p in Position.objects.filter(gear_model_id__in=ids, designator__in=designators)
        }

    def resolve(self, number, values):
        key = (values["maker"], values["model_name"])
        pk = self.models.cache.get(key)
        if pk is None:
            self.error(number, "model_name", _unknown_model(key))
            return None
        if values["pump_partner"]:
            if values["pump_partner"] == values["designator"]:
                self.error(number, "pump_partner", f"{values['designator']} cannot be its own pump partner.")
                return None
            self.partners.append((number, pk, key, values["pump_partner"]))
        return {"gear_model_id": pk}

    def existing(self, values, refs):
        return self.found.get((refs["gear_model_id"], values["designator"]))

    def after_write(self, created, updated, changed_fields):
        self.models_with_new.update(p.gear_model_id for p in created)
        self.changed_ratings += len(updated)

    def finish(self):
        if self.partners:
            ids = {p[1] for p in self.partners}
            names = {p[3] for p in self.partners}
            in_db = set(Position.objects.filter(gear_model_id__in=ids, designator__in=names)
                        .values_list("gear_model_id", "designator"))
            for number, pk, key, partner in self.partners:
                if (pk, partner) not in in_db and (key[0], key[1], partner) not in self.seen:
                    self.error(number, "pump_partner",
                               f"'{_gear_model_label(key)}' has no position {partner} (in this file or "
                               f"already imported) to pair with.")
        if self.errors.total:
            return
        if self.models_with_new and Unit.objects.filter(gear_model_id__in=self.models_with_new).exists():
            self.report.notes.append(
                "New positions were added to gear models that already have units; "
                "those units were not given the new positions."
            )
        if self.changed_ratings:
            self.report.notes.append(
                "Changed positions change the gear models' templates only; "
                "capacitors already fitted in units keep their ratings."
            )


class _Units(_Handler):
    kind = "units"
    fk_columns = {"gear_model": "model_name", "home_location": "home_location"}
    rebuild_fields = ("joined_on", "prior_powered_h_per_year", "prior_ambient_c", "prior_storage_c")

    def __init__(self, *args):
        super().__init__(*args)
        self.models = _GearModelLookup()
        self.locations = _LocationLookup()

    def key(self, values):
        return values["asset_tag"]

    def describe_key(self, key):
        return f"asset tag {key}"

    def prepare(self, batch):
        self.models.load((v["maker"], v["model_name"]) for _, v in batch)
        self.locations.load(v["home_location"] for _, v in batch)
        tags = [v["asset_tag"] for _, v in batch]
        self.found = {u.asset_tag: u for u in Unit.objects.filter(asset_tag__in=tags).select_related("gear_model")}

    def resolve(self, number, values):
        key = (values["maker"], values["model_name"])
        model_pk = self.models.cache.get(key)
        location_pk = self.locations.cache.get(values["home_location"])
        if model_pk is None:
            self.error(number, "model_name", _unknown_model(key))
        if location_pk is None:
            self.error(number, "home_location", _unknown_location(values["home_location"]))
        if model_pk is None or location_pk is None:
            return None
        return {"gear_model_id": model_pk, "home_location_id": location_pk}

    def existing(self, values, refs):
        return self.found.get(values["asset_tag"])

    def check(self, number, obj, fields, changed):
        ok = True
        out = Unit.Status.OUT
        if obj is None:
            if fields["status"] == out:
                self.error(number, "status", "a new unit cannot be 'out': import it as available and check it "
                                             "out at the rental desk.")
                ok = False
            return ok
        if "gear_model_id" in changed:
            self.error(number, "model_name",
                       f"{obj.asset_tag} is a {obj.gear_model}; an import cannot change a unit's gear model "
                       f"(its capacitors come from it).")
            ok = False
        if "year_made" in changed:
            self.error(number, "year_made",
                       f"{obj.asset_tag} was made in {obj.year_made}; an import cannot change the year of "
                       f"manufacture (its original capacitors are dated from it).")
            ok = False
        if "status" in changed and out in (obj.status, fields["status"]):
            self.error(number, "status",
                       f"{obj.asset_tag} is '{obj.status}'; the status 'out' is set only by check-out and "
                       f"check-in at the rental desk.")
            ok = False
        return ok

    def after_write(self, created, updated, changed_fields):
        from scheduling.thermal import thermal_rebuild, thermal_start

        if created:
            if any(u.pk is None for u in created):  # a database that does not return ids from bulk inserts
                pks = dict(Unit.objects.filter(asset_tag__in=[u.asset_tag for u in created])
                           .values_list("asset_tag", "pk"))
                for u in created:
                    u.pk = pks[u.asset_tag]
            self.report.capacitors_fitted += unit_populate(units=created)
            self.report.histories_started += thermal_start(unit_ids=[u.pk for u in created])
        rebuild = [obj.pk for obj, changed in zip(updated, changed_fields)
                   if set(changed) & set(self.rebuild_fields)]
        if rebuild:
            self.report.histories_rebuilt += thermal_rebuild(unit_ids=rebuild)


HANDLERS = {h.kind: h for h in (_Locations, _Samples, _GearModels, _Positions, _Units)}


def import_csv(fileobj_or_path, *, name=None, dry_run=False) -> ImportReport:
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
        return _import(f, name, dry_run)
    finally:
        if close:
            f.close()


def _import(f, name, dry_run):
    reader = csv.reader(_lines(f, name))
    header = _read_header(reader, name)
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
            number = 1
            try:
                for number, cells in enumerate(reader, start=2):
                    if not any(c.strip() for c in cells):
                        continue  # a blank line, or a row of empty cells from a spreadsheet
                    report.rows += 1
                    if len(cells) != width:
                        if len(cells) > width and not any(c.strip() for c in cells[width:]):
                            cells = cells[:width]
                        else:
                            handler.error(number, None, f"the row has {len(cells)} cells, but the header has "
                                                        f"{width} columns.")
                            continue
                    values = handler.parse(number, cells, index)
                    if values is None or not handler.check_duplicate(number, values):
                        continue
                    batch.append((number, values))
                    if len(batch) >= BATCH_SIZE:
                        handler.flush(batch)
                        batch = []
            except _Fatal as exc:
                errors.add(str(exc))
            except csv.Error as exc:
                errors.add(f"{name}, row {number + 1} (line {reader.line_num}): {exc}")
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


# --- exporting ---------------------------------------------------------------------

def _export_rows(kind):
    """(queryset, function object -> {column: value}) for a kind."""
    if kind == "locations":
        return Location.objects.order_by("name"), {}
    if kind == "temperature_samples":
        qs = TemperatureSample.objects.select_related("location").order_by("location__name", "taken_at")
        return qs, {"location": lambda o: o.location.name}
    if kind == "gear_models":
        return GearModel.objects.order_by("maker", "model_name"), {}
    if kind == "positions":
        qs = Position.objects.select_related("gear_model").order_by("gear_model__maker", "gear_model__model_name",
                                                                    "designator")
        return qs, {"maker": lambda o: o.gear_model.maker, "model_name": lambda o: o.gear_model.model_name}
    if kind == "units":
        qs = Unit.objects.select_related("gear_model", "home_location").order_by("asset_tag")
        return qs, {"maker": lambda o: o.gear_model.maker, "model_name": lambda o: o.gear_model.model_name,
                    "home_location": lambda o: o.home_location.name}
    raise ValueError(f"Unknown kind {kind!r}: choose one of {', '.join(KINDS)}.")


def export_csv(kind, fileobj) -> int:
    """Write every record of one kind in the import format; returns the number of rows.

    ``fileobj`` is a path, a text file (open it with ``newline=""``), a binary
    file or anything with ``write(str)`` such as an ``HttpResponse``.  Rows are
    ordered by natural key; capacitance is written as its IEC 60062 code
    (``4u7``, ``n47``, ``2200u``), numbers in the shortest form that reads back exactly, times in
    UTC, so exporting and importing again gives the same values.
    """
    queryset, lookups = _export_rows(kind)
    columns = COLUMNS[kind]
    if isinstance(fileobj, (str, os.PathLike)):
        with open(fileobj, "w", encoding="utf-8", newline="") as f:
            return _write(f, columns, queryset, lookups)
    if isinstance(fileobj, (io.RawIOBase, io.BufferedIOBase)) or "b" in str(getattr(fileobj, "mode", "")):
        wrapper = io.TextIOWrapper(fileobj, encoding="utf-8", newline="", write_through=True)
        try:
            return _write(wrapper, columns, queryset, lookups)
        finally:
            wrapper.flush()
            wrapper.detach()
    return _write(fileobj, columns, queryset, lookups)


def _write(f, columns, queryset, lookups):
    writer = csv.writer(f, lineterminator="\n")
    writer.writerow([c.name for c in columns])
    count = 0
    for obj in queryset.iterator(chunk_size=BATCH_SIZE):
        row = []
        for c in columns:
            if c.name in lookups:
                row.append(lookups[c.name](obj))
            else:
                row.append(_format_cell(c, getattr(obj, c.model_field)))
        writer.writerow(row)
        count += 1
    return count
