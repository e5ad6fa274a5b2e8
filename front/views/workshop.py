"""The workshop: units on the bench and held (with why), then the triage list
(what to do first, and why), then the parts the top of the list needs."""

from django.core.paginator import Paginator
from django.utils import timezone

from fleet.models import Unit
from reports import formatting as fmt
from scheduling import parameters as P
from scheduling.loader import active_policy

from ..forms import WorkshopFilterForm
from .access import page, technician_required
from . import worklist


@technician_required
def workshop(request):
    today = timezone.localdate()
    policy = active_policy()
    form = WorkshopFilterForm(request.GET or None)
    filters = form.cleaned_data if form.is_valid() else {}
    forecasts = worklist.triage_forecasts(gear_model=filters.get("gear_model"), location=filters.get("location"),
                                          role=filters.get("role", ""))
    paginator = Paginator(forecasts, worklist.TRIAGE_PER_PAGE)
    page_obj = paginator.get_page(request.GET.get("page"))
    rows = worklist.triage_rows(page_obj.object_list, policy=policy, today=today)
    # The parts for the top of the list: the first units of the page shown
    # when it is the first page, else the top of the filtered list.
    top = rows[:worklist.PARTS_TOP_UNITS] if page_obj.number == 1 else None
    top_forecasts = [r["forecast"] for r in top] if top is not None else \
        list(forecasts[:worklist.PARTS_TOP_UNITS])
    invalid, invalid_total = worklist.unforecastable()
    held = worklist.workshop_units()
    counts = worklist.workshop_counts()
    query = request.GET.copy()
    query.pop("page", None)
    return page(request, "front/workshop.html", {
        "form": form,
        "filtered": any(filters.values()),
        "page_obj": page_obj,
        "rows": rows,
        "querystring": query.urlencode(),
        "invalid": invalid,
        "invalid_total": invalid_total,
        "held_rows": worklist.workshop_rows(held),
        "held_total": counts[Unit.Status.BENCH] + counts[Unit.Status.HOLD],
        "bench_count": counts[Unit.Status.BENCH],
        "hold_count": counts[Unit.Status.HOLD],
        "parts": worklist.parts_for_top(top_forecasts),
        "parts_units": len(top_forecasts),
        "policy": policy,
        "safe_v": fmt.volts(P.SAFE_VOLTAGE_V),
        "today": today,
    })
