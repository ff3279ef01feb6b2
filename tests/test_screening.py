"""Batch screening (dynamics.screening, `trailcast screen`): the rule, ranking, stage-1 geometry
independent of chunking and workers, and the invented 200-orbit batch screened end to end,
interrupted with SIGKILL and resumed without recomputing finished orbits.

The candidates are checked against an independent recomputation of the rule: the MOID by
:func:`dynamics.moid.moid` (the scalar search, not the vectorised one screening uses) against
Earth's osculating orbit built here from the DE423 state, and the node distances by a
brute-force scan of Earth's orbit.
"""

import concurrent.futures as cf
import csv
import io
import json
import math
import multiprocessing
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from processes import alive, children

from dynamics.ephemeris import EPHEMERIS_SPAN_TDB_JD, gm_au3_d2, heliocentric_state
from dynamics.geometry import EARTH_MEAN_J2000
from dynamics.moid import moid
from dynamics.orbit_input import parse_orbit
from dynamics.orbits import state_to_elements
from dynamics.screening import ScreeningRule, rank_orbits, screen_geometry
from service.screening import read_batch

ROOT = Path(__file__).resolve().parents[1]
BATCH = ROOT / "examples" / "screening-batch.jsonl"
#: Lines of the invented batch that are bad on purpose (examples/make_screening_batch.py).
BAD_LINES = {104: "not valid JSON", 170: "eccentricity", 178: "tp: missing"}
#: Agreement between the vectorised and the scalar MOID search (au): both refine the same minima
#: to double precision; 1e-9 au leaves room for different Newton paths.
MOID_AGREEMENT_AU = 1e-9
#: Agreement of node distances with the brute-force scan of Earth's orbit (au): 400,000 samples
#: and linear interpolation put Earth's radius within ~1e-10 au.
NODE_AGREEMENT_AU = 1e-7
WAIT_S = 300.0


def _valid_orbits():
    orbits, lines = [], []
    for n, text in enumerate(BATCH.read_text().splitlines(), start=1):
        try:
            orbits.append(parse_orbit(json.loads(text)))
            lines.append(n)
        except Exception:  # noqa: BLE001 - the bad rows, checked elsewhere
            pass
    return orbits, lines


def _earth_elements(epoch_tdb_jd):
    """Earth-Moon barycentre osculating elements from DE423, or the documented mean fallback."""
    first, last = EPHEMERIS_SPAN_TDB_JD
    if not first <= epoch_tdb_jd <= last:
        return EARTH_MEAN_J2000
    r, v = heliocentric_state("earthmoon", epoch_tdb_jd)
    el = state_to_elements(r, v, epoch_tdb_jd, mu=gm_au3_d2("sun") + gm_au3_d2("earthmoon"))
    return tuple(float(x) for x in (el.q_au, el.e, el.incl_deg, el.node_deg, el.peri_deg))


def _positions(q, e, i, node, peri, nu_rad):
    r = q * (1 + e) / (1 + e * np.cos(nu_rad))
    i, o, w = np.radians([i, node, peri])
    u = nu_rad + w
    x = r * (np.cos(o) * np.cos(u) - np.sin(o) * np.sin(u) * np.cos(i))
    y = r * (np.sin(o) * np.cos(u) + np.cos(o) * np.sin(u) * np.cos(i))
    return x, y


def _nearest_node_bruteforce(o, earth) -> float:
    """Radial distance of the nearer node from Earth's orbit, Earth sampled densely."""
    nu = np.linspace(-np.pi, np.pi, 400_001)
    ex, ey = _positions(*earth, nu)
    lon = np.mod(np.arctan2(ey, ex), 2 * np.pi)
    order = np.argsort(lon)
    rad = np.hypot(ex, ey)[order]
    lon = lon[order]
    best = math.inf
    for shift in (0.0, 180.0):
        nu_node = math.radians(shift - o.peri_deg)
        den = 1 + o.e * math.cos(nu_node)
        if den <= 0 or abs(math.sin(math.radians(o.incl_deg))) < 1e-9:
            continue
        r = o.q_au * (1 + o.e) / den
        node_lon = math.radians((o.node_deg + shift) % 360.0)
        r_earth = np.interp(node_lon, lon, rad, period=2 * np.pi)
        best = min(best, abs(r - r_earth))
    return best


@pytest.mark.invariant
def test_rule_thresholds_and_ranking():
    rule = ScreeningRule(moid_max_au=0.05, node_max_au=0.25)
    # strictly below both thresholds; missing values never pass
    got = rule.passes([0.0499, 0.05, 0.01, np.inf, np.nan], [0.1, 0.1, 0.25, 0.1, 0.1])
    assert got.tolist() == [True, False, False, False, False]
    assert "not a candidate" in rule.reason(0.2, 0.1) and rule.reason(0.01, 0.1).startswith("cand")
    with pytest.raises(ValueError):
        ScreeningRule(moid_max_au=-1.0)
    ranks = rank_orbits([0.2, None, 0.01, 0.01], [0.3, 0.0, 0.2, 0.1])
    assert ranks.tolist() == [3, 4, 2, 1]


@pytest.mark.invariant
@pytest.mark.slow
def test_stage1_independent_of_chunking_and_workers():
    orbits, _ = _valid_orbits()
    ref = screen_geometry(orbits, chunk_size=64)
    assert screen_geometry(orbits, chunk_size=7) == ref
    ctx = multiprocessing.get_context("spawn")
    with cf.ProcessPoolExecutor(max_workers=2, mp_context=ctx) as pool:
        assert screen_geometry(orbits, executor=pool, chunk_size=16) == ref


def test_csv_batch_rows_with_line_numbers(tmp_path):
    path = tmp_path / "batch.csv"
    path.write_text(
        "name,epoch,q,e,i,node,peri,tp,nongrav.a1\n"
        "A [invented],2461000.5,2.5,0.3,10,20,30,2461000.5,\n"
        "B [invented],2461000.5,abc,0.3,10,20,30,2461000.5,\n"
        '"C, quoted [invented]",2026-11-20T00:00:00 TDB,3.0,0.1,5,6,7,2461000.5,1e-9\n'
        "D [invented],2461000.5,2.0,-1,10,20,30,2461000.5,\n"
    )
    rows = read_batch(path)
    assert [r.line for r in rows] == [2, 3, 4, 5]
    assert [r.orbit is not None for r in rows] == [True, False, True, False]
    assert rows[1].error["field"] == "q" and rows[3].error["field"] == "e"
    assert rows[2].orbit.nongrav.a1_au_d2 == 1e-9 and rows[2].orbit.name == "C, quoted [invented]"
    out = tmp_path / "out"
    r = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "screen",
            str(path),
            "--years",
            "2030",
            "--out",
            str(out),
            "--workers",
            "1",
        ],
        capture_output=True,
        text=True,
        timeout=WAIT_S,
        cwd=ROOT,
    )
    assert r.returncode == 0, r.stderr
    assert "line 3: skipped" in r.stderr and "line 5: skipped" in r.stderr
    summary = json.loads((out / "screening.json").read_text())
    assert [o["verdict"] for o in summary["orbits"]] == [
        "not a candidate",
        "invalid",
        "not a candidate",
        "invalid",
    ]


def _screen_cmd(out: Path):
    return [
        sys.executable,
        "-m",
        "service.cli",
        "screen",
        str(BATCH),
        "--years",
        "2030",
        "--out",
        str(out),
        "--workers",
        "2",
        "--max-age",  # trails up to 100 years keep this end-to-end run short (README's example)
        "100",
    ]


@pytest.mark.reference
@pytest.mark.slow
def test_invented_batch_end_to_end_interrupted_and_resumed(tmp_path):
    out = tmp_path / "screen"
    results = out / "results"
    # 1. Start, and SIGKILL the whole process group once the non-candidates and at least one
    #    candidate are stored but not every candidate is.
    proc = subprocess.Popen(
        _screen_cmd(out),
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    try:
        deadline = time.monotonic() + WAIT_S
        while True:
            n = len(list(results.glob("*.json"))) if results.exists() else 0
            if n >= 193:  # 191 non-candidates + 2 candidates (of 197 valid orbits)
                break
            assert proc.poll() is None, "finished before it could be interrupted"
            assert time.monotonic() < deadline
            time.sleep(0.02)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finished = {p.name: p.stat().st_mtime_ns for p in results.glob("*.json")}
    assert 193 <= len(finished) < 197, len(finished)
    assert not (out / "screening.json").exists()

    # 2. The same command again completes the batch, recomputing only what was missing.
    r = subprocess.run(
        _screen_cmd(out) + ["--json"], cwd=ROOT, capture_output=True, text=True, timeout=WAIT_S
    )
    assert r.returncode == 0, r.stderr
    counts = json.loads(r.stdout)
    assert counts["reused"] == len(finished)
    assert counts["computed"] == 197 - len(finished)
    for name, mtime in finished.items():  # finished orbits were not rewritten
        assert (results / name).stat().st_mtime_ns == mtime
    assert len(list(results.glob("*.json"))) == 197

    result = json.loads((out / "screening.json").read_text())
    records = {o["line"]: o for o in result["orbits"]}
    assert len(records) == 200

    # 3. Bad rows: reported with their line number, skipped.
    for line, text in BAD_LINES.items():
        assert records[line]["verdict"] == "invalid" and text in records[line]["error"]["message"]

    # 4. Candidates are exactly the orbits passing the rule, recomputed independently.
    rule = ScreeningRule()
    orbits, lines = _valid_orbits()
    expected = set()
    for o, line in zip(orbits, lines, strict=True):
        earth = _earth_elements(o.epoch_tdb_jd)
        pts = moid(o.q_au, o.e, o.incl_deg, o.node_deg, o.peri_deg, *earth)
        m = pts[0].distance_au if pts else math.inf
        node = _nearest_node_bruteforce(o, earth)
        g = records[line]["geometry"]
        assert abs((g["moid_au"] if g["moid_au"] is not None else math.inf) - m) <= (
            MOID_AGREEMENT_AU if math.isfinite(m) else 0
        )
        assert abs(g["nearest_node_au"] - node) <= NODE_AGREEMENT_AU
        if m < rule.moid_max_au and node < rule.node_max_au:
            expected.add(line)
    got = {line for line, r in records.items() if r["candidate"]}
    assert got == expected
    assert 4 <= len(expected) <= 8  # the generator's design: a few of 200
    assert all(records[line]["verdict"] == "not a candidate" for line in set(lines) - expected)
    assert all(records[line]["forecast"] is None for line in set(lines) - expected)

    # 5. Candidates' verdicts: forecasts ran; the hyperbolic one has no trails; the epoch
    #    outside DE423 gives a clear per-row error.
    by_name = {records[line]["name"]: records[line] for line in expected}
    assert by_name["C/2027 C5 (hyperbolic) [invented]"]["verdict"] == "no trails"
    late = by_name["P/2250 C6 (late epoch) [invented]"]
    assert late["verdict"] == "error" and "DE423" in late["error"]["message"]
    # The message says what to do about it (issue 14).
    assert "propagate the orbit to an epoch between 1800 and 2200" in late["error"]["message"]
    assert any("mean J2000" in n for n in late["geometry"]["notes"])
    periodic = [r for n, r in by_name.items() if "(candidate)" in n]
    assert periodic and all(r["forecast"] is not None for r in periodic)
    assert all(r["forecast"]["parent_returns_tdb"] for r in periodic)

    # 6. Ranks order by MOID; CSV and report list every orbit; cautions shown.
    ranked = sorted((r for r in records.values() if r["rank"]), key=lambda r: r["rank"])
    moids = [r["geometry"]["moid_au"] for r in ranked]
    assert moids == sorted(moids)
    table = list(csv.DictReader(io.StringIO((out / "screening.csv").read_text())))
    assert len(table) == 200 and {int(t["line"]) for t in table} == set(range(1, 201))
    report = (out / "screening.txt").read_text()
    assert all(f"  {line:>4}  " in report for line in records)
    assert "Spacecraft operators" in report and "safety" in report
    assert "Spacecraft operators" in " ".join(result["screening"]["cautions"])


@pytest.mark.invariant
@pytest.mark.slow
def test_dask_cluster_gives_the_same_screening(tmp_path):
    """Stage 1 chunks and the stage-2 forecast of a quick candidate (the hyperbolic one: no
    trails) on a real LocalCluster give the same records as in process."""
    from distributed import Client, LocalCluster

    from dynamics.screening import screen_batch, screening_forecast_options

    orbits, _ = _valid_orbits()
    pick = [o for o in orbits if "harmless" in o.name][:40]
    pick += [o for o in orbits if "hyperbolic" in o.name]
    options = screening_forecast_options(2030, 2030)
    local = screen_batch(pick, ScreeningRule(), options)
    with (
        LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cluster,
        Client(cluster) as client,
    ):
        remote = screen_batch(pick, ScreeningRule(), options, executor=client.get_executor())
    assert remote.records == local.records
    assert sum(r["candidate"] for r in local.records) >= 1


@pytest.mark.slow
def test_screen_workers_end_when_the_command_is_killed(tmp_path):
    """Issue 13, finding 5: after SIGKILL of `trailcast screen --workers 2`, its worker
    processes stayed alive. Only the command is killed here; its workers must end by
    themselves."""
    proc = subprocess.Popen(
        _screen_cmd(tmp_path / "screen"),
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    try:
        deadline = time.monotonic() + WAIT_S
        while len(children(proc.pid)) < 2:  # the pool's workers (and the resource tracker)
            assert proc.poll() is None and time.monotonic() < deadline
            time.sleep(0.05)
        time.sleep(1.0)  # let the workers finish starting up
        workers = children(proc.pid)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
        deadline = time.monotonic() + 30.0  # generous against the workers' 0.5 s watch
        while any(alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.2)
        assert [p for p in workers if alive(p)] == []
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass


def test_duplicated_names_in_a_batch_are_flagged(tmp_path):
    """Issue 13, finding 6: duplicated names were not flagged."""
    from dynamics.screening import ScreeningRule, screening_forecast_options
    from service.screening_report import assemble

    bad = {"name": "P/x (invented)", "q": -1}
    path = tmp_path / "dup.jsonl"
    path.write_text("\n".join(json.dumps(bad) for _ in range(3)) + "\n", encoding="utf-8")
    rows = read_batch(path)
    result = assemble(
        rows, None, ScreeningRule(), screening_forecast_options(2040, 2040), source="test"
    )
    assert [o.get("duplicate_name_of") for o in result["orbits"]] == [None, 1, 1]
