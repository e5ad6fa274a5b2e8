"""The bench: intake, readings that move the forecast, a recap, release.

For technicians and managers.  Every write goes through ``front.bench``; a
reading that cannot be right comes back with the register's message next to
its field, and nothing is saved.
"""

from django.contrib import messages
from django.core.exceptions import ValidationError
from django.http import Http404
from django.shortcuts import redirect
from django.views.decorators.http import require_http_methods, require_POST

from fleet.bench_services import open_visit, pump_pairs
from fleet.models import Rental, Role, Unit
from fleet.services import ServiceError
from scheduling.services import stored_positions
from scheduling.triage import REPLACE

from .. import bench, selectors
from ..bench_forms import CapacitorReadingForm, IntakeForm, RailReadingForm, RecapChoiceForm, RecapForm, ReleaseForm
from ..workflows import checkout_reason_needed
from .access import page, technician_required
from .display import designator_key, forecast_display, safety, unit_forecast
from .readings import reading_rows, reading_summary


def _unit(asset_tag):
    unit = selectors.unit_by_tag(asset_tag)
    if unit is None:
        raise Http404(f"No unit has the asset tag {asset_tag}.")
    return unit


def _put_errors(form, exc):
    """The register's refusal onto the form: per field where it names one."""
    if isinstance(exc, ValidationError) and hasattr(exc, "error_dict"):
        for field, errors in exc.message_dict.items():
            form.add_error(field if field in form.fields else None, errors)
    elif isinstance(exc, ValidationError):
        for msg in exc.messages:
            form.add_error(None, msg)
    else:
        form.add_error(None, str(exc))


def _bench_page(request, unit, *, intake=None, cap_form=None, rail_form=None, status=200):
    caps = selectors.unit_capacitors(unit)
    pumps = pump_pairs(unit.pk)
    if rail_form is None:
        initial = {}
        if len(pumps) == 1:
            fly = next(iter(pumps.values()))[0].position
            initial = {"rail_name": f"-{fly.pump_input_v:g}V", "rail_load_ma": f"{fly.pump_load_a * 1000:g}"}
        rail_form = RailReadingForm(initial=initial)
    cap_form = cap_form or CapacitorReadingForm(initial={"esr_freq_hz": 100})
    target = cap_form if cap_form.is_bound else (rail_form if rail_form.is_bound else cap_form)
    first = next((n for n in target.fields if n in target.errors), "designator" if target is cap_form else "rail_name")
    target.fields[first].widget.attrs["autofocus"] = True
    return page(request, "front/bench.html", {
        "unit": unit,
        "visit": open_visit(unit.pk),
        "safety": safety(unit, caps),
        "forecast": forecast_display(unit_forecast(unit)),
        # what the desk wrote when it came back: the fault the technician is to find
        "last_back": Rental.objects.filter(unit=unit, in_at__isnull=False).order_by("-in_at").first(),
        "intake": intake or IntakeForm(),
        "cap_form": cap_form,
        "rail_form": rail_form,
        "designators": [c.position.designator for c in caps],
        "new_figures": [{"designator": c.position.designator, "role": c.position.get_role_display(),
                         "esr": f"{c.initial_esr_ohm:.3g}", "capacitance": f"{c.capacitance_uf:g}"} for c in caps],
        "pumps": sorted(pumps),
        "readings": reading_rows(selectors.unit_readings(unit)),
    }, status=status)


@technician_required
def bench_unit(request, asset_tag):
    unit = _unit(asset_tag)
    if unit.asset_tag != asset_tag:
        return redirect("bench_unit", asset_tag=unit.asset_tag)
    return _bench_page(request, unit)


@technician_required
@require_POST
def bench_intake(request, asset_tag):
    unit = _unit(asset_tag)
    form = IntakeForm(request.POST)
    if form.is_valid():
        try:
            bench.bench_intake(unit_id=unit.pk, notes=form.cleaned_data["notes"], user=request.user)
        except ServiceError as exc:
            form.add_error(None, str(exc))
        else:
            messages.success(request, f"{unit.asset_tag} is on the bench.")
            return redirect("bench_unit", asset_tag=unit.asset_tag)
    unit.refresh_from_db()
    return _bench_page(request, unit, intake=form, status=200)


@technician_required
@require_POST
def bench_reading(request, asset_tag):
    unit = _unit(asset_tag)
    rail = "rail-rail_name" in request.POST
    form = RailReadingForm(request.POST) if rail else CapacitorReadingForm(request.POST)
    if form.is_valid():
        data = form.cleaned_data
        try:
            outcome = bench.bench_reading_record(unit_id=unit.pk, user=request.user, **data)
        except (ServiceError, ValidationError) as exc:
            _put_errors(form, exc)
        else:
            messages.success(request, reading_summary(outcome))
            return redirect("bench_unit", asset_tag=unit.asset_tag)
    return _bench_page(request, unit, **({"rail_form": form} if rail else {"cap_form": form}))


def _to_replace(unit, caps):
    """The designators the stored forecast says to replace, in designator order."""
    forecast = unit_forecast(unit)
    if forecast is None:
        return []
    by_id = {c.pk: c.position.designator for c in caps}
    wanted = {by_id.get(int(rec["capacitor_id"])) for rec in stored_positions(forecast)
              if int(rec["action"]) == REPLACE}
    return [by_id[c.pk] for c in sorted(caps, key=lambda c: designator_key(c.position.designator))
            if by_id[c.pk] in wanted]


@technician_required
@require_http_methods(["GET", "POST"])
def bench_recap(request, asset_tag):
    unit = _unit(asset_tag)
    caps = selectors.unit_capacitors(unit)
    roles = sorted({(c.position.role, c.position.get_role_display()) for c in caps}, key=lambda r: r[1])
    source = request.POST if request.method == "POST" else request.GET
    choice = RecapChoiceForm(source if "choice" in source else None, roles=roles,
                             designators=[c.position.designator for c in caps])
    chosen, form, problem = [], None, None
    if choice.is_bound and choice.is_valid():
        d = choice.cleaned_data
        try:
            chosen = bench.recap_positions(unit_id=unit.pk, choice=d["choice"], role=d["role"], designators=d["pick"])
        except ServiceError as exc:
            problem = str(exc)
    if chosen:
        suggestions = {c.position.designator: bench.replacement_suggestion(c)[0] for c in chosen}
        form = RecapForm(request.POST if request.method == "POST" else None, caps=chosen, suggestions=suggestions)
        if request.method == "POST" and form.is_valid():
            replacements, removed = form.replacements()
            try:
                record = bench.bench_recap(unit_id=unit.pk, replacements=replacements, removed_readings=removed,
                                           user=request.user, notes=form.cleaned_data["notes"],
                                           signed_off=form.cleaned_data["signed_off"])
            except (ServiceError, ValidationError) as exc:
                _put_errors(form, exc)
            else:
                names = ", ".join(p.position.designator for p in record.replaced.all())
                messages.success(request, f"Recap recorded and signed off: {names} replaced. The forecast is "
                                          "recomputed; release the unit when it has been tested.")
                return redirect("bench_unit", asset_tag=unit.asset_tag)
    return page(request, "front/bench_recap.html", {
        "unit": unit, "choice": choice, "form": form, "rows": form.bound_rows() if form else [],
        "to_replace": _to_replace(unit, caps),
        "problem": problem, "on_bench": unit.status == Unit.Status.BENCH,
        "low_esr": {c.position.designator for c in chosen if c.position.role in (Role.PUMP_FLYING,
                                                                                 Role.PUMP_RESERVOIR)},
        "safety": safety(unit, caps),
    })


@technician_required
@require_http_methods(["GET", "POST"])
def bench_release(request, asset_tag):
    unit = _unit(asset_tag)
    form = ReleaseForm(request.POST or None)
    if request.method == "POST" and form.is_valid():
        d = form.cleaned_data
        try:
            bench.bench_release(unit_id=unit.pk, user=request.user, notes=d["notes"],
                                keep_held_reason=d["reason"] if d["decision"] == "hold" else "")
        except ServiceError as exc:
            form.add_error(None, str(exc))
        else:
            unit.refresh_from_db()
            if unit.status == Unit.Status.HOLD:
                messages.success(request, f"{unit.asset_tag} stays held: {unit.hold_reason}")
            else:
                messages.success(request, f"{unit.asset_tag} is released: the desk may hire it out.")
            return redirect("unit_detail", asset_tag=unit.asset_tag)
    visit = open_visit(unit.pk)
    caps = selectors.unit_capacitors(unit)
    return page(request, "front/bench_release.html", {
        "unit": unit, "form": form, "visit": visit,
        # what this visit did, and what the forecast still asks for
        "visit_readings": visit.readings.count() if visit else 0,
        "visit_recaps": list(visit.service_records.prefetch_related("replaced__position")) if visit else [],
        "to_replace": _to_replace(unit, caps),
        "safety": safety(unit, caps),
        "forecast": forecast_display(unit_forecast(unit)),
        "desk_reason": checkout_reason_needed(unit_forecast(unit)),
    })
