"""Exporting the register in the import format."""

import csv
import io
import os

from ..models import GearModel, Location, Position, TemperatureSample, Unit
from .cells import _format_cell, guard_formula
from .columns import COLUMNS, KINDS

#: Rows fetched from the database at a time.
CHUNK_ROWS = 2000


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
    for obj in queryset.iterator(chunk_size=CHUNK_ROWS):
        row = []
        for c in columns:
            if c.name in lookups:
                row.append(guard_formula(lookups[c.name](obj)))
            else:
                row.append(_format_cell(c, getattr(obj, c.model_field)))
        writer.writerow(row)
        count += 1
    return count
