"""Background jobs of the pages: thin wrappers around their workflows.

Arguments are ids; each task is safe to run twice and has time limits.
"""

from celery import shared_task


@shared_task(name="front.import_job_run", acks_late=True, soft_time_limit=3300, time_limit=3600)
def import_job_run(job_id):
    """Import the files of one upload kept as an ``ImportJob`` (``front.imports``)."""
    if not isinstance(job_id, int) or isinstance(job_id, bool) or job_id <= 0:
        raise ValueError(f"job_id must be a positive whole number, not {job_id!r}")
    from .imports import import_job_run as run

    job = run(job_id=job_id)
    return {"state": job.state if job is not None else "missing"}
