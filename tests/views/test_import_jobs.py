"""Large uploads run as a background job with a page of their own.

A very large file used to keep the web worker past its timeout (a 500 when
the worker was killed).  Now an upload above RECAP_IMPORT_INLINE_BYTES is
stored and imported by the background worker (run inline in the tests); the
job page shows how far it got and then the result.  Above
RECAP_UPLOAD_MAX_BYTES the page refuses it and points to the command.
"""

import pytest
from django.core.cache import cache
from django.urls import reverse

from fleet import csvio
from fleet.models import Location, TemperatureSample
from front import imports
from front.models import ImportJob, ImportJobFile
from front.tasks import import_job_run
from tests.views.test_csv_import import LOCATIONS_HEADER, csv_file, good_locations

URL = reverse("csv_import")


@pytest.fixture
def small_inline(settings):
    settings.RECAP_IMPORT_INLINE_BYTES = 10  # every upload here counts as large


def samples(rows):
    lines = "".join(f"Rear Store,2024-01-{1 + k // 24:02d}T{k % 24:02d}:00:00Z,{15 + k % 7}\n" for k in range(rows))
    return csv_file("temperature_samples.csv", "location,taken_at,temp_c\n" + lines)


def test_a_large_upload_becomes_a_job_that_the_worker_imports(client, users, small_inline,
                                                                django_capture_on_commit_callbacks):
    client.force_login(users.manager)
    with django_capture_on_commit_callbacks(execute=True):
        response = client.post(URL, {"files": [samples(30), good_locations()]})
    job = ImportJob.objects.get()
    assert response.status_code == 302 and response["Location"] == reverse("import_job", args=[job.pk])
    assert job.state == ImportJob.State.DONE and job.created_by == users.manager
    assert [r["name"] for r in job.outcome["imported"]] == ["locations.csv", "temperature_samples.csv"]
    assert TemperatureSample.objects.count() == 30 and Location.objects.count() == 2
    assert not ImportJobFile.objects.exists()  # the bytes go once the job is done
    page = client.get(response["Location"])
    text = page.content.decode()
    assert "All files imported" in text and "30 created" in text
    assert 'http-equiv="refresh"' not in text
    assert reverse("import_job", args=[job.pk]) in client.get(URL).content.decode()


def test_a_refused_file_in_a_job_says_why_and_saves_nothing_of_it(client, users, small_inline,
                                                                   django_capture_on_commit_callbacks):
    client.force_login(users.manager)
    bad = csv_file("locations.csv", LOCATIONS_HEADER + "Rear Store,store,constant,18,,\nAttic,store,constant,x,,\n")
    with django_capture_on_commit_callbacks(execute=True):
        client.post(URL, {"files": [bad]})
    job = ImportJob.objects.get()
    assert job.state == ImportJob.State.FAILED
    assert job.outcome["failed"]["errors"] == [
        "locations.csv, row 3, column constant_temp_c: 'x' is not a temperature: write 85, 85C, 85 °C or 85 degC."]
    assert not Location.objects.exists()
    text = client.get(reverse("import_job", args=[job.pk])).content.decode()
    assert "Import stopped at locations.csv" in text and "Nothing from this file was saved." in text


def test_a_waiting_or_running_job_shows_how_far_it_got_and_looks_again(client, users, small_inline):
    client.force_login(users.manager)
    response = client.post(URL, {"files": [samples(5)]})  # queued: the worker has not run (no commit here)
    job = ImportJob.objects.get()
    text = client.get(response["Location"]).content.decode()
    assert job.state == ImportJob.State.QUEUED
    assert "Waiting for the background worker" in text and 'http-equiv="refresh" content="3"' in text
    assert "temperature_samples.csv" in text
    ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.RUNNING, current_file="temperature_samples.csv")
    cache.set(imports._progress_key(job.pk), 4000, 60)
    text = client.get(response["Location"]).content.decode()
    assert "Importing <strong>temperature_samples.csv</strong> (0 of 1 files done): 4000 rows read so far" in text


def test_the_importer_reports_rows_read_after_each_batch(db, tmp_path, monkeypatch):
    monkeypatch.setattr("fleet.csvio.importer.BATCH_SIZE", 10)
    Location.objects.create(name="Rear Store", constant_temp_c=18)
    path = tmp_path / "temperature_samples.csv"
    path.write_bytes(samples(35).read())
    seen = []
    csvio.import_csv(path, progress=seen.append)
    assert seen == [10, 20, 30]


def test_running_the_job_twice_imports_once(client, users, small_inline, django_capture_on_commit_callbacks):
    client.force_login(users.manager)
    with django_capture_on_commit_callbacks(execute=True):
        client.post(URL, {"files": [good_locations()]})
    job = ImportJob.objects.get()
    finished = job.finished_at
    assert import_job_run.delay(job.pk).get() == {"state": "done"}
    job.refresh_from_db()
    assert job.finished_at == finished
    with pytest.raises(ValueError, match="job_id must be a positive whole number"):
        import_job_run.delay("1; DROP")


def test_an_upload_above_the_page_limit_points_to_the_command(client, users, settings):
    settings.RECAP_UPLOAD_MAX_BYTES = 100
    client.force_login(users.manager)
    response = client.post(URL, {"files": [samples(20)]})
    assert response.status_code == 200
    errors = response.context["form"].errors["files"]
    assert "the largest file this page takes is 0 MB" in errors[0]
    assert "python manage.py import_fleet FILE..." in errors[0]
    assert not ImportJob.objects.exists() and not TemperatureSample.objects.exists()
