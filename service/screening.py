"""Batch screening around :mod:`dynamics.screening`: reading batches, stored results, reports, jobs.

- :func:`read_batch` reads a JSON-lines or CSV file of orbit inputs; a row that cannot be read
  as an orbit becomes an ``invalid`` record naming its line, and the rest of the batch goes on.
- :class:`ResultDir` keeps each orbit's result as ``DIR/results/<key>.json`` (written to a
  temporary file, flushed and renamed: a file is whole or absent), so ``trailcast screen`` run
  again after an interruption skips the orbits already done.
- :func:`assemble`, :func:`table_csv` and :func:`report_text` turn records into the JSON summary,
  the CSV table (one row per orbit) and the short readable report.
- :class:`ScreeningJobStore` and :class:`ScreeningRunner` run screenings submitted through
  ``POST /v1/screenings`` as jobs in SQLite, like forecast jobs (same id rule, leases,
  re-queue after an interruption); per-orbit results are stored by the same content key, so a
  re-queued job also skips finished orbits.
"""

import csv
import io
import json
import logging
import os
import sqlite3
import sys
import tempfile
import threading
import time
import traceback
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path

from dynamics import __version__
from dynamics.errors import InvalidOrbit, TrailcastError
from dynamics.forecast import CAUTIONS

from .jobs import (
    JobConflict,
    JobNotFound,
    LeaseLost,
    QueueFull,
    _process_alive,
    canonical_json,
    format_utc,
    job_id_for,
    new_runner_name,
    utc_now,
)
from .problems import TYPE_BASE
from .settings import Settings
from .storage import Store

log = logging.getLogger("trailcast.screening")

#: Columns of a CSV batch: the orbit JSON's keys (README, "The orbit input"); ``nongrav.a1`` etc.
#: for the optional non-gravitational parameters. Covariances and alternative solutions need the
#: JSON-lines form.
CSV_COLUMNS = (
    "name",
    "epoch",
    "q",
    "e",
    "i",
    "node",
    "peri",
    "tp",
    "nongrav.a1",
    "nongrav.a2",
    "nongrav.a3",
)
_CSV_NUMBERS = ("q", "e", "i", "node", "peri", "nongrav.a1", "nongrav.a2", "nongrav.a3")


@dataclass(frozen=True)
class BatchRow:
    """One row of a batch file: its line number and either an orbit or why it is unreadable."""

    line: int
    orbit: object | None  # dynamics.orbit_input.OrbitInput
    name: str | None
    error: dict | None


def _row_from_mapping(line: int, data) -> BatchRow:
    from dynamics.orbit_input import parse_orbit

    name = data.get("name") if isinstance(data, dict) else None
    name = name if isinstance(name, str) else None
    try:
        return BatchRow(line, parse_orbit(data), name, None)
    except InvalidOrbit as exc:
        return BatchRow(line, None, name, {"field": exc.field, "message": str(exc)})


def _csv_value(key: str, text: str):
    text = text.strip()
    if text == "":
        return None
    if key in _CSV_NUMBERS:
        try:
            return float(text)
        except ValueError:
            return text  # parse_orbit names the field
    if key in ("epoch", "tp"):
        try:
            return float(text)  # a Julian date (TDB)
        except ValueError:
            return text  # ISO 8601 with a scale
    return text


def read_batch(path: Path) -> list[BatchRow]:
    """Rows of a ``.csv`` file (header: :data:`CSV_COLUMNS`) or of a JSON-lines file (any other
    name: one orbit object per line; blank lines and lines starting with ``#`` are skipped).

    Raises
    ------
    OSError
        The file cannot be read. A CSV file whose header has an unknown column raises
        :class:`~dynamics.errors.InvalidOrbit` naming it (nothing in such a file can be read).
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8-sig")
    rows: list[BatchRow] = []
    if path.suffix.lower() == ".csv":
        reader = csv.DictReader(io.StringIO(text))
        unknown = [c for c in reader.fieldnames or () if c not in CSV_COLUMNS]
        if unknown:
            raise InvalidOrbit(
                unknown[0], f"unknown CSV column; expected some of {', '.join(CSV_COLUMNS)}"
            )
        for rec in reader:
            line = reader.line_num
            data: dict = {}
            for key, value in rec.items():
                if key is None:  # more cells than columns
                    data["_extra"] = value
                    continue
                v = _csv_value(key, value or "")
                if v is None:
                    continue
                if key.startswith("nongrav."):
                    data.setdefault("nongrav", {})[key.split(".", 1)[1]] = v
                else:
                    data[key] = v
            if "_extra" in data:
                rows.append(
                    BatchRow(
                        line,
                        None,
                        data.get("name"),
                        {"field": "row", "message": "more cells than columns"},
                    )
                )
                continue
            rows.append(_row_from_mapping(line, data))
        return rows
    for line, raw in enumerate(text.splitlines(), start=1):
        if not raw.strip() or raw.lstrip().startswith("#"):
            continue
        try:
            data = json.loads(raw)
        except json.JSONDecodeError as exc:
            rows.append(
                BatchRow(
                    line, None, None, {"field": "line", "message": f"not valid JSON ({exc.msg})"}
                )
            )
            continue
        rows.append(_row_from_mapping(line, data))
    return rows


# --- stored results (CLI) -----------------------------------------------------------------------


class ResultDir:
    """Per-orbit results as ``DIR/results/<key>.json``, each written atomically."""

    def __init__(self, out_dir: Path):
        self.dir = Path(out_dir) / "results"
        self.dir.mkdir(parents=True, exist_ok=True)

    def path(self, key: str) -> Path:
        return self.dir / f"{key}.json"

    def lookup(self, key: str) -> dict | None:
        try:
            return json.loads(self.path(key).read_text(encoding="utf-8"))
        except (OSError, ValueError):  # absent, or unreadable: compute it again
            return None

    def save(self, key: str, record: dict) -> None:
        write_atomic(self.path(key), json.dumps(record, allow_nan=False))


def write_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder and a rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


# --- outputs ------------------------------------------------------------------------------------


def invalid_record(row: BatchRow) -> dict:
    return {
        "line": row.line,
        "name": row.name,
        "candidate": False,
        "verdict": "invalid",
        "geometry": None,
        "forecast": None,
        "error": row.error,
        "rank": None,
        "key": None,
    }


def assemble(rows: list[BatchRow], run, rule, options, source: str) -> dict:
    """The JSON summary: counts, rule, options, every orbit in input order, cautions."""
    from dynamics.screening import screening_summary

    records = []
    it = iter(run.records if run is not None else [])
    for row in rows:
        if row.orbit is None:
            records.append(invalid_record(row))
        else:
            records.append({"line": row.line, **next(it)})
    summary = screening_summary(records, rule, options)
    summary["source"] = source
    summary["reused"] = run.reused if run is not None else 0
    summary["computed"] = run.computed if run is not None else 0
    return {"screening": summary, "orbits": records}


#: Columns of the CSV table, one row per orbit.
TABLE_COLUMNS = (
    "line",
    "rank",
    "name",
    "verdict",
    "candidate",
    "moid_au",
    "nearest_node_au",
    "ascending_miss_distance_au",
    "descending_miss_distance_au",
    "encounters",
    "near_misses",
    "first_encounter_peak_utc",
    "closest_encounter_miss_distance_au",
    "max_zhr",
    "error",
    "key",
)


def _table_row(r: dict) -> dict:
    g = r.get("geometry") or {}
    f = r.get("forecast") or {}
    enc = f.get("encounters") or []
    err = r.get("error")
    return {
        "line": r["line"],
        "rank": r.get("rank"),
        "name": r.get("name"),
        "verdict": r["verdict"],
        "candidate": r.get("candidate"),
        "moid_au": g.get("moid_au"),
        "nearest_node_au": g.get("nearest_node_au"),
        "ascending_miss_distance_au": g.get("ascending_miss_distance_au"),
        "descending_miss_distance_au": g.get("descending_miss_distance_au"),
        "encounters": len(enc) if r.get("forecast") else None,
        "near_misses": len(f.get("near_misses") or []) if r.get("forecast") else None,
        "first_encounter_peak_utc": min((e["peak_utc"] for e in enc), default=None),
        "closest_encounter_miss_distance_au": min(
            (e["miss_distance_au"] for e in enc), key=abs, default=None
        ),
        "max_zhr": max((e["zhr"]["estimate"] for e in enc), default=None),
        "error": None if not err else err.get("message"),
        "key": r.get("key"),
    }


def table_csv(result: dict) -> str:
    """One row per orbit (input order), columns :data:`TABLE_COLUMNS`."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=TABLE_COLUMNS, lineterminator="\r\n")
    w.writeheader()
    for r in result["orbits"]:
        w.writerow({k: ("" if v is None else v) for k, v in _table_row(r).items()})
    return buf.getvalue()


def _f(v, spec):
    return "-" if v is None else format(v, spec)


def report_text(result: dict, every_orbit: bool = True) -> str:
    """The short readable report: counts, the rule, candidates with encounters, every orbit
    (``every_orbit``; the terminal shows the rest only)."""
    s = result["screening"]
    v = s["verdicts"]
    rule = s["rule"]
    lines = [
        f"Screening of {s['orbits']} orbit rows from {s['source']}, years "
        f"{s['years'][0]}-{s['years'][1]}",
        f"  rule: candidate when MOID < {rule['moid_max_au']} au and the nearer node lies within "
        f"{rule['node_max_au']} au of Earth's orbit ({rule['sources']['moid_max_au']})",
        f"  candidates {s['candidates']}; "
        + ", ".join(f"{k} {n}" for k, n in v.items() if n)
        + f"; reused {s['reused']}, computed {s['computed']}",
        f"  trail forecasts: {s['forecast_options']['particles_per_trail']} meteoroids per trail "
        f"and passage, trails up to {s['forecast_options']['max_trail_age_years']:g} years old, "
        f"seed {s['forecast_options']['seed']}",
        "  times UTC; miss = trail minus Earth (au); solar longitude geometric J2000",
        "",
        "Candidates (trail forecasts)",
    ]
    cands = [r for r in result["orbits"] if r.get("candidate")]
    for r in sorted(cands, key=lambda r: r["rank"]):
        g = r["geometry"]
        lines.append(
            f"  line {r['line']:>4}  {r['name']}: {r['verdict']} (MOID {g['moid_au']:.5f} au, "
            f"nearest node {_f(g['nearest_node_au'], '.5f')} au)"
        )
        f = r.get("forecast") or {}
        for e in f.get("encounters") or []:
            lines.append(
                f"      encounter  {e['peak_utc']}  lambda_sun {e['solar_longitude_deg']:.4f}  "
                f"trail {e['trail']['perihelion_year']} ({e['trail']['revolutions']} rev)  miss "
                f"{e['miss_distance_au']:+.5f}  RA {e['radiant']['ra_deg']:.1f} Dec "
                f"{e['radiant']['dec_deg']:+.1f}  Vg {e['vg_km_s']:.1f} km/s  ZHR "
                f"{e['zhr']['estimate']:.3g} ({e['zhr']['low']:.3g}-{e['zhr']['high']:.3g})"
            )
        if f.get("near_misses"):
            lines.append(f"      near misses: {len(f['near_misses'])} (see the JSON)")
        if r.get("error"):
            lines.append(f"      error: {r['error']['message']}")
    if not cands:
        lines.append("  none")
    if every_orbit:
        lines += [
            "",
            "Every orbit (input order)",
            "  line  rank  verdict              MOID_au   node_au   name",
        ]
    for r in result["orbits"] if every_orbit else ():
        g = r.get("geometry") or {}
        lines.append(
            f"  {r['line']:>4}  {_f(r.get('rank'), '>4')}  {r['verdict']:<19}  "
            f"{_f(g.get('moid_au'), '.5f'):>8}  {_f(g.get('nearest_node_au'), '.5f'):>8}  "
            f"{r.get('name') or '-'}"
            + (f"  [{r['error']['message']}]" if r["verdict"] == "invalid" else "")
        )
    lines += ["", *(f"Caution: {c}" for c in s["cautions"])]
    return "\n".join(lines) + "\n"


def write_outputs(out_dir: Path, result: dict) -> dict[str, Path]:
    """``screening.json``, ``screening.csv`` and ``screening.txt`` in ``out_dir`` (atomic)."""
    out_dir = Path(out_dir)
    paths = {
        "json": out_dir / "screening.json",
        "csv": out_dir / "screening.csv",
        "report": out_dir / "screening.txt",
    }
    write_atomic(paths["json"], json.dumps(result, indent=2, allow_nan=False))
    write_atomic(paths["csv"], table_csv(result))
    write_atomic(paths["report"], report_text(result))
    return paths


class ProgressBar:
    """``[#####.....]  120/200 orbits  stage  ETA 0:42`` on stderr when it is a terminal."""

    def __init__(self, stream=None, width: int = 30):
        self.stream = stream or sys.stderr
        self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.width = width
        self.t0 = time.monotonic()
        self.first_done: int | None = None

    def __call__(self, done: int, total: int, stage: str) -> None:
        if not self.enabled:
            return
        if self.first_done is None:
            self.first_done, self.t0 = done, time.monotonic()
        frac = done / total if total else 1.0
        fill = int(round(self.width * frac))
        new = done - self.first_done
        elapsed = time.monotonic() - self.t0
        if new > 0 and done < total:
            eta_s = int(elapsed / new * (total - done))
            eta = f"ETA {eta_s // 3600}:{eta_s // 60 % 60:02d}:{eta_s % 60:02d}"
        else:
            eta = "ETA --:--:--" if done < total else "done"
        self.stream.write(
            f"\r[{'#' * fill}{'.' * (self.width - fill)}] {done}/{total} orbits  "
            f"{stage:<16} {eta}   "
        )
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()


# --- jobs ---------------------------------------------------------------------------------------

_JOB_COLUMNS = (
    "id, state, request_json, model_version, first_year, last_year, orbits_total, orbits_done, "
    "progress_stage, created_utc, queued_utc, started_utc, finished_utc, heartbeat_utc, runner, "
    "attempts, cancel_requested, error_json"
)


@dataclass(frozen=True)
class ScreeningJob:
    """One row of ``screening_jobs`` (with the result when asked for and present)."""

    id: str
    state: str
    request: dict
    model_version: str
    first_year: int
    last_year: int
    orbits_total: int
    orbits_done: int
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
    def from_row(cls, row: sqlite3.Row, result_json: str | None = None) -> "ScreeningJob":
        return cls(
            id=row["id"],
            state=row["state"],
            request=json.loads(row["request_json"]),
            model_version=row["model_version"],
            first_year=row["first_year"],
            last_year=row["last_year"],
            orbits_total=row["orbits_total"],
            orbits_done=row["orbits_done"],
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


def canonical_screening_request(
    orbits: list, first_year: int, last_year: int, rule: dict, options: dict
) -> dict:
    """What a screening job's id hashes: the orbits as given, years, rule, options, version."""
    return {
        "orbits": orbits,
        "years": [int(first_year), int(last_year)],
        "rule": rule,
        "options": options,
        "model_version": __version__,
    }


class ScreeningJobStore:
    """Screening jobs and per-orbit results in SQLite; every write is one transaction."""

    def __init__(self, store: Store):
        self.store = store

    def submit(self, request: dict, max_queued: int) -> tuple[ScreeningJob, bool]:
        """Queue the job for ``request`` unless it exists (as :meth:`JobStore.submit`)."""
        job_id = job_id_for(request)
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute(
                "SELECT state FROM screening_jobs WHERE id = ?", (job_id,)
            ).fetchone()
            if row is not None and row["state"] in ("queued", "running", "done"):
                queued = False
            else:
                waiting = conn.execute(
                    "SELECT COUNT(*) FROM screening_jobs WHERE state = 'queued'"
                ).fetchone()[0]
                if waiting >= max_queued:
                    raise QueueFull(f"{waiting} screenings are queued (limit {max_queued})")
                conn.execute("DELETE FROM screening_jobs WHERE id = ?", (job_id,))
                conn.execute(
                    "INSERT INTO screening_jobs (id, state, request_json, model_version, "
                    "first_year, last_year, orbits_total, created_utc, queued_utc) "
                    "VALUES (?, 'queued', ?, ?, ?, ?, ?, ?, ?)",
                    (
                        job_id,
                        canonical_json(request),
                        request["model_version"],
                        request["years"][0],
                        request["years"][1],
                        len(request["orbits"]),
                        now,
                        now,
                    ),
                )
                queued = True
        return self.get(job_id, with_result=True), queued

    def get(self, job_id: str, with_result: bool = False) -> ScreeningJob:
        rows = self.store.query(
            "SELECT j.*, r.result_json AS result_json FROM screening_jobs j "
            "LEFT JOIN screening_job_results r ON r.job_id = j.id WHERE j.id = ?",
            (job_id,),
        )
        if not rows:
            raise JobNotFound(job_id)
        return ScreeningJob.from_row(rows[0], rows[0]["result_json"] if with_result else None)

    def cancel(self, job_id: str) -> ScreeningJob:
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute(
                "SELECT state FROM screening_jobs WHERE id = ?", (job_id,)
            ).fetchone()
            if row is None:
                raise JobNotFound(job_id)
            if row["state"] == "queued":
                conn.execute(
                    "UPDATE screening_jobs SET state = 'cancelled', progress_stage = 'cancelled', "
                    "finished_utc = ?, cancel_requested = 1 WHERE id = ?",
                    (now, job_id),
                )
            elif row["state"] == "running":
                conn.execute(
                    "UPDATE screening_jobs SET cancel_requested = 1 WHERE id = ?", (job_id,)
                )
            else:
                raise JobConflict(f"screening {job_id} is {row['state']}: nothing to cancel")
        return self.get(job_id)

    # runner side

    def claim_next(self, runner: str) -> ScreeningJob | None:
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            row = conn.execute(
                "SELECT id FROM screening_jobs WHERE state = 'queued' "
                "ORDER BY queued_utc, id LIMIT 1"
            ).fetchone()
            if row is None:
                return None
            conn.execute(
                "UPDATE screening_jobs SET state = 'running', runner = ?, started_utc = ?, "
                "heartbeat_utc = ?, attempts = attempts + 1, orbits_done = 0, "
                "progress_stage = 'starting' WHERE id = ?",
                (runner, now, now, row["id"]),
            )
        return self.get(row["id"])

    def heartbeat(
        self, job_id: str, runner: str, done: int | None = None, stage: str | None = None
    ) -> bool:
        """Renew the lease (and record progress); True when cancellation was asked."""
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            if done is None:
                cur = conn.execute(
                    "UPDATE screening_jobs SET heartbeat_utc = ? "
                    "WHERE id = ? AND state = 'running' AND runner = ?",
                    (now, job_id, runner),
                )
            else:
                cur = conn.execute(
                    "UPDATE screening_jobs SET heartbeat_utc = ?, orbits_done = ?, "
                    "progress_stage = ? WHERE id = ? AND state = 'running' AND runner = ?",
                    (now, int(done), stage or "", job_id, runner),
                )
            if cur.rowcount != 1:
                raise LeaseLost(job_id)
            row = conn.execute(
                "SELECT cancel_requested FROM screening_jobs WHERE id = ?", (job_id,)
            ).fetchone()
        return bool(row["cancel_requested"])

    def lookup_orbit(self, key: str) -> dict | None:
        rows = self.store.query(
            "SELECT result_json FROM screening_orbit_results WHERE key = ?", (key,)
        )
        return json.loads(rows[0]["result_json"]) if rows else None

    def save_orbit(self, key: str, record: dict) -> None:
        with self.store.transaction() as conn:
            conn.execute(
                "INSERT OR REPLACE INTO screening_orbit_results (key, result_json, stored_utc) "
                "VALUES (?, ?, ?)",
                (key, json.dumps(record, allow_nan=False), format_utc(utc_now())),
            )

    def finish_done(self, job_id: str, runner: str, result: dict) -> bool:
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE screening_jobs SET state = 'done', finished_utc = ?, heartbeat_utc = ?, "
                "orbits_done = orbits_total, progress_stage = 'done', error_json = NULL "
                "WHERE id = ? AND state = 'running' AND runner = ?",
                (now, now, job_id, runner),
            )
            if cur.rowcount != 1:
                return False
            conn.execute(
                "INSERT OR REPLACE INTO screening_job_results (job_id, result_json, stored_utc) "
                "VALUES (?, ?, ?)",
                (job_id, json.dumps(result, allow_nan=False), now),
            )
        return True

    def finish(self, job_id: str, runner: str, state: str, error: dict | None = None) -> bool:
        now = format_utc(utc_now())
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE screening_jobs SET state = ?, finished_utc = ?, progress_stage = ?, "
                "error_json = ? WHERE id = ? AND state = 'running' AND runner = ?",
                (state, now, state, json.dumps(error) if error else None, job_id, runner),
            )
        return cur.rowcount == 1

    def release(self, job_id: str, runner: str, stage: str) -> bool:
        with self.store.transaction() as conn:
            cur = conn.execute(
                "UPDATE screening_jobs SET state = 'queued', runner = NULL, heartbeat_utc = NULL, "
                "started_utc = NULL, progress_stage = ?, attempts = attempts - 1 "
                "WHERE id = ? AND state = 'running' AND runner = ?",
                (stage, job_id, runner),
            )
        return cur.rowcount == 1

    def recover(self, me: str, lease_seconds: float, max_attempts: int) -> list[str]:
        """Re-queue running screenings whose runner is gone (as :meth:`JobStore.recover`)."""
        host, pid, _ = me.rsplit(":", 2)
        now = utc_now()
        stale_before = format_utc(now - timedelta(seconds=lease_seconds))
        requeued = []
        with self.store.transaction() as conn:
            rows = conn.execute(
                "SELECT id, runner, heartbeat_utc, attempts FROM screening_jobs "
                "WHERE state = 'running'"
            ).fetchall()
            for row in rows:
                owner = row["runner"] or "::"
                if owner == me:
                    continue
                o_host, o_pid, _ = (owner.rsplit(":", 2) + ["", ""])[:3]
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
                        "UPDATE screening_jobs SET state = 'failed', finished_utc = ?, "
                        "progress_stage = 'failed', error_json = ? WHERE id = ?",
                        (
                            format_utc(now),
                            json.dumps(
                                {
                                    "type": TYPE_BASE + "job-interrupted",
                                    "title": "Job interrupted too often",
                                    "status": 500,
                                    "detail": f"the process running this screening stopped "
                                    f"{row['attempts']} times; not retried again",
                                }
                            ),
                            row["id"],
                        ),
                    )
                else:
                    conn.execute(
                        "UPDATE screening_jobs SET state = 'queued', runner = NULL, "
                        "heartbeat_utc = NULL, started_utc = NULL, "
                        "progress_stage = 'queued (re-queued after an interruption)' WHERE id = ?",
                        (row["id"],),
                    )
                    requeued.append(row["id"])
        return requeued


def screening_inputs(request: dict):
    """(rows, rule, options) a screening job's canonical request describes."""
    from dynamics.screening import ScreeningRule, screening_forecast_options

    from .runner import ejection_model

    rows = [_row_from_mapping(k, item) for k, item in enumerate(request["orbits"])]
    rule = ScreeningRule(**request["rule"])
    o = request["options"]
    options = screening_forecast_options(
        request["years"][0],
        request["years"][1],
        particles=o["particles"],
        seed=o["seed"],
        max_trail_age_years=o["max_trail_age_years"],
        integrator=o["integrator"],
        ejection=ejection_model(o),
    )
    return rows, rule, options


class _Cancelled(Exception):
    pass


class _Stopping(Exception):
    pass


class ScreeningRunner:
    """One thread in the service process that runs queued screenings (see the module doc)."""

    def __init__(self, jobs: ScreeningJobStore, settings: Settings):
        from .runner import Executors

        self.jobs = jobs
        self.settings = settings
        self.name = new_runner_name()
        self.executors = Executors(settings)
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._threads: list[threading.Thread] = []

    def start(self) -> list[str]:
        requeued = self.jobs.recover(
            self.name, self.settings.job_lease_seconds, self.settings.max_job_attempts
        )
        if self.settings.job_runners > 0:
            t = threading.Thread(target=self._loop, name="trailcast-screening", daemon=True)
            t.start()
            self._threads.append(t)
        return requeued

    def stop(self, timeout_s: float = 30.0) -> None:
        self._stop.set()
        self._wake.set()
        for t in self._threads:
            t.join(timeout_s)
        self.executors.close()

    def wake(self) -> None:
        self._wake.set()

    def _loop(self) -> None:
        poll_s = min(1.0, self.settings.job_lease_seconds / 4)
        while not self._stop.is_set():
            try:
                job = self.jobs.claim_next(self.name)
            except Exception:  # noqa: BLE001 - a busy database: try again
                log.exception("screening queue not readable")
                job = None
            if job is None:
                self._wake.wait(poll_s)
                self._wake.clear()
                continue
            self._run(job)

    def _run(self, job: ScreeningJob) -> None:
        from dynamics.screening import screen_batch

        beat_stop = threading.Event()

        def beat():
            while not beat_stop.wait(self.settings.job_lease_seconds / 4):
                try:
                    self.jobs.heartbeat(job.id, self.name)
                except Exception:  # noqa: BLE001 - lease lost or busy: the job notices later
                    return

        threading.Thread(target=beat, daemon=True).start()

        def progress(done: int, total: int, stage: str) -> None:
            if self._stop.is_set():
                raise _Stopping
            if self.jobs.heartbeat(job.id, self.name, done, stage):
                raise _Cancelled

        try:
            rows, rule, options = screening_inputs(job.request)
            executor = self.executors.get()
            run = screen_batch(
                [r.orbit for r in rows if r.orbit is not None],
                rule,
                options,
                executor=executor,
                lookup=self.jobs.lookup_orbit,
                save=self.jobs.save_orbit,
                progress=progress,
            )
            result = assemble(rows, run, rule, options, source=f"POST /v1/screenings ({job.id})")
            for r in result["orbits"]:
                r["index"] = r.pop("line")  # an API batch has item indices, not file lines
            if self.jobs.finish_done(job.id, self.name, result):
                log.info("screening %s: done", job.id)
        except _Cancelled:
            self.jobs.finish(job.id, self.name, "cancelled")
        except _Stopping:
            self.jobs.release(job.id, self.name, "queued (re-queued at shutdown)")
        except LeaseLost:
            log.warning("screening %s: lease lost", job.id)
        except TrailcastError as exc:
            self._fail(job, 422, "Cannot compute", str(exc))
        except Exception as exc:  # noqa: BLE001 - a job must never take the runner down
            log.error("screening %s failed:\n%s", job.id, traceback.format_exc())
            self.executors.discard_pool()
            self._fail(job, 500, "Screening failed", f"{type(exc).__name__}: {exc}")
        finally:
            beat_stop.set()

    def _fail(self, job: ScreeningJob, status: int, title: str, detail: str) -> None:
        kind = {422: "computation"}.get(status, "job-failed")
        self.jobs.finish(
            job.id,
            self.name,
            "failed",
            {"type": TYPE_BASE + kind, "title": title, "status": status, "detail": detail},
        )


SCREENING_CAUTIONS = CAUTIONS
