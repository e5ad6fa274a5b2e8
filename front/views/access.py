"""Who may see which page: login first, then the role (a 403 page that says
who the page is for).  The manager holds every role's pages; a superuser
counts as every role."""

from functools import wraps

from django.contrib.auth.decorators import login_required
from django.shortcuts import render

from fleet.roles import DESK, MANAGER, ROLE_LABELS, ROLES, TECHNICIAN, user_roles


# --- roles ---------------------------------------------------------------------

AUDIENCE = {
    DESK: "the rental desk and managers",
    TECHNICIAN: "technicians and managers",
    MANAGER: "managers",
    "any": "staff with a role (rental desk, technician or manager)",
}


def forbidden(request, audience):
    held = sorted(user_roles(request.user))
    held_text = ", ".join(ROLE_LABELS[r].lower() for r in held) if held else "no role yet"
    return page(request, "front/forbidden.html", {"audience": AUDIENCE[audience], "held_text": held_text},
                status=403)


def role_required(*roles, audience):
    """Login first (redirect), then the role (403 page saying who the page is for).
    The manager holds every role's pages; a superuser counts as every role."""
    allowed = set(roles) | {MANAGER}

    def decorator(view):
        @wraps(view)
        def wrapped(request, *args, **kwargs):
            if not (user_roles(request.user) & allowed):
                return forbidden(request, audience)
            return view(request, *args, **kwargs)

        return login_required(wrapped)

    return decorator


desk_required = role_required(DESK, audience=DESK)
technician_required = role_required(TECHNICIAN, audience=TECHNICIAN)
manager_required = role_required(MANAGER, audience=MANAGER)
staff_required = role_required(*ROLES, audience="any")


def page(request, template, context=None, status=200):
    """Render a page (the role flags come from ``front.context_processors.roles``)."""
    return render(request, template, context or {}, status=status)


def not_found(request, message):
    """The app's own 404 page, also with DEBUG on (Django's debug page would
    show instead of it for a raised Http404)."""
    return page(request, "404.html", {"exception": message}, status=404)
