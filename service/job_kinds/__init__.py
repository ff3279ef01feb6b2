"""The kinds of job the service runs, each a small module saying how to run one and store it.

A kind is a :class:`JobKind`: its ``name`` (the ``kind`` column of the ``jobs`` table), ``run``
(compute the result JSON from the job's canonical request, reporting progress through the
:class:`~service.runner.RunContext`) and ``store_result`` (anything kept beside the result, in
the transaction that marks the job done). Queue, leases, recovery, dead worker pools, cancel,
time limits, progress and retention are the same for every kind and live in
:mod:`service.jobs` and :mod:`service.runner`.
"""

from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class JobKind:
    """How one kind of job runs and what it stores beside its result."""

    name: str
    #: ``run(job, ctx) -> dict``: the result JSON.
    run: Callable
    #: ``store_result(conn, job, result)``: extra rows in the ``done`` transaction (or None).
    store_result: Callable | None = None
    #: Title of the problem when a run fails unexpectedly.
    failure_title: str = "Job failed"
    #: ``read_result(result) -> dict``: a stored result as readers expect it today (fields an
    #: older version did not store, derived from what it did); never written back (or None).
    read_result: Callable | None = None


def kinds() -> dict[str, JobKind]:
    """Every kind by name."""
    from . import forecast, screening

    return {k.name: k for k in (forecast.KIND, screening.KIND)}


def result_hooks() -> dict:
    """``store_result`` of every kind that has one, by name."""
    return {name: k.store_result for name, k in kinds().items() if k.store_result is not None}


def read_hooks() -> dict:
    """``read_result`` of every kind that has one, by name."""
    return {name: k.read_result for name, k in kinds().items() if k.read_result is not None}
