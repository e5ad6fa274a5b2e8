"""The rental desk: scan, check out, check in with its verdict."""

from django.contrib import messages
from django.core.exceptions import ValidationError
from django.shortcuts import redirect
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_http_methods

from fleet.models import Rental, Unit
from fleet.services import ServiceError
from reports import formatting as fmt

from .. import selectors
from ..forms import CheckInForm, CheckOutForm
from ..workflows import rental_check_in, rental_check_out, return_verdict
from .access import desk_required, page


def _service_error(form, exc):
    if isinstance(exc, ValidationError):
        for msg in exc.messages:
            form.add_error(None, msg)
    else:
        form.add_error(None, str(exc))


@desk_required
def desk_scan(request):
    """The start page's tag box: go to whichever desk form fits the unit."""
    raw = request.GET.get("tag", "")
    unit = selectors.unit_by_tag(raw)
    if unit is None:
        tag = selectors.normalise_tag(raw)
        if tag:
            messages.error(request, f"No unit has the asset tag {tag}. Check the label and try again.")
        else:
            messages.error(request, "Scan or type an asset tag.")
        return redirect("home")
    if unit.status == Unit.Status.OUT:
        return redirect(f"{reverse('check_in')}?tag={unit.asset_tag}")
    if unit.status == Unit.Status.AVAILABLE:
        return redirect(f"{reverse('check_out')}?tag={unit.asset_tag}")
    why = f" ({unit.hold_reason})" if unit.status == Unit.Status.HOLD and unit.hold_reason else ""
    messages.warning(
        request, f"{unit.asset_tag} is {unit.get_status_display().lower()}{why}; it cannot go out until the workshop "
                 "releases it.",
    )
    return redirect("unit_detail", asset_tag=unit.asset_tag)


@desk_required
@require_http_methods(["GET", "POST"])
def check_out(request):
    if request.method == "POST":
        form = CheckOutForm(request.POST)
        if form.is_valid():
            data = form.cleaned_data
            try:
                rental = rental_check_out(
                    unit_id=form.unit.pk,
                    job_ref=data["job_ref"],
                    out_at=data["out_at"],
                    expected_ambient_c=data["expected_ambient_c"],
                    user=request.user,
                    override_reason=data["override_reason"] if form.needs_confirmation else "",
                )
            except (ServiceError, ValidationError) as exc:
                _service_error(form, exc)
            else:
                messages.success(
                    request,
                    f"{rental.unit.asset_tag} checked out on job {rental.job_ref} at "
                    f"{fmt.moment(timezone.localtime(rental.out_at))}.",
                )
                return redirect("check_out")
    else:
        tag = selectors.normalise_tag(request.GET.get("tag", ""))
        form = CheckOutForm(initial={"asset_tag": tag} if tag else {})
    form.focus()
    return page(request, "front/check_out.html", {"form": form})


@desk_required
@require_http_methods(["GET", "POST"])
def check_in(request):
    verdict = None
    open_rental = None
    unit = None
    if request.method == "POST":
        form = CheckInForm(request.POST)
        if form.is_valid():
            data = form.cleaned_data
            try:
                rental = rental_check_in(
                    unit_id=form.unit.pk,
                    in_at=data["in_at"],
                    venue_ambient_c=data["venue_ambient_c"],
                    powered_hours=data["powered_hours"],
                    meter_reading_h=data["meter_reading_h"],
                    reported_faults=data["reported_faults"],
                    user=request.user,
                )
            except (ServiceError, ValidationError) as exc:
                _service_error(form, exc)
            else:
                return _returned_page(request, rental)
        unit = form.unit
    else:
        initial = {}
        tag = selectors.normalise_tag(request.GET.get("tag", ""))
        if tag:
            initial["asset_tag"] = tag
            unit = selectors.unit_by_tag(tag)
            open_rental = selectors.open_rental_for(unit) if unit else None
            if open_rental is not None:
                initial["venue_ambient_c"] = f"{open_rental.expected_ambient_c:g}"
        form = CheckInForm(initial=initial)
        returned = request.GET.get("returned", "")
        if returned.isdigit():
            rental = Rental.objects.select_related("unit").filter(pk=int(returned), in_at__isnull=False).first()
            if rental is not None:
                verdict = _verdict(rental)
    if unit is not None and open_rental is None and request.method == "POST":
        open_rental = selectors.open_rental_for(unit)
    if open_rental is not None:
        open_rental.unit = unit
    form.focus()
    return page(request, "front/check_in.html", {
        "form": form, "verdict": verdict, "open_rental": open_rental,
        "meter": selectors.last_meter_reading(unit) if open_rental is not None else None,
    })


def _verdict(rental, forecast=None):
    """The verdict on ``rental`` just closed: from ``forecast`` (the check-in's
    own, as it stored it) or the unit's forecast read from the table."""
    verdict = return_verdict(rental, forecast if forecast is not None else selectors.forecast_for(rental.unit_id))
    verdict["rental"] = rental
    return verdict


def _returned_page(request, rental):
    """The answer to a check-in: the verdict at once, in the response to the
    POST (no redirect and second request on the desk's busiest path), above
    an empty form for the next unit.  The verdict keeps its own address
    (``?returned=<hire>``): sent as ``Content-Location``, and put in the
    browser's address bar by the page, so that reloading it shows the
    verdict again instead of sending the form twice."""
    url = f"{reverse('check_in')}?returned={rental.pk}"
    form = CheckInForm()
    form.focus()
    response = page(request, "front/check_in.html", {
        "form": form, "verdict": _verdict(rental, rental.forecast_now), "open_rental": None, "meter": None,
        "returned_url": url})
    response["Content-Location"] = url
    return response
