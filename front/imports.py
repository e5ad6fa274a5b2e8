"""Importing the files of one upload, as the manager's import page does.

The files are sorted into the order the kinds depend on (locations first,
units last), each is imported all or nothing (``workflows.import_csv``), and
the import stops at the first file refused; files imported before it stay.

An upload of at most ``RECAP_IMPORT_INLINE_BYTES`` is imported while the
browser waits.  A larger one becomes an ``ImportJob``: its files are stored,
a background worker imports them (``front.tasks.import_job_run``), and the
job page shows how far it got (files done in the database; rows read in the
current file in the cache, since the file's own transaction holds SQLite's
write lock until it ends) and then the result.  No web worker is ever kept
busy long enough to be killed.  Above ``RECAP_UPLOAD_MAX_BYTES`` the page
refuses the upload and points to ``manage.py import_fleet``.
"""

import io

from django.core.cache import cache
from django.db import transaction
from django.utils import timezone

from fleet import csvio

from . import workflows
from .models import ImportJob, ImportJobFile

KIND_LABELS = {
    "locations": "Locations",
    "temperature_samples": "Temperature samples",
    "gear_models": "Gear models",
    "positions": "Capacitor positions",
    "units": "Units",
}
#: Messages of a refused file kept for the page (the rest are counted).
MAX_ERRORS_SHOWN = 100
#: How long the rows-read figure of a running job is kept [s].
PROGRESS_SECONDS = 6 * 3600


class NamedFile(io.BytesIO):
    """A stored file's bytes with the name it was uploaded under."""

    def __init__(self, data, name):
        super().__init__(bytes(data))
        self.name = name
        self.size = len(data)


def import_order(files):
    """Files sorted into the order the imports depend on (locations first,
    units last), the kind read from each file's header row.  A file whose
    header cannot be read goes last (its import then fails and says why)."""
    order = list(csvio.IMPORT_ORDER)
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


def _errors(exc):
    errors = [str(e) for e in (getattr(exc, "errors", None) or [str(exc)])]
    total = max(getattr(exc, "total", 0) or 0, len(errors))
    shown = errors[:MAX_ERRORS_SHOWN]
    return {"errors": shown, "more": total - len(shown)}


def import_files(files, *, user=None, on_file=None, progress=None):
    """Import the files of one upload; returns the outcome the page shows:
    ``{"imported": [{name, kind, summary}], "failed": {name, errors, more} or
    None, "skipped": [names], "order": [names]}``.

    ``on_file(index, name)`` is called before each file; ``progress(rows)``
    every batch of rows read.  Each file is recorded as ``user``'s upload
    (``ImportRecord``).
    """
    ordered = import_order(files)
    imported, failed, skipped = [], None, []
    for index, f in enumerate(ordered):
        if on_file is not None:
            on_file(index, f.name)
        try:
            report = workflows.import_csv(f, name=f.name, user=user, source="upload", progress=progress)
        except csvio.CsvImportError as exc:
            failed = {"name": f.name, **_errors(exc)}
            skipped = [g.name for g in ordered[index + 1:]]
            break
        imported.append({"name": f.name, "kind": KIND_LABELS.get(report.kind, report.kind),
                         "summary": report.summary()})
    return {"imported": imported, "failed": failed, "skipped": skipped, "order": [f.name for f in ordered]}


# --- background jobs --------------------------------------------------------------------------

def import_job_create(*, files, user=None):
    """Store an upload's files as a job and queue it once this is committed."""
    from .tasks import import_job_run

    with transaction.atomic():
        job = ImportJob.objects.create(created_by=user if user is not None and user.is_authenticated else None)
        for position, f in enumerate(files):
            f.seek(0)
            data = f.read()
            ImportJobFile.objects.create(job=job, position=position, name=f.name, size=len(data), data=data)
        transaction.on_commit(lambda: import_job_run.delay(job.pk))
    return job


def _progress_key(job_id):
    return f"recap:import-job:{job_id}:rows"


def import_job_progress(job):
    """Rows read so far in the file being imported (None when not known)."""
    if job.state != ImportJob.State.RUNNING:
        return None
    return cache.get(_progress_key(job.pk))


def import_job_run(*, job_id):
    """Import a job's files (the background task calls this).  Safe to run
    twice: a finished job is left alone, and an unfinished one starts again
    (files imported already import again unchanged).  Returns the job."""
    job = ImportJob.objects.filter(pk=job_id).first()
    if job is None or job.finished:
        return job
    ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.RUNNING, started_at=timezone.now(),
                                               files_done=0, current_file="")
    files = [NamedFile(f.data, f.name) for f in job.files.all()]
    current = {"name": ""}

    def on_file(index, name):
        current["name"] = name
        ImportJob.objects.filter(pk=job.pk).update(files_done=index, current_file=name)
        cache.set(_progress_key(job.pk), 0, PROGRESS_SECONDS)

    def progress(rows):
        cache.set(_progress_key(job.pk), rows, PROGRESS_SECONDS)

    try:
        outcome = import_files(files, user=job.created_by, on_file=on_file, progress=progress)
        state = ImportJob.State.FAILED if outcome["failed"] else ImportJob.State.DONE
    except Exception as exc:  # reported on the job's page; the file being imported was rolled back
        outcome = {"imported": [], "skipped": [], "order": [f.name for f in files],
                   "failed": {"name": current["name"] or "the upload",
                              "errors": [f"The import stopped before the end ({exc.__class__.__name__}); nothing "
                                         f"of this file was saved. Upload it again, or import it with "
                                         f"manage.py import_fleet."], "more": 0}}
        state = ImportJob.State.FAILED
        ImportJob.objects.filter(pk=job.pk).update(state=state, finished_at=timezone.now(), outcome=outcome)
        ImportJobFile.objects.filter(job=job).delete()
        cache.delete(_progress_key(job.pk))
        raise
    ImportJob.objects.filter(pk=job.pk).update(
        state=state, finished_at=timezone.now(), outcome=outcome, current_file="",
        files_done=len(outcome["imported"]))
    ImportJobFile.objects.filter(job=job).delete()  # the result is kept; the bytes are not needed any more
    cache.delete(_progress_key(job.pk))
    job.refresh_from_db()
    return job
