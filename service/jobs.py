"""Every kind of job in one table: identity, queue, leases, progress, results and retention.

A job's id is a hash of its canonical inputs (for a forecast: the validated orbit, the years,
every model option with its default filled in, and the model version), so the same question asked
twice finds the same job, and a finished answer is served again instead of being recomputed.

States: ``queued`` -> ``running`` -> ``done`` | ``failed`` | ``cancelled`` (a queued job can be
cancelled directly). A running job is held by one runner (``host:pid:token``) that renews its
heartbeat; a job whose runner died is put back in the queue (:meth:`JobStore.recover`). The
result, whatever its kind stores beside it (a forecast's encounter rows) and the move to ``done``
are one transaction. What differs between kinds (how to run one, what to store beside its
result) lives in :mod:`service.job_kinds`; this module knows nothing of forecasts or batches.

While a job runs its progress stays below 1 and its stage is never ``done``: only the move to
``done`` says so, so that state and progress never contradict each other.
"""

import hashlib
import json
import os
import secrets
import socket
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import UTC, datetime, timedelta

from .storage import Store

STATES = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATES = ("done", "failed", "cancelled")
#: Highest progress fraction a running job shows (the rest is storing its result).
RUNNING_FRACTION_MAX = 0.99
#: Stage shown instead of a computation's own "done" until the result is stored.
STORING_STAGE = "storing the result"
#: Problem type base (kept here so that this module needs nothing from the web layer).
PROBLEM_TYPE_BASE = "https://trailcast.invalid/problems/"


class JobNotFound(LookupError):
    """No job (of this kind) has this id."""


class JobConflict(RuntimeError):
    """The job's state does not allow the operation (e.g. cancelling a finished job)."""


class QueueFull(RuntimeError):
    """As many jobs are queued as the settings allow; submit again later."""


class LeaseLost(RuntimeError):
    """This runner no longer holds the job (it was re-queued or cancelled meanwhile)."""


def utc_now() -> datetime:
    return datetime.now(UTC)


def format_wall_utc(t: datetime) -> str:
    """A wall-clock ``datetime`` as ISO 8601 UTC with ``Z``, millisecond precision (sorts as
    text). Not :func:`dynamics.timescales.format_utc`, which formats TDB Julian dates."""
    return t.astimezone(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def parse_utc(text: str | None) -> datetime | None:
    if text is None:
        return None
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def seconds_between(a: str | None, b: str | None) -> float | None:
    """Seconds from ``a`` to ``b`` (or to now when ``b`` is None); None without ``a``."""
    if a is None:
        return None
    end = parse_utc(b) if b else utc_now()
    return round((end - parse_utc(a)).total_seconds(), 3)


def canonical_json(value) -> str:
    """Deterministic JSON: sorted keys, no spaces, floats by ``repr`` (round-trip exact)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False)


def job_id_for(request: dict) -> str:
    """The job id of a canonical request (which includes the model version)."""
    return hashlib.sha256(canonical_json(request).encode("utf-8")).hexdigest()[:32]


def canonical_request(orbit_json: dict, first_year: int, last_year: int, options: dict) -> dict:
    """The inputs a forecast job's id hashes: orbit as parsed, years, options, version."""
    from dynamics import __version__

    return {
        "orbit": orbit_json,
        "years": [int(first_year), int(last_year)],
        "options": options,
        "model_version": __version__,
    }


@dataclass(frozen=True)
class Job:
    """One row of ``jobs`` (with the result when asked for and present)."""

    id: str
    kind: str
    state: str
    request: dict
    label: str
    first_year: int
    last_year: int
    model_version: str
    progress_fraction: float
    progress_stage: str
    items_done: int | None
    items_total: int | None
    created_utc: str
    queued_utc: str
    started_utc: str | None
    finished_utc: str | None
    heartbeat_utc: str | None
    runner: str | None
    attempts: int
    cancel_requested: bool
    error: dict | None
    result: dict | None = None

    @property
    def parent_name(self) -> str:
        """A forecast's parent name (its label)."""
        return self.label

    @classmethod
    def from_row(cls, row: sqlite3.Row, result_json: str | None = None) -> "Job":
        return cls(
            id=row["id"],
            kind=row["kind"],
            state=row["state"],
            request=json.loads(row["request_json"]),
            label=row["label"],
            first_year=row["first_year"],
            last_year=row["last_year"],
            model_version=row["model_version"],
            progress_fraction=row["progress_fraction"],
            progress_stage=row["progress_stage"],
            items_done=row["items_done"],
            items_total=row["items_total"],
            created_utc=row["created_utc"],
            queued_utc=row["queued_utc"],
            started_utc=row["started_utc"],
            finished_utc=row["finished_utc"],
            heartbeat_utc=row["heartbeat_utc"],
            runner=row["runner"],
            attempts=row["attempts"],
            cancel_requested=bool(row["cancel_requested"]),
            error=json.loads(row["error_json"]) if row["error_json"] else None,
            result=json.loads(result_json) if result_json else None,
        )

    def shown_progress(self) -> tuple[float, str]:
        """(fraction, stage) as shown: 1 and ``done`` only when done, never while running."""
        fraction = min(1.0, max(0.0, self.progress_fraction))
        if self.state == "done":
            return 1.0, "done"
        if self.state == "running":
            stage = STORING_STAGE if self.progress_stage == "done" else self.progress_stage
            return min(fraction, RUNNING_FRACTION_MAX), stage
        return fraction, self.progress_stage


def new_runner_name() -> str:
    """``host:pid:token``: who holds a running job (the token tells apart two lives of a pid)."""
    return f"{socket.gethostname()}:{os.getpid()}:{secrets.token_hex(4)}"


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _interrupted_error(attempts: int) -> str:
    return json.dumps(
        {
            "type": PROBLEM_TYPE_BASE + "job-interrupted",
            "title": "Job interrupted too often",
            "status": 500,
            "detail": f"the process running this job stopped {attempts} times; not retried again",
        }
    )


#: What a job kind stores beside its result, in the same transaction: ``(conn, job, result)``.
ResultHook = Callable[[sqlite3.Connection, Job, dict], None]


class JobStore:
    """Job operations on a :class:`service.storage.Store`; every write is one transaction.

    ``result_hooks`` maps a kind to what it stores beside its result (default: the hooks of
    :mod:`service.job_kinds`); results are read through their kind's ``read_result`` (results
    stored by older versions stay readable as today's readers expect them).
    """

    def __init__(self, store: Store, result_hooks: dict[str, ResultHook] | None = None):
        from .job_kinds import read_hooks

        self.store = store
        if result_hooks is None:
            from .job_kinds import result_hooks as default_hooks

            result_hooks = default_hooks()
        self.result_hooks = result_hooks
        self.read_hooks = read_hooks()

    # --- submitting and reading -------------------------------------------------------------

    def submit(
        self,
        request: dict,
        label: str,
        max_queued: int,
        *,
        kind: str = "forecast",
        items_total: int | None = None,
    ) -> tuple[Job, bool]:
        """Queue the job for ``request`` unless it exists; return it and whether it was queued.

        A failed or cancelled job with the same id is queued again (updated in place); a
        queued, running or done one is returned unchanged (a done one with its result).

        Raises
        ------
        QueueFull
            ``max_queued`` jobs (of any kind) are already waiting.
        """
        job_id = job_id_for(request)
        now = format_wall_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute("SELECT state, kind FROM jobs WHERE id = ?", (job_id,)).fetchone()
            if row is not None and row["state"] in ("queued", "running", "done"):
                queued = False
            else:
                waiting = conn.execute(
                    "SELECT COUNT(*) FROM jobs WHERE state = 'queued'"
                ).fetchone()[0]
                if waiting >= max_queued:
                    raise QueueFull(f"{waiting} jobs are queued (limit {max_queued})")
                if row is None:
                    conn.execute(
                        "INSERT INTO jobs (id, kind, state, request_json, label, series_key, "
                        "first_year, last_year, model_version, progress_stage, items_done, "
                        "items_total, created_utc, queued_utc) VALUES (?, ?, 'queued', ?, ?, "
                        "CASE WHEN ? = 'forecast' THEN ? || char(31) || "
                        "json_extract(?, '$.options') END, ?, ?, ?, 'queued', ?, ?, ?, ?)",
                        (
                            job_id,
                            kind,
                            canonical_json(request),
                            label,
                            kind,
                            label,
                            canonical_json(request),
                            request["years"][0],
                            request["years"][1],
                            request["model_version"],
                            0 if items_total is not None else None,
                            items_total,
                            now,
                            now,
                        ),
                    )
                else:  # failed or cancelled before: try again from scratch
                    conn.execute(
                        "UPDATE jobs SET state = 'queued', progress_fraction = 0, "
                        "progress_stage = 'queued', items_done = CASE WHEN items_total IS NULL "
                        "THEN NULL ELSE 0 END, queued_utc = ?, started_utc = NULL, "
                        "finished_utc = NULL, heartbeat_utc = NULL, runner = NULL, "
                        "attempts = 0, cancel_requested = 0, error_json = NULL WHERE id = ?",
                        (now, job_id),
                    )
                queued = True
        return self.get(job_id, with_result=True), queued

    def get(self, job_id: str, with_result: bool = False, kind: str | None = None) -> Job:
        """The job (and its result when ``with_result`` and done), read in one statement.

        Raises
        ------
        JobNotFound
            No job has this id, or it is not of ``kind`` (when given).
        """
        if with_result:
            rows = self.store.query(
                "SELECT j.*, r.result_json AS result_json FROM jobs j "
                "LEFT JOIN job_results r ON r.job_id = j.id WHERE j.id = ?",
                (job_id,),
            )
        else:
            rows = self.store.query("SELECT * FROM jobs WHERE id = ?", (job_id,))
        if not rows or (kind is not None and rows[0]["kind"] != kind):
            raise JobNotFound(job_id)
        row = rows[0]
        job = Job.from_row(row, row["result_json"] if with_result else None)
        hook = self.read_hooks.get(job.kind)
        if job.result is not None and hook is not None:
            job = replace(job, result=hook(job.result))
        return job

    def cancel(self, job_id: str, kind: str | None = None) -> Job:
        """Cancel a queued job at once, or ask the runner of a running job to stop.

        Raises
        ------
        JobNotFound, JobConflict
        """
        now = format_wall_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute("SELECT state, kind FROM jobs WHERE id = ?", (job_id,)).fetchone()
            if row is None or (kind is not None and row["kind"] != kind):
                raise JobNotFound(job_id)
            if row["state"] == "queued":
                conn.execute(
                    "UPDATE jobs SET state = 'cancelled', progress_stage = 'cancelled', "
                    "finished_utc = ?, cancel_requested = 1 WHERE id = ?",
                    (now, job_id),
                )
            elif row["state"] == "running":
                conn.execute("UPDATE jobs SET cancel_requested = 1 WHERE id = ?", (job_id,))
            else:
                raise JobConflict(f"job {job_id} is {row['state']}: nothing to cancel")
        return self.get(job_id)

    def counts_by_state(self, kind: str | None = "forecast") -> dict[str, int]:
        """Jobs per state (of ``kind``; every kind when None)."""
        counts = dict.fromkeys(STATES, 0)
        where, params = ("WHERE kind = ?", (kind,)) if kind else ("", ())
        for row in self.store.query(
            f"SELECT state, COUNT(*) AS n FROM jobs {where} GROUP BY state", params
        ):
            counts[row["state"]] = row["n"]
        return counts

    def duration_histogram(self, buckets_s: tuple[float, ...], kind: str = "forecast") -> dict:
        """Run times (start to finish) of done and failed jobs: cumulative bucket counts, sum."""
        sums = ", ".join(f"SUM(d <= {float(b)!r})" for b in buckets_s)
        rows = self.store.query(
            f"SELECT state, COUNT(*) AS n, COALESCE(SUM(d), 0) AS total, {sums} FROM ("
            "SELECT state, (julianday(finished_utc) - julianday(started_utc)) * 86400.0 AS d "
            "FROM jobs WHERE kind = ? AND state IN ('done', 'failed') "
            "AND started_utc IS NOT NULL AND finished_utc IS NOT NULL) GROUP BY state",
            (kind,),
        )
        out = {}
        for row in rows:
            values = tuple(row)
            out[row["state"]] = {
                "count": row["n"],
                "sum": row["total"],
                "buckets": [(b, values[3 + k] or 0) for k, b in enumerate(buckets_s)],
            }
        return out

    # --- the runner's side ------------------------------------------------------------------

    def claim_next(self, runner: str, kinds: tuple[str, ...] | None = None) -> Job | None:
        """Move the oldest queued job (of ``kinds``) to running, held by ``runner``."""
        now = format_wall_utc(utc_now())
        where, params = "state = 'queued'", []
        if kinds is not None:
            where += f" AND kind IN ({', '.join('?' * len(kinds))})"
            params.extend(kinds)
        with self.store.transaction() as conn:
            row = conn.execute(
                f"SELECT id FROM jobs WHERE {where} ORDER BY queued_utc, id LIMIT 1", params
            ).fetchone()
            if row is None:
                return None
            conn.execute(
                "UPDATE jobs SET state = 'running', runner = ?, started_utc = ?, "
                "heartbeat_utc = ?, attempts = attempts + 1, progress_fraction = 0, "
                "items_done = CASE WHEN items_total IS NULL THEN NULL ELSE 0 END, "
                "progress_stage = 'starting' WHERE id = ?",
                (runner, now, now, row["id"]),
            )
        return self.get(row["id"])

    def heartbeat(
        self,
        job_id: str,
        runner: str,
        fraction: float | None = None,
        stage: str | None = None,
        items_done: int | None = None,
    ) -> bool:
        """Renew the lease (and record progress); return True when cancellation was asked.

        A running job's fraction is held below 1 and its stage is never ``done`` (the move to
        ``done`` in :meth:`finish_done` says that).

        Raises
        ------
        LeaseLost
            The job is no longer running under ``runner``.
        """
        now = format_wall_utc(utc_now())
        with self.store.transaction() as conn:
            if fraction is None:
                cur = conn.execute(
                    "UPDATE jobs SET heartbeat_utc = ? "
                    "WHERE id = ? AND state = 'running' AND runner = ?",
                    (now, job_id, runner),
                )
            else:
                stage = STORING_STAGE if stage == "done" else (stage or "")
                cur = conn.execute(
                    "UPDATE jobs SET heartbeat_utc = ?, progress_fraction = ?, "
                    "progress_stage = ?, items_done = COALESCE(?, items_done) "
                    "WHERE id = ? AND state = 'running' AND runner = ?",
                    (
                        now,
                        min(max(float(fraction), 0.0), RUNNING_FRACTION_MAX),
                        stage,
                        items_done,
                        job_id,
                        runner,
                    ),
                )
            if cur.rowcount != 1:
                raise LeaseLost(job_id)
            row = conn.execute(
                "SELECT cancel_requested FROM jobs WHERE id = ?", (job_id,)
            ).fetchone()
        return bool(row["cancel_requested"])

    def finish_done(self, job_id: str, runner: str, result: dict) -> bool:
        """Store the result, what its kind keeps beside it and the state ``done`` at once.

        Returns False (and writes nothing) when ``runner`` no longer holds the job.
        """
        now = format_wall_utc(utc_now())
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE jobs SET state = 'done', finished_utc = ?, heartbeat_utc = ?, "
                "progress_fraction = 1.0, progress_stage = 'done', items_done = items_total, "
                "error_json = NULL WHERE id = ? AND state = 'running' AND runner = ?",
                (now, now, job_id, runner),
            )
            if cur.rowcount != 1:
                return False
            conn.execute(
                "INSERT OR REPLACE INTO job_results (job_id, result_json, stored_utc) "
                "VALUES (?, ?, ?)",
                (job_id, json.dumps(result, allow_nan=False), now),
            )
            job = Job.from_row(
                conn.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone()
            )
            hook = self.result_hooks.get(job.kind)
            if hook is not None:
                hook(conn, job, result)
        return True

    def finish(self, job_id: str, runner: str, state: str, error: dict | None = None) -> bool:
        """End a job held by ``runner`` as ``failed`` or ``cancelled``."""
        now = format_wall_utc(utc_now())
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE jobs SET state = ?, finished_utc = ?, progress_stage = ?, "
                "error_json = ? WHERE id = ? AND state = 'running' AND runner = ?",
                (state, now, state, json.dumps(error) if error else None, job_id, runner),
            )
        return cur.rowcount == 1

    def release(self, job_id: str, runner: str, stage: str, count_attempt: bool = False) -> bool:
        """Put a job held by ``runner`` back in the queue (shutdown: the attempt does not count;
        a dead worker pool: ``count_attempt``, so that a job that kills its workers ends)."""
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE jobs SET state = 'queued', runner = NULL, heartbeat_utc = NULL, "
                "started_utc = NULL, progress_fraction = 0, progress_stage = ?, "
                "items_done = CASE WHEN items_total IS NULL THEN NULL ELSE 0 END, "
                "attempts = attempts - ? WHERE id = ? AND state = 'running' AND runner = ?",
                (stage, 0 if count_attempt else 1, job_id, runner),
            )
        return cur.rowcount == 1

    def recover(self, me: str, lease_seconds: float, max_attempts: int) -> list[str]:
        """Re-queue running jobs whose runner is gone; fail those that died too often.

        A runner is gone when it ran on this host and its process no longer exists (or is an
        earlier life of this very process id), or when its heartbeat is older than
        ``lease_seconds`` (any host). Returns the ids put back in the queue.
        """
        host, pid, _token = me.rsplit(":", 2)
        now = utc_now()
        stale_before = format_wall_utc(now - timedelta(seconds=lease_seconds))
        requeued = []
        with self.store.transaction() as conn:
            rows = conn.execute(
                "SELECT id, runner, heartbeat_utc, attempts FROM jobs WHERE state = 'running'"
            ).fetchall()
            for row in rows:
                owner = row["runner"] or "::"
                if owner == me:
                    continue
                o_host, o_pid, _o_token = (owner.rsplit(":", 2) + ["", ""])[:3]
                gone = (
                    o_host == host
                    and o_pid.isdigit()
                    and (o_pid == pid or not _process_alive(int(o_pid)))
                )
                gone = gone or (row["heartbeat_utc"] or "") < stale_before
                if not gone:
                    continue
                if row["attempts"] >= max_attempts:
                    conn.execute(
                        "UPDATE jobs SET state = 'failed', finished_utc = ?, "
                        "progress_stage = 'failed', error_json = ? WHERE id = ?",
                        (format_wall_utc(now), _interrupted_error(row["attempts"]), row["id"]),
                    )
                else:
                    conn.execute(
                        "UPDATE jobs SET state = 'queued', runner = NULL, heartbeat_utc = NULL, "
                        "started_utc = NULL, progress_fraction = 0, "
                        "items_done = CASE WHEN items_total IS NULL THEN NULL ELSE 0 END, "
                        "progress_stage = 'queued (re-queued after an interruption)' "
                        "WHERE id = ?",
                        (row["id"],),
                    )
                    requeued.append(row["id"])
        return requeued

    def prune(self, max_age_days: float | None, max_finished: int | None) -> int:
        """Delete finished jobs (with their results) older than ``max_age_days`` or beyond the
        newest ``max_finished``; queued and running jobs are never touched. Returns how many."""
        deleted = 0
        with self.store.transaction() as conn:
            if max_age_days is not None:
                before = format_wall_utc(utc_now() - timedelta(days=max_age_days))
                deleted += conn.execute(
                    "DELETE FROM jobs WHERE state IN ('done', 'failed', 'cancelled') "
                    "AND finished_utc < ?",
                    (before,),
                ).rowcount
            if max_finished is not None:
                deleted += conn.execute(
                    "DELETE FROM jobs WHERE id IN (SELECT id FROM jobs WHERE state IN "
                    "('done', 'failed', 'cancelled') ORDER BY finished_utc DESC, id DESC "
                    "LIMIT -1 OFFSET ?)",
                    (int(max_finished),),
                ).rowcount
        return deleted
