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
