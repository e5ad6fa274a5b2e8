"""Sessions (``front.sessions``): kept as Django's own database engine keeps
them, read from SQL compiled once; each reading must equal what Django's
engine (the reference: ``django.contrib.sessions.backends.db``) reads."""

import datetime as dt

import pytest
from django.conf import settings
from django.contrib.auth.models import User
from django.contrib.sessions.backends.db import SessionStore as DjangoStore
from django.contrib.sessions.models import Session
from django.core.exceptions import ImproperlyConfigured
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.compiled import compile_once
from front.sessions import SessionStore
from tests.base import PASSWORD, make_user


def test_the_app_keeps_its_sessions_with_this_engine():
    assert settings.SESSION_ENGINE == "front.sessions"


@pytest.mark.parametrize("case", ["live", "expired", "unknown", "empty"])
def test_a_session_reads_as_djangos_own_engine_reads_it(db, case):
    saved = DjangoStore()
    saved.update({"cart": [1, 2], "word": "é"})
    saved.save()
    key = saved.session_key
    if case == "expired":
        Session.objects.filter(session_key=key).update(expire_date=timezone.now() - dt.timedelta(seconds=1))
    elif case == "unknown":
        key = "x" * 32
    elif case == "empty":
        key = None
    ours, reference = SessionStore(key), DjangoStore(key)
    assert ours.load() == reference.load() == ({"cart": [1, 2], "word": "é"} if case == "live" else {})
    assert ours.session_key == reference.session_key


def test_a_page_reads_its_session_in_one_query_and_sign_out_ends_it(client, db):
    make_user("desk", username="clerk")
    assert client.post(reverse("login"), {"username": "clerk", "password": PASSWORD}).status_code == 302
    with CaptureQueriesContext(connection) as ctx:
        assert client.get(reverse("check_in")).status_code == 200
    assert len([q for q in ctx.captured_queries if '"django_session"' in q["sql"]]) == 1
    old_key = client.cookies[settings.SESSION_COOKIE_NAME].value
    client.post(reverse("logout"))
    assert not Session.objects.filter(session_key=old_key).exists()
    client.cookies[settings.SESSION_COOKIE_NAME] = old_key  # the old cookie, sent again
    response = client.get(reverse("check_in"))
    assert response.status_code == 302 and response["Location"].startswith(reverse("login"))


def test_compile_once_refuses_a_marker_that_is_missing_or_twice(db):
    query = User.objects.filter(username="marker-a", first_name="marker-a")
    with pytest.raises(ImproperlyConfigured, match="2 times"):
        compile_once(query, "default", ("marker-a",))
    with pytest.raises(ImproperlyConfigured, match="0 times"):
        compile_once(query, "default", ("marker-b",))
    sql, params, (at,) = compile_once(User.objects.filter(username="marker-c"), "default", ("marker-c",))
    assert params[at] == "marker-c" and "username" in sql
