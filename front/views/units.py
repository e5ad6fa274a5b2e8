"""The unit list and a unit's page."""

from django.core.paginator import Paginator
from django.http import Http404
from django.shortcuts import redirect

from .. import selectors
from ..forms import UnitFilterForm
from .access import page, staff_required
from .display import capacitor_rows, forecast_display, format_number, hazard_words, unit_forecast

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
    })


@staff_required
def unit_detail(request, asset_tag):
    data = selectors.unit_detail(asset_tag)
    if data is None:
        raise Http404(f"No unit has the asset tag {asset_tag}.")
    unit = data["unit"]
    if unit.asset_tag != asset_tag:
        return redirect("unit_detail", asset_tag=unit.asset_tag)
    return page(request, "front/unit_detail.html", {
        "unit": unit,
        "hazards": hazard_words(unit.gear_model),
        "forecast": forecast_display(stored := unit_forecast(unit)),
        "capacitors": capacitor_rows(data["capacitors"], stored),
        "rentals": data["rentals"],
        "rental_limit": selectors.RENTAL_HISTORY_LENGTH,
        "service_records": data["service_records"],
        "hour_meter": format_number(unit.hour_meter_h, "h") if unit.hour_meter_h is not None else None,
    })
