"""The command line: readable output, JSON output, one-line errors with exit status 2."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.cli import main

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def test_check_demo_comet(capsys):
    assert main(["check", str(EXAMPLES / "demo-comet.json"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["orbit_type"] == "elliptic"


@pytest.mark.parametrize(
    "content",
    [
        '{"name": "x"}',
        "not json",
        '{"name":"x","epoch":2460000.5,"q":1,"e":-1,"i":1,"node":1,"peri":1,"tp":2460000.5}',
    ],
)
def test_bad_orbit_file_gives_one_line_and_exit_2(tmp_path, content):
    path = tmp_path / "orbit.json"
    path.write_text(content)
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "check", str(path)], capture_output=True, text=True
    )
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert len(proc.stderr.strip().splitlines()) == 1


def test_missing_file_exit_2(capsys):
    assert main(["check", "/nonexistent/orbit.json"]) == 2
    assert "cannot read" in capsys.readouterr().err


def test_unknown_option_exit_2():
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "check", "--bogus"], capture_output=True, text=True
    )
    assert proc.returncode == 2


def test_dynamics_never_imports_the_web_layer():
    """`dynamics` must import without fastapi, pydantic or service (checked in a fresh process)."""
    code = (
        "import sys, dynamics, dynamics.timescales, dynamics.frames, dynamics.orbit_input\n"
        "import pkgutil, importlib\n"
        "for m in pkgutil.iter_modules(dynamics.__path__): importlib.import_module('dynamics.' + m.name)\n"
        "bad = [m for m in sys.modules if m.split('.')[0] in ('service', 'fastapi', 'pydantic', 'starlette')]\n"
        "print(bad); sys.exit(1 if bad else 0)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stdout + proc.stderr


DEMO = json.loads((EXAMPLES / "demo-comet.json").read_text(encoding="utf-8"))


def _one_line_exit_2(args: list[str]) -> str:
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", *args], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 2, proc.stderr
    assert proc.stdout == "" and len(proc.stderr.strip().splitlines()) == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    return proc.stderr


@pytest.mark.parametrize(
    ("name", "data"),
    [
        # Issue 13, finding 7: each gave a traceback and exit 1.
        ("utf16.json", json.dumps(DEMO).encode("utf-16")),
        ("binary.json", bytes(range(256))),
        ("deep.json", b"[" * 5000 + b"]" * 5000),
        ("huge.json", json.dumps(DEMO).replace('"q": 0.953', '"q": ' + "9" * 400).encode()),
        ("surrogate.json", json.dumps(DEMO).replace('"P/2026', '"\\ud800P/2026').encode()),
    ],
)
def test_hostile_orbit_files_give_one_line_and_exit_2(tmp_path, name, data):
    path = tmp_path / name
    path.write_bytes(data)
    _one_line_exit_2(["check", str(path)])


@pytest.mark.parametrize(
    "option",
    [
        ["--seed", "-1"],
        ["--trails", "-5000"],
        ["--max-age", "-1"],
        ["--max-age", "nan"],
        ["--max-age", "inf"],
        ["--max-age", "0"],
        ["--calibrate", "2039:1975:inf"],
    ],
)
def test_forecast_options_the_api_refuses_are_refused_here_too(option):
    err = _one_line_exit_2(
        ["forecast", str(EXAMPLES / "demo-comet.json"), "--years", "2040", *option]
    )
    assert option[0] in err


def test_orbit_file_with_a_byte_order_mark_is_read(tmp_path, capsys):
    path = tmp_path / "bom.json"
    path.write_bytes(b"\xef\xbb\xbf" + json.dumps(DEMO).encode("utf-8"))
    assert main(["check", str(path), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["orbit_type"] == "elliptic"


def test_batch_rows_that_used_to_abort_the_batch(tmp_path):
    """Issue 13, finding 6: a huge integer, deep nesting, a surrogate or a raw U+2028 in one row."""
    from service.batch import read_batch

    good = json.dumps(DEMO)
    lines = [
        good.replace('"q": 0.953', '"q": ' + "9" * 400),  # line 1: huge integer
        "[" * 5000 + "]" * 5000,  # line 2: deep nesting
        good.replace('"P/2026', '"\\ud800P/2026'),  # line 3: lone surrogate (escaped)
        good.replace("Hollow Pine", "Hollow\u2028Pine"),  # line 4: raw U+2028 inside a string
        good,  # line 5: fine
    ]
    path = tmp_path / "batch.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    rows = read_batch(path)
    assert [r.line for r in rows] == [1, 2, 3, 4, 5]  # U+2028 did not split line 4
    assert [r.orbit is not None for r in rows] == [False, False, False, False, True]
    assert rows[0].error["field"] == "q" and rows[2].error["field"] == "name"
    assert rows[3].error["field"] == "name"  # a line break has no place in a name
    rows[2].name.encode("utf-8")  # a printable name: reports and CSV can be written


def test_csv_batch_carries_the_asymmetric_nongrav_offset(tmp_path):
    from service.batch import CSV_COLUMNS, read_batch

    path = tmp_path / "batch.csv"
    cells = {**{k: DEMO[k] for k in ("name", "epoch", "q", "e", "i", "node", "peri", "tp")}}
    cells.update({"nongrav.a2": -4e-10, "nongrav.dt": -32.8})
    header = [c for c in CSV_COLUMNS if c in cells]
    path.write_text(
        ",".join(header) + "\n" + ",".join(str(cells[c]) for c in header) + "\n", encoding="utf-8"
    )
    (row,) = read_batch(path)
    assert row.orbit.nongrav.dt_days == -32.8 and row.orbit.nongrav.a2_au_d2 == -4e-10


def test_csv_batch_takes_rows_placed_by_mean_anomaly(tmp_path):
    # A newly found asteroid comes as (a, e, i, node, peri, M) at an epoch: such a row leaves q
    # and tp empty. The demo comet placed both ways must give the same q and tp.
    import math

    from dynamics.constants import GM_SUN_AU3_D2
    from dynamics.orbit_input import parse_orbit
    from service.batch import CSV_COLUMNS, read_batch

    demo = parse_orbit(DEMO)
    a = DEMO["q"] / (1.0 - DEMO["e"])
    n_rad = math.sqrt(GM_SUN_AU3_D2 / a**3)
    m_deg = math.degrees(n_rad * (demo.epoch_tdb_jd - demo.tp_tdb_jd))
    keys = ("name", "epoch", "q", "e", "i", "node", "peri", "tp", "a", "mean_anomaly", "n")
    by_m = {**DEMO, "q": "", "tp": "", "a": a, "mean_anomaly": m_deg, "n": math.degrees(n_rad)}
    by_q = {**DEMO, "a": "", "mean_anomaly": "", "n": ""}
    header = [c for c in CSV_COLUMNS if c in keys]
    lines = [",".join(header)] + [",".join(str(r[c]) for c in header) for r in (by_m, by_q)]
    path = tmp_path / "batch.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    rows = read_batch(path)
    assert [r.error for r in rows] == [None, None]
    assert rows[0].orbit.q_au == pytest.approx(rows[1].orbit.q_au, rel=1e-12)
    assert rows[0].orbit.tp_tdb_jd == pytest.approx(rows[1].orbit.tp_tdb_jd, abs=1e-6)


@pytest.mark.slow
def test_forecast_table_names_each_crossing_by_its_activity():
    # Regression (what the engine gives today, the example): the demo comet's 2026
    # trail passes about 0.002 au from Earth in 2040 with a predicted peak ZHR of 0. The table
    # lists it under "Negligible", not under "Encounters", with its number; the level is
    # dynamics.activity.ENCOUNTER_MIN_ZHR (10, common practice, no source).
    args = ["--years", "2040", "--trails", "2026", "--particles", "30"]
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "forecast", str(EXAMPLES / "demo-comet.json"), *args],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    encounters = out[out.index("Encounters (") : out.index("Negligible (")]
    negligible = out[out.index("Negligible (") : out.index("Near misses (")]
    assert "predicted peak ZHR at or above 10" in encounters and "  none" in encounters
    row = next(line for line in negligible.splitlines() if line.startswith("  2040   2026"))
    assert row.endswith("0 (0-0)")
    assert "passed close to Earth's path but with negligible activity" in out
