"""CSV import and export (managers)."""

from django.http import Http404, HttpResponse
from django.utils import timezone
from django.views.decorators.http import require_http_methods

from fleet import csvio

from .. import workflows
from ..forms import CsvUploadForm
from .access import manager_required, page

CSV_KINDS = ["locations", "temperature_samples", "gear_models", "positions", "units"]
CSV_KIND_LABELS = {
    "locations": "Locations",
    "temperature_samples": "Temperature samples",
    "gear_models": "Gear models",
    "positions": "Capacitor positions",
    "units": "Units",
}


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
    outcome = None
    if request.method == "POST" and csvio is not None:
        form = CsvUploadForm(request.POST, request.FILES)
        if form.is_valid():
            ordered = import_order(csvio, form.cleaned_data["files"])
            imported, failed, skipped = [], None, []
            for index, f in enumerate(ordered):
                try:
                    report = workflows.import_csv(f, name=f.name, user=request.user)
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
    return page(request, "front/csv_import.html", {
        "form": form,
        "outcome": outcome,
        "available": csvio is not None,
        "kinds": [(k, CSV_KIND_LABELS[k]) for k in CSV_KINDS],
    })


@manager_required
def csv_export(request, kind):
    if kind not in CSV_KINDS:
        raise Http404("No such export.")
    stamp = timezone.localdate().isoformat()
    response = HttpResponse(content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="{kind}-{stamp}.csv"'
    csvio.export_csv(kind, response)
    return response
