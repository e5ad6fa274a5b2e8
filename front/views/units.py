"""The unit list and a unit's page: the technician's full page (what to do
with each position, and why; the unit's own safety; the life chart; hires
and service history) and the desk's short card."""

from django.core.paginator import Paginator
from django.shortcuts import redirect
from django.utils import timezone
from django.utils.safestring import mark_safe

from fleet.roles import MANAGER, TECHNICIAN, user_roles
from scheduling.loader import active_policy
from scheduling.services import unit_trajectory
from scheduling.reasons import ROLE_WORDS

from .. import selectors
from ..history import unit_history
from ..forms import UnitFilterForm
from . import display, worklist
from .access import not_found, page, staff_required
from .charts import life_chart
from .readings import reading_rows

UNITS_PER_PAGE = 50


@staff_required
def unit_list(request):
    form = UnitFilterForm(request.GET or None)
    filters = form.cleaned_data if form.is_valid() else {}
    units = selectors.unit_list(
        q=filters.get("q", ""),
        status=filters.get("status", ""),
        gear_model=filters.get("gear_model"),
        location=filters.get("location"),
        forecast=filters.get("forecast", ""),
    )
    paginator = Paginator(units, UNITS_PER_PAGE)
    page_obj = paginator.get_page(request.GET.get("page"))
    query = request.GET.copy()
    query.pop("page", None)
    return page(request, "front/unit_list.html", {
        "form": form,
        "page_obj": page_obj,
        "units": page_obj.object_list,
        "querystring": query.urlencode(),
        "filtered": any(v for k, v in request.GET.items() if k != "page"),
        "today": timezone.localdate(),
    })


@staff_required
def unit_detail(request, asset_tag):
    data = selectors.unit_detail(asset_tag)
    if data is None:
        tag = selectors.normalise_tag(asset_tag)
        return not_found(request, f"No unit has the asset tag {tag}. Check the label, or search the unit list.")
    unit = data["unit"]
    if unit.asset_tag != asset_tag:
        return redirect("unit_detail", asset_tag=unit.asset_tag)
    today = timezone.localdate()
    stored = display.unit_forecast(unit)
    technician = bool(user_roles(request.user) & {TECHNICIAN, MANAGER})
    ctx = {
        "unit": unit,
        "today": today,
        "safety": display.safety(unit, data["capacitors"]),
        "rentals": data["rentals"],
        "rental_limit": selectors.RENTAL_HISTORY_LENGTH,
        "service_records": data["service_records"],
        "open_rental": next((r for r in data["rentals"] if r.in_at is None), None),
        "overrides": selectors.unit_overrides(unit),
    }
    if not technician:
        ctx["forecast"] = display.forecast_display(stored, today=today)
        ctx["desk"] = display.desk_card(unit, stored, data["rentals"], today)
        return page(request, "front/unit_desk.html", ctx)

    policy = active_policy()
    rows = display.position_plan(data["capacitors"], stored, damage_limit=policy.damage_limit,
                                 calendar_age_years=policy.calendar_age_years, today=today)
    grouped = request.GET.get("view") == "role"
    ctx.update({
        "forecast": display.forecast_display(stored, needing_work=worklist.needing_work_count(), today=today),
        "rows": display.by_action(rows),
        "groups": display.by_role(rows) if grouped else None,
        "grouped": grouped,
        "counts": display.action_counts(rows),
        "todo": display.todo_line(rows),
        "chart": _chart(stored, data["capacitors"], policy),
        "policy": policy,
        "readings": reading_rows(selectors.unit_readings(unit)),
        "history": unit_history(unit),
    })
    return page(request, "front/unit_detail.html", ctx)


def _chart(stored, capacitors, policy):
    """The life chart's SVG, or None without a forecast."""
    installed = {c.pk: c.installed_on for c in capacitors}
    result = unit_trajectory(forecast=stored, installed_on=installed, damage_limit=policy.damage_limit)
    if result is None:
        return None
    curves, ids = result
    by_id = {c.pk: c for c in capacitors}
    labels = [f"{by_id[i].position.designator} {ROLE_WORDS[by_id[i].position.role]}" for i in ids]
    return mark_safe(life_chart(curves, labels, risk_limit=policy.risk_limit, horizon_days=stored.horizon_days))
