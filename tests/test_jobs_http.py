"""Forecast jobs through real HTTP: `trailcast serve` under uvicorn on a free loopback port.

Submit, follow progress to done, fetch JSON, CSV and iCalendar, re-submit (served from the
store), drive the `submit`/`status` commands against the server, and kill the server with
SIGKILL while a job runs: after a restart the job finishes and the store is intact.
Every server started here is stopped by the test that started it (its whole process group).
"""

import csv
import io
import json
import os
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from datetime import datetime
from pathlib import Path

import httpx
import icalendar
import pytest
from processes import alive, children

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO_ORBIT = json.loads((EXAMPLES / "demo-comet.json").read_text(encoding="utf-8"))

#: A tiny forecast of the invented demo comet: one trail, one year, 20 meteoroids (~1-3 s). Its
#: 1975 trail meets Earth on 2039 April 11 with a predicted peak ZHR far above the encounter
#: level (about a thousand, the README's example): an encounter, by activity.
TINY = {"orbit": DEMO_ORBIT, "years": [2039, 2039], "particles": 20, "options": {"trails": [1975]}}
#: Longest wait for a server to answer or a job to finish (s): generous for 2 shared cores.
WAIT_S = 180.0
POLL_S = 0.2


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """`python -m service.cli serve` in its own process group on a free loopback port."""

    def __init__(self, data_dir: Path, **env):
        self.port = _free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.env = dict(os.environ, TRAILCAST_DATA_DIR=str(data_dir), **env)
        self.log = open(data_dir.parent / f"server-{self.port}.log", "wb")  # noqa: SIM115
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(self.port)],
            env=self.env,
            stdout=self.log,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        deadline = time.monotonic() + WAIT_S
        while True:
            try:
                if httpx.get(f"{self.url}/health", timeout=2.0).status_code == 200:
                    return
            except httpx.TransportError:
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                self.stop()
                raise AssertionError(f"server did not start: {self.output()}")
            time.sleep(POLL_S)

    def output(self) -> str:
        self.log.flush()
        return Path(self.log.name).read_text(errors="replace")[-3000:]

    def kill(self) -> None:
        """SIGKILL the server and every process it started (forecast worker processes)."""
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=30)
        self.log.close()

    def stop(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=30)
        self.log.close()


def _wait_for(url: str, predicate, what: str) -> dict:
    deadline = time.monotonic() + WAIT_S
    while True:
        job = httpx.get(url, timeout=10.0).json()
        if predicate(job):
            return job
        if job["state"] in ("failed", "cancelled") or time.monotonic() > deadline:
            raise AssertionError(f"waiting for {what}: {json.dumps(job)[:2000]}")
        time.sleep(POLL_S)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    data = tmp_path_factory.mktemp("served") / "var"
    s = Server(data, TRAILCAST_WORKERS="2")
    try:
        yield s
    finally:
        s.stop()


@pytest.mark.slow
def test_submit_follow_and_export_over_http(server):
    r = httpx.post(f"{server.url}/v1/forecasts", json=TINY, timeout=30.0)
    assert r.status_code == 202, r.text
    accepted = r.json()
    assert accepted["state"] in ("queued", "running") and not accepted["reused"]
    assert r.headers["location"] == f"/v1/forecasts/{accepted['id']}"
    job_url = server.url + accepted["links"]["self"]

    seen_states = set()

    def done(job):
        seen_states.add(job["state"])
        assert 0.0 <= job["progress"]["fraction"] <= 1.0
        return job["state"] == "done"

    job = _wait_for(job_url, done, "the tiny forecast")
    assert seen_states <= {"queued", "running", "done"}
    result = job["result"]
    assert result["parent"]["name"] == DEMO_ORBIT["name"]
    assert result["model"]["options"]["trails"] == [1975]
    assert job["progress"] == {
        "fraction": 1.0,
        "stage": "done",
        "items_done": None,  # a forecast counts no items (a screening counts its orbits)
        "items_total": None,
    }
    assert job["timings"]["run_seconds"] > 0 and job["timings"]["finished_utc"]
    assert any("Spacecraft operators" in c for c in job["cautions"])

    # CSV: one row per encounter and near miss, read back with the csv module.
    r = httpx.get(server.url + accepted["links"]["encounters_csv"], timeout=30.0)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "Spacecraft operators" in r.headers["trailcast-cautions"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == len(result["encounters"]) + len(result["near_misses"])
    encounter_rows = [row for row in rows if row["kind"] == "encounter"]
    for row, e in zip(encounter_rows, result["encounters"], strict=True):
        assert row["peak_utc"] == e["peak_utc"]
        assert row["classification.reason"] == e["classification"]["reason"]
        assert float(row["radiant.ra_deg"]) == e["radiant"]["ra_deg"]
        assert row["forecast_id"] == accepted["id"]

    # iCalendar: parsed by the general-purpose icalendar library; one event per encounter.
    r = httpx.get(server.url + accepted["links"]["encounters_ics"], timeout=30.0)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/calendar")
    cal = icalendar.Calendar.from_ical(r.content)
    events = list(cal.walk("VEVENT"))
    assert len(events) == len(result["encounters"]) >= 1  # the 1975 trail meets Earth in 2039
    for ev, e in zip(events, result["encounters"], strict=True):
        start, end = ev.decoded("dtstart"), ev.decoded("dtend")
        peak = datetime.fromisoformat(e["peak_utc"].replace("Z", "+00:00"))
        assert start < peak < end
        text = str(ev.get("description"))
        assert f"RA {e['radiant']['ra_deg']}" in text and "Caution" in text
        assert "Window:" in text

    # Identical re-submission: same id, served from the store (200, reused, nothing queued).
    before = httpx.get(f"{server.url}/metrics", timeout=10.0).text
    r = httpx.post(f"{server.url}/v1/forecasts", json=TINY, timeout=30.0)
    assert r.status_code == 200 and r.json()["id"] == accepted["id"]
    assert r.json()["state"] == "done" and r.json()["reused"] is True
    after = httpx.get(f"{server.url}/metrics", timeout=10.0).text
    assert 'trailcast_jobs{state="done"} 1' in before and 'trailcast_jobs{state="done"} 1' in after
    assert 'trailcast_jobs{state="queued"} 0' in after
    assert "trailcast_http_request_duration_seconds_bucket" in after

    # The dashboard view lists the stored encounters.
    page = httpx.get(
        f"{server.url}/v1/encounters", params={"parent": "hollow pine"}, timeout=10.0
    ).json()
    assert [i["encounter"]["peak_utc"] for i in page["items"]] == [
        e["peak_utc"] for e in result["encounters"]
    ]
    ready = httpx.get(f"{server.url}/ready", timeout=30.0).json()
    assert ready["workers"].startswith("local: 2 processes")


@pytest.mark.slow
def test_cli_submit_and_status_talk_to_the_server(server, tmp_path):
    orbit_file = EXAMPLES / "demo-comet.json"
    cli = [sys.executable, "-m", "service.cli"]
    args = ["--years", "2040", "--trails", "2026", "--particles", "21", "--url", server.url]
    proc = subprocess.run(
        [*cli, "submit", str(orbit_file), *args, "--wait", "--json", "--poll", "0.2"],
        capture_output=True,
        text=True,
        timeout=WAIT_S,
    )
    assert proc.returncode == 0, proc.stderr
    job = json.loads(proc.stdout)
    assert job["state"] == "done" and job["options"]["particles"] == 21

    proc = subprocess.run(
        [*cli, "status", job["id"], "--url", server.url], capture_output=True, text=True
    )
    assert proc.returncode == 0, proc.stderr
    assert "Dust-trail forecast for P/2026 W3 (Hollow Pine)" in proc.stdout
    assert "Caution" in proc.stdout

    # Bad input: one line on stderr, exit 2, nothing sent.
    bad = tmp_path / "bad.json"
    bad.write_text('{"name": "x"}')
    proc = subprocess.run(
        [*cli, "submit", str(bad), *args], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 2 and proc.stdout == ""
    assert len(proc.stderr.strip().splitlines()) == 1
    # Refused by the server (particles above its default ceiling): one line, exit 2.
    proc = subprocess.run(
        [*cli, "submit", str(orbit_file), "--years", "2040", "--particles", "90000"]
        + ["--url", server.url],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode == 2 and "Limit exceeded" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    # Unreachable service: one line, exit 1.
    proc = subprocess.run(
        [*cli, "status", job["id"], "--url", f"http://127.0.0.1:{_free_port()}"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode == 1 and "cannot reach" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


#: A forecast long enough (~10 s on one core) to be killed in the middle: two trails of the
#: invented demo comet over three years, 150 meteoroids each, in many integration chunks. Its
#: 1975 trail gives the 2039 encounter (predicted peak ZHR far above the level), so the
#: encounters index has a row to lose or double.
LONGER = {
    "orbit": DEMO_ORBIT,
    "years": [2039, 2041],
    "particles": 150,
    "options": {"trails": [1975, 2013]},
}


def _integrity(db: Path) -> str:
    conn = sqlite3.connect(db)
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


@pytest.mark.slow
def test_job_survives_sigkill_and_completes_after_restart(tmp_path):
    data = tmp_path / "var"
    db = data / "trailcast.sqlite3"
    env = {"TRAILCAST_WORKERS": "1"}  # chunks in the server process: SIGKILL hits them too
    first = Server(data, **env)
    try:
        r = httpx.post(f"{first.url}/v1/forecasts", json=LONGER, timeout=30.0)
        assert r.status_code == 202, r.text
        long_id = r.json()["id"]
        r = httpx.post(f"{first.url}/v1/forecasts", json=TINY, timeout=30.0)
        tiny_id = r.json()["id"]  # queued behind the long one (one job at a time)
        _wait_for(
            f"{first.url}/v1/forecasts/{long_id}",
            lambda j: j["state"] == "running" and j["progress"]["fraction"] >= 0.3,
            "the long job to be well under way",
        )
    finally:
        first.kill()

    # The process is gone mid-job: the row says running, nothing is half-written.
    assert _integrity(db) == "ok"
    conn = sqlite3.connect(db)
    states = dict(conn.execute("SELECT id, state FROM jobs").fetchall())
    assert states == {long_id: "running", tiny_id: "queued"}
    assert conn.execute("SELECT COUNT(*) FROM job_results").fetchone()[0] == 0
    assert conn.execute("SELECT COUNT(*) FROM encounters").fetchone()[0] == 0
    conn.close()

    second = Server(data, **env)
    try:
        long_job = _wait_for(
            f"{second.url}/v1/forecasts/{long_id}",
            lambda j: j["state"] == "done",
            "the interrupted job to finish after the restart",
        )
        tiny_job = _wait_for(
            f"{second.url}/v1/forecasts/{tiny_id}",
            lambda j: j["state"] == "done",
            "the queued job to finish after the restart",
        )
    finally:
        second.stop()
    assert long_job["attempts"] == 2  # started once before the kill, once after
    assert len(long_job["result"]["encounters"]) >= 1

    assert _integrity(db) == "ok"
    conn = sqlite3.connect(db)
    try:
        results = conn.execute("SELECT job_id, COUNT(*) FROM job_results GROUP BY job_id")
        assert dict(results.fetchall()) == {long_id: 1, tiny_id: 1}
        for job in (long_job, tiny_job):
            n = conn.execute(
                "SELECT COUNT(*) FROM encounters WHERE job_id = ?", (job["id"],)
            ).fetchone()[0]
            assert n == len(job["result"]["encounters"])  # none lost, none twice
    finally:
        conn.close()


@pytest.mark.slow
def test_alternative_solutions_and_stated_production_run_as_a_job(server):
    """An orbit with an alternative fit runs every solution; the stated dust mass is used."""
    alt = dict(DEMO_ORBIT, name=DEMO_ORBIT["name"] + ", alternative fit", q=DEMO_ORBIT["q"] + 0.003)
    body = {
        "orbit": dict(DEMO_ORBIT, solutions=[alt]),
        "years": [2040, 2040],
        "particles": 20,
        "options": {"trails": [2026], "dust_mass_per_return_g": 1e12},
    }
    r = httpx.post(f"{server.url}/v1/forecasts", json=body, timeout=30.0)
    assert r.status_code == 202, r.text
    job = _wait_for(
        server.url + r.json()["links"]["self"], lambda j: j["state"] == "done", "solutions job"
    )
    result = job["result"]
    assert [s["solution"] for s in result["solutions"]] == ["nominal", "solution-1"]
    rows = result["encounters"] + result["near_misses"]
    assert {row["solution"] for row in rows} == {"nominal", "solution-1"}
    assert result["model"]["dust_mass_per_return_g"] == 1e12
    # the stored meteoroid crossings point at the merged rows they belong to
    for item in result["particle_crossings"]:
        key = "encounters" if item["kind"] == "encounter" else "near_misses"
        assert result[key][item["index"]]["solution"] == item["solution"]


def test_calibration_trail_must_precede_its_year(server):
    body = dict(
        TINY,
        options={"trails": [2026], "calibration": {"year": 2040, "trail_year": 2040, "zhr": 10}},
    )
    r = httpx.post(f"{server.url}/v1/forecasts", json=body, timeout=30.0)
    assert r.status_code == 422
    assert r.json()["field"] == "options.calibration.trail_year"


#: The invented example batch (examples/screening-batch.jsonl): 200 orbits with a few
#: candidates whose trail forecasts keep a screening busy long enough to be killed mid-way.
def _readable_rows(path: Path) -> list:
    out = []
    for t in path.read_text(encoding="utf-8").split("\n"):
        try:
            out.append(json.loads(t))
        except ValueError:  # comments, blank lines and the deliberately broken row
            continue
    return out


_ALL_ROWS = _readable_rows(EXAMPLES / "screening-batch.jsonl")
#: 30 harmless orbits (done right after the geometry stage) and the two periodic candidates,
#: whose small trail forecasts keep the job running long enough to be killed in the middle.
BATCH_ROWS = [r for r in _ALL_ROWS if "(harmless)" in r["name"]][:30] + [
    r for r in _ALL_ROWS if "(candidate)" in r["name"]
][:2]
SCREENING = {
    "orbits": BATCH_ROWS,
    "years": [2039, 2039],
    "options": {"particles": 10, "max_trail_age_years": 60},
}


@pytest.mark.slow
def test_screening_survives_sigkill_and_its_workers_do_not_outlive_the_server(tmp_path):
    data = tmp_path / "var"
    db = data / "trailcast.sqlite3"
    env = {"TRAILCAST_WORKERS": "2"}
    first = Server(data, **env)
    try:
        r = httpx.post(f"{first.url}/v1/screenings", json=SCREENING, timeout=60.0)
        assert r.status_code == 202, r.text
        job_id = r.json()["id"]
        _wait_for(
            f"{first.url}/v1/screenings/{job_id}",
            lambda j: j["state"] == "running" and j["progress"]["items_done"] >= 1,
            "the screening to be under way",
        )
        workers = children(first.proc.pid)
        assert workers, "the server has started no worker processes"
        os.kill(first.proc.pid, signal.SIGKILL)  # the server only: its workers must follow
        first.proc.wait(timeout=30)
        deadline = time.monotonic() + 30.0  # generous against the workers' 0.5 s watch
        while any(alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.2)
        orphans = [p for p in workers if alive(p)]
    finally:
        first.kill()  # the rest of the process group, if anything is left
    assert orphans == []

    assert _integrity(db) == "ok"
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT state FROM jobs WHERE id = ?", (job_id,)).fetchone()[0] == (
        "running"
    )
    conn.close()

    second = Server(data, **env)
    try:
        job = _wait_for(
            f"{second.url}/v1/screenings/{job_id}",
            lambda j: j["state"] == "done",
            "the interrupted screening to finish after the restart",
        )
        results = httpx.get(f"{second.url}/v1/screenings/{job_id}/results.json", timeout=30.0)
    finally:
        second.stop()
    assert job["attempts"] == 2  # started once before the kill, once after
    orbits = results.json()["orbits"]
    assert [o["index"] for o in orbits] == list(range(len(BATCH_ROWS)))  # none lost
    assert _integrity(db) == "ok"
    conn = sqlite3.connect(db)
    try:
        assert (
            conn.execute("SELECT COUNT(*) FROM job_results WHERE job_id = ?", (job_id,)).fetchone()[
                0
            ]
            == 1
        )  # none twice
        keys = {o["key"] for o in orbits if o["key"]}
        stored = conn.execute("SELECT COUNT(*) FROM screening_orbit_results").fetchone()[0]
        assert stored == len(keys)  # one stored result per distinct orbit
    finally:
        conn.close()


@pytest.mark.slow
def test_sigterm_puts_the_running_job_back_in_the_queue(tmp_path):
    """Issue 13, finding 1: SIGTERM left a job 'running'. Now the computation stops between
    steps, the job is re-queued and the server exits; its workers end with it."""
    data = tmp_path / "var"
    server = Server(data, TRAILCAST_WORKERS="2")
    try:
        r = httpx.post(f"{server.url}/v1/forecasts", json=LONGER, timeout=30.0)
        job_id = r.json()["id"]
        _wait_for(
            f"{server.url}/v1/forecasts/{job_id}",
            lambda j: j["state"] == "running" and j["progress"]["fraction"] > 0.0,
            "the job to be under way",
        )
        workers = children(server.proc.pid)
        os.kill(server.proc.pid, signal.SIGTERM)
        server.proc.wait(timeout=WAIT_S)
        deadline = time.monotonic() + 30.0
        while any(alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert [p for p in workers if alive(p)] == []
    finally:
        server.kill()
    conn = sqlite3.connect(data / "trailcast.sqlite3")
    try:
        state, stage = conn.execute(
            "SELECT state, progress_stage FROM jobs WHERE id = ?", (job_id,)
        ).fetchone()
    finally:
        conn.close()
    assert state == "queued" and "shutdown" in stage
