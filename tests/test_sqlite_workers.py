"""Several web workers on one SQLite file: writers queue, nothing is a server error.

Four gunicorn worker processes serve the test database; eight clients check
units out and in at once.  Every transaction takes the write lock when it
begins (BEGIN IMMEDIATE) and waits for it (the busy timeout), so the desk's
writes queue instead of failing with "database is locked"; a write that still
cannot get the lock would answer 503 "try again".  Each hire is counted once.
(The same race on PostgreSQL is the threaded test in test_concurrency.py.)
"""

import http.cookiejar
import os
import re
import socket
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path

import pytest
from django.db import connection
from django.test import Client

from fleet.models import GearModel, Position, Rental
from tests.base import make_location, make_unit, make_user

ROOT = Path(__file__).resolve().parent.parent
WORKERS = 4
UNITS = 4
CLIENTS_PER_UNIT = 2
ROUNDS = 6


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Desk:
    """One browser at the desk: its own cookies, CSRF token from the form page."""

    def __init__(self, base, session_key):
        self.base = base
        self.jar = http.cookiejar.CookieJar()
        self.opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(self.jar),
                                                  _NoRedirect())
        self.session_key = session_key

    def request(self, path, data=None):
        body = urllib.parse.urlencode(data).encode() if data is not None else None
        req = urllib.request.Request(self.base + path, data=body)
        req.add_header("Cookie", f"sessionid={self.session_key}" + "".join(
            f"; {c.name}={c.value}" for c in self.jar if c.name == "csrftoken"))
        try:
            with self.opener.open(req, timeout=60) as response:
                return response.status, response.read().decode()
        except urllib.error.HTTPError as exc:
            return exc.code, exc.read().decode()

    def post_form(self, path, fields):
        status, page = self.request(path)
        assert status == 200, page[:500]
        token = re.search(r'name="csrfmiddlewaretoken" value="([^"]+)"', page).group(1)
        return self.request(path, {"csrfmiddlewaretoken": token, **fields})


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


@pytest.mark.skipif(connection.vendor != "sqlite", reason="SQLite's write lock; PostgreSQL has its own test")
@pytest.mark.django_db(transaction=True)
def test_four_web_workers_queue_their_writes_and_never_answer_500():
    name = connection.settings_dict["NAME"]
    if name.startswith(("file:", ":memory:")):
        pytest.skip("the workers need a file database")
    # Young units with one sound part: no forecast holds them after a check-in, so every round can go out again.
    location = make_location()
    model = GearModel.objects.create(maker="Brindle Acoustics", model_name="Pocket 1", year_from=2014, year_to=2016,
                                     internal_rise_k=8)
    Position.objects.create(gear_model=model, designator="C1", capacitance_uf=47, rated_voltage_v=25,
                            rated_temp_c=105, rated_life_h=5000, esr_ohm=0.8, diameter_mm=6.3, length_mm=11)
    units = [make_unit(model, location, asset_tag=f"PKT-{k:04d}", serial=f"S-{k}", year_made=2014)
             for k in range(1, UNITS + 1)]
    desk = make_user("desk", username="dora.desk")
    client = Client()
    client.force_login(desk)
    session_key = client.cookies["sessionid"].value

    port = _free_port()
    env = dict(os.environ, DATABASE_URL=f"sqlite:///{name}", DJANGO_SETTINGS_MODULE="config.settings",
               SECURE_SSL_REDIRECT="false", SESSION_COOKIE_SECURE="false", CSRF_COOKIE_SECURE="false",
               DEBUG="false", ALLOWED_HOSTS="127.0.0.1", LOG_LEVEL="ERROR")
    server = subprocess.Popen(
        [sys.executable, "-m", "gunicorn", "config.wsgi", "--bind", f"127.0.0.1:{port}", "--workers", str(WORKERS),
         "--timeout", "60", "--log-level", "warning"],
        cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    try:
        for _ in range(200):
            try:
                with socket.create_connection(("127.0.0.1", port), timeout=0.2):
                    break
            except OSError:
                time.sleep(0.1)
        statuses, problems = [], []
        lock = threading.Lock()

        def desk_at(unit, first):
            d = Desk(base, session_key)
            for k in range(ROUNDS):
                # Two clients per unit race each other: the loser of a round gets the form's message.
                s1, p1 = d.post_form("/desk/check-out/", {"asset_tag": unit.asset_tag, "job_ref": f"J{k}-{first}",
                                                          "expected_ambient_c": "24"})
                s2, p2 = d.post_form("/desk/check-in/", {"asset_tag": unit.asset_tag, "venue_ambient_c": "25",
                                                         "powered_hours": "0", "reported_faults": ""})
                with lock:
                    statuses.extend([s1, s2])
                    for s, p in ((s1, p1), (s2, p2)):
                        if s >= 500 and s != 503:
                            problems.append(p[-2000:])

        threads = [threading.Thread(target=desk_at, args=(u, j)) for u in units for j in range(CLIENTS_PER_UNIT)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=300)
    finally:
        server.terminate()
        try:
            out, _ = server.communicate(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
            out, _ = server.communicate()
    assert not problems, problems[0]
    assert len(statuses) == UNITS * CLIENTS_PER_UNIT * ROUNDS * 2
    assert all(s in (200, 302) for s in statuses), sorted(set(statuses))  # writers queued: none was turned away
    assert b"database is locked" not in out, out.decode()[-3000:]
    # Every hire is closed once: no hire left half-written, hours counted once per closed hire.
    for unit in units:
        hires = Rental.objects.filter(unit=unit)
        closed = hires.filter(in_at__isnull=False)
        assert hires.filter(in_at__isnull=True).count() <= 1
        assert all(h.powered_hours == 0.0 for h in closed)
    print(f"{len(statuses)} requests: {statuses.count(302)} saved, {statuses.count(200)} refused with a form "
          f"message, {statuses.count(503)} busy; {Rental.objects.filter(in_at__isnull=False).count()} hires closed")
