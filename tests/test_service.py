"""The web service: health, readiness, version, problem+json errors; and a real server over HTTP."""

import os
import socket
import subprocess
import sys
import time

import httpx
import pytest
from fastapi.testclient import TestClient

from service.main import create_app
from service.settings import Settings


@pytest.fixture
def client(tmp_path):
    app = create_app(Settings(data_dir=tmp_path))
    with TestClient(app) as c:
        yield c


def test_health(client):
    r = client.get("/health")
    assert r.status_code == 200
    assert r.json() == {"status": "ok"}


def test_ready_reports_schema(client, tmp_path):
    r = client.get("/ready")
    assert r.status_code == 200
    assert r.json()["schema_version"] >= 1
    assert (tmp_path / "trailcast.sqlite3").exists()


def test_version_names_libraries_and_ephemeris(client):
    body = client.get("/version").json()
    assert body["name"] == "trailcast"
    assert "rebound" in body["libraries"]
    assert "DE423" in body["ephemeris"]["name"]


def test_unknown_route_is_problem_json(client):
    r = client.get("/no-such-thing")
    assert r.status_code == 404
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["status"] == 404


def test_oversized_body_is_413(tmp_path):
    app = create_app(Settings(data_dir=tmp_path, max_body_bytes=10))
    with TestClient(app) as c:
        r = c.post("/health", content=b"x" * 100)
    assert r.status_code == 413
    assert r.headers["content-type"].startswith("application/problem+json")


def test_openapi_is_3_1(client):
    spec = client.get("/openapi.json").json()
    assert spec["openapi"].startswith("3.1")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_real_server_answers_health_over_http(tmp_path):
    """What `make run` starts: `trailcast serve` under uvicorn, queried over loopback HTTP."""
    port = _free_port()
    env = dict(os.environ, TRAILCAST_DATA_DIR=str(tmp_path / "var"))
    proc = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--host", "127.0.0.1", "--port", str(port)],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
    )
    try:
        deadline = time.monotonic() + 60.0
        while True:
            try:
                r = httpx.get(f"http://127.0.0.1:{port}/health", timeout=2.0)
                break
            except httpx.TransportError:
                if proc.poll() is not None or time.monotonic() > deadline:
                    raise AssertionError(proc.stdout.read().decode()) from None
                time.sleep(0.2)
        assert r.status_code == 200 and r.json() == {"status": "ok"}
        assert httpx.get(f"http://127.0.0.1:{port}/ready", timeout=5.0).status_code == 200
        assert (tmp_path / "var" / "trailcast.sqlite3").exists()
    finally:
        proc.terminate()
        proc.wait(timeout=20)
