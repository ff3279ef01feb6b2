"""One way to run integration chunks: in this process, in local worker processes, or on Dask.

Every stage of the dust-trail pipeline that integrates meteoroids hands its chunks to
:func:`run_tasks`; every process pool of the engine comes from :func:`make_executor`. Chunks are
independent (meteoroids are test particles), so results never depend on where a chunk ran.
"""

import concurrent.futures as cf
import multiprocessing
import os
from collections.abc import Callable, Sequence
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from .crossings import node_crossings
from .nbody import MassiveBodies, integrate_particles
from .workers import die_with_parent


def default_workers() -> int:
    """Worker processes used when the caller does not say: one per core this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def process_pool(workers: int) -> cf.ProcessPoolExecutor:
    """A process pool of ``workers`` processes: ``spawn`` (safe under a threaded web server)
    and workers that die with this process (no orphans after a SIGKILL). Every process pool
    of trailcast comes from here; the caller shuts it down."""
    ctx = multiprocessing.get_context("spawn")
    return cf.ProcessPoolExecutor(
        max_workers=workers,
        mp_context=ctx,
        initializer=die_with_parent,
        initargs=(os.getpid(),),
    )


def warm_up() -> int:
    """Load what every chunk needs in a fresh worker (REBOUND, REBOUNDx, DE423), and return
    the worker's pid."""
    import rebound  # noqa: F401
    import reboundx  # noqa: F401

    from .ephemeris import barycentric_states

    barycentric_states(("sun", "earthmoon"), 2451545.0)
    return os.getpid()


@contextmanager
def make_executor(workers: int):
    """:func:`process_pool` as a context manager, or None for ``workers <= 1`` (run in this
    process).

    The workers start at once, each loading its libraries and DE423 (:func:`warm_up`), while
    this process goes on with the serial stages (parent history, candidate draws); a process
    pool otherwise starts them at the first chunk, whose start-up then adds to the first
    round (measured here: 0.3 s of a 0.9 s pilot round of a one-trail forecast).
    """
    if workers <= 1:
        yield None
        return
    with process_pool(workers) as pool:
        for _ in range(workers):  # each submission beyond the running workers starts one
            pool.submit(warm_up)
        yield pool


@dataclass(frozen=True)
class Task:
    """One integration chunk: meteoroids released from one parent return, output times."""

    key: tuple
    bodies: MassiveBodies
    release_t: np.ndarray
    r: np.ndarray
    v: np.ndarray
    beta: np.ndarray
    out_t: np.ndarray
    integrator: str
    dt_days: float
    #: When set ("ascending"/"descending"), the worker also finds where each meteoroid crosses
    #: Earth's path at that node and returns those crossings instead of the raw states: the
    #: crossing geometry then runs in parallel, and far less data travels back.
    node: str | None = None


def run_task(task: Task):
    """Integrate one chunk (top-level so that worker processes can run it)."""
    snaps = integrate_particles(
        task.bodies,
        task.release_t,
        task.r,
        task.v,
        task.beta,
        task.out_t,
        integrator=task.integrator,
        dt_days=task.dt_days,
    )
    if task.node is None:
        return snaps
    return node_crossings(snaps, task.beta, task.node)


def task_cost(task: Task) -> float:
    """Rough cost of a chunk: meteoroids times days integrated (the step count's scale)."""
    return float(len(task.beta)) * float(task.out_t[-1] - task.bodies.t_tdb_jd)


def run_tasks(
    tasks: Sequence[Task], executor=None, on_done: Callable[[int, int], None] | None = None
):
    """Run integration chunks and return their results in the order given (the costliest are
    started first).

    ``executor`` is anything with ``submit`` (a process pool from :func:`make_executor`, a Dask
    client's executor) or None (this process). ``on_done(k, n)`` is called after each chunk; an
    exception it raises (e.g. a cancelled job) stops the run and cancels chunks not yet started.
    """
    n = len(tasks)
    report = on_done or (lambda k, total: None)
    if executor is None or n <= 1:
        out = []
        for k, t in enumerate(tasks):
            out.append(run_task(t))
            report(k + 1, n)
        return out
    # longest first (the LPT rule of scheduling, Graham 1969): the last chunks to start are
    # the short ones, so workers wait least for each other at the end of a round
    order = sorted(range(n), key=lambda k: -task_cost(tasks[k]))
    futures = [None] * n
    for k in order:
        futures[k] = executor.submit(run_task, tasks[k])
    try:
        for k, _ in enumerate(cf.as_completed(futures)):
            report(k + 1, n)
        return [f.result() for f in futures]
    except BaseException:
        for f in futures:
            f.cancel()
        raise
