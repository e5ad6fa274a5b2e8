"""Sign-in throttling and the forwarded-protocol header.

Thirty wrong passwords in a row used to be refused one by one and the right
one then worked; now a login is paused after five (django-axes).  The
forwarded headers are believed only when a setting says a proxy is in front.
"""

import datetime as dt
import os
import subprocess
import sys
from pathlib import Path

import pytest
import time_machine
from django.contrib.auth import get_user_model
from django.test import RequestFactory
from django.urls import reverse

from front.middleware import client_ip
from tests.base import PASSWORD

ROOT = Path(__file__).resolve().parent.parent.parent
LOGIN = reverse("login")


def sign_in(client, username, password, **extra):
    return client.post(LOGIN, {"username": username, "password": password}, **extra)


# --- throttling ------------------------------------------------------------------------------------

def test_a_login_is_paused_after_five_wrong_passwords_even_for_the_right_one(client, users, settings):
    for _ in range(settings.AXES_FAILURE_LIMIT - 1):
        response = sign_in(client, "dora.desk", "wrong")
        assert response.status_code == 200 and "did not match" in response.content.decode()
    response = sign_in(client, "dora.desk", "wrong")
    assert response.status_code == 429
    text = response.content.decode()
    assert "Signing in is paused for this login" in text and "5 wrong passwords in a row" in text
    assert "dora.desk" in text and "for 15 minutes" in text
    response = sign_in(client, "dora.desk", PASSWORD)
    assert response.status_code == 429  # the right password does not get through while paused
    # Another login from the same desk is not paused.
    assert sign_in(client, "tomas.tech", PASSWORD).status_code == 302


def test_the_pause_ends_after_the_cool_off(client, users, settings):
    with time_machine.travel(dt.datetime(2026, 12, 1, 9, 0, tzinfo=dt.timezone.utc), tick=False) as traveller:
        for _ in range(settings.AXES_FAILURE_LIMIT):
            sign_in(client, "dora.desk", "wrong")
        assert sign_in(client, "dora.desk", PASSWORD).status_code == 429
        traveller.shift(settings.AXES_COOLOFF_TIME + dt.timedelta(minutes=1))
        assert sign_in(client, "dora.desk", PASSWORD).status_code == 302


def test_a_right_password_resets_the_count(client, users, settings):
    for _ in range(settings.AXES_FAILURE_LIMIT - 1):
        sign_in(client, "dora.desk", "wrong")
    assert sign_in(client, "dora.desk", PASSWORD).status_code == 302
    client.post(reverse("logout"))
    for _ in range(settings.AXES_FAILURE_LIMIT - 1):
        assert sign_in(client, "dora.desk", "wrong").status_code == 200
    assert sign_in(client, "dora.desk", PASSWORD).status_code == 302


def test_a_manager_can_release_a_paused_login_in_the_admin(client, users, settings):
    for _ in range(settings.AXES_FAILURE_LIMIT):
        sign_in(client, "dora.desk", "wrong")
    client.force_login(get_user_model().objects.get(username="mina.manager"))
    get_user_model().objects.filter(username="mina.manager").update(is_staff=True)
    changelist = reverse("admin:axes_accessattempt_changelist")
    page = client.get(changelist)
    assert page.status_code == 200 and "dora.desk" in page.content.decode()
    from axes.models import AccessAttempt

    attempt = AccessAttempt.objects.get(username="dora.desk")
    response = client.post(reverse("admin:axes_accessattempt_delete", args=[attempt.pk]), {"post": "yes"})
    assert response.status_code == 302
    client.post(reverse("logout"))
    assert sign_in(client, "dora.desk", PASSWORD).status_code == 302


# --- the forwarded headers -------------------------------------------------------------------------

def _settings_in_a_fresh_process(**env):
    code = ("import django, os; os.environ.setdefault('DJANGO_SETTINGS_MODULE', 'config.settings'); "
            "from django.conf import settings; "
            "print(getattr(settings, 'SECURE_PROXY_SSL_HEADER', None))")
    full = {k: v for k, v in os.environ.items() if k not in ("RECAP_BEHIND_PROXY", "DEBUG")}
    full.update(env)
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=full, capture_output=True, text=True,
                         timeout=60)
    assert out.returncode == 0, out.stderr
    return out.stdout.strip()


def test_the_forwarded_protocol_is_believed_only_behind_a_declared_proxy():
    assert _settings_in_a_fresh_process(DEBUG="false") == "None"
    assert _settings_in_a_fresh_process(DEBUG="false", RECAP_BEHIND_PROXY="true") == "('HTTP_X_FORWARDED_PROTO', 'https')"


def test_a_forged_forwarded_protocol_does_not_make_a_request_secure(client, users, settings):
    settings.SECURE_SSL_REDIRECT = True
    response = client.get(LOGIN, HTTP_X_FORWARDED_PROTO="https")
    assert response.status_code == 301 and response["Location"].startswith("https://")


def test_the_client_address_comes_from_the_proxy_only_when_there_is_one(settings):
    request = RequestFactory().get("/", REMOTE_ADDR="10.0.0.5", HTTP_X_FORWARDED_FOR="203.0.113.9, 198.51.100.7")
    settings.RECAP_BEHIND_PROXY = False
    assert client_ip(request) == "10.0.0.5"
    settings.RECAP_BEHIND_PROXY = True
    assert client_ip(request) == "198.51.100.7"  # the address the proxy itself appended
