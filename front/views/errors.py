"""The server-error page: a busy database answers "try again" (503)."""

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
