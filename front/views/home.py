"""The start page: what each role needs first."""

from django.contrib.auth.decorators import login_required

from fleet.roles import DESK, MANAGER, TECHNICIAN, user_roles

from .. import selectors
from .access import page


@login_required
def home(request):
    roles = user_roles(request.user)
    ctx = {
        "show_desk": DESK in roles,
        "show_technician": TECHNICIAN in roles,
        "show_manager": MANAGER in roles,
    }
    if ctx["show_desk"]:
        ctx["out_now"] = list(selectors.units_out_now()[:200])
    if ctx["show_technician"]:
        ctx["workshop_units"] = list(selectors.units_in_workshop())
        ctx["recap_count"] = selectors.attention_count()
    if ctx["show_manager"]:
        ctx["counts"] = selectors.fleet_counts()
    return page(request, "front/home.html", ctx)
