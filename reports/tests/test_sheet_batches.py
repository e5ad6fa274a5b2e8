"""Service sheets for many units in one PDF: asked for on a page, built by the
worker (inline here), its progress readable while it runs."""

import pytest
from django.urls import reverse

from reports import batches
from reports.models import SheetBatch
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh

from .factories import TODAY, make_bench_model, make_bench_unit
from .pdftext import page_texts


@pytest.fixture
def fleet(db):
    gm = make_bench_model()
    units = [make_bench_unit(gm, tag=f"FT-{k:04d}", year_made=1979 + 3 * k, serial=f"FA-{k}") for k in range(1, 5)]
    forecast_refresh(today=TODAY)
    return units


def test_the_top_of_the_list_in_one_pdf_each_sheet_counting_its_own_pages(client, users, fleet,
                                                                         django_capture_on_commit_callbacks):
    client.force_login(users.technician)
    with django_capture_on_commit_callbacks(execute=True):
        response = client.post(reverse("sheet_batches"), {"which": "top", "top": "3"})
    batch = SheetBatch.objects.get()
    assert response.status_code == 302 and response["Location"] == reverse("sheet_batch", args=[batch.pk])
    status = client.get(reverse("sheet_batch", args=[batch.pk]) + "?format=json").json()
    assert status == {"state": "done", "percent": 100, "phase": "ready: 3 sheets", "ready": True}
    expected = list(UnitForecast.objects.filter(priority__isnull=False).order_by("priority")
                    .values_list("unit__asset_tag", flat=True)[:3])
    pdf = client.get(reverse("sheet_batch_pdf", args=[batch.pk]))
    assert pdf["Content-Type"] == "application/pdf"
    texts = page_texts(pdf.content)
    starts = [i for i, t in enumerate(texts) if "page 1 of" in t]
    assert len(starts) == 3
    for k, (first, tag) in enumerate(zip(starts, expected)):
        end = starts[k + 1] if k + 1 < len(starts) else len(texts)
        m = end - first
        for n in range(1, m + 1):
            assert f"{tag} · Fennick Audio Works Tallow 120" in texts[first + n - 1]
            assert f"page {n} of {m}" in texts[first + n - 1]


def test_chosen_units_in_the_order_given_and_unknown_tags_refused(client, users, fleet,
                                                                 django_capture_on_commit_callbacks):
    client.force_login(users.manager)
    bad = client.post(reverse("sheet_batches"), {"which": "tags", "tags": "FT-0002, NOPE-1 nope-2"})
    assert bad.status_code == 400 and "No unit has the asset tags NOPE-1, NOPE-2." in bad.content.decode()
    assert not SheetBatch.objects.exists()
    with django_capture_on_commit_callbacks(execute=True):
        client.post(reverse("sheet_batches"), {"which": "tags", "tags": "ft-0004\nFT-0002 FT-0004"})
    batch = SheetBatch.objects.get()
    assert batch.unit_ids == [fleet[3].pk, fleet[1].pk]
    texts = page_texts(bytes(batch.pdf))
    firsts = [t for t in texts if "page 1 of" in t]
    assert [t.split(" · ")[0].strip().splitlines()[-1] for t in firsts] == ["FT-0004", "FT-0002"]


def test_a_second_delivery_of_the_task_does_nothing(fleet):
    batch = batches.batch_create(unit_ids=[u.pk for u in fleet[:2]], title="two", enqueue=False)
    assert batches.batch_build(batch.pk) == "done"
    first = bytes(SheetBatch.objects.get(pk=batch.pk).pdf)
    assert batches.batch_build(batch.pk) == "done"
    assert bytes(SheetBatch.objects.get(pk=batch.pk).pdf) == first


def test_progress_is_written_while_it_runs(fleet, monkeypatch):
    seen = []
    real = batches.unit_sheet

    def watching(**kw):
        seen.append(SheetBatch.objects.get().done)
        return real(**kw)

    monkeypatch.setattr(batches, "unit_sheet", watching)
    batch = batches.batch_create(unit_ids=[u.pk for u in fleet], title="four", enqueue=False)
    batches.batch_build(batch.pk)
    assert seen == [0, 1, 2, 3], "written after each of the units gathered"
    done = SheetBatch.objects.get(pk=batch.pk)
    assert (done.state, done.done, done.total, done.percent) == ("done", 8, 8, 100)


def test_limits_and_access(client, users, fleet):
    with pytest.raises(batches.BatchError, match="at most 500"):
        batches.batch_create(unit_ids=range(1, 502), title="too many", enqueue=False)
    client.force_login(users.desk)
    assert client.get(reverse("sheet_batches")).status_code == 403
    client.force_login(users.technician)
    assert client.get(reverse("sheet_batch_pdf", args=[999])).status_code == 404


def test_a_database_hiccup_queues_the_batch_again_for_the_retry(fleet, monkeypatch):
    from django.db import OperationalError

    batch = batches.batch_create(unit_ids=[u.pk for u in fleet[:2]], title="two", enqueue=False)
    real = batches.unit_sheet
    calls = {"n": 0}

    def flaky(**kw):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OperationalError("database is locked")
        return real(**kw)

    monkeypatch.setattr(batches, "unit_sheet", flaky)
    with pytest.raises(OperationalError):
        batches.batch_build(batch.pk)
    assert SheetBatch.objects.get(pk=batch.pk).state == "queued"
    assert batches.batch_build(batch.pk) == "done", "the retry finishes it"


def test_a_failure_is_shown_on_the_batch(fleet, monkeypatch):
    batch = batches.batch_create(unit_ids=[fleet[0].pk], title="one", enqueue=False)
    monkeypatch.setattr(batches, "batch_pdf_bytes", lambda *a, **k: (_ for _ in ()).throw(RuntimeError("no room")))
    with pytest.raises(RuntimeError):
        batches.batch_build(batch.pk)
    failed = SheetBatch.objects.get(pk=batch.pk)
    assert failed.state == "failed" and failed.error == "RuntimeError: no room"
