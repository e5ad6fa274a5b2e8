"""The digest end to end through a real Celery worker process on a real Redis
broker (integration; needs TEST_REDIS_URL): into the file mail backend, once
per subscriber under a second tick and a retried task; through a failing SMTP
server, retried and delivered once; and with a worker killed in the middle of
a send, delivered once by the next worker."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import redis
from celery import Celery
from django.db import connection
from django.urls import reverse

from reports.digest.render import user_from_token
from reports.models import DigestDelivery, DigestSubscription
from reports.tests.mailbox import SmtpServer, parts, read_mail_folder

from .digest_world import make_digest_world

ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.redis


def _database_url():
    s = connection.settings_dict
    if connection.vendor == "sqlite":
        return f"sqlite:///{s['NAME']}"
    return f"postgres://{s['USER']}@{s['HOST'] or '127.0.0.1'}:{s['PORT'] or 5432}/{s['NAME']}"


class Worker:
    """A solo worker process on the test database and the test Redis."""

    def __init__(self, redis_url, var_dir, **env):
        self.env = dict(os.environ, REDIS_URL=redis_url, DATABASE_URL=_database_url(),
                        DJANGO_SETTINGS_MODULE="config.settings", RECAP_VAR_DIR=str(var_dir),
                        RECAP_DIGEST_RETRY_BASE_SECONDS="1", RECAP_DIGEST_LEASE_SECONDS="3")
        self.env.update(env)
        self.proc = None

    def start(self):
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "celery", "-A", "config", "worker", "--pool=solo", "--without-mingle",
             "--without-gossip", "--without-heartbeat", "--loglevel=WARNING", "-n", f"digest-{os.getpid()}-%h-{id(self)}"],
            cwd=ROOT, env=self.env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        return self

    def kill(self):
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(timeout=20)

    def stop(self):
        if self.proc and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.proc.kill()


@pytest.fixture
def world(transactional_db, redis_url):
    if connection.vendor == "sqlite" and connection.settings_dict["NAME"].startswith(("file:", ":memory:")):
        pytest.skip("the worker needs a file database")
    redis.Redis.from_url(redis_url).flushdb()  # the test Redis database is ours alone
    return make_digest_world()


@pytest.fixture
def client_app(redis_url):
    return Celery(broker=redis_url, backend=redis_url, set_as_current=False)


def wait_for(check, timeout=60, what="the worker"):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if check():
            return
        time.sleep(0.2)
    raise AssertionError(f"timed out waiting for {what}")


def all_sent(n):
    return lambda: DigestDelivery.objects.filter(state=DigestDelivery.State.SENT).count() == n


def test_a_worker_sends_the_digest_once_per_subscriber(world, redis_url, client_app, tmp_path, client):
    worker = Worker(redis_url, tmp_path).start()
    try:
        summary = client_app.send_task("reports.digest_send").get(timeout=90)
        assert summary["prepared"] and summary["queued"] == 2
        wait_for(all_sent(2), what="both deliveries")
        # a second beat tick and a retried task change nothing
        again = client_app.send_task("reports.digest_send").get(timeout=60)
        assert again["queued"] == 0 and not again["prepared"]
        one = DigestDelivery.objects.first()
        assert client_app.send_task("reports.digest_deliver", args=[one.pk]).get(timeout=60) == "skipped"
    finally:
        worker.stop()
    mails = read_mail_folder(tmp_path / "mail")
    assert sorted(m["To"] for m in mails) == sorted(u.email for u in world.subscribers)
    for m in mails:
        found = parts(m)
        assert m["Subject"].startswith(f"Recap digest {world.period}: ")
        assert {"text/plain", "text/html", "application/pdf"} <= set(found)
        assert "TOP OF THE TRIAGE LIST" in found["text/plain"] and "Top of the triage list" in found["text/html"]
        assert found["application/pdf"].startswith(b"%PDF")
        assert "µF" in found["text/plain"] and "µF" in found["text/html"]
        link = next(line.split(": ", 1)[1] for line in found["text/plain"].splitlines()
                    if line.startswith("Unsubscribe: "))
        token = link.rstrip("/").rsplit("/", 1)[1]
        recipient = next(u for u in world.subscribers if u.email == m["To"])
        assert user_from_token(token) == recipient.pk
        assert m["List-Unsubscribe"].strip() == f"<{link}>"
    # the link works (one-click POST, no login)
    response = client.post(reverse("digest_unsubscribe", args=[token]), {"List-Unsubscribe": "One-Click"})
    assert response.status_code == 200
    assert not DigestSubscription.objects.get(user=recipient).active


def test_a_failing_smtp_send_is_retried_and_delivered_once(world, redis_url, client_app, tmp_path):
    with SmtpServer(refuse_first=1) as smtp:
        worker = Worker(redis_url, tmp_path, EMAIL_HOST="127.0.0.1", EMAIL_PORT=str(smtp.port),
                        EMAIL_USE_TLS="false").start()
        try:
            client_app.send_task("reports.digest_send").get(timeout=90)
            wait_for(all_sent(2), what="both deliveries, one after a retry")
        finally:
            worker.stop()
        assert smtp.connections >= 3
        assert len(smtp.messages) == 2
    attempts = sorted(DigestDelivery.objects.values_list("attempts", flat=True))
    assert attempts == [1, 2]
    assert DigestDelivery.objects.get(attempts=2).sent_at is not None


def test_a_worker_killed_mid_send_never_sends_twice(world, redis_url, client_app, tmp_path):
    stalling = Worker(redis_url, tmp_path, DJANGO_SETTINGS_MODULE="reports.tests.worker_settings").start()
    try:
        client_app.send_task("reports.digest_send").get(timeout=90)
        wait_for(lambda: (tmp_path / "stalled").exists(), what="the send to stall")
        stalling.kill()  # SIGKILL in the middle of the send: nothing written, the delivery left "sending"
    finally:
        stalling.stop()
    assert DigestDelivery.objects.filter(state=DigestDelivery.State.SENDING).count() == 1
    cut_off = DigestDelivery.objects.get(state=DigestDelivery.State.SENDING)
    worker = Worker(redis_url, tmp_path, DJANGO_SETTINGS_MODULE="reports.tests.worker_settings").start()
    try:
        # the other delivery was never taken by the killed worker: queue it and the sweep
        time.sleep(3.5)  # past the lease (RECAP_DIGEST_LEASE_SECONDS=3)
        client_app.send_task("reports.digest_sweep").get(timeout=60)
        wait_for(all_sent(2), what="the sweep to finish the cut-off send")
        client_app.send_task("reports.digest_sweep").get(timeout=60)  # a second sweep finds nothing to do
        time.sleep(1.0)
    finally:
        worker.stop()
    mails = read_mail_folder(tmp_path / "mail")
    assert sorted(m["To"] for m in mails) == sorted(u.email for u in world.subscribers)
    cut_off.refresh_from_db()
    assert cut_off.attempts == 2 and cut_off.state == DigestDelivery.State.SENT
