"""A generated corpus of bad inputs against the import command, the upload page
and the desk's forms (tests/corpus.py, seeded).

The demo fleet is built once and exported; each bad file is a few of its rows
with one cell or the file's structure broken, each bad post a desk form with
one field broken.  For every one: no server error, a message naming the file,
row and column (or the line, or the form's field), nothing written (a
checksum of every register and engine table, before and after), and no file
taking longer than ``SECONDS_PER_FILE`` (a guard against hangs, not a speed
budget: ``make bench`` reports speed).  The PostgreSQL run takes a smaller
sample of the same corpus.
"""

import hashlib
import io
import pickle
import os
import time

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.core.management import CommandError, call_command
from django.db import connection
from django.test import Client
from django.urls import reverse

from fixtures.demo_fleet import build_demo_fleet
from fleet.csvio import IMPORT_ORDER, export_csv
from fleet.models import Unit
from fleet.roles import DESK, MANAGER
from scheduling.services import forecast_refresh
from tests.base import make_user
from tests.corpus import bad_csv_files, bad_desk_posts

SEED = 20261202
SECONDS_PER_FILE = 2.0
POSTGRES = os.environ.get("DATABASE_URL", "").startswith("postgres")
#: Files per path (the command and the upload page each get their own) and desk posts.
FILES = 120 if POSTGRES else 600
POSTS = 100 if POSTGRES else 300

#: The tables of the register and the engine, checksummed row by row before
#: and after each test; those an import or a desk post could write, before
#: and after each file or post.
TABLES = (
    "fleet_location", "fleet_temperaturesample", "fleet_gearmodel", "fleet_position", "fleet_unit",
    "fleet_unitcapacitor", "fleet_rental", "fleet_servicerecord", "fleet_replacedpart", "fleet_measurement",
    "scheduling_thermalhistory", "scheduling_histogramsnapshot", "scheduling_unitforecast",
)
IMPORT_WRITES = (
    "fleet_location", "fleet_temperaturesample", "fleet_gearmodel", "fleet_position", "fleet_unit",
    "fleet_unitcapacitor", "scheduling_thermalhistory", "scheduling_histogramsnapshot", "scheduling_unitforecast",
)
DESK_WRITES = ("fleet_unit", "fleet_rental", "scheduling_thermalhistory", "scheduling_histogramsnapshot",
               "scheduling_unitforecast")
_COLUMNS = {}


def checksum(tables=TABLES):
    """A digest of every row of every table in ``tables``, in id order (on
    PostgreSQL taken in the database from each row's text)."""
    digest = hashlib.sha1()
    qn = connection.ops.quote_name
    with connection.cursor() as cursor:
        for table in tables:
            if connection.vendor == "postgresql":
                cursor.execute(f"SELECT md5(coalesce(string_agg(t::text, '|' ORDER BY t.id), '')) FROM {qn(table)} t")
                digest.update(cursor.fetchone()[0].encode())
                continue
            # "+column" is the column's own value without its declared type, so no
            # converter turns each row's dates into Python objects on the way.
            if table not in _COLUMNS:
                _COLUMNS[table] = [c.name for c in connection.introspection.get_table_description(cursor, table)]
            columns = _COLUMNS[table]
            cursor.execute(f"SELECT {', '.join(f'+{qn(c)}' for c in columns)} FROM {qn(table)} ORDER BY id")
            digest.update(pickle.dumps(cursor.fetchall(), protocol=5))
    return digest.hexdigest()


@pytest.fixture(scope="module")
def demo(django_db_setup, django_db_blocker):
    """The demo fleet, built once for the module and its export; removed afterwards."""
    with django_db_blocker.unblock():
        build_demo_fleet(seed=1986)
        forecast_refresh()
        export = {}
        for kind in IMPORT_ORDER:
            out = io.StringIO()
            export_csv(kind, out)
            export[kind] = out.getvalue()
        yield export
        call_command("flush", interactive=False, verbosity=0)


def _names_the_place(bad, messages):
    """Some message names the file and the row (or line), and the column when there is one to name."""
    text = "\n".join(messages)
    for message in messages:
        if not message.startswith(bad.name):
            continue
        if bad.row is not None and f", row {bad.row}" not in message:
            continue
        if bad.line is not None and f", line {bad.line}" not in message:
            continue
        if bad.columns and not any(f"column {c}" in message or f"('{c}')" in message for c in bad.columns):
            continue
        return None
    return f"{bad.name} ({bad.how}): no message names the place:\n{text[:1500]}"


def _report(problems, done):
    assert not problems, f"{len(problems)} of {done} failed; the first ones:\n\n" + "\n\n".join(problems[:8])


def test_bad_files_through_the_command(demo, db, tmp_path):
    everything, before = checksum(), checksum(IMPORT_WRITES)
    problems = []
    files = list(bad_csv_files(demo, seed=SEED, count=FILES))
    for bad in files:
        path = tmp_path / bad.name
        path.write_bytes(bad.data)
        err = io.StringIO()
        started = time.perf_counter()
        try:
            call_command("import_fleet", str(path), stdout=io.StringIO(), stderr=err)
        except CommandError:
            pass
        except Exception as exc:  # a crash, not a refusal
            problems.append(f"{bad.name} ({bad.how}): {exc.__class__.__name__}: {exc}")
            continue
        else:
            problems.append(f"{bad.name} ({bad.how}): imported, but it is bad")
        seconds = time.perf_counter() - started
        if seconds > SECONDS_PER_FILE and len(bad.data) < 1_000_000:
            problems.append(f"{bad.name} ({bad.how}): took {seconds:.1f} s")
        problem = _names_the_place(bad, err.getvalue().splitlines())
        if problem:
            problems.append(problem)
        after = checksum(IMPORT_WRITES)
        if after != before:
            problems.append(f"{bad.name} ({bad.how}): something was written")
            before = after
    if checksum() != everything:
        problems.append("the tables changed over the run")
    _report(problems, len(files))


def test_bad_files_through_the_upload_page(demo, db):
    client = Client(raise_request_exception=False)
    client.force_login(make_user(MANAGER, username="corpus.manager"))
    everything, before = checksum(), checksum(IMPORT_WRITES)
    problems = []
    files = list(bad_csv_files(demo, seed=SEED + 1, count=FILES))
    for bad in files:
        started = time.perf_counter()
        response = client.post(reverse("csv_import"), {"files": [SimpleUploadedFile(bad.name, bad.data)]},
                               secure=True)
        seconds = time.perf_counter() - started
        after = checksum(IMPORT_WRITES)
        if after != before:
            problems.append(f"{bad.name} ({bad.how}): something was written")
            before = after
        if response.status_code != 200:
            problems.append(f"{bad.name} ({bad.how}): HTTP {response.status_code}")
            continue
        outcome = response.context["outcome"]
        if outcome is None or not outcome["failed"] or outcome["imported"]:
            problems.append(f"{bad.name} ({bad.how}): not refused: {outcome}")
            continue
        if seconds > SECONDS_PER_FILE and len(bad.data) < 1_000_000:
            problems.append(f"{bad.name} ({bad.how}): took {seconds:.1f} s")
        problem = _names_the_place(bad, outcome["failed"]["errors"])
        if problem:
            problems.append(problem)
        if "Nothing from this file was saved." not in response.content.decode():
            problems.append(f"{bad.name} ({bad.how}): the page does not say nothing was saved")
    if checksum() != everything:
        problems.append("the tables changed over the run")
    _report(problems, len(files))


def test_bad_desk_posts(demo, db):
    client = Client(raise_request_exception=False)
    client.force_login(make_user(DESK, username="corpus.desk"))
    available = list(Unit.objects.filter(status=Unit.Status.AVAILABLE).values_list("asset_tag", flat=True))
    out = list(Unit.objects.filter(status=Unit.Status.OUT).values_list("asset_tag", flat=True))
    assert available and out
    everything, before = checksum(), checksum(DESK_WRITES)
    problems = []
    posts = list(bad_desk_posts(available_tags=available, out_tags=out, seed=SEED, count=POSTS))
    for bad in posts:
        started = time.perf_counter()
        response = client.post(reverse(bad.form), bad.data, secure=True)
        seconds = time.perf_counter() - started
        after = checksum(DESK_WRITES)
        if after != before:
            problems.append(f"{bad.how}: something was written")
            before = after
        if response.status_code != 200:
            problems.append(f"{bad.how}: HTTP {response.status_code}")
            continue
        errors = response.context["form"].errors
        if bad.field not in errors:
            problems.append(f"{bad.how}: no message on {bad.field}: {dict(errors)}")
        if "Nothing was saved." not in response.content.decode():
            problems.append(f"{bad.how}: the page does not say nothing was saved")
        if seconds > SECONDS_PER_FILE:
            problems.append(f"{bad.how}: took {seconds:.1f} s")
    if checksum() != everything:
        problems.append("the tables changed over the run")
    _report(problems, len(posts))
