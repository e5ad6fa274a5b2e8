"""CSV import and export (managers): small uploads at once, large ones as a
background job with a page of its own (``front.imports``)."""

from django.conf import settings
from django.http import Http404, HttpResponse
from django.shortcuts import get_object_or_404, redirect
from django.utils import timezone
from django.views.decorators.http import require_http_methods

from fleet import csvio

from .. import imports
from ..forms import CsvUploadForm
from ..models import ImportJob
from .access import manager_required, page

CSV_KINDS = list(imports.KIND_LABELS)
CSV_KIND_LABELS = imports.KIND_LABELS
#: Jobs listed on the import page.
RECENT_JOBS = 5


@manager_required
@require_http_methods(["GET", "POST"])
def csv_import(request):
    outcome = None
    if request.method == "POST":
        form = CsvUploadForm(request.POST, request.FILES)
        if form.is_valid():
            files = form.cleaned_data["files"]
            if sum(f.size for f in files) > settings.RECAP_IMPORT_INLINE_BYTES:
                job = imports.import_job_create(files=files, user=request.user)
                return redirect("import_job", pk=job.pk)
            outcome = imports.import_files(files, user=request.user)
            form = CsvUploadForm()
    else:
        form = CsvUploadForm()
    return page(request, "front/csv_import.html", {
        "form": form,
        "outcome": outcome,
        "available": True,
        "kinds": [(k, CSV_KIND_LABELS[k]) for k in CSV_KINDS],
        "jobs": ImportJob.objects.order_by("-created_at")[:RECENT_JOBS],
        "inline_mb": settings.RECAP_IMPORT_INLINE_BYTES / 1e6,
    })


@manager_required
def import_job(request, pk):
    """A background import: how far it got, then its result."""
    job = get_object_or_404(ImportJob, pk=pk)
    files = list(job.files.values_list("name", "size")) if not job.finished else []
    return page(request, "front/import_job.html", {
        "job": job,
        "outcome": job.outcome if job.finished else None,
        "rows": imports.import_job_progress(job),
        "files": files,
        "refresh_seconds": 3,
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
