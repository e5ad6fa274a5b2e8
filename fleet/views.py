"""Pages of the fleet register: start page, units, the rental desk, the
workshop queue and the manager's CSV import and export.

Every page needs a login.  Desk pages are for the rental desk and managers,
workshop pages for technicians and managers, import and export for managers;
a superuser holds every role.  Writes go through ``fleet.services``; reads
through ``fleet.selectors``.
"""

import math
import re
from functools import wraps

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import ValidationError
from django.core.paginator import Paginator
from django.http import Http404, HttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_http_methods

from scheduling.models import UnitForecast

from . import selectors, values
from .forms import CheckInForm, CheckOutForm, CsvUploadForm, UnitFilterForm
from .models import Rental, Unit
from .roles import DESK, MANAGER, ROLE_LABELS, ROLES, TECHNICIAN, user_roles
from .services import ServiceError, rental_check_in, rental_check_out

UNITS_PER_PAGE = 50
CSV_KINDS = ["locations", "temperature_samples", "gear_models", "positions", "units"]
CSV_KIND_LABELS = {
    "locations": "Locations",
    "temperature_samples": "Temperature samples",
    "gear_models": "Gear models",
    "positions": "Capacitor positions",
    "units": "Units",
}


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
    return page(request, "fleet/forbidden.html", {"audience": AUDIENCE[audience], "held_text": held_text},
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


# --- display helpers -------------------------------------------------------------

def _plain_number(value, significant=3):
    """A number to ``significant`` figures without an exponent or trailing zeros."""
    if value == 0:
        return "0"
    digits = significant - 1 - math.floor(math.log10(abs(value)))
    rounded = round(value, digits)
    text = f"{rounded:.{max(digits, 0)}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text


def format_capacitance(uf):
    """Capacitance stored in uF, written the way parts are marked:
    4.7 -> "4.7 uF", 0.47 -> "470 nF", 4.7e-5 -> "47 pF", 2200 -> "2200 uF"."""
    if uf is None:
        return ""
    try:
        return values.format_capacitance(uf)
    except ValueError:
        return f"{uf:g} uF"


def format_number(value, unit=""):
    if value is None:
        return ""
    text = f"{value:,.1f}".rstrip("0").rstrip(".") if abs(value) < 1e6 else f"{value:,.0f}"
    return f"{text} {unit}".strip()


def hazard_words(gear_model):
    """What inside the unit can hurt, in words."""
    words = []
    if gear_model.hazard_mains:
        volts = f" ({gear_model.mains_voltage_v:g} V a.c.)" if gear_model.mains_voltage_v else ""
        words.append(f"Mains voltage inside{volts}")
    if gear_model.hazard_tube_hv:
        words.append("Tube high voltage: lethal even when switched off")
    if gear_model.hazard_smps:
        words.append("Switch-mode supply: primary side at rectified mains voltage")
    if not words:
        words.append("No mains inside (external low-voltage supply); charged capacitors can still hurt")
    return words


def designator_key(designator):
    """C2 before C10: letters, then the number, then any suffix."""
    match = re.match(r"([A-Za-z]*)(\d*)(.*)", designator)
    prefix, number, rest = match.groups()
    return (prefix.upper(), int(number) if number else -1, rest)


def _predicted_by_capacitor(forecast):
    """{capacitor id: predicted figures} from a stored forecast (empty without one)."""
    if forecast is None:
        return {}
    from scheduling.forecast import day_to_date
    from scheduling.services import stored_positions

    out = {}
    for rec in stored_positions(forecast):
        reach = float(rec["reaches_day"])
        out[int(rec["capacitor_id"])] = {
            "damage": float(rec["damage"]),
            "threshold": float(rec["threshold"]),
            "esr_ohm": float(rec["esr_ohm"]),
            "capacitance_uf": float(rec["capacitance_f"]) * 1e6,
            "reaches_on": None if reach != reach else day_to_date(reach),
        }
    return out


def capacitor_rows(capacitors, forecast=None):
    capacitors = sorted(capacitors, key=lambda c: designator_key(c.position.designator))
    predicted = _predicted_by_capacitor(forecast)
    return [
        {
            "predicted": _predicted_row(predicted.get(c.pk), forecast),
            "designator": c.position.designator,
            "role": c.position.get_role_display(),
            "capacitance": format_capacitance(c.capacitance_uf),
            "voltage": f"{c.rated_voltage_v:g} V",
            "temperature": f"{c.rated_temp_c:g} °C",
            "endurance": f"{format_number(c.rated_life_h)} h",
            "installed_on": c.installed_on,
            "original": c.is_original,
        }
        for c in capacitors
    ]


from scheduling.forecast import DAMAGE_THRESHOLD_CAP as DRIFT_MODEL_MAX_DAMAGE  # noqa: E402


def _predicted_row(p, forecast):
    if p is None:
        return None
    share = p["damage"] / p["threshold"] if p["threshold"] > 0 else None
    return {
        "damage": f"{p['damage']:.2f}",
        "threshold": f"{p['threshold']:.2f}",
        "used_percent": None if share is None else f"{min(share, 9.99) * 100:.0f}%",
        "over": share is None or share >= 1,
        "esr": f"{p['esr_ohm']:.3g} Ω",
        "capacitance": format_capacitance(float(f"{p['capacitance_uf']:.3g}")),
        # the drift laws are calibrated at damage 1; far past it the figures mean little
        "beyond": p["damage"] > DRIFT_MODEL_MAX_DAMAGE,
        "reaches_on": p["reaches_on"],
        "past": p["reaches_on"] is not None and forecast is not None
                and p["reaches_on"] <= forecast.computed_at.date(),
    }


def forecast_display(forecast):
    if forecast is None:
        return None
    return {
        "status": forecast.status,
        "label": forecast.get_status_display(),
        "due_date": forecast.due_date,
        "risk_percent": _plain_number(forecast.risk * 100, 2) if forecast.risk is not None else "",
        "horizon_days": forecast.horizon_days,
        "reasons": list(forecast.reasons or []),
        "computed_at": forecast.computed_at,
        "storage_reform": forecast.storage_reform,
    }


def _unit_forecast(unit):
    try:
        return unit.forecast
    except UnitForecast.DoesNotExist:
        return None


def return_verdict(rental, forecast):
    """May the unit that just came back go out again?

    Reported faults hold it for the bench.  Otherwise the forecast decides:
    ok or watch may go out (watch with the date the recap is coming up by),
    due or overdue hold it for a recap; no forecast yet lets it go out.
    """
    tag = rental.unit.asset_tag
    if rental.reported_faults:
        return {
            "go": False,
            "headline": f"{tag}: hold for the bench",
            "details": ["Faults were reported on return:", rental.reported_faults,
                        "The unit is on hold until a technician has looked at it."],
        }
    if forecast is None:
        return {"go": True, "headline": f"{tag}: may go out again (no forecast yet)", "details": []}
    if forecast.status == UnitForecast.Status.OK:
        return {"go": True, "headline": f"{tag}: may go out again", "details": []}
    if forecast.status == UnitForecast.Status.WATCH:
        when = f" by {forecast.due_date:%d %b %Y}" if forecast.due_date else " soon"
        return {"go": True, "headline": f"{tag}: may go out again; recap coming up{when}",
                "details": list(forecast.reasons or [])}
    return {
        "go": False,
        "headline": f"{tag}: hold for recap",
        "details": list(forecast.reasons or []) or [f"The forecast says the unit is {forecast.get_status_display().lower()}."],
    }


def _role_flags(request):
    roles = user_roles(request.user)
    return {
        "is_desk": bool(roles & {DESK, MANAGER}),
        "is_technician": bool(roles & {TECHNICIAN, MANAGER}),
        "is_manager": MANAGER in roles,
        "role_names": [ROLE_LABELS[r] for r in ROLES if r in roles],
    }


def page(request, template, context=None, status=200):
    ctx = _role_flags(request)
    ctx.update(context or {})
    return render(request, template, ctx, status=status)


# --- start page ------------------------------------------------------------------

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
    return page(request, "fleet/home.html", ctx)


# --- units -----------------------------------------------------------------------

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
    return page(request, "fleet/unit_list.html", {
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
    return page(request, "fleet/unit_detail.html", {
        "unit": unit,
        "hazards": hazard_words(unit.gear_model),
        "forecast": forecast_display(stored := _unit_forecast(unit)),
        "capacitors": capacitor_rows(data["capacitors"], stored),
        "rentals": data["rentals"],
        "rental_limit": selectors.RENTAL_HISTORY_LENGTH,
        "service_records": data["service_records"],
        "hour_meter": format_number(unit.hour_meter_h, "h") if unit.hour_meter_h is not None else None,
    })


# --- rental desk -----------------------------------------------------------------

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
    messages.warning(
        request, f"{unit.asset_tag} is {unit.get_status_display().lower()}; it cannot go out until that is cleared.",
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
                )
            except (ServiceError, ValidationError) as exc:
                _service_error(form, exc)
            else:
                messages.success(
                    request,
                    f"{rental.unit.asset_tag} checked out on job {rental.job_ref} at "
                    f"{timezone.localtime(rental.out_at):%d %b %Y %H:%M}.",
                )
                return redirect("check_out")
    else:
        tag = selectors.normalise_tag(request.GET.get("tag", ""))
        form = CheckOutForm(initial={"asset_tag": tag} if tag else {})
    form.focus()
    return page(request, "fleet/check_out.html", {"form": form})


@desk_required
@require_http_methods(["GET", "POST"])
def check_in(request):
    verdict = None
    open_rental = None
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
                return redirect(f"{reverse('check_in')}?returned={rental.pk}")
    else:
        initial = {}
        tag = selectors.normalise_tag(request.GET.get("tag", ""))
        if tag:
            initial["asset_tag"] = tag
            unit = selectors.unit_by_tag(tag)
            open_rental = selectors.open_rental_for(unit) if unit else None
            if open_rental is not None:
                open_rental.unit = unit
                initial["venue_ambient_c"] = f"{open_rental.expected_ambient_c:g}"
        form = CheckInForm(initial=initial)
        returned = request.GET.get("returned", "")
        if returned.isdigit():
            rental = Rental.objects.select_related("unit").filter(pk=int(returned), in_at__isnull=False).first()
            if rental is not None:
                verdict = return_verdict(rental, selectors.forecast_for(rental.unit_id))
                verdict["rental"] = rental
    form.focus()
    return page(request, "fleet/check_in.html", {"form": form, "verdict": verdict, "open_rental": open_rental})


# --- workshop --------------------------------------------------------------------

@technician_required
def workshop(request):
    return page(request, "fleet/workshop.html", {
        "workshop_units": list(selectors.units_in_workshop()),
        "recaps": list(selectors.recap_list()),
    })


# --- CSV import and export (managers) ----------------------------------------------

MAX_ERRORS_SHOWN = 100


def _import_errors(exc):
    errors = [str(e) for e in (getattr(exc, "errors", None) or [str(exc)])]
    total = max(getattr(exc, "total", 0) or 0, len(errors))
    shown = errors[:MAX_ERRORS_SHOWN]
    return {"errors": shown, "more": total - len(shown)}


def import_order(csvio, files):
    """Files sorted into the order the imports depend on (locations first,
    units last), the kind read from each file's header row.  A file whose
    header cannot be read goes last (its import then fails and says why)."""
    order = list(getattr(csvio, "IMPORT_ORDER", CSV_KINDS))
    ranked = []
    for position, f in enumerate(files):
        try:
            kind = csvio.detect_kind(f, name=f.name)
        except csvio.CsvImportError:
            kind = None
        finally:
            f.seek(0)
        ranked.append((order.index(kind) if kind in order else len(order), position, f))
    return [f for _, _, f in sorted(ranked, key=lambda t: t[:2])]


@manager_required
@require_http_methods(["GET", "POST"])
def csv_import(request):
    try:
        from . import csvio
    except ImportError:
        csvio = None
    outcome = None
    if request.method == "POST" and csvio is not None:
        form = CsvUploadForm(request.POST, request.FILES)
        if form.is_valid():
            ordered = import_order(csvio, form.cleaned_data["files"])
            imported, failed, skipped = [], None, []
            for index, f in enumerate(ordered):
                try:
                    report = csvio.import_csv(f, name=f.name)
                except csvio.CsvImportError as exc:
                    failed = {"name": f.name, **_import_errors(exc)}
                    skipped = [g.name for g in ordered[index + 1:]]
                    break
                imported.append({
                    "name": f.name,
                    "kind": CSV_KIND_LABELS.get(report.kind, report.kind),
                    "summary": report.summary(),
                })
            outcome = {"imported": imported, "failed": failed, "skipped": skipped,
                       "order": [f.name for f in ordered]}
            form = CsvUploadForm()
    else:
        form = CsvUploadForm()
    return page(request, "fleet/csv_import.html", {
        "form": form,
        "outcome": outcome,
        "available": csvio is not None,
        "kinds": [(k, CSV_KIND_LABELS[k]) for k in CSV_KINDS],
    })


@manager_required
def csv_export(request, kind):
    if kind not in CSV_KINDS:
        raise Http404("No such export.")
    try:
        from .csvio import export_csv
    except ImportError:
        raise Http404("CSV export is not available yet.") from None
    stamp = timezone.localdate().isoformat()
    response = HttpResponse(content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="{kind}-{stamp}.csv"'
    export_csv(kind, response)
    return response
