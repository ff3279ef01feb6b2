"""The one job store and runner, in process: migration of stored jobs, retention, progress that
never contradicts the state, the encounter listing's dedup, dead worker pools, cancel and time
limits that stop a running computation, and the cancel check inside the parent history.

These are behaviour checks of the service's own machinery (no outside reference values).
"""

import concurrent.futures as cf
import json
import os
import sqlite3
import threading
import time
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from dynamics.errors import ComputationStopped
from service.job_kinds import JobKind
from service.jobs import JobStore, canonical_request
from service.main import create_app
from service.runner import JobRunner
from service.settings import Settings
from service.storage import Store, _migrations

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO_ORBIT = json.loads((EXAMPLES / "demo-comet.json").read_text(encoding="utf-8"))
RUNNER = "test:0:runner"
#: Longest wait for a runner thread to finish a job (s): generous for 2 shared cores.
WAIT_S = 120.0


def _encounter(peak_utc: str, year: int) -> dict:
    # Invented demo values (the invented comet's scenario); only their storage is tested.
    return {
        "year": year,
        "trail": {
            "perihelion_tdb": "2026-10-30T06:00:01 TDB",
            "perihelion_year": 2026,
            "revolutions": 1,
        },
        "node": "descending",
        "peak_utc": peak_utc,
        "solar_longitude_deg": 21.5,
        "miss_distance_au": 0.004,
        "miss_distance_spread_au": 0.0007,
        "fwhm_hours": 1.2,
        "radiant": {"ra_deg": 235.2, "dec_deg": 57.1},
        "vg_km_s": 25.7,
        "vinf_km_s": 28.0,
        "particles": 20,
        "dilution": 0.99,
    }


def _result(name: str, encounters: list[dict]) -> dict:
    return {
        "parent": {"name": name},
        "model": {},
        "conventions": {},
        "encounters": encounters,
        "near_misses": [],
        "notes": [],
        "cautions": [],
    }


def _done_forecast(jobs: JobStore, name: str, years, options: dict, encounters) -> str:
    request = canonical_request({"name": name}, years[0], years[1], options)
    job, _ = jobs.submit(request, name, max_queued=100)
    assert jobs.claim_next(RUNNER).id == job.id
    assert jobs.finish_done(job.id, RUNNER, _result(name, encounters))
    return job.id


def _v3_database(path: Path) -> None:
    """A database as the previous release left it (schema version 3)."""
    conn = sqlite3.connect(path, isolation_level=None)
    for version, sql in _migrations():
        if version <= 3:
            conn.executescript(f"BEGIN;\n{sql}\n;PRAGMA user_version = {version};\nCOMMIT;")
    now = "2026-12-01T10:00:00.000Z"
    fc = {
        "orbit": {"name": "old"},
        "years": [2040, 2040],
        "options": {"seed": 1},
        "model_version": "0.1.0",
    }
    conn.execute(
        "INSERT INTO forecast_jobs (id, state, request_json, parent_name, first_year, last_year, "
        "model_version, progress_fraction, progress_stage, created_utc, queued_utc, started_utc, "
        "finished_utc, attempts) VALUES ('a' || printf('%031d', 0), 'done', ?, 'old', 2040, 2040, "
        "'0.1.0', 1.0, 'done', ?, ?, ?, ?, 1)",
        (json.dumps(fc), now, now, now, now),
    )
    conn.execute(
        "INSERT INTO forecast_results VALUES ('a' || printf('%031d', 0), ?, ?)",
        (json.dumps(_result("old", [_encounter("2040-04-11T08:32:43.000Z", 2040)])), now),
    )
    conn.execute(
        "INSERT INTO forecast_encounters VALUES ('a' || printf('%031d', 0), 0, 'old', "
        "'2040-04-11T08:32:43.000Z', NULL, ?)",
        (json.dumps(_encounter("2040-04-11T08:32:43Z", 2040)),),
    )
    conn.execute(
        "INSERT INTO forecast_jobs (id, state, request_json, parent_name, first_year, last_year, "
        "model_version, created_utc, queued_utc, started_utc, heartbeat_utc, runner, attempts) "
        "VALUES ('b' || printf('%031d', 0), 'running', ?, 'old', 2041, 2041, '0.1.0', ?, ?, ?, "
        "?, 'gone-host:1:x', 1)",
        (json.dumps({**fc, "years": [2041, 2041]}), now, now, now, now),
    )
    sc = {
        "orbits": [DEMO_ORBIT],
        "years": [2039, 2039],
        "rule": {},
        "options": {},
        "model_version": "0.1.0",
    }
    conn.execute(
        "INSERT INTO screening_jobs (id, state, request_json, model_version, first_year, "
        "last_year, orbits_total, orbits_done, progress_stage, created_utc, queued_utc, "
        "started_utc, finished_utc, attempts) VALUES ('c' || printf('%031d', 0), 'done', ?, "
        "'0.1.0', 2039, 2039, 1, 1, 'done', ?, ?, ?, ?, 1)",
        (json.dumps(sc), now, now, now, now),
    )
    conn.execute(
        "INSERT INTO screening_job_results VALUES ('c' || printf('%031d', 0), ?, ?)",
        (json.dumps({"screening": {"orbits": 1}, "orbits": [{"index": 0}]}), now),
    )
    conn.close()


def test_migration_keeps_every_stored_job_readable(tmp_path):
    db = tmp_path / "trailcast.sqlite3"
    _v3_database(db)
    store = Store(db)
    try:
        jobs = JobStore(store)
        old = jobs.get("a" + "0" * 31, with_result=True)
        assert (old.kind, old.state, old.label) == ("forecast", "done", "old")
        assert old.result["encounters"][0]["year"] == 2040
        running = jobs.get("b" + "0" * 31)
        assert (running.kind, running.state, running.attempts) == ("forecast", "running", 1)
        screening = jobs.get("c" + "0" * 31, with_result=True)
        assert screening.kind == "screening" and screening.result["screening"]["orbits"] == 1
        assert (screening.items_done, screening.items_total) == (1, 1)
        n = store.query("SELECT COUNT(*) FROM encounters")[0][0]
        assert n == 1
        assert store.query("PRAGMA integrity_check")[0][0] == "ok"
        assert store.query("PRAGMA foreign_key_check") == []
        names = {r[0] for r in store.query("SELECT name FROM sqlite_master WHERE type='table'")}
        assert not names & {"forecast_jobs", "screening_jobs", "forecast_results"}
    finally:
        store.close()


def test_retention_by_age_and_count_keeps_unfinished_jobs(tmp_path):
    store = Store(tmp_path / "db.sqlite3")
    try:
        jobs = JobStore(store)
        ids = []
        for k in range(5):
            ids.append(_done_forecast(jobs, f"p{k}", (2040, 2040), {"seed": k}, []))
            time.sleep(0.01)  # finished_utc has millisecond resolution: keep the order clear
        queued, _ = jobs.submit(canonical_request({"name": "q"}, 2040, 2040, {}), "q", 100)
        with store.transaction() as conn:  # the two oldest finished 200 days ago
            conn.execute(
                "UPDATE jobs SET finished_utc = '2020-01-01T00:00:00.000Z' WHERE id IN (?, ?)",
                ids[:2],
            )
        assert jobs.prune(max_age_days=90, max_finished=None) == 2
        assert jobs.prune(max_age_days=None, max_finished=2) == 1  # keeps the newest two
        left = {r[0] for r in store.query("SELECT id FROM jobs")}
        assert queued.id in left and len(left) == 3
        assert store.query("SELECT COUNT(*) FROM job_results")[0][0] == 2  # cascaded
        # the runner's sweep reads both limits from the settings
        settings = Settings(data_dir=tmp_path, job_retention_days=None, job_retention_count=1)
        assert JobRunner(jobs, settings).apply_retention() == 1
        left = {r[0] for r in store.query("SELECT id FROM jobs")}
        assert left == {queued.id, ids[-1]}  # the newest finished job and the queued one
    finally:
        store.close()


def test_running_job_never_shows_done_progress(tmp_path):
    store = Store(tmp_path / "db.sqlite3")
    try:
        jobs = JobStore(store)
        job, _ = jobs.submit(canonical_request({"name": "x"}, 2040, 2040, {}), "x", 10)
        jobs.claim_next(RUNNER)
        jobs.heartbeat(job.id, RUNNER, 1.0, "done")  # the computation said it is done
        running = jobs.get(job.id)
        fraction, stage = running.shown_progress()
        assert running.state == "running" and fraction < 1.0 and stage != "done"
        jobs.finish_done(job.id, RUNNER, _result("x", []))
        assert jobs.get(job.id).shown_progress() == (1.0, "done")
    finally:
        store.close()


def test_encounter_listing_keeps_the_latest_forecast_per_parent_and_options(tmp_path):
    app = create_app(Settings(data_dir=tmp_path, job_runners=0))
    with TestClient(app) as client:
        jobs = app.state.jobs
        e40 = [_encounter("2040-04-11T08:32:43Z", 2040)]
        old = _done_forecast(jobs, "P/x", (2040, 2040), {"seed": 1, "v": 1}, e40)
        time.sleep(0.01)  # finished_utc has millisecond resolution
        new = _done_forecast(
            jobs,
            "P/x",
            (2039, 2041),
            {"seed": 1, "v": 1},
            [_encounter("2040-04-11T08:40:00Z", 2040)],
        )
        other = _done_forecast(jobs, "P/x", (2040, 2040), {"seed": 2, "v": 1}, e40)
        ids = [i["forecast_id"] for i in client.get("/v1/encounters").json()["items"]]
        assert sorted(ids) == sorted([new, other])  # the older run of the same options is hidden
        all_ids = client.get("/v1/encounters?include_superseded=true").json()["items"]
        assert sorted(i["forecast_id"] for i in all_ids) == sorted([old, new, other])


def _die_in_worker(_x):
    os._exit(1)


def _flaky_kind(name: str, calls: list):
    """A job kind whose first run kills a worker of the real pool (BrokenProcessPool)."""

    def run(job, ctx):
        calls.append(job.attempts)
        if len(calls) == 1:
            ctx.executor.submit(_die_in_worker, 0).result()
        return {"screening": {"orbits": 0}, "orbits": []}

    return JobKind(name, run)


@pytest.mark.slow
def test_dead_worker_pool_requeues_a_screening_and_it_finishes(tmp_path):
    store = Store(tmp_path / "db.sqlite3")
    settings = Settings(data_dir=tmp_path, workers=2, job_runners=1)
    calls: list = []
    runner = JobRunner(
        JobStore(store), settings, kinds={"screening": _flaky_kind("screening", calls)}
    )
    try:
        request = {
            "orbits": [],
            "years": [2040, 2040],
            "rule": {},
            "options": {},
            "model_version": "test",
        }
        job, _ = runner.jobs.submit(request, "batch", 10, kind="screening", items_total=0)
        runner.start()
        deadline = time.monotonic() + WAIT_S
        while runner.jobs.get(job.id).state != "done":
            assert time.monotonic() < deadline, runner.jobs.get(job.id)
            time.sleep(0.1)
        assert calls == [1, 2]  # re-queued once after the worker died, then finished
        assert runner.jobs.get(job.id).attempts == 2
    finally:
        runner.stop()
        store.close()


def _polling_kind(name: str, started: threading.Event):
    """A job kind that computes until told to stop (as the parent history does)."""

    def run(job, ctx):
        started.set()
        while not ctx.should_stop():
            time.sleep(0.01)
        raise ComputationStopped("stopped")

    return JobKind(name, run)


@pytest.mark.parametrize("how", ["cancel", "time limit"])
def test_cancel_and_time_limit_stop_a_running_computation(tmp_path, how):
    store = Store(tmp_path / "db.sqlite3")
    limit_s = 1.0 if how == "time limit" else 3600.0
    settings = Settings(data_dir=tmp_path, workers=1, job_runners=1, job_max_seconds=limit_s)
    started = threading.Event()
    runner = JobRunner(
        JobStore(store), settings, kinds={"forecast": _polling_kind("forecast", started)}
    )
    try:
        job, _ = runner.jobs.submit(canonical_request({"name": "x"}, 2040, 2040, {}), "x", 10)
        runner.start()
        assert started.wait(WAIT_S)
        if how == "cancel":
            assert runner.jobs.cancel(job.id).state == "running"
        deadline = time.monotonic() + WAIT_S
        while runner.jobs.get(job.id).state == "running":
            assert time.monotonic() < deadline
            time.sleep(0.05)
        final = runner.jobs.get(job.id)
        if how == "cancel":
            assert final.state == "cancelled"
        else:
            assert final.state == "failed" and final.error["type"].endswith("time-limit")
    finally:
        runner.stop()
        store.close()


def test_parent_history_stops_when_asked():
    from dynamics.history import parent_history
    from dynamics.orbit_input import parse_orbit

    orbit = parse_orbit(DEMO_ORBIT)
    asked = []

    def should_stop():
        asked.append(1)
        return len(asked) > 3

    with pytest.raises(ComputationStopped):
        parent_history(
            orbit,
            orbit.epoch_tdb_jd - 36525.0,
            orbit.epoch_tdb_jd + 3650.0,
            should_stop=should_stop,
        )
    assert len(asked) == 4  # stopped at the first True


def test_die_with_parent_initializer_runs_in_a_pool():
    import multiprocessing

    from dynamics.workers import die_with_parent

    ctx = multiprocessing.get_context("spawn")
    with cf.ProcessPoolExecutor(
        1, mp_context=ctx, initializer=die_with_parent, initargs=(os.getpid(),)
    ) as pool:
        assert pool.submit(os.getppid).result() == os.getpid()


def test_settings_come_typed_from_the_environment(monkeypatch):
    from pydantic import ValidationError

    from service.settings import get_settings

    monkeypatch.setenv("TRAILCAST_JOB_MAX_SECONDS", "90")
    monkeypatch.setenv("TRAILCAST_JOB_RETENTION_COUNT", "7")
    s = Settings()
    assert s.job_max_seconds == 90.0 and s.job_retention_count == 7
    monkeypatch.setenv("TRAILCAST_JOB_RUNNERS", "-1")  # below its range: refused, not used
    with pytest.raises(ValidationError):
        Settings()
    get_settings.cache_clear()  # the cached dependency must not keep this test's values
