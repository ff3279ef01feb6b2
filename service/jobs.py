"""Forecast jobs in the database: identity, queue, leases, results and the encounters index.

A job's id is a hash of its canonical inputs (the validated orbit, the years, every model option
with its default filled in) and the model version, so the same question asked twice finds the
same job, and a finished answer is served again instead of being recomputed.

States: ``queued`` -> ``running`` -> ``done`` | ``failed`` | ``cancelled`` (a queued job can be
cancelled directly). A running job is held by one runner (``host:pid:token``) that renews its
heartbeat; a job whose runner died is put back in the queue (:meth:`JobStore.recover`). The
result, its encounter rows and the move to ``done`` are one transaction.
"""

import hashlib
import json
import math
import os
import secrets
import socket
import sqlite3
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from dynamics import __version__

from .storage import Store

STATES = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATES = ("done", "failed", "cancelled")
#: Keys of a ``zhr`` object read (in this order) as its number for the ``min_zhr`` filter.
ZHR_KEYS = ("estimate", "peak", "value", "max", "zhr")


class JobNotFound(LookupError):
    """No job has this id."""


class JobConflict(RuntimeError):
    """The job's state does not allow the operation (e.g. cancelling a finished job)."""


class QueueFull(RuntimeError):
    """As many jobs are queued as the settings allow; submit again later."""


class LeaseLost(RuntimeError):
    """This runner no longer holds the job (it was re-queued or cancelled meanwhile)."""


def utc_now() -> datetime:
    return datetime.now(UTC)


def format_utc(t: datetime) -> str:
    """ISO 8601 UTC with ``Z``, millisecond precision (sorts as text)."""
    return t.astimezone(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def parse_utc(text: str | None) -> datetime | None:
    if text is None:
        return None
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def canonical_json(value) -> str:
    """Deterministic JSON: sorted keys, no spaces, floats by ``repr`` (round-trip exact)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False)


def job_id_for(request: dict) -> str:
    """The job id of a canonical request (which includes the model version)."""
    return hashlib.sha256(canonical_json(request).encode("utf-8")).hexdigest()[:32]


def canonical_request(orbit_json: dict, first_year: int, last_year: int, options: dict) -> dict:
    """The inputs a job's id hashes: orbit as parsed, years, options with defaults, version."""
    return {
        "orbit": orbit_json,
        "years": [int(first_year), int(last_year)],
        "options": options,
        "model_version": __version__,
    }


def zhr_number(encounter: dict) -> float | None:
    """The number the ``min_zhr`` filter compares, when the encounter carries a ``zhr``."""
    z = encounter.get("zhr")
    if isinstance(z, int | float) and not isinstance(z, bool):
        return float(z) if math.isfinite(z) else None
    if isinstance(z, dict):
        for key in ZHR_KEYS:
            v = z.get(key)
            if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
                return float(v)
    return None


@dataclass(frozen=True)
class Job:
    """One row of ``forecast_jobs`` (with the result when asked for and present)."""

    id: str
    state: str
    request: dict
    parent_name: str
    first_year: int
    last_year: int
    model_version: str
    progress_fraction: float
    progress_stage: str
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

    @classmethod
    def from_row(cls, row: sqlite3.Row, result_json: str | None = None) -> "Job":
        return cls(
            id=row["id"],
            state=row["state"],
            request=json.loads(row["request_json"]),
            parent_name=row["parent_name"],
            first_year=row["first_year"],
            last_year=row["last_year"],
            model_version=row["model_version"],
            progress_fraction=row["progress_fraction"],
            progress_stage=row["progress_stage"],
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


class JobStore:
    """Job operations on a :class:`service.storage.Store`; every write is one transaction."""

    def __init__(self, store: Store):
        self.store = store

    # --- submitting and reading -------------------------------------------------------------

    def submit(self, request: dict, parent_name: str, max_queued: int) -> tuple[Job, bool]:
        """Queue the job for ``request`` unless it exists; return it and whether it was queued.

        A failed or cancelled job with the same id is queued again; a queued, running or done
        one is returned unchanged (a done one with its result).

        Raises
        ------
        QueueFull
            ``max_queued`` jobs are already waiting.
        """
        job_id = job_id_for(request)
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute("SELECT * FROM forecast_jobs WHERE id = ?", (job_id,)).fetchone()
            if row is not None and row["state"] in ("queued", "running", "done"):
                queued = False
            else:
                waiting = conn.execute(
                    "SELECT COUNT(*) FROM forecast_jobs WHERE state = 'queued'"
                ).fetchone()[0]
                if waiting >= max_queued:
                    raise QueueFull(f"{waiting} jobs are queued (limit {max_queued})")
                if row is None:
                    conn.execute(
                        "INSERT INTO forecast_jobs (id, state, request_json, parent_name, "
                        "first_year, last_year, model_version, progress_stage, created_utc, "
                        "queued_utc) VALUES (?, 'queued', ?, ?, ?, ?, ?, 'queued', ?, ?)",
                        (
                            job_id,
                            canonical_json(request),
                            parent_name,
                            request["years"][0],
                            request["years"][1],
                            request["model_version"],
                            now,
                            now,
                        ),
                    )
                else:  # failed or cancelled before: try again from scratch
                    conn.execute(
                        "UPDATE forecast_jobs SET state = 'queued', progress_fraction = 0, "
                        "progress_stage = 'queued', queued_utc = ?, started_utc = NULL, "
                        "finished_utc = NULL, heartbeat_utc = NULL, runner = NULL, "
                        "attempts = 0, cancel_requested = 0, error_json = NULL WHERE id = ?",
                        (now, job_id),
                    )
                queued = True
        return self.get(job_id, with_result=True), queued

    def get(self, job_id: str, with_result: bool = False) -> Job:
        """The job (and its result when ``with_result`` and done), read in one statement."""
        if with_result:
            rows = self.store.query(
                "SELECT j.*, r.result_json AS result_json FROM forecast_jobs j "
                "LEFT JOIN forecast_results r ON r.job_id = j.id WHERE j.id = ?",
                (job_id,),
            )
        else:
            rows = self.store.query("SELECT * FROM forecast_jobs WHERE id = ?", (job_id,))
        if not rows:
            raise JobNotFound(job_id)
        row = rows[0]
        return Job.from_row(row, row["result_json"] if with_result else None)

    def cancel(self, job_id: str) -> Job:
        """Cancel a queued job at once, or ask the runner of a running job to stop.

        Raises
        ------
        JobNotFound, JobConflict
        """
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute("SELECT state FROM forecast_jobs WHERE id = ?", (job_id,)).fetchone()
            if row is None:
                raise JobNotFound(job_id)
            if row["state"] == "queued":
                conn.execute(
                    "UPDATE forecast_jobs SET state = 'cancelled', progress_stage = 'cancelled', "
                    "finished_utc = ?, cancel_requested = 1 WHERE id = ?",
                    (now, job_id),
                )
            elif row["state"] == "running":
                conn.execute(
                    "UPDATE forecast_jobs SET cancel_requested = 1 WHERE id = ?", (job_id,)
                )
            else:
                raise JobConflict(f"job {job_id} is {row['state']}: nothing to cancel")
        return self.get(job_id)

    def counts_by_state(self) -> dict[str, int]:
        counts = dict.fromkeys(STATES, 0)
        for row in self.store.query(
            "SELECT state, COUNT(*) AS n FROM forecast_jobs GROUP BY state"
        ):
            counts[row["state"]] = row["n"]
        return counts

    def duration_histogram(self, buckets_s: tuple[float, ...]) -> dict:
        """Run times (start to finish) of done and failed jobs: cumulative bucket counts, sum."""
        sums = ", ".join(f"SUM(d <= {float(b)!r})" for b in buckets_s)
        rows = self.store.query(
            f"SELECT state, COUNT(*) AS n, COALESCE(SUM(d), 0) AS total, {sums} FROM ("
            "SELECT state, (julianday(finished_utc) - julianday(started_utc)) * 86400.0 AS d "
            "FROM forecast_jobs WHERE state IN ('done', 'failed') AND started_utc IS NOT NULL "
            "AND finished_utc IS NOT NULL) GROUP BY state"
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

    def claim_next(self, runner: str) -> Job | None:
        """Move the oldest queued job to running, held by ``runner``; None if none waits."""
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute(
                "SELECT id FROM forecast_jobs WHERE state = 'queued' "
                "ORDER BY queued_utc, id LIMIT 1"
            ).fetchone()
            if row is None:
                return None
            conn.execute(
                "UPDATE forecast_jobs SET state = 'running', runner = ?, started_utc = ?, "
                "heartbeat_utc = ?, attempts = attempts + 1, progress_fraction = 0, "
                "progress_stage = 'starting' WHERE id = ?",
                (runner, now, now, row["id"]),
            )
        return self.get(row["id"])

    def heartbeat(
        self, job_id: str, runner: str, fraction: float | None = None, stage: str | None = None
    ) -> bool:
        """Renew the lease (and record progress); return True when cancellation was asked.

        Raises
        ------
        LeaseLost
            The job is no longer running under ``runner``.
        """
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            if fraction is None:
                cur = conn.execute(
                    "UPDATE forecast_jobs SET heartbeat_utc = ? "
                    "WHERE id = ? AND state = 'running' AND runner = ?",
                    (now, job_id, runner),
                )
            else:
                cur = conn.execute(
                    "UPDATE forecast_jobs SET heartbeat_utc = ?, progress_fraction = ?, "
                    "progress_stage = ? WHERE id = ? AND state = 'running' AND runner = ?",
                    (now, float(fraction), stage or "", job_id, runner),
                )
            if cur.rowcount != 1:
                raise LeaseLost(job_id)
            row = conn.execute(
                "SELECT cancel_requested FROM forecast_jobs WHERE id = ?", (job_id,)
            ).fetchone()
        return bool(row["cancel_requested"])

    def finish_done(self, job_id: str, runner: str, result: dict) -> bool:
        """Store the result, its encounter rows and the state ``done`` in one transaction.

        Returns False (and writes nothing) when ``runner`` no longer holds the job.
        """
        now = format_utc(utc_now())
        parent = str(result.get("parent", {}).get("name", ""))
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE forecast_jobs SET state = 'done', finished_utc = ?, heartbeat_utc = ?, "
                "progress_fraction = 1.0, progress_stage = 'done', error_json = NULL "
                "WHERE id = ? AND state = 'running' AND runner = ?",
                (now, now, job_id, runner),
            )
            if cur.rowcount != 1:
                return False
            conn.execute(
                "INSERT INTO forecast_results (job_id, result_json, stored_utc) VALUES (?, ?, ?)",
                (job_id, json.dumps(result, allow_nan=False), now),
            )
            conn.executemany(
                "INSERT INTO forecast_encounters (job_id, idx, parent_name, peak_utc, zhr, "
                "encounter_json) VALUES (?, ?, ?, ?, ?, ?)",
                [
                    (
                        job_id,
                        k,
                        parent,
                        format_utc(parse_utc(e["peak_utc"])),  # one format: sorts as text
                        zhr_number(e),
                        json.dumps(e),
                    )
                    for k, e in enumerate(result.get("encounters", []))
                ],
            )
        return True

    def finish(self, job_id: str, runner: str, state: str, error: dict | None = None) -> bool:
        """End a job held by ``runner`` as ``failed`` or ``cancelled``."""
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE forecast_jobs SET state = ?, finished_utc = ?, progress_stage = ?, "
                "error_json = ? WHERE id = ? AND state = 'running' AND runner = ?",
                (state, now, state, json.dumps(error) if error else None, job_id, runner),
            )
        return cur.rowcount == 1

    def release(self, job_id: str, runner: str, stage: str, count_attempt: bool = False) -> bool:
        """Put a job held by ``runner`` back in the queue (shutdown, lost worker)."""
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE forecast_jobs SET state = 'queued', runner = NULL, heartbeat_utc = NULL, "
                "started_utc = NULL, progress_fraction = 0, progress_stage = ?, "
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
        stale_before = format_utc(now - timedelta(seconds=lease_seconds))
        requeued = []
        with self.store.transaction() as conn:
            rows = conn.execute(
                "SELECT id, runner, heartbeat_utc, attempts FROM forecast_jobs "
                "WHERE state = 'running'"
            ).fetchall()
            for row in rows:
                owner = row["runner"] or "::"
                o_host, o_pid, _o_token = (owner.rsplit(":", 2) + ["", ""])[:3]
                gone = False
                if owner == me:
                    continue
                if o_host == host and o_pid.isdigit():
                    gone = o_pid == pid or not _process_alive(int(o_pid))
                if not gone and (row["heartbeat_utc"] or "") < stale_before:
                    gone = True
                if not gone:
                    continue
                if row["attempts"] >= max_attempts:
                    conn.execute(
                        "UPDATE forecast_jobs SET state = 'failed', finished_utc = ?, "
                        "progress_stage = 'failed', error_json = ? WHERE id = ?",
                        (
                            format_utc(now),
                            json.dumps(
                                {
                                    "type": "https://trailcast.invalid/problems/job-interrupted",
                                    "title": "Job interrupted too often",
                                    "status": 500,
                                    "detail": f"the process running this job stopped "
                                    f"{row['attempts']} times; not retried again",
                                }
                            ),
                            row["id"],
                        ),
                    )
                else:
                    conn.execute(
                        "UPDATE forecast_jobs SET state = 'queued', runner = NULL, "
                        "heartbeat_utc = NULL, started_utc = NULL, progress_fraction = 0, "
                        "progress_stage = 'queued (re-queued after an interruption)' "
                        "WHERE id = ?",
                        (row["id"],),
                    )
                    requeued.append(row["id"])
        return requeued

    # --- encounters across forecasts ----------------------------------------------------------

    def encounters(
        self,
        from_utc: str | None,
        to_utc: str | None,
        parent: str | None,
        min_zhr: float | None,
        after: tuple[str, str, int] | None,
        limit: int,
    ) -> list[sqlite3.Row]:
        """Stored encounters ordered by peak time, filtered, after the cursor, at most limit."""
        where, params = [], []
        if from_utc is not None:
            where.append("e.peak_utc >= ?")
            params.append(from_utc)
        if to_utc is not None:
            where.append("e.peak_utc <= ?")
            params.append(to_utc)
        if parent:
            escaped = parent.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
            where.append("e.parent_name LIKE ? ESCAPE '\\'")
            params.append(f"%{escaped}%")
        if min_zhr is not None:
            where.append("(e.zhr IS NULL OR e.zhr >= ?)")
            params.append(min_zhr)
        if after is not None:
            where.append("(e.peak_utc, e.job_id, e.idx) > (?, ?, ?)")
            params.extend(after)
        sql = (
            "SELECT e.job_id, e.idx, e.parent_name, e.peak_utc, e.encounter_json, "
            "j.finished_utc FROM forecast_encounters e JOIN forecast_jobs j ON j.id = e.job_id "
            + ("WHERE " + " AND ".join(where) if where else "")
            + " ORDER BY e.peak_utc, e.job_id, e.idx LIMIT ?"
        )
        return self.store.query(sql, (*params, int(limit)))
