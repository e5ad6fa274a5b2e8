"""manage.py bench_reports: speed of the printed output on this database.

Prints figures against the budgets; checks nothing.  `make bench` runs it on
the synthetic fleet after bench_forecast.  Budgets: one service sheet of a
120-position unit within 0.3 s; a digest over 10,000 units within 10 s; a
batch of 500 sheets through a real worker process is reported (no budget).
Whatever it adds to the database (a 120-position unit, a digest, a batch) is
removed again.
"""

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError
from django.db import connection, transaction
from django.utils import timezone

from fleet.models import GearModel, Location, Position, Role, Unit
from fleet.services import unit_add
from reports.batches import batch_create, top_unit_ids
from reports.digest.content import digest_content
from reports.digest.delivery import ATTACHMENT_ROWS
from reports.digest.period import period_of
from reports.digest.render import build_message
from reports.duelist import due_list
from reports.models import SheetBatch
from reports.pdf.lists import due_list_pdf_bytes
from reports.pdf.sheet import sheet_pdf_bytes
from reports.sheets import unit_sheet
from scheduling.services import forecast_refresh

SHEET_BUDGET_S = 0.3
DIGEST_BUDGET_S = 10.0
ROOT = Path(__file__).resolve().parents[3]


class Rollback(Exception):
    pass


def _verdict(seconds, budget):
    return f"within the {budget:g} s budget" if seconds <= budget else f"OVER the {budget:g} s budget by {seconds - budget:.2f} s"


def _big_unit():
    """A made-up 120-position unit (rolled back after the timing)."""
    gm = GearModel.objects.create(maker="Bench Works", model_name="Sheet Timing 120", year_from=1980, year_to=1985,
                                  internal_rise_k=15.0, hazard_tube_hv=True)
    pump = dict(pump_input_v=5.0, pump_load_a=0.01, pump_freq_hz=5000.0, pump_switch_ohm=46.0, pump_min_rail_v=4.0)
    rows = [Position(gear_model=gm, designator="C1", role=Role.PUMP_FLYING, pump_partner="C2", capacitance_uf=10,
                     rated_voltage_v=16, rated_temp_c=85, rated_life_h=1000, esr_ohm=0.1, diameter_mm=5, length_mm=11,
                     **pump),
            Position(gear_model=gm, designator="C2", role=Role.PUMP_RESERVOIR, pump_partner="C1", capacitance_uf=10,
                     rated_voltage_v=16, rated_temp_c=85, rated_life_h=1000, esr_ohm=0.1, diameter_mm=5, length_mm=11,
                     **pump),
            Position(gear_model=gm, designator="C3", role=Role.SUPPLY_RESERVOIR, capacitance_uf=100,
                     rated_voltage_v=450, rated_temp_c=85, rated_life_h=2000, tan_delta=0.15, diameter_mm=30,
                     length_mm=45, operating_voltage_v=380, reservoir_load_a=0.05, reservoir_ripple_freq_hz=100,
                     reservoir_ripple_limit_v=20)]
    rows += [Position(gear_model=gm, designator=f"C{k}", role=Role.GENERAL, capacitance_uf=(10, 22, 47, 4.7)[k % 4],
                      rated_voltage_v=25, rated_temp_c=85, rated_life_h=1000, tan_delta=0.14, diameter_mm=5,
                      length_mm=11, operating_voltage_v=12) for k in range(4, 121)]
    Position.objects.bulk_create(rows)
    loc = Location.objects.first() or Location.objects.create(name="Bench store", constant_temp_c=20)
    unit = unit_add(asset_tag="BENCH-SHEET-120", gear_model=gm, home_location=loc, year_made=1982,
                    joined_on=timezone.localdate().replace(year=2015), serial="BW-120")
    forecast_refresh(unit_ids=[unit.pk])
    return unit


class Command(BaseCommand):
    help = "Time one 120-position service sheet, a digest over the whole fleet and a batch of sheets through a worker."

    def add_arguments(self, parser):
        parser.add_argument("--repeat", type=int, default=5, help="Runs of the sheet and digest timings.")
        parser.add_argument("--batch", type=int, default=500, help="Sheets in the worker batch (0: skip it).")

    def handle(self, *args, repeat, batch, **options):
        if repeat < 1 or batch < 0:
            raise CommandError("--repeat must be at least 1 and --batch zero or more")
        units = Unit.objects.count()
        if not units:
            raise CommandError("The database has no units; run make_fleet first.")
        load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
        self.stdout.write(f"Printed output on {units} units ({connection.vendor}); load average {load:.1f} on "
                          f"{os.cpu_count()} CPUs (wall times grow with it; CPU times much less).")
        self._sheet(repeat)
        self._digest(repeat, units)
        if batch:
            self._batch(batch)

    def _sheet(self, repeat):
        gather, draw, total, cpu = [], [], [], []
        try:
            with transaction.atomic():
                unit = _big_unit()
                for _ in range(repeat + 1):
                    c0, t0 = time.process_time(), time.perf_counter()
                    sheet = unit_sheet(unit_id=unit.pk)
                    t1 = time.perf_counter()
                    data = sheet_pdf_bytes(sheet)
                    t2 = time.perf_counter()
                    gather.append(t1 - t0), draw.append(t2 - t1), total.append(t2 - t0)
                    cpu.append(time.process_time() - c0)
                raise Rollback
        except Rollback:
            pass
        gather, draw, total, cpu = gather[1:], draw[1:], total[1:], cpu[1:]  # the first run warms caches
        med, med_cpu = statistics.median(total), statistics.median(cpu)
        self.stdout.write(f"One service sheet, 120 positions ({len(data) // 1024} KB): median {med:.3f} s "
                          f"(gather {statistics.median(gather):.3f} s, draw {statistics.median(draw):.3f} s), "
                          f"worst {max(total):.3f} s over {repeat} runs: {_verdict(med, SHEET_BUDGET_S)}; "
                          f"CPU time {med_cpu:.3f} s: {_verdict(med_cpu, SHEET_BUDGET_S)}")

    def _digest(self, repeat, units):
        content_s, pdf_s, mail_s, total, cpu = [], [], [], [], []
        period = period_of(timezone.localdate())
        for _ in range(repeat):
            c0, t0 = time.process_time(), time.perf_counter()
            content, snapshot = digest_content(period=period)
            t1 = time.perf_counter()
            pdf = due_list_pdf_bytes(due_list(limit=ATTACHMENT_ROWS))
            t2 = time.perf_counter()
            reader = type("Reader", (), {"pk": 1, "get_full_name": lambda self: "", "get_username": lambda self: "x"})()
            msg = build_message(content=content, attachment=pdf, user=reader, email="bench@example.invalid")
            size = len(msg.message().as_bytes())
            t3 = time.perf_counter()
            content_s.append(t1 - t0), pdf_s.append(t2 - t1), mail_s.append(t3 - t2), total.append(t3 - t0)
            cpu.append(time.process_time() - c0)
        best, med = min(total), statistics.median(total)
        self.stdout.write(f"Digest over {units} units: median {med:.2f} s, best {best:.2f} s (content "
                          f"{statistics.median(content_s):.2f} s, due-list PDF of {ATTACHMENT_ROWS} rows "
                          f"{statistics.median(pdf_s):.2f} s, one message {statistics.median(mail_s):.3f} s, "
                          f"{size // 1024} KB): {_verdict(med, DIGEST_BUDGET_S)}; CPU time "
                          f"{statistics.median(cpu):.2f} s")

    def _batch(self, n):
        from celery import Celery

        ids = top_unit_ids(n)
        if len(ids) < n:
            ids += list(Unit.objects.exclude(pk__in=ids).order_by("pk").values_list("pk", flat=True)[:n - len(ids)])
        folder = Path(tempfile.mkdtemp(prefix="bench-broker-"))
        queue = {sub: folder / "celery" / sub for sub in ("queue", "processed", "control")}
        for path in queue.values():
            path.mkdir(parents=True)
        db = connection.settings_dict
        url = (f"sqlite:///{db['NAME']}" if connection.vendor == "sqlite"
               else f"postgres://{db['USER']}@{db['HOST'] or '127.0.0.1'}:{db['PORT'] or 5432}/{db['NAME']}")
        env = dict(os.environ, DATABASE_URL=url, RECAP_VAR_DIR=str(folder), REDIS_URL="",
                   DJANGO_SETTINGS_MODULE="config.settings")
        with open(os.devnull, "wb") as quiet:
            worker = subprocess.Popen([sys.executable, "-m", "celery", "-A", "config", "worker", "--pool=solo",
                                       "--without-mingle", "--without-gossip", "--without-heartbeat",
                                       "--loglevel=WARNING"], cwd=ROOT, env=env, stdout=quiet, stderr=quiet)
        sender = Celery(broker="filesystem://", set_as_current=False)
        sender.conf.broker_transport_options = {"data_folder_in": str(queue["queue"]),
                                                "data_folder_out": str(queue["queue"]),
                                                "processed_folder": str(queue["processed"]),
                                                "control_folder": str(queue["control"])}
        batch = None
        try:
            batch = batch_create(unit_ids=ids, title="bench batch", enqueue=False)
            started = time.perf_counter()
            sender.send_task("reports.sheet_batch_build", args=[batch.pk])
            polls, seen = 0, set()
            while True:
                b = SheetBatch.objects.defer("pdf").get(pk=batch.pk)
                polls += 1
                seen.add(b.done)
                if b.state in (SheetBatch.State.DONE, SheetBatch.State.FAILED) or time.perf_counter() - started > 1800:
                    break
                time.sleep(0.5)
            elapsed = time.perf_counter() - started
            size = len(SheetBatch.objects.get(pk=batch.pk).pdf or b"")
            self.stdout.write(f"Batch of {len(ids)} sheets through a worker (folder broker, worker start "
                              f"included): {b.state} in {elapsed:.1f} s ({len(ids) / elapsed:.1f} sheets/s, "
                              f"{size / 1e6:.1f} MB PDF, {len(seen)} progress steps seen in {polls} polls)")
        finally:
            worker.terminate()
            worker.wait(timeout=30)
            if batch is not None:
                SheetBatch.objects.filter(pk=batch.pk).delete()
