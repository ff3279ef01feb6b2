"""Orbit uncertainty: alternative solutions and covariance clones, run with shared random draws."""

import json
from pathlib import Path

import numpy as np
import pytest

from dynamics.forecast import ForecastOptions
from dynamics.orbit_input import parse_orbit
from dynamics.uncertainty import forecast_solutions, orbit_solutions
from service.cli import forecast_table

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO = json.loads((EXAMPLES / "demo-comet.json").read_text())
# An invented alternative fit of the invented demo comet: perihelion 0.003 au farther out.
ALTERNATIVE = dict(DEMO, name=DEMO["name"] + ", alternative fit", q=DEMO["q"] + 0.003, e=0.8275)


@pytest.fixture(scope="module")
def two_solutions():
    orbit = parse_orbit(dict(DEMO, solutions=[ALTERNATIVE]))
    opts = ForecastOptions(
        2040, 2040, trails=(2013, 2026), particles=40, pilot_particles=20, candidates=50_000
    )
    return forecast_solutions(orbit, opts)


@pytest.mark.invariant
@pytest.mark.slow
def test_two_solutions_side_by_side_with_explained_differences(two_solutions):
    out = two_solutions.to_json()
    assert [p["solution"] for p in out["solutions"]] == ["nominal", "solution-1"]
    rows = out["encounters"] + out["near_misses"]
    assert {r["solution"] for r in rows} == {"nominal", "solution-1"}
    summary = {s["trail_year"]: s for s in out["solution_summary"]}
    assert set(summary) == {2013, 2026}
    for s in summary.values():
        assert s["solutions"] == ["nominal", "solution-1"]
        assert "across 2 solutions" in s["explanation"]
    # Physics: the alternative fit's perihelion is 0.003 au farther out, so its trails cross
    # Earth's path farther out too (same random draws: the difference is the orbit's).
    by = {(r["solution"], r["trail"]["perihelion_year"]): r["miss_distance_au"] for r in rows}
    for trail in (2013, 2026):
        assert by[("solution-1", trail)] - by[("nominal", trail)] == pytest.approx(
            0.003, abs=0.0015
        )
    table = forecast_table(out)
    assert "How the solutions differ" in table and "solution-1" in table
    # every solution states what became of each of its trail passages, and a note that only
    # one solution has says which one
    assert {t["solution"] for t in out["trails"]} == {"nominal", "solution-1"}
    per = [n for r in two_solutions.results for n in r.notes]
    for n in out["notes"]:
        assert n in per or n.split(": ", 1)[1] in per


def test_covariance_clones_are_reproducible_and_spread():
    cov = np.diag([1e-6, 1e-7, 1e-4, 1e-4, 1e-4, 1e-2])  # au^2, 1, deg^2 x3, day^2
    orbit = parse_orbit(dict(DEMO, covariance=cov.tolist()))
    labels, orbits = orbit_solutions(orbit, clones=4, seed=3)
    again = orbit_solutions(orbit, clones=4, seed=3)[1]
    assert labels == ("nominal", "clone-1", "clone-2", "clone-3", "clone-4")
    assert [o.q_au for o in orbits] == [o.q_au for o in again]
    q = np.array([o.q_au for o in orbits[1:]])
    assert 0 < np.std(q) < 0.01  # drawn about the nominal with sigma 1e-3 au
    assert all(o.covariance is None and not o.solutions for o in orbits)
