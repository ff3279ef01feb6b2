"""Synchronous computations bounded in time and stopped when their client goes away.

``POST /v1/geometry`` answers in the request, but its numerical searches must never hold the
server: :class:`BoundedWorkers` runs such a call in a separate worker process (which dies with
the server, :func:`dynamics.workers.die_with_parent`) and waits at most
``settings.request_max_seconds``. Past that, or as soon as the client disconnects, the worker is
killed (a Python thread cannot be stopped; a process can) and a fresh one serves the next call.
"""

import asyncio
import concurrent.futures as cf
import logging
import threading
import time

from .runner import kill_pool, make_local_pool

log = logging.getLogger("trailcast.bounded")

#: How often the wait looks at the client connection (s); no source: well below a human's
#: patience, well above the cost of the check.
DISCONNECT_POLL_S = 0.2


class TimeLimitExceeded(Exception):
    """The computation ran past its limit; its worker was stopped."""


class ClientGone(Exception):
    """The client disconnected; its computation was stopped."""


class BoundedWorkers:
    """A small process pool whose calls are bounded in time (see the module doc)."""

    def __init__(self, workers: int = 1):
        self.workers = workers
        self._lock = threading.Lock()
        self._pool: cf.ProcessPoolExecutor | None = None

    def _get(self) -> cf.ProcessPoolExecutor:
        with self._lock:
            if self._pool is None:
                self._pool = make_local_pool(self.workers)
            return self._pool

    def _kill(self, pool: cf.ProcessPoolExecutor) -> None:
        """Kill the pool's processes (a running call cannot be cancelled otherwise)."""
        with self._lock:
            if self._pool is pool:
                self._pool = None
        kill_pool(pool)

    async def run(self, request, limit_s: float, fn, *args):
        """``fn(*args)`` in a worker; raises TimeLimitExceeded or ClientGone after killing it."""
        pool = self._get()
        try:
            future = pool.submit(fn, *args)
        except cf.process.BrokenProcessPool:
            self._kill(pool)
            pool = self._get()
            future = pool.submit(fn, *args)
        wrapped = asyncio.wrap_future(future)
        deadline = time.monotonic() + limit_s
        while True:
            try:
                return await asyncio.wait_for(asyncio.shield(wrapped), DISCONNECT_POLL_S)
            except TimeoutError:
                pass
            if time.monotonic() > deadline:
                self._kill(pool)
                raise TimeLimitExceeded(f"stopped after {limit_s:g} s")
            if request is not None and await request.is_disconnected():
                self._kill(pool)
                log.info("client disconnected: computation stopped")
                raise ClientGone

    def close(self) -> None:
        with self._lock:
            pool, self._pool = self._pool, None
        if pool is not None:
            self._kill(pool)
