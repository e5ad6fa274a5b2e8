"""Histograms and packs stored compressed (scheduling/histogram.py, parts.py,
recent.py).  The histograms already stored are written again in the new form
here (the old form would still read, but a fleet's read would not get
faster); the packs of the old layout would read as missing, so every pack is
marked for packing again (the next sync writes them).  On PostgreSQL a history row now
fits well within a page: it is kept in the table itself up to a page's
size instead of its blobs going out to the TOAST table."""

import lz4.block
from django.db import migrations

#: The forms histogram.py reads: the 191 float64 bins as they are, and the
#: tag then the bins as an lz4 block (without its size).
RAW_BYTES = 191 * 8
TAG = b"HZ1"
CHUNK = 2000


def _compressed(blob):
    blob = bytes(blob)
    if len(blob) != RAW_BYTES:
        return blob  # already compressed
    new = TAG + lz4.block.compress(blob, store_size=False)
    return new if len(new) != RAW_BYTES else blob


def compress_histograms(apps, schema_editor):
    for name in ("ThermalHistory", "HistogramSnapshot"):
        model = apps.get_model("scheduling", name)
        ids = list(model.objects.order_by("pk").values_list("pk", flat=True))
        for start in range(0, len(ids), CHUNK):
            rows = list(model.objects.filter(pk__in=ids[start:start + CHUNK]).only("pk", "powered", "unpowered"))
            for row in rows:
                row.powered, row.unpowered = _compressed(row.powered), _compressed(row.unpowered)
            model.objects.bulk_update(rows, ["powered", "unpowered"], batch_size=500)


def mark_packs_stale(apps, schema_editor):
    apps.get_model("scheduling", "ThermalHistory").objects.update(parts_version=-1)


def keep_rows_in_the_table(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute("ALTER TABLE scheduling_thermalhistory SET (toast_tuple_target = 8160)")


def toast_as_before(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute("ALTER TABLE scheduling_thermalhistory RESET (toast_tuple_target)")


class Migration(migrations.Migration):

    dependencies = [
        ("scheduling", "0009_reasons_as_json_text"),
    ]

    operations = [
        # first: a table with pending row changes cannot be altered
        migrations.RunPython(keep_rows_in_the_table, toast_as_before),
        migrations.RunPython(compress_histograms, migrations.RunPython.noop),
        migrations.RunPython(mark_packs_stale, mark_packs_stale),
    ]
