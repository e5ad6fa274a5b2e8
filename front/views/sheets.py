"""Printed output for technicians and managers: a unit's service sheet (to
print or download), the due list and the parts list for the top of it, and
batches of sheets the worker builds while the page shows its progress."""

from django import forms
from django.http import Http404, HttpResponse, JsonResponse
from django.shortcuts import redirect

from reports import batches
from reports.duelist import PARTS_UNITS
from reports.models import SheetBatch
from reports.services import UnknownUnit, due_list_pdf, parts_list_csv, parts_list_pdf, sheet_pdf

from .access import page, technician_required


def pdf_response(data, filename, *, download=False):
    response = HttpResponse(data, content_type="application/pdf")
    disposition = "attachment" if download else "inline"
    response["Content-Disposition"] = f'{disposition}; filename="{filename}"'
    response["Cache-Control"] = "no-store"
    return response


@technician_required
def unit_sheet(request, asset_tag):
    """The service sheet of one unit, inline (to print) or, with
    ``?download=1``, as a file."""
    try:
        sheet, data = sheet_pdf(asset_tag=asset_tag)
    except UnknownUnit:
        raise Http404(f"No unit has the asset tag {asset_tag}.") from None
    return pdf_response(data, f"service-sheet-{sheet.asset_tag}.pdf", download=request.GET.get("download") == "1")


def _units_asked(request):
    try:
        units = int(request.GET.get("units", PARTS_UNITS))
    except ValueError:
        units = PARTS_UNITS
    return min(max(units, 1), 500)


@technician_required
def due_list(request):
    """The due list in triage order (PDF)."""
    dl, data = due_list_pdf()
    return pdf_response(data, f"due-list-{dl.today.isoformat()}.pdf", download=request.GET.get("download") == "1")


@technician_required
def parts_list(request, fmt):
    """The parts for the top ``?units=N`` units of the due list, as PDF or CSV."""
    if fmt not in ("pdf", "csv"):
        raise Http404("The parts list comes as .pdf or .csv.")
    units = _units_asked(request)
    if fmt == "csv":
        pl, text = parts_list_csv(units=units)
        response = HttpResponse(text, content_type="text/csv; charset=utf-8")
        response["Content-Disposition"] = f'attachment; filename="parts-list-{pl.today.isoformat()}.csv"'
        return response
    pl, data = parts_list_pdf(units=units)
    return pdf_response(data, f"parts-list-{pl.today.isoformat()}.pdf", download=request.GET.get("download") == "1")


# --- batches of sheets -------------------------------------------------------------


class BatchForm(forms.Form):
    CHOICE = (("top", "The top of the triage list"), ("tags", "These units"))
    which = forms.ChoiceField(choices=CHOICE, widget=forms.RadioSelect, initial="top")
    top = forms.IntegerField(label="How many", min_value=1, max_value=batches.MAX_UNITS, initial=20, required=False)
    tags = forms.CharField(label="Asset tags", required=False, widget=forms.Textarea(attrs={"rows": 3}),
                           help_text="Separated by spaces, commas or lines; scanned tags work.")

    def clean(self):
        data = super().clean()
        if data.get("which") == "top":
            n = data.get("top") or 20
            ids = batches.top_unit_ids(n)
            if not ids:
                raise forms.ValidationError("No unit needs work now: choose the units by asset tag.")
            data["unit_ids"], data["title"] = ids, f"Top {len(ids)} of the triage list"
        elif data.get("which") == "tags":
            try:
                data["unit_ids"] = batches.unit_ids_for_tags(data.get("tags") or "")
            except batches.BatchError as exc:
                message = str(exc)
                raise forms.ValidationError(message[:1].upper() + message[1:] + ".") from None
            data["title"] = f"{len(data['unit_ids'])} chosen unit{'s' if len(data['unit_ids']) != 1 else ''}"
        return data


def _batch_status(batch):
    n = len(batch.unit_ids)
    if batch.state == SheetBatch.State.DONE:
        phase = f"ready: {n} sheet{'s' if n != 1 else ''}"
    elif batch.state == SheetBatch.State.FAILED:
        phase = "failed: " + batch.error
    elif batch.state == SheetBatch.State.QUEUED:
        phase = "waiting for the worker"
    elif batch.done < n:
        phase = f"gathering the figures: {batch.done} of {n} units"
    else:
        phase = f"drawing: {batch.done - n} of {n} sheets"
    return {"state": batch.state, "percent": batch.percent, "phase": phase,
            "ready": batch.state == SheetBatch.State.DONE}


@technician_required
def sheet_batches(request):
    """Ask for many sheets at once; the worker builds them into one PDF."""
    form = BatchForm(request.POST or None)
    if request.method == "POST" and form.is_valid():
        batch = batches.batch_create(unit_ids=form.cleaned_data["unit_ids"], title=form.cleaned_data["title"],
                                     user=request.user)
        return redirect("sheet_batch", pk=batch.pk)
    recent = SheetBatch.objects.defer("pdf").select_related("requested_by")[:10]
    return page(request, "front/sheet_batches.html", {"form": form, "recent": recent, "max_units": batches.MAX_UNITS},
                status=400 if request.method == "POST" else 200)


@technician_required
def sheet_batch(request, pk):
    """A batch's progress: a page that polls, or its figures as JSON."""
    batch = SheetBatch.objects.defer("pdf").filter(pk=pk).first()
    if batch is None:
        raise Http404("No such batch of sheets.")
    status = _batch_status(batch)
    if request.GET.get("format") == "json":
        return JsonResponse(status)
    return page(request, "front/sheet_batch.html", {"batch": batch, "status": status})


@technician_required
def sheet_batch_pdf(request, pk):
    batch = SheetBatch.objects.filter(pk=pk, state=SheetBatch.State.DONE).first()
    if batch is None:
        raise Http404("That batch is not ready.")
    return pdf_response(bytes(batch.pdf), f"service-sheets-{batch.pk}.pdf", download=request.GET.get("download") == "1")
