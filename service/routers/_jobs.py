"""Route helpers shared by the job resources (forecasts, screenings, plots).

Both job stores answer ``get(job_id, with_result=True)`` and ``cancel(job_id)`` and raise
:class:`~service.jobs.JobNotFound` / :class:`~service.jobs.JobConflict`; these helpers turn that
into the documented problems once, instead of once per router.
"""

from collections.abc import Callable

from fastapi import Response

from ..jobs import JobConflict, JobNotFound
from ..problems import TYPE_BASE, ProblemError


def finished_job(
    store, job_id: str, not_found: Callable[[str], ProblemError], label: str, products: str
):
    """The job with its result, or 404 (unknown) / 409 (not done yet: ``products`` don't exist)."""
    try:
        job = store.get(job_id, with_result=True)
    except JobNotFound:
        raise not_found(job_id) from None
    if job.state != "done" or job.result is None:
        raise ProblemError(
            409,
            "Conflict",
            f"{label} {job_id} is {job.state}: {products} exist once it is done",
            TYPE_BASE + "job-not-done",
            state=job.state,
        )
    return job


def cancel_job(store, job_id: str, response: Response, not_found: Callable[[str], ProblemError]):
    """Cancel a queued (200) or running (202, stops after its current step) job; 404 / 409."""
    try:
        job = store.cancel(job_id)
    except JobNotFound:
        raise not_found(job_id) from None
    except JobConflict as exc:
        raise ProblemError(409, "Conflict", str(exc), TYPE_BASE + "job-finished") from None
    if job.state == "running":
        response.status_code = 202
    return job
