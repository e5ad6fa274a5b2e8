"""Requests refused before any view sees them."""

from django.http import HttpResponseBadRequest


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
