"""Printed output for technicians and managers: a unit's service sheet (to
print or download), the due list and the parts list for the top of it."""

from django.http import Http404, HttpResponse

from reports.duelist import PARTS_UNITS
from reports.services import UnknownUnit, due_list_pdf, parts_list_csv, parts_list_pdf, sheet_pdf

from .access import technician_required


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
