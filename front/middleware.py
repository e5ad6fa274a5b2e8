"""Requests refused before any view sees them, and a busy database answered
in words."""

import logging

from django.conf import settings
from django.db import OperationalError
from django.http import HttpResponse, HttpResponseBadRequest
from django.shortcuts import render

log = logging.getLogger(__name__)


class RefuseNulMiddleware:
    """Answer 400 to a request whose address or query holds a NUL character.

    No asset tag, page number or search contains one, and PostgreSQL refuses
    NUL in any text it is given, so a lookup with it would fail as a server
    error.  Form fields refuse it themselves (Django's ``CharField`` has a
    validator for it), so posted forms still get their own field messages.
    """

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        if "\x00" in request.path or any(
            "\x00" in key or any("\x00" in v for v in values) for key, values in request.GET.lists()
        ):
            return HttpResponseBadRequest("Bad request: the address holds a NUL character.",
                                          content_type="text/plain; charset=utf-8")
        return self.get_response(request)


#: How long a browser is asked to wait before trying again [s].
BUSY_RETRY_AFTER_S = 5


def is_busy(exc):
    """True for the database's "locked" or "busy" refusal of a write (SQLite
    when another writer held the lock for longer than the busy timeout)."""
    return isinstance(exc, OperationalError) and any(
        word in str(exc).lower() for word in ("database is locked", "database table is locked", "busy"))


class BusyDatabaseMiddleware:
    """A write that could not get the database's lock in time answers 503
    with "try again" in words (nothing was saved: the transaction rolled
    back), not a server error."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        return self.get_response(request)

    def process_exception(self, request, exc):
        if not is_busy(exc):
            return None
        log.warning("Database busy for %s %s: %s", request.method, request.path, exc)
        return busy_response(request)


def busy_response(request):
    """503 with "try again" in words and a Retry-After header."""
    try:
        response = render(request, "front/busy.html", {"retry_after": BUSY_RETRY_AFTER_S}, status=503)
    except Exception:  # the page itself needs the database: say it plainly
        response = HttpResponse("The register is busy; nothing was saved. Try again in a few seconds.",
                                status=503, content_type="text/plain; charset=utf-8")
    response["Retry-After"] = str(BUSY_RETRY_AFTER_S)
    return response


def client_ip(request):
    """The client's address: the one the proxy appended to X-Forwarded-For
    when ``RECAP_BEHIND_PROXY`` says a proxy is in front, else the peer's."""
    if settings.RECAP_BEHIND_PROXY:
        forwarded = [part.strip() for part in request.META.get("HTTP_X_FORWARDED_FOR", "").split(",") if part.strip()]
        if forwarded:
            return forwarded[-1]
    return request.META.get("REMOTE_ADDR")
