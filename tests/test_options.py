"""The one option table against every surface built from it (issue 14, point 8).

These are consistency tests, not numerical ones: they compare the table
(``service/options.py``) with the engine's dataclass defaults, the API's request models and
their OpenAPI schema, the flags of ``forecast``, ``submit``, ``screen`` and ``hindcast``, the
options a submitted job runs with, and the README's table. Each fails when a surface drifts
from the table (a retyped default, a missing flag, a limit changed in one place only).
"""

import dataclasses
import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from dynamics.executors import default_workers
from dynamics.forecast import ForecastOptions
from dynamics.release import EjectionModel
from dynamics.screening import screening_forecast_options
from dynamics.uncertainty import DEFAULT_CLONES
from service import options as table
from service.cli import (
    build_parser,
    checked_options,
    forecast_options_from_args,
    main,
    submit_body_from_args,
)
from service.job_kinds.forecast import forecast_inputs
from service.job_kinds.screening import screening_inputs
from service.jobs import Job
from service.main import create_app
from service.models import ForecastIn, ForecastOptionsIn, ScreeningIn, ScreeningOptionsIn
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[1]
DEMO_PATH = ROOT / "examples" / "demo-comet.json"
DEMO_ORBIT = json.loads(DEMO_PATH.read_text(encoding="utf-8"))
YEARS = ["--years", "2040"]

#: A valid value other than the default for every option: (command-line text, API value).
#: Adding an option to the table without a line here fails test_every_option_has_a_probe.
NON_DEFAULT = {
    "particles": ("42", 42),
    "seed": ("7", 7),
    "trails": ("2026", [2026]),
    "max_trail_age_years": ("123.5", 123.5),
    "integrator": ("ias15", "ias15"),
    "speed_law": ("whipple1951_escape", "whipple1951_escape"),
    "mass_index": ("1.8", 1.8),
    "meteoroid_density_g_cm3": ("0.5", 0.5),
    "nucleus_radius_km": ("3.5", 3.5),
    "dust_mass_per_return_g": ("1e12", 1e12),
    "calibration": ("2039:2026:350", {"year": 2039, "trail_year": 2026, "zhr": 350.0}),
    "clones": ("3", 3),
    "events": ("outburst:2026-10-31:2:3", None),  # the API takes events in the orbit
    "workers": ("2", None),  # not an API field: where it runs, not what it computes
}


def _surface_parser(command: str):
    sub = next(a for a in build_parser()._actions if a.__class__.__name__ == "_SubParsersAction")
    return sub.choices[command]


def _flags(command: str) -> dict:
    return {s: a for a in _surface_parser(command)._actions for s in a.option_strings}


def _args(command: str, *extra: str):
    first = ["screen", str(DEMO_PATH)] if command == "screen" else [command, str(DEMO_PATH)]
    return build_parser().parse_args([*first, *YEARS, *extra])


def test_every_option_has_a_probe():
    assert set(NON_DEFAULT) == {o.name for o in table.OPTIONS}


def test_table_defaults_are_the_engines():
    """Every default in the table is the engine's, not a retyped copy."""
    fo = {f.name: f for f in dataclasses.fields(ForecastOptions)}
    em = {f.name: f for f in dataclasses.fields(EjectionModel)}
    for o in table.OPTIONS:
        cls, _, field = o.engine.partition(".")
        if o.repeatable:  # a list on the command line, () in the engine: checked below
            continue
        if cls == "ForecastOptions" and fo[field].default is not dataclasses.MISSING:
            assert o.default == fo[field].default, o.name
        elif cls == "EjectionModel":
            assert o.default == em[field].default, o.name
    assert table.BY_NAME["clones"].default == DEFAULT_CLONES
    assert table.BY_NAME["events"].default is None and fo["events"].default == ()
    assert table.resolve_workers(None) == default_workers()
    # With nothing given, the API's options are exactly the engine's default options.
    checked = ForecastOptionsIn().model_dump()
    assert table.forecast_options(2040, 2040, checked, 1) == ForecastOptions(2040, 2040, workers=1)
    screened = ScreeningOptionsIn().model_dump()
    assert table.screening_options(2040, 2040, screened, workers=1) == screening_forecast_options(
        2040, 2040, workers=1
    )


@pytest.mark.parametrize(
    ("model", "options", "surface"),
    [
        (ForecastOptionsIn, table.API_OPTIONS, table.FORECAST),
        (ScreeningOptionsIn, table.SCREENING_OPTIONS, table.SCREEN),
    ],
)
def test_api_models_are_the_table(model, options, surface):
    """Same fields, defaults, choices and limits in the model and in its OpenAPI schema."""
    assert list(model.model_fields) == [o.name for o in options]
    props = model.model_json_schema()["properties"]
    for o in options:
        assert model.model_fields[o.name].default == o.default_for(surface), o.name
        prop = props[o.name]
        variants = prop.get("anyOf", [prop])
        scalar = next(v for v in variants if v.get("type") != "null")
        assert ({"type": "null"} in variants) == o.nullable, o.name
        for key, schema_key in (
            ("ge", "minimum"),
            ("gt", "exclusiveMinimum"),
            ("le", "maximum"),
            ("lt", "exclusiveMaximum"),
        ):
            if scalar.get("type") in ("integer", "number"):
                assert scalar.get(schema_key) == getattr(o, key), (o.name, key)
        if o.choices:
            assert tuple(scalar["enum"]) == o.choices, o.name
        if o.max_items is not None:
            assert scalar["maxItems"] == o.max_items, o.name


@pytest.mark.parametrize("command", [table.FORECAST, table.SUBMIT, table.SCREEN, table.HINDCAST])
def test_each_command_takes_its_options_with_the_tables_defaults(command):
    flags = _flags(command)
    for o in table.OPTIONS:
        if command not in o.surfaces:
            # hindcast keeps its own --particles/--seed for the catalogue's runs (its budget)
            if command != table.HINDCAST:
                assert o.flag not in flags, (command, o.flag)
            continue
        action = flags[o.flag]
        assert action.dest == o.name
        assert action.default == (None if o.repeatable else o.default_for(command)), o.flag
        assert (tuple(action.choices) if action.choices else None) == o.choices, o.flag
        assert f"(default {o.default_text(command)})" in action.help, o.flag
    for o in table.OPTIONS:  # --speed-law and --integrator list their choices in the help
        if o.choices and command in o.surfaces:
            assert all(c in flags[o.flag].help for c in o.choices)


#: Flags of each command that are not forecast options (where, when, how to print).
OTHER_FLAGS = {
    table.FORECAST: {"-h", "--help", "--years", "--json"},
    table.SUBMIT: {"-h", "--help", "--years", "--json", "--url", "--token", "--wait"}
    | {"--timeout", "--poll"},
    table.SCREEN: {"-h", "--help", "--years", "--json", "--out", "--moid-max", "--node-max"},
}


@pytest.mark.parametrize("command", sorted(OTHER_FLAGS))
def test_no_command_has_an_option_outside_the_table(command):
    """A flag added by hand beside the table (a second copy that can drift) fails here."""
    taken = {o.flag for o in table.OPTIONS if command in o.surfaces}
    assert set(_flags(command)) == taken | OTHER_FLAGS[command]


def test_screen_shares_the_forecasts_defaults_except_its_declared_budget():
    """One --max-age (and every other shared option) default for forecast and screen; only the
    particle budget differs, and it is the engine's screening budget."""
    for o in table.SCREENING_OPTIONS:
        if o.name == "particles":
            assert o.default_for(table.SCREEN) == screening_forecast_options(2040, 2040).particles
            assert o.default_for(table.SCREEN) != o.default
        else:
            assert o.default_for(table.SCREEN) == o.default, o.name
    assert (
        _flags("screen")["--max-age"].default
        == _flags("forecast")["--max-age"].default
        == ForecastOptions(2040, 2040).max_trail_age_years
    )


def _job(request: dict) -> Job:
    return Job(
        id="0" * 32,
        kind="forecast",
        state="queued",
        request=request,
        label="",
        first_year=request["years"][0],
        last_year=request["years"][1],
        model_version="",
        progress_fraction=0.0,
        progress_stage="",
        items_done=None,
        items_total=None,
        created_utc="",
        queued_utc="",
        started_utc=None,
        finished_utc=None,
        heartbeat_utc=None,
        runner=None,
        attempts=0,
        cancel_requested=False,
        error=None,
    )


@pytest.mark.parametrize("name", [o.name for o in table.OPTIONS if o.name != "workers"])
def test_every_forecast_option_is_reachable_from_submit(name):
    """submit with the flag -> the job's canonical request -> the engine options the job runs
    with: the same as `forecast` with the same flag (where it runs aside)."""
    o = table.BY_NAME[name]
    assert {table.FORECAST, table.SUBMIT} <= o.surfaces
    text, api_value = NON_DEFAULT[name]
    extra = [o.flag, text]
    if name == "calibration":
        extra += ["--trails", "2026"]  # any trail before the forecast year
    body = submit_body_from_args(_args("submit", *extra))
    canonical, _ = ForecastIn.model_validate(body).to_domain(max_years=20, max_particles=100_000)
    if o.api:
        assert canonical["options"][name] == api_value
        assert canonical["options"][name] != o.default
    orbit, via_job = forecast_inputs(_job(canonical), workers=1)
    local = forecast_options_from_args(_args("forecast", *extra, "--workers", "1"))
    if name == "events":  # the job's orbit carries them; the engine merges them into options
        assert len(orbit.ejection_events) == 1 and orbit.ejection_events == local.events
        local = dataclasses.replace(local, events=())
    if name == "clones":  # a forecast_solutions argument, not a ForecastOptions field
        args = _args("forecast", *extra)
        assert checked_options(args, table.FORECAST, 2040, 2040)["clones"] == 3
    assert via_job == local
    assert via_job != ForecastOptions(2040, 2040, workers=1) or name in ("clones", "events")


def test_submit_does_not_take_workers_and_the_service_ignores_it():
    assert "--workers" not in _flags("submit")
    assert "workers" not in ForecastOptionsIn.model_fields


@pytest.mark.parametrize("name", [o.name for o in table.SCREENING_OPTIONS])
def test_every_screening_option_is_reachable_from_screen_and_the_api(name):
    o = table.BY_NAME[name]
    text, api_value = NON_DEFAULT[name]
    args = _args("screen", o.flag, text)
    local = table.screening_options(2040, 2040, checked_options(args, table.SCREEN, 2040, 2040))
    body = ScreeningIn.model_validate(
        {"orbits": [DEMO_ORBIT], "years": [2040], "options": {name: api_value}}
    )
    _, _, via_api = screening_inputs(body.to_domain(20, 100_000, 10))
    assert local == via_api
    assert local != screening_forecast_options(2040, 2040, workers=local.workers)


def _outside(o: table.Option):
    """Values just outside each limit of ``o`` (as command-line text and JSON value)."""
    out = []
    step = 1 if o.type is int else 1e-3
    if o.ge is not None:
        out.append(o.ge - step)
    if o.gt is not None:
        out.append(o.gt)
    if o.le is not None:
        out.append(o.le * 10 if o.le > 1e6 else o.le + step)
    if o.lt is not None:
        out.append(o.lt)
    return [o.type(v) for v in out]


OUT_OF_RANGE = [
    (command, o.name, v)
    for o in table.OPTIONS
    for v in _outside(o)
    for command in (table.FORECAST, table.SUBMIT, table.SCREEN)
    if command in o.surfaces
]


def test_out_of_range_probes_cover_every_limited_option():
    limited = {
        o.name
        for o in table.OPTIONS
        if any(getattr(o, k) is not None for k in ("ge", "gt", "le", "lt"))
    }
    assert {name for _, name, _ in OUT_OF_RANGE} == limited


@pytest.mark.parametrize(("command", "name", "value"), OUT_OF_RANGE)
def test_out_of_range_on_the_command_line_is_one_line_and_exit_2(command, name, value, capsys):
    o = table.BY_NAME[name]
    first = [command, str(DEMO_PATH)]
    assert main([*first, *YEARS, o.flag, str(value)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert len(captured.err.strip().splitlines()) == 1 and o.flag in captured.err, captured.err


@pytest.fixture(scope="module")
def idle(tmp_path_factory):
    """A service that stores jobs but runs none."""
    app = create_app(Settings(data_dir=tmp_path_factory.mktemp("idle"), job_runners=0))
    with TestClient(app) as c:
        yield c


@pytest.mark.parametrize(
    ("route", "name", "value"),
    [
        (route, o.name, v)
        for o in table.API_OPTIONS
        for v in _outside(o)
        for route, options in (
            ("/v1/forecasts", table.API_OPTIONS),
            ("/v1/screenings", table.SCREENING_OPTIONS),
        )
        if o in options
    ],
)
def test_out_of_range_in_the_api_is_problem_json_naming_the_field(idle, route, name, value):
    body = {"years": [2040], "options": {name: value}}
    body.update({"orbit": DEMO_ORBIT} if route == "/v1/forecasts" else {"orbits": [DEMO_ORBIT]})
    r = idle.post(route, json=body)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["field"] == f"options.{name}"


def test_readme_option_table_is_the_tables():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index("<!-- options-table -->") + len("<!-- options-table -->")
    end = text.index("<!-- /options-table -->")
    assert text[start:end].strip() == table.markdown_table()


def test_serve_names_its_processes_apart_from_workers(monkeypatch, tmp_path, capsys):
    """--server-processes for serve; its old --workers still works, with one warning line."""
    import uvicorn

    calls = []
    monkeypatch.setattr(uvicorn, "run", lambda *a, **k: calls.append(k))
    monkeypatch.setenv("TRAILCAST_DATA_DIR", str(tmp_path))
    assert main(["serve", "--server-processes", "2"]) == 0
    assert calls[-1]["workers"] == 2
    assert main(["serve", "--workers", "3"]) == 0
    assert calls[-1]["workers"] == 3
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--server-processes" in err[0]
    assert main(["serve", "--workers", "2", "--server-processes", "2"]) == 2
    assert main(["serve", "--server-processes", "0"]) == 2
    assert "--workers" not in _surface_parser("serve").format_help()
