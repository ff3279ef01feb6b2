"""Screenings through the API in process (ASGI client, runner thread on, one local worker):
submit a small invented batch with one unreadable item, follow per-orbit progress to done, read
the results as JSON and CSV, re-submit (served from the store), refused inputs change nothing.
"""

import csv
import io
import json
import sqlite3
import time
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service.main import create_app
from service.settings import Settings

BATCH = Path(__file__).resolve().parents[1] / "examples" / "screening-batch.jsonl"
PROBLEM = "application/problem+json"
WAIT_S = 180.0


def _small_batch() -> list:
    """Four harmless orbits, the hyperbolic candidate (its forecast is quick: no trails) and one
    item with an impossible eccentricity, all from the invented example batch."""
    rows = [
        json.loads(t)
        for t in BATCH.read_text().splitlines()
        if t.startswith("{") and t.endswith("}")
    ]
    harmless = [r for r in rows if "(harmless)" in r["name"]][:4]
    hyperbolic = next(r for r in rows if "(hyperbolic)" in r["name"])
    bad = next(r for r in rows if "(impossible)" in r["name"])
    return [*harmless[:2], bad, hyperbolic, *harmless[2:]]


def _dump(db: Path) -> list:
    conn = sqlite3.connect(db)
    try:
        tables = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")]
        return [(t, sorted(conn.execute(f"SELECT * FROM {t}").fetchall())) for t in tables]
    finally:
        conn.close()


@pytest.fixture
def client(tmp_path):
    app = create_app(Settings(data_dir=tmp_path, workers=1, job_runners=1))
    with TestClient(app) as c:
        yield c, tmp_path / "trailcast.sqlite3"


@pytest.mark.slow
def test_submit_progress_results_and_reuse(client):
    c, db = client
    body = {"orbits": _small_batch(), "years": [2030, 2030]}
    r = c.post("/v1/screenings", json=body)
    assert r.status_code == 202, r.text
    accepted = r.json()
    assert r.headers["location"] == accepted["links"]["self"]
    deadline = time.monotonic() + WAIT_S
    while True:
        job = c.get(accepted["links"]["self"]).json()
        progress = job["progress"]
        assert 0 <= progress["items_done"] <= progress["items_total"] == 6
        # state and progress never contradict: 1 and "done" only once the job is done
        assert (progress["fraction"] == 1.0) == (job["state"] == "done"), job
        assert (progress["stage"] == "done") == (job["state"] == "done"), job
        if job["state"] == "done":
            break
        assert job["state"] in ("queued", "running") and time.monotonic() < deadline, job
        time.sleep(0.1)
    assert job["summary"]["verdicts"]["invalid"] == 1
    assert job["summary"]["verdicts"]["no trails"] == 1
    assert job["summary"]["verdicts"]["not a candidate"] == 4
    assert any("Spacecraft operators" in x for x in job["cautions"])

    res = c.get(accepted["links"]["results_json"]).json()
    assert [o["index"] for o in res["orbits"]] == list(range(6))
    assert res["orbits"][2]["verdict"] == "invalid" and res["orbits"][2]["error"]["field"] == "e"
    assert res["orbits"][3]["verdict"] == "no trails" and res["orbits"][3]["candidate"]

    r = c.get(accepted["links"]["results_csv"])
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "Spacecraft operators" in r.headers["trailcast-cautions"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [row["verdict"] for row in rows] == [o["verdict"] for o in res["orbits"]]
    # Numbered from 1, as `trailcast screen` numbers a batch file's lines (issue 14).
    assert [row["line"] for row in rows] == [str(o["index"] + 1) for o in res["orbits"]]
    assert rows[0]["line"] == "1"

    # same batch again: same job, served from the store; per-orbit results stored by key
    r = c.post("/v1/screenings", json=body)
    assert r.status_code == 200 and r.json()["reused"] and r.json()["id"] == accepted["id"]
    n = sqlite3.connect(db).execute("SELECT COUNT(*) FROM screening_orbit_results").fetchone()[0]
    assert n == 5  # every readable orbit, once


BAD = [
    ({"orbits": [], "years": [2030]}, "orbits"),
    ({"orbits": [{}], "years": [1700]}, "years.0"),
    ({"orbits": [{}], "years": [2031, 2030]}, "years"),
    ({"orbits": [{}], "years": [2030], "rule": {"moid_max_au": -1}}, "rule.moid_max_au"),
    ({"orbits": [{}], "years": [2030], "options": {"particles": 9000}}, "options.particles"),
    ({"orbits": [{}], "years": [2030], "colour": "red"}, "colour"),
]


@pytest.mark.parametrize(("body", "field"), BAD)
def test_refused_screenings_are_problems_and_change_nothing(tmp_path, body, field):
    app = create_app(Settings(data_dir=tmp_path, job_runners=0))
    with TestClient(app) as c:
        c.post("/v1/screenings", json={"orbits": [{"name": "x"}], "years": [2030]})
        before = _dump(tmp_path / "trailcast.sqlite3")
        r = c.post("/v1/screenings", json=body)
        assert r.status_code == 422 and r.headers["content-type"].startswith(PROBLEM)
        assert r.json()["field"] == field
        assert _dump(tmp_path / "trailcast.sqlite3") == before
        missing = "0" * 32
        assert c.get(f"/v1/screenings/{missing}").status_code == 404
        queued = c.post("/v1/screenings", json={"orbits": [{"name": "y"}], "years": [2030]})
        assert c.get(queued.json()["links"]["results_csv"]).status_code == 409
        assert c.delete(queued.json()["links"]["self"]).json()["state"] == "cancelled"


def test_hostile_items_are_reported_and_the_screening_finishes(client):
    """Issue 13, finding 2: one orbit with a 400-digit integer failed the whole screening; a
    lone surrogate in a name made its results.json and results.csv answer 500."""
    c, _ = client
    harmless = _small_batch()[0]
    huge = json.dumps({**harmless, "q": 1.0}).replace('"q": 1.0', '"q": ' + "9" * 400)
    surrogate = json.dumps(harmless).replace('"name": "', '"name": "\\ud800', 1)
    body = '{"orbits": [' + huge + ", " + surrogate + '], "years": [2030]}'
    r = c.post(
        "/v1/screenings",
        content=body.encode("utf-8", "surrogatepass"),
        headers={"content-type": "application/json"},
    )
    assert r.status_code == 202, r.text
    url = r.json()["links"]["self"]
    deadline = time.monotonic() + WAIT_S
    while (job := c.get(url).json())["state"] != "done":
        assert job["state"] in ("queued", "running") and time.monotonic() < deadline, job
        time.sleep(0.1)
    res = c.get(job["links"]["results_json"])
    assert res.status_code == 200
    errors = [o["error"]["field"] for o in res.json()["orbits"]]
    assert errors == ["q", "name"]  # both reported, neither stopped the batch
    csv_r = c.get(job["links"]["results_csv"])
    assert csv_r.status_code == 200 and len(list(csv.DictReader(io.StringIO(csv_r.text)))) == 2
