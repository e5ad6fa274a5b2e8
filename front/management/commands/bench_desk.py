"""manage.py bench_desk: the desk's check-in through the real web server.

Starts gunicorn on a spare port against this command's database, signs in
as the desk user ``bench-desk`` over HTTP (the CSRF cookie and token, the
sign-in form), and for each of ``--units`` units checks it out and then in
through the forms, timing the check-in from the POST to its answer, the
verdict page (read whole).  Prints p50, p95 and max, the same check-ins as
the server itself timed them (gunicorn's access log), the machine's load
and speed (``bench_record.yardstick_ms``), and the queries of one more
check-in counted in this process through Django's test client; records ``checkin_p50_ms_<vendor>``,
``checkin_p95_ms_<vendor>``, ``checkin_queries_<vendor>`` and
``checkin_yardstick_ms_<vendor>`` (vendor
``sqlite`` or ``postgres``) in ``var/bench.json``.  Checks nothing: the
budget (p95 under 50 ms at 10,000 units) is read from the figures.

It writes real hires to this database: run it on a benchmark database
(``make_fleet``).  The units the check-ins put on hold (the synthetic fleet's
units are all due for a recap) are made available again at the end, and the
fleet's priorities renumbered (and, on PostgreSQL without autovacuum, the
forecast table vacuumed once its old row versions pass autovacuum's
threshold, as the worker would), so the next run finds the fleet as it was.
"""

import datetime as dt
import http.cookiejar
import os
import re
import secrets
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.parse
import urllib.request
import warnings
from unittest import mock
from pathlib import Path

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.hashers import PBKDF2PasswordHasher
from django.core.management.base import BaseCommand, CommandError
from django.db import connection
from django.test import Client
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Rental, Unit
from fleet.roles import DESK, ensure_groups
from scheduling import bench_record
from scheduling import services as scheduling_services
from scheduling.models import ThermalHistory, UnitForecast
from scheduling.batches import fleet_finish

#: The budget the figures are read against [ms].
P95_BUDGET_MS = 50.0
#: Job references of the bench's hires (and how the bench finds them again).
JOB_PREFIX = "BENCH-DESK"
USERNAME = "bench-desk"


def _vendor():
    return "postgres" if connection.vendor == "postgresql" else connection.vendor


def database_url():
    """This process's database as an address for the server (the test
    database too, when a test runs the command)."""
    db = connection.settings_dict
    if connection.vendor == "sqlite":
        return f"sqlite:///{db['NAME']}"
    if connection.vendor != "postgresql":
        raise CommandError(f"bench_desk runs on SQLite or PostgreSQL, not {connection.vendor}.")
    quote = urllib.parse.quote
    auth = quote(db.get("USER") or "", safe="")
    if db.get("PASSWORD"):
        auth += ":" + quote(db["PASSWORD"], safe="")
    host = db.get("HOST") or "localhost"
    port = f":{db['PORT']}" if db.get("PORT") else ""
    return f"postgres://{auth}{'@' if auth else ''}{host}{port}/{quote(db['NAME'], safe='')}"


def _spare_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _desk_user():
    User = get_user_model()
    user = User.objects.filter(username=USERNAME).first()
    if user is None:
        user = User.objects.create_user(username=USERNAME, password=None)
    user.groups.add(ensure_groups()[DESK])
    password = secrets.token_urlsafe(18)
    # Hashed with Django's default hasher, which the server accepts whatever
    # this process was given (the test suite's settings use a faster one).
    hasher = PBKDF2PasswordHasher()
    user.password = hasher.encode(password, hasher.salt())
    user.is_active = True
    user.save(update_fields=["password", "is_active"])
    return user, password


def _units(n):
    """``n`` available units with their check-out moment: after the end of
    their thermal history (the check-in then adds the hire to it, as on a
    real day) and no earlier than six hours ago."""
    now = timezone.now()
    ids = list(Unit.objects.filter(status=Unit.Status.AVAILABLE).order_by("pk").values_list("pk", flat=True)[:n])
    until = dict(ThermalHistory.objects.filter(unit_id__in=ids).values_list("unit_id", "accounted_until"))
    last_in = {}
    for unit_id, in_at in Rental.objects.filter(unit_id__in=ids, in_at__isnull=False).order_by("in_at") \
            .values_list("unit_id", "in_at"):
        last_in[unit_id] = in_at
    tags = dict(Unit.objects.filter(pk__in=ids).values_list("pk", "asset_tag"))
    starts = {unit_id: max(d for d in (until.get(unit_id), last_in.get(unit_id), now - dt.timedelta(hours=6))
                           if d is not None).replace(microsecond=0) + dt.timedelta(seconds=1) for unit_id in ids}
    latest = max(starts.values(), default=now)
    if latest > now + dt.timedelta(seconds=60):
        raise CommandError(f"A unit's history or last hire ends at {latest:%Y-%m-%d %H:%M}, in the future; "
                           "bench_desk needs a fleet whose records end by now.")
    if latest > now - dt.timedelta(seconds=2):
        # A run just before this one returned these units a moment ago: the
        # hires must start after that, and the check-ins come after them.
        time.sleep((latest - now).total_seconds() + 2)
    return [(unit_id, tags[unit_id], starts[unit_id]) for unit_id in ids]


class _Browser:
    """A desk clerk's browser: cookies, the CSRF token, forms."""

    def __init__(self, base):
        self.base = base
        self.jar = http.cookiejar.CookieJar()
        self.opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(self.jar))

    def csrf(self):
        for cookie in self.jar:
            if cookie.name == settings.CSRF_COOKIE_NAME:
                return cookie.value
        raise CommandError("The server set no CSRF cookie.")

    def get(self, path):
        with self.opener.open(self.base + path, timeout=60) as response:
            return response.geturl(), response.read().decode("utf-8", "replace")

    def post(self, path, fields):
        data = urllib.parse.urlencode({**fields, "csrfmiddlewaretoken": self.csrf()}).encode()
        request = urllib.request.Request(self.base + path, data=data, headers={"Referer": self.base + path})
        try:
            with self.opener.open(request, timeout=60) as response:
                return response.geturl(), response.read().decode("utf-8", "replace")
        except urllib.error.HTTPError as exc:
            raise CommandError(f"POST {path} answered {exc.code}: {exc.read()[:300]!r}") from None


def _errors(html):
    found = re.findall(r'class="[^"]*error[^"]*"[^>]*>(.*?)<', html, re.S)
    return "; ".join(" ".join(f.split()) for f in found if f.strip())[:300] or "no message"


def _moment(when):
    return timezone.localtime(when).strftime("%Y-%m-%dT%H:%M:%S")


def _served_ms(log_path, path):
    """The server's own time [ms] of each POST to ``path`` in gunicorn's access
    log (``%(D)s``, microseconds), in order; [] when the log is missing."""
    try:
        lines = Path(log_path).read_text(errors="replace").splitlines()
    except OSError:
        return []
    served = []
    for line in lines:
        parts = line.split()
        if len(parts) == 4 and parts[0] == "POST" and parts[1] == path and parts[3].isdigit():
            served.append(int(parts[3]) / 1000.0)
    return served


def _p95(times):
    ordered = sorted(times)
    return ordered[min(len(ordered) - 1, int(round(0.95 * (len(ordered) - 1))))]


class Command(BaseCommand):
    help = "Time the desk's check-in (POST to verdict) through gunicorn: p50, p95, max, queries."

    def add_arguments(self, parser):
        parser.add_argument("--units", type=int, default=200, help="Units checked out and in, timed (default 200).")
        parser.add_argument("--warmup", type=int, default=5,
                            help="Check-ins before the timed ones, not counted (default 5).")
        parser.add_argument("--workers", type=int, default=2, help="gunicorn worker processes (default 2).")
        parser.add_argument("--in-process", type=int, default=10,
                            help="Units checked in through the test client in this process after the server's: the "
                                 "first counts the queries, the rest say where the time goes (default 10).")

    def handle(self, *args, **options):
        self.verbosity = options["verbosity"]
        n, warmup = options["units"], options["warmup"]
        if n < 1 or warmup < 0 or options["workers"] < 1:
            raise CommandError("--units and --workers must be at least 1, --warmup at least 0.")
        total = Unit.objects.count()
        if not total:
            raise CommandError("The database has no units; run make_fleet first.")
        if options["in_process"] < 1:
            raise CommandError("--in-process must be at least 1.")
        picked = _units(warmup + n + options["in_process"])
        if len(picked) < 2:
            raise CommandError("Fewer than two units are available for hire.")
        # Through the server first; the rest (at least one) in this process.
        timed_units = picked[:min(warmup + n, len(picked) - 1)]
        local_units = picked[len(timed_units):]
        warmup = min(warmup, max(len(timed_units) - 1, 0))
        user, password = _desk_user()
        vendor = _vendor()
        # The forecast table as the run found it (PostgreSQL): its dead row
        # versions slow the count that places a held unit among the priorities.
        state, dead = bench_record.table_state(UnitForecast)
        yardstick = [bench_record.yardstick_ms()]
        port = _spare_port()
        with tempfile.TemporaryDirectory(prefix="bench-desk-") as var_dir:
            server = self._start(port, options["workers"], var_dir)
            try:
                browser = _Browser(f"http://127.0.0.1:{port}")
                self._wait(browser, server, var_dir)
                self._sign_in(browser, password)
                times, held = self._run(browser, timed_units, warmup)
            finally:
                server.terminate()
                try:
                    server.wait(timeout=20)
                except subprocess.TimeoutExpired:
                    server.kill()
                    server.wait()
            served = _served_ms(Path(var_dir) / "access.log", reverse("check_in"))[-len(times):]
        queries, verdict_queries = self._count_queries(user, local_units[0])
        stages = self._stages(user, local_units[1:]) if len(local_units) > 1 else None
        touched = [unit_id for unit_id, _, _ in picked]
        self._restore(touched)
        yardstick.append(bench_record.yardstick_ms())
        load = os.getloadavg()
        p50, p95 = statistics.median(times), _p95(times)
        verdict = "ok" if p95 < P95_BUDGET_MS else f"OVER by {100 * (p95 / P95_BUDGET_MS - 1):.0f} %"
        self.stdout.write(
            f"Check-in POST to verdict through gunicorn ({options['workers']} workers) on {total:,} units "
            f"({vendor}), {len(times)} timed after {warmup} warm-up: p50 {p50:.1f} ms, p95 {p95:.1f} ms, "
            f"max {max(times):.1f} ms (budget p95 {P95_BUDGET_MS:.0f} ms: {verdict}); {held} of them put on hold "
            f"by the forecast or a fault")
        self.stdout.write(f"Queries per check-in: {queries} for the POST with its verdict, {verdict_queries} for a "
                          f"reload of the verdict (counted in this process); load average "
                          f"{load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
        self.stdout.write(f"Machine yardstick (bench_record.yardstick_ms, a fixed pure-Python task; lower is faster): "
                          f"{yardstick[0]:.0f} ms before, {yardstick[1]:.0f} ms after")
        if len(served) == len(times):
            gap = [t - s for t, s in zip(times, served)]
            self.stdout.write(f"The same check-ins as the server timed them (gunicorn's access log, request read to "
                              f"response written): p50 {statistics.median(served):.1f} ms, p95 {_p95(served):.1f} ms; "
                              f"the rest (the client, the connection) p50 {statistics.median(gap):.1f} ms")
        if stages:
            self.stdout.write(stages)
        if state:
            self.stdout.write(f"At the start: {state}")
        bench_record.record(**{f"checkin_p50_ms_{vendor}": p50, f"checkin_p95_ms_{vendor}": p95,
                               f"checkin_queries_{vendor}": queries, f"checkin_load_{vendor}": round(load[0], 2),
                               f"checkin_yardstick_ms_{vendor}": statistics.mean(yardstick),
                               **({f"checkin_forecast_dead_rows_{vendor}": dead} if dead is not None else {})})

    def _start(self, port, workers, var_dir):
        env = {k: v for k, v in os.environ.items() if k not in ("REDIS_URL", "TEST_DATABASE_NAME")}
        env.update({
            "DATABASE_URL": database_url(), "DEBUG": "false", "RECAP_VAR_DIR": var_dir,
            "SECURE_SSL_REDIRECT": "false", "SESSION_COOKIE_SECURE": "false", "CSRF_COOKIE_SECURE": "false",
            "ALLOWED_HOSTS": "127.0.0.1", "CELERY_TASK_ALWAYS_EAGER": "false", "SECRET_KEY": settings.SECRET_KEY,
        })
        log = open(Path(var_dir) / "gunicorn.log", "wb")
        return subprocess.Popen(
            [sys.executable, "-m", "gunicorn", "-c", "python:config.gunicorn", "config.wsgi", "--bind", f"127.0.0.1:{port}",
             "--workers", str(workers), "--log-level", "warning", "--timeout", "120", "--no-control-socket",
             "--access-logfile", str(Path(var_dir) / "access.log"), "--access-logformat", "%(m)s %(U)s %(s)s %(D)s"],
            cwd=settings.BASE_DIR, env=env, stdout=log, stderr=subprocess.STDOUT)

    def _wait(self, browser, server, var_dir):
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if server.poll() is not None:
                log = (Path(var_dir) / "gunicorn.log").read_text(errors="replace")[-2000:]
                raise CommandError(f"gunicorn stopped (exit {server.returncode}):\n{log}")
            try:
                browser.get(reverse("login"))
                return
            except (urllib.error.URLError, ConnectionError, socket.timeout):
                time.sleep(0.2)
        raise CommandError("gunicorn did not answer within 60 s.")

    def _sign_in(self, browser, password):
        url, html = browser.post(reverse("login"), {"username": USERNAME, "password": password})
        if reverse("login") in urllib.parse.urlparse(url).path:
            raise CommandError(f"Could not sign in as {USERNAME}: {_errors(html)}")

    def _run(self, browser, units, warmup):
        times, held = [], 0
        for k, (unit_id, tag, out_at) in enumerate(units):
            url, html = browser.post(reverse("check_out"), {
                "asset_tag": tag, "job_ref": f"{JOB_PREFIX}-{k:05d}", "expected_ambient_c": "24",
                "out_at": _moment(out_at), "override_reason": "Benchmark hire (bench_desk)"})
            if "returned=" in url or f"{tag} checked out" not in html:
                raise CommandError(f"Check-out of {tag} was refused: {_errors(html)}")
            elapsed_h = (timezone.now() - out_at).total_seconds() / 3600.0
            fields = {"asset_tag": tag, "venue_ambient_c": "27", "in_at": "", "meter_reading_h": "",
                      "powered_hours": f"{min(4.0, 0.5 * elapsed_h):.4f}", "reported_faults": ""}
            started = time.perf_counter()
            url, html = browser.post(reverse("check_in"), fields)
            took = (time.perf_counter() - started) * 1000
            if 'class="verdict' not in html or f"{tag}: " not in html:
                raise CommandError(f"Check-in of {tag} did not reach its verdict: {_errors(html)}")
            if k >= warmup:
                times.append(took)
                held += f"{tag}: hold" in html
        return times, held

    def _count_queries(self, user, unit):
        """The queries of one check-in (the POST, which answers with the verdict;
        then the verdict's own address, as a reload asks for it) in this process."""
        from front.workflows import rental_check_out

        unit_id, tag, out_at = unit
        rental_check_out(unit_id=unit_id, job_ref=f"{JOB_PREFIX}-Q", out_at=out_at, user=user,
                         override_reason="Benchmark hire (bench_desk)")
        settings.ALLOWED_HOSTS = [*settings.ALLOWED_HOSTS, "testserver"]
        warnings.filterwarnings("ignore", message="No directory at")  # whitenoise: no collected static here
        client = Client()
        client.force_login(user)
        elapsed_h = (timezone.now() - out_at).total_seconds() / 3600.0
        # The renumbering the check-in queues for a worker after the commit
        # is not the request's work (``_restore`` does it once at the end).
        with mock.patch.object(scheduling_services, "_queue_ranking", lambda: None):
            with CaptureQueriesContext(connection) as posted:
                response = client.post(reverse("check_in"), {
                    "asset_tag": tag, "venue_ambient_c": "27", "in_at": "", "meter_reading_h": "",
                    "powered_hours": f"{min(4.0, 0.5 * elapsed_h):.4f}", "reported_faults": ""}, secure=True)
        if response.status_code != 200 or 'class="verdict' not in response.content.decode():
            raise CommandError(f"The in-process check-in of {tag} answered {response.status_code} without a verdict.")
        with CaptureQueriesContext(connection) as shown:
            client.get(response["Content-Location"], secure=True)
        if self.verbosity >= 2:  # -v 2: each query of the check-in, with its time
            for name, ctx in (("POST", posted), ("reload", shown)):
                for q in ctx.captured_queries:
                    self.stdout.write(f"  {name:12s} {float(q['time']) * 1000:6.2f} ms  {q['sql'][:150]}")
        return len(posted.captured_queries), len(shown.captured_queries)

    def _stages(self, user, units):
        """Where a check-in's time goes, in this process through the test
        client (medians over ``units``): closing the hire, the history's sync,
        the forecast (load, compute, store), the rest (session, form, hold,
        page), and the time Django's cursor waited on the database."""
        from fleet import services as register
        from front import workflows

        stages = {name: [] for name in ("post", "close", "sync", "forecast", "load", "compute", "store", "db")}

        def timed(name, fn):
            def wrapper(*args, **kwargs):
                started = time.perf_counter()
                try:
                    return fn(*args, **kwargs)
                finally:
                    stages[name][-1] += time.perf_counter() - started
            return wrapper

        def forecast(*args, **kwargs):
            run = refresh(*args, **kwargs)
            for key in ("load", "compute", "store"):
                stages[key][-1] += run.seconds.get(key, 0.0)
            return run

        def db_time(execute, sql, params, many, context):
            started = time.perf_counter()
            try:
                return execute(sql, params, many, context)
            finally:
                stages["db"][-1] += time.perf_counter() - started

        refresh = timed("forecast", workflows.forecast_refresh)
        client = Client()
        client.force_login(user)
        for k, (unit_id, tag, out_at) in enumerate(units):
            workflows.rental_check_out(unit_id=unit_id, job_ref=f"{JOB_PREFIX}-Q{k + 1}", out_at=out_at, user=user,
                                       override_reason="Benchmark hire (bench_desk)")
            elapsed_h = (timezone.now() - out_at).total_seconds() / 3600.0
            for values in stages.values():
                values.append(0.0)
            with mock.patch.object(scheduling_services, "_queue_ranking", lambda: None), \
                    mock.patch.object(register, "rental_close", timed("close", register.rental_close)), \
                    mock.patch.object(workflows, "thermal_check_in", timed("sync", workflows.thermal_check_in)), \
                    mock.patch.object(workflows, "forecast_refresh", forecast), \
                    connection.execute_wrapper(db_time):
                started = time.perf_counter()
                response = client.post(reverse("check_in"), {
                    "asset_tag": tag, "venue_ambient_c": "27", "in_at": "", "meter_reading_h": "",
                    "powered_hours": f"{min(4.0, 0.5 * elapsed_h):.4f}", "reported_faults": ""}, secure=True)
                stages["post"][-1] = time.perf_counter() - started
            if response.status_code != 200:
                raise CommandError(f"The in-process check-in of {tag} answered {response.status_code}.")
        ms = {name: statistics.median(values) * 1000 for name, values in stages.items()}
        rest = ms["post"] - ms["close"] - ms["sync"] - ms["forecast"]
        return (f"Where a check-in's time goes, in this process (medians of {len(units)}): the POST with its verdict "
                f"{ms['post']:.1f} ms: closing the hire {ms['close']:.1f}, the history's sync {ms['sync']:.1f}, the "
                f"forecast {ms['forecast']:.1f} (load {ms['load']:.1f}, compute {ms['compute']:.1f}, store "
                f"{ms['store']:.1f}), the rest (session, form, hold, page) {rest:.1f}; Django's cursor waited "
                f"{ms['db']:.1f} ms on the database (the engine's own raw reads and its upsert not counted)")

    def _restore(self, unit_ids):
        """Make the bench's units available again and do what the worker
        would have done after the check-ins (the server queued it to a worker
        this bench does not run): renumber the priorities, and on PostgreSQL
        without autovacuum vacuum the forecast table once the old row
        versions pass autovacuum's threshold (``batches.fleet_finish``)."""
        Unit.objects.filter(pk__in=unit_ids, status=Unit.Status.HOLD).update(status=Unit.Status.AVAILABLE,
                                                                              hold_reason="")
        fleet_finish()
