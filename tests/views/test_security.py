"""Sign-in throttling, the forwarded-protocol header, and the People page.

Thirty wrong passwords in a row used to be refused one by one and the right
one then worked; now a login is paused after five (django-axes).  The
forwarded headers are believed only when a setting says a proxy is in front.
Managers grant and take away the app's roles, and nothing else.
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

from fleet.roles import DESK, MANAGER, TECHNICIAN, user_roles
from front.middleware import client_ip
from tests.base import PASSWORD, make_user

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


# --- people and roles ------------------------------------------------------------------------------

PERSON = {"first_name": "Pia", "last_name": "Porter", "email": "pia@example.org", "is_active": "on"}


def test_a_manager_adds_a_login_with_a_role_and_it_can_sign_in(client, users):
    client.force_login(users.manager)
    response = client.post(reverse("person_new"), {"username": "pia.porter", "roles": [DESK],
                                                   "password1": "long-enough-words-17", "password2":
                                                   "long-enough-words-17", **PERSON})
    assert response.status_code == 302
    pia = get_user_model().objects.get(username="pia.porter")
    assert user_roles(pia) == {DESK} and not pia.is_staff and not pia.is_superuser
    assert not pia.user_permissions.exists()
    client.post(reverse("logout"))
    assert sign_in(client, "pia.porter", "long-enough-words-17").status_code == 302
    assert client.get(reverse("check_out")).status_code == 200


def test_a_manager_grants_and_takes_away_roles(client, users):
    client.force_login(users.manager)
    url = reverse("person_edit", args=[users.desk.pk])
    response = client.post(url, {"roles": [TECHNICIAN, MANAGER], **PERSON})
    assert response.status_code == 302
    desk = get_user_model().objects.get(pk=users.desk.pk)
    assert user_roles(desk) == {TECHNICIAN, MANAGER} and desk.is_staff
    client.force_login(desk)
    assert client.get(reverse("admin:fleet_unit_changelist")).status_code == 200  # a manager uses the admin
    assert client.get(reverse("admin:auth_user_changelist")).status_code == 403    # but not Django's users
    client.force_login(users.manager)
    client.post(url, {"roles": [DESK], **PERSON})
    desk = get_user_model().objects.get(pk=users.desk.pk)
    assert user_roles(desk) == {DESK} and not desk.is_staff
    page = client.get(reverse("people")).content.decode()
    assert "dora.desk" in page and "Rental desk" in page


def test_what_a_manager_may_not_do(client, users):
    client.force_login(users.manager)
    response = client.post(reverse("person_edit", args=[users.manager.pk]), {"roles": [DESK], **PERSON})
    assert response.status_code == 200
    assert "You cannot take away your own manager role; ask another manager." in response.content.decode()
    response = client.post(reverse("person_edit", args=[users.manager.pk]), {"roles": [MANAGER], "first_name": ""})
    assert "You cannot switch off your own login" in response.content.decode()
    assert get_user_model().objects.get(pk=users.manager.pk).is_active
    root = make_user("superuser", username="root")
    response = client.post(reverse("person_edit", args=[root.pk]), {"roles": [DESK], **PERSON})
    assert response.status_code == 302
    assert get_user_model().objects.get(pk=root.pk).is_superuser
    response = client.post(reverse("person_new"), {"username": "weak", "roles": [DESK], "password1": "12345678",
                                                   "password2": "12345678", **PERSON})
    assert response.status_code == 200
    assert "This password is entirely numeric." in response.content.decode()
    response = client.post(reverse("person_new"), {"username": "dora.desk", "roles": [DESK],
                                                   "password1": "long-enough-words-17",
                                                   "password2": "long-enough-words-17", **PERSON})
    assert "A user with that username already exists." in response.content.decode()
    response = client.post(reverse("person_new"), {"username": "x", "roles": ["superuser"],
                                                   "password1": "long-enough-words-17",
                                                   "password2": "long-enough-words-17", **PERSON})
    assert response.status_code == 200
    assert not get_user_model().objects.filter(username__in=["weak", "x"]).exists()


def test_only_managers_see_the_people_page(client, users):
    for user in (users.desk, users.technician, users.norole):
        client.force_login(user)
        assert client.get(reverse("people")).status_code == 403
        assert client.post(reverse("person_edit", args=[users.desk.pk]), {"roles": [MANAGER]}).status_code == 403
    assert user_roles(get_user_model().objects.get(pk=users.desk.pk)) == {DESK}
