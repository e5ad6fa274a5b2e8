"""The start page: what each role needs first.

- Desk: the scan box and the units out now.
- Technician: the top of the triage list and the units on the bench or held.
- Manager: what is due this month, the units held, the recorded overrides
  (check-outs against the forecast), recent imports and the fleet at a glance.

Every list is short (one screen) and links to the full page.
"""

from django.contrib.auth.decorators import login_required
from django.utils import timezone

from fleet.models import CheckoutOverride, Unit
from fleet.roles import DESK, MANAGER, TECHNICIAN, user_roles
from reports import formatting as fmt
from scheduling.loader import active_policy

from .. import selectors
from ..models import ImportRecord
from . import worklist
from .access import page

#: Rows shown per list on the start page.
START_ROWS = 10
OUT_NOW_ROWS = 25
IMPORTS_SHOWN = 8
OVERRIDES_SHOWN = 8


@login_required
def home(request):
    roles = user_roles(request.user)
    today = timezone.localdate()
    ctx = {
        "show_desk": DESK in roles,
        "show_technician": TECHNICIAN in roles,
        "show_manager": MANAGER in roles,
        "today": today,
    }
    if ctx["show_desk"]:
        out = selectors.units_out_now()
        ctx["out_now"] = list(out[:OUT_NOW_ROWS])
        ctx["out_count"] = out.count() if len(ctx["out_now"]) == OUT_NOW_ROWS else len(ctx["out_now"])
    if ctx["show_technician"] or ctx["show_manager"]:
        policy = active_policy()
        held = worklist.workshop_units(limit=START_ROWS)
        counts = worklist.workshop_counts()
        ctx["held_rows"] = worklist.workshop_rows(held)
        ctx["held_total"] = counts[Unit.Status.BENCH] + counts[Unit.Status.HOLD]
        ctx["bench_count"], ctx["hold_count"] = counts[Unit.Status.BENCH], counts[Unit.Status.HOLD]
    if ctx["show_technician"]:
        top = worklist.triage_forecasts()[:START_ROWS]
        ctx["top_rows"] = worklist.triage_rows(top, policy=policy, today=today)
        ctx["needing_work"] = worklist.needing_work_count()
    if ctx["show_manager"]:
        month_end = fmt.first_of_next_month(today)
        due = worklist.triage_forecasts().filter(act_by__lt=month_end)
        ctx["month_label"] = fmt.month(today)
        ctx["due_rows"] = worklist.triage_rows(due[:START_ROWS], policy=policy, today=today)
        ctx["due_count"] = due.count()
        ctx["imports"] = list(ImportRecord.objects.select_related("user")[:IMPORTS_SHOWN])
        ctx["overrides"] = list(CheckoutOverride.objects.select_related("unit", "rental", "decided_by")
                                [:OVERRIDES_SHOWN])
        ctx["counts"] = selectors.fleet_counts()
    return page(request, "front/home.html", ctx)
