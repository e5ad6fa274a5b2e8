"""The rules every kind of file shares: parse, key, look up, validate and
write a batch of rows (one query per table per batch)."""

from django.core.exceptions import NON_FIELD_ERRORS, ValidationError
from django.db import IntegrityError, transaction

from ..models import GearModel, Location
from .cells import _parse_cell
from .columns import COLUMNS, MODELS, _label

#: Rows per bulk write.
WRITE_BATCH = 2000
#: Longest cell read as a value (names, numbers, dates); only notes may be longer.
MAX_VALUE_CHARS = 1000


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
            if "\x00" in text:
                self.error(number, c.name, "the cell holds a NUL character (a zero byte), which is not text; "
                                           "was the file saved as CSV?")
                ok = False
                continue
            if c.type != "notes" and len(text) > MAX_VALUE_CHARS:
                self.error(number, c.name, f"the cell holds {len(text):,} characters; no {self.labels[c.name]} "
                                           f"is that long.")
                ok = False
                continue
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

    def keep_owned(self, obj, fields):
        """Put back into ``fields`` what other services own on an existing
        record (an import leaves it as it is)."""

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
        if obj is not None:
            self.keep_owned(obj, fields)
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
                self.model.objects.bulk_create(created, batch_size=WRITE_BATCH)
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
