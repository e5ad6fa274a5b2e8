"""manage.py bench_desk: check-ins through a real gunicorn server on this
database (it times; nothing here reads the times)."""

import io
import json
import re

import pytest
from django.contrib.auth import get_user_model
from django.core.management import call_command
from django.core.management.base import CommandError

from fleet.models import Rental, Unit
from front.management.commands import bench_desk
from scheduling import bench_record
from scheduling.models import UnitForecast
from scheduling.services import forecast_refresh

pytestmark = pytest.mark.django_db(transaction=True)  # the server reads what the test wrote


@pytest.fixture
def bench_file(tmp_path, monkeypatch):
    path = tmp_path / "bench.json"
    path.write_text(json.dumps({"floor_s": 1.5}))
    monkeypatch.setattr(bench_record, "BENCH_FILE", path)
    return path


def test_it_checks_units_out_and_in_through_the_server_and_records_the_figures(bench_file):
    call_command("make_fleet", units=8, positions=6, years=1, stdout=io.StringIO())
    forecast_refresh()
    before = {u.pk: u.status for u in Unit.objects.all()}
    out = io.StringIO()
    call_command("bench_desk", units=3, warmup=1, workers=1, in_process=3, stdout=out)
    text = out.getvalue()

    vendor = "postgres" if "postgres" in text else "sqlite"
    figures = json.loads(bench_file.read_text())
    assert figures["floor_s"] == 1.5  # merged, not overwritten
    for key in (f"checkin_p50_ms_{vendor}", f"checkin_p95_ms_{vendor}", f"checkin_queries_{vendor}"):
        assert figures[key] > 0, key
    assert figures[f"checkin_p95_ms_{vendor}"] >= figures[f"checkin_p50_ms_{vendor}"]
    # The machine's speed before and after, their mean recorded.
    before_ms, after_ms = map(float, re.search(r"Machine yardstick .*: (\d+) ms before, (\d+) ms after", text).groups())
    assert figures[f"checkin_yardstick_ms_{vendor}"] == pytest.approx((before_ms + after_ms) / 2, abs=0.5)
    assert re.search(r"3 timed after 1 warm-up: p50 [\d.]+ ms, p95 [\d.]+ ms, max [\d.]+ ms", text), text
    assert re.search(rf"Queries per check-in: {figures[f'checkin_queries_{vendor}']} for the POST with its "
                     r"verdict, \d+ for a reload of the verdict", text), text

    # Where the time goes, from the two check-ins in this process after the one that counts queries.
    assert re.search(r"Where a check-in's time goes, in this process \(medians of 2\): the POST with its verdict "
                     r"[\d.]+ ms: closing the hire [\d.]+, the history's sync [\d.]+, the forecast [\d.]+ "
                     r"\(load [\d.]+, compute [\d.]+, store [\d.]+\)", text), text
    assert "budget p95 50 ms: " in text
    # The server's own time of the same three check-ins, from gunicorn's access log: no more than the client's.
    served = re.search(r"The same check-ins as the server timed them .*: p50 ([\d.]+) ms, p95 ([\d.]+) ms; the rest "
                       r"\(the client, the connection\) p50 (-?[\d.]+) ms", text)
    assert served, text
    assert 0 < float(served[1]) <= figures[f"checkin_p50_ms_{vendor}"] + 0.1

    # The server did the work: four hires through it (one warm-up, three timed) and three in this
    # process, each checked out and back in by the desk user, each with its refreshed forecast.
    desk = get_user_model().objects.get(username=bench_desk.USERNAME)
    hires = Rental.objects.filter(job_ref__startswith=bench_desk.JOB_PREFIX)
    assert hires.count() == 7
    assert not hires.filter(in_at__isnull=True).exists()
    assert set(hires.values_list("checked_in_by", flat=True)) == {desk.pk}
    assert set(hires.values_list("checked_out_by", flat=True)) == {desk.pk}
    through_server = hires.exclude(job_ref__startswith=f"{bench_desk.JOB_PREFIX}-Q")
    assert sorted(hires.filter(job_ref__startswith=f"{bench_desk.JOB_PREFIX}-Q").values_list("job_ref", flat=True)) \
        == [f"{bench_desk.JOB_PREFIX}-Q", f"{bench_desk.JOB_PREFIX}-Q1", f"{bench_desk.JOB_PREFIX}-Q2"]
    assert sorted(through_server.values_list("job_ref", flat=True)) == [
        f"{bench_desk.JOB_PREFIX}-{k:05d}" for k in range(4)]
    for hire in hires:
        assert UnitForecast.objects.get(unit_id=hire.unit_id).computed_at >= hire.in_at
    # The units are left as they were found: available, none out.
    assert {u.pk: u.status for u in Unit.objects.all()} == before


def test_the_server_times_are_read_from_the_access_log_in_order(tmp_path):
    log = tmp_path / "access.log"
    log.write_text("GET /desk/check-in/ 200 900\nPOST /desk/check-out/ 302 5000\nPOST /desk/check-in/ 200 41500\n"
                   "POST /desk/check-in/ 200 38250\nnot a line of ours\n")
    assert bench_desk._served_ms(log, "/desk/check-in/") == [41.5, 38.25]
    assert bench_desk._served_ms(tmp_path / "missing.log", "/desk/check-in/") == []


def test_it_refuses_an_empty_database(bench_file):
    with pytest.raises(CommandError, match="no units"):
        call_command("bench_desk", units=2, stdout=io.StringIO())
