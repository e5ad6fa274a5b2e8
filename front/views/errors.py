"""Error pages: a busy database answers "try again" (503); a login paused
after too many wrong passwords says so (429)."""

import sys

from django.views.defaults import server_error

from ..middleware import busy_response, is_busy


def server_error_or_busy(request, template_name="500.html"):
    """Django's 500 page, unless the error is the database refusing a write
    because another writer held its lock too long (for example while the
    session was being saved, after the view): then 503 and "try again"."""
    exc = sys.exc_info()[1]
    if is_busy(exc):
        return busy_response(request)
    return server_error(request, template_name)


def locked_out(request, original_response=None, credentials=None):
    """The page django-axes shows when a login is paused after too many wrong
    passwords (429): who, for how long, and who can release it sooner."""
    from django.conf import settings
    from django.shortcuts import render

    username = (credentials or {}).get("username") or request.POST.get("username", "")
    minutes = int(settings.AXES_COOLOFF_TIME.total_seconds() // 60) if settings.AXES_COOLOFF_TIME else None
    return render(request, "registration/locked_out.html",
                  {"username": username, "minutes": minutes, "failure_limit": settings.AXES_FAILURE_LIMIT},
                  status=429)
