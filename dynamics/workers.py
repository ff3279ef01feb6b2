"""Worker processes that die with the process that started them.

A ``concurrent.futures.ProcessPoolExecutor`` worker outlives its parent when the parent is
killed with SIGKILL: nothing tells it to stop, and it goes on computing for nobody. Pass
:func:`die_with_parent` as the pool's ``initializer`` (any pool: forecasts, screenings, the
service's geometry worker)::

    ProcessPoolExecutor(max_workers=2, mp_context=ctx, initializer=die_with_parent,
                        initargs=(os.getpid(),))

and each worker ends itself within :data:`PARENT_POLL_S` once its parent is gone.

How: a daemon thread in the worker compares ``os.getppid()`` with the parent's pid every
:data:`PARENT_POLL_S` seconds (an orphan is re-parented, so its parent pid changes) and calls
``os._exit`` when they differ. The thread gets its turn while the worker computes, because the
integrations run in C with the interpreter lock released (REBOUND is called through ctypes) and
the interpreter switches threads every few milliseconds otherwise. Linux's
``prctl(PR_SET_PDEATHSIG)`` is not used: it fires when the *thread* that started the worker
ends, and pools start workers from whichever thread submits first (a web server's short-lived
worker threads), which would kill healthy workers.
"""

import os
import threading

#: Interval between two looks at the parent process (s); no source: short against a job's
#: minutes, long against the cost of one ``getppid`` call (microseconds).
PARENT_POLL_S = 0.5
#: Exit status of a worker that ended because its parent was gone (no source; any non-zero).
ORPHAN_EXIT_STATUS = 3


def _watch(parent_pid: int) -> None:
    while True:
        if os.getppid() != parent_pid:
            os._exit(ORPHAN_EXIT_STATUS)
        threading.Event().wait(PARENT_POLL_S)


def die_with_parent(parent_pid: int | None = None) -> None:
    """Pool initializer: end this worker process soon after its parent process ends.

    Parameters
    ----------
    parent_pid : int, optional
        The pid of the process that owns the pool (pass ``os.getpid()`` from it); default: this
        worker's parent at start-up.
    """
    parent_pid = os.getppid() if parent_pid is None else int(parent_pid)
    if os.getppid() != parent_pid:  # already orphaned before the watch began
        os._exit(ORPHAN_EXIT_STATUS)
    threading.Thread(target=_watch, args=(parent_pid,), name="die-with-parent", daemon=True).start()
