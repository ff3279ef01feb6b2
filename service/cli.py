"""The ``trailcast`` command line: a thin layer over :mod:`dynamics` and the web service.

Every command prints a readable table by default and JSON with ``--json``. Bad input gives one
line on stderr and exit status 2; nothing is written in that case.
"""

import argparse
import json
import math
import sys
from pathlib import Path

from dynamics import __version__
from dynamics.errors import TrailcastError

CAUTION = (
    "Predictions are model estimates with real uncertainty, above all in intensity. Spacecraft "
    "operators: defer to the responsible agencies' meteoroid assessments. Observers: usual "
    "night-time and outdoor safety."
)


class UsageError(Exception):
    """Bad command-line input (reported on one line, exit status 2)."""


def load_orbit_file(path: str):
    """Read and validate an orbit JSON file (see :mod:`dynamics.orbit_input`)."""
    from dynamics.orbit_input import parse_orbit

    try:
        text = Path(path).read_text(encoding="utf-8-sig")  # a leading BOM is fine
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise UsageError(f"{path}: not UTF-8 text (save the orbit file as UTF-8)") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise UsageError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
    except RecursionError:
        raise UsageError(f"{path}: JSON nested too deeply to be an orbit") from None
    return parse_orbit(data)


# --- commands -----------------------------------------------------------------------------------

#: Most server processes `serve` starts; no source: each holds its own worker pool, so more than
#: a few dozen on one machine only adds memory.
MAX_SERVER_PROCESSES = 64


def cmd_serve(args) -> int:
    import uvicorn

    from .main import create_app
    from .settings import Settings

    processes = args.server_processes
    if args.workers_deprecated is not None:
        if processes is not None:
            raise UsageError("give --server-processes only (--workers is its old name)")
        print(
            "trailcast serve: --workers is deprecated here (it meant server processes); "
            "use --server-processes",
            file=sys.stderr,
        )
        processes = args.workers_deprecated
    processes = 1 if processes is None else processes
    if not 1 <= processes <= MAX_SERVER_PROCESSES:
        raise UsageError(f"--server-processes must be between 1 and {MAX_SERVER_PROCESSES}")
    settings = Settings.from_env()
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    if processes == 1:
        uvicorn.run(create_app(settings), host=args.host, port=args.port, log_level="info")
    else:  # several server processes: each builds its app from the same environment
        uvicorn.run(
            "service.main:create_app",
            factory=True,
            host=args.host,
            port=args.port,
            workers=processes,
            log_level="info",
        )
    return 0


# --- talking to a running service ---------------------------------------------------------------

DEFAULT_URL = "http://127.0.0.1:8000"


class ServiceUnreachable(Exception):
    """The service did not answer (reported on one line, exit status 1)."""


class JobDidNotFinish(Exception):
    """The job failed or was cancelled (reported on one line, exit status 1)."""


def _service_call(method: str, url: str, token: str | None = None, **kwargs):
    """One HTTP call; problem+json answers become UsageError (4xx) or ServiceUnreachable (5xx)."""
    import httpx

    headers = {"Authorization": f"Bearer {token}"} if token else {}
    try:
        r = httpx.request(method, url, headers=headers, timeout=30.0, **kwargs)
    except httpx.HTTPError as exc:
        raise ServiceUnreachable(f"cannot reach the service at {url}: {exc}") from None
    if r.status_code >= 400:
        try:
            body = r.json()
            text = f"{body.get('title', r.status_code)}: {body.get('detail', '')}"
        except ValueError:
            text = f"HTTP {r.status_code}"
        if r.status_code >= 500:
            raise ServiceUnreachable(f"the service failed ({r.status_code}): {text}")
        raise UsageError(f"the service refused the request ({r.status_code}): {text}")
    return r


def _service_url(args) -> str:
    import os

    return (args.url or os.environ.get("TRAILCAST_URL") or DEFAULT_URL).rstrip("/")


def _token(args) -> str | None:
    import os

    return args.token or os.environ.get("TRAILCAST_API_TOKEN") or None


def submit_body_from_args(args) -> dict:
    """The POST /v1/forecasts body for the CLI arguments (checked locally first): the orbit,
    the years and every option of the table; ``--event`` joins the orbit's ``ejection_events``
    (where the API takes them)."""
    from .options import SUBMIT

    load_orbit_file(args.orbit)  # one-line error, exit 2, before any network traffic
    orbit = json.loads(Path(args.orbit).read_text(encoding="utf-8-sig"))
    first, last = _parse_years(args.years)
    options = checked_options(args, SUBMIT, first, last)
    events = [_parse_event(t) for t in (args.events or ())]
    if events:
        orbit["ejection_events"] = list(orbit.get("ejection_events") or []) + [
            {
                "kind": ev.kind,
                "start": ev.t_tdb_jd,
                "duration_days": ev.duration_days,
                "speed_multiplier": ev.speed_multiplier,
                "source": ev.source,
            }
            for ev in events
        ]
    return {"orbit": orbit, "years": [first, last], "options": options}


def cmd_submit(args) -> int:
    body = submit_body_from_args(args)
    url = _service_url(args)
    r = _service_call("POST", f"{url}/v1/forecasts", _token(args), json=body)
    accepted = r.json()
    if not args.wait:
        if args.json:
            print(json.dumps(accepted, indent=2))
        else:
            how = (
                "already done (served from the store)"
                if accepted["state"] == "done"
                else (
                    accepted["state"]
                    + (" (same inputs as an earlier job)" if accepted["reused"] else "")
                )
            )
            print(f"{accepted['id']}  {how}")
            print(f"  status: trailcast status {accepted['id']} --url {url}")
        return 0
    return _wait_and_show(url, accepted["id"], args)


def _wait_and_show(url: str, job_id: str, args) -> int:
    import time

    show = sys.stderr.isatty() and not args.json
    deadline = time.monotonic() + args.timeout
    while True:
        job = _service_call("GET", f"{url}/v1/forecasts/{job_id}").json()
        if job["state"] in ("done", "failed", "cancelled"):
            break
        if time.monotonic() > deadline:
            raise ServiceUnreachable(
                f"job {job_id} still {job['state']} after {args.timeout:g} s (it keeps running; "
                f"ask again with `trailcast status {job_id}`)"
            )
        if show:
            p = job["progress"]
            print(f"\r  {100 * p['fraction']:5.1f}%  {p['stage']:<30}", end="", file=sys.stderr)
        time.sleep(args.poll)
    if show:
        print(file=sys.stderr)
    return _show_job(job, args)


def _show_job(job: dict, args) -> int:
    if args.json:
        print(json.dumps(job, indent=2))
    elif job["state"] == "done":
        print(forecast_table(job["result"]))
    else:
        t = job["timings"]
        p = job["progress"]
        print(f"Job {job['id']}: {job['state']}")
        print(f"  parent    {job['parent_name']}")
        print(f"  years     {job['years'][0]}-{job['years'][1]}")
        print(f"  progress  {100 * p['fraction']:.1f}%  {p['stage']}")
        print(f"  created   {t['created_utc']}")
        print(f"  started   {t['started_utc'] or '-'}")
        print(f"  finished  {t['finished_utc'] or '-'}")
        if job.get("error"):
            print(f"  error     {job['error']['title']}: {job['error']['detail']}")
    if job["state"] in ("failed", "cancelled"):
        detail = (job.get("error") or {}).get("detail", "")
        raise JobDidNotFinish(f"job {job['id']} {job['state']}" + (f": {detail}" if detail else ""))
    return 0


def cmd_status(args) -> int:
    import re

    if not re.fullmatch("[0-9a-f]{32}", args.id):
        raise UsageError(f"not a job id (32 hex digits): {args.id!r}")
    url = _service_url(args)
    if args.wait:
        return _wait_and_show(url, args.id, args)
    job = _service_call("GET", f"{url}/v1/forecasts/{args.id}").json()
    try:
        return _show_job(job, args)
    except JobDidNotFinish:
        return 0  # asking about a failed job is not itself a failure


def cmd_check(args) -> int:
    from dynamics.timescales import format_iso, format_utc

    orbit = load_orbit_file(args.orbit)
    summary = {
        "name": orbit.name,
        "epoch_tdb": format_iso(orbit.epoch_tdb_jd, "TDB"),
        "perihelion_utc": format_utc(orbit.tp_tdb_jd),
        "q_au": orbit.q_au,
        "e": orbit.e,
        "a_au": orbit.a_au if math.isfinite(orbit.a_au) else None,
        "aphelion_au": orbit.aphelion_au if math.isfinite(orbit.aphelion_au) else None,
        "period_years": orbit.period_days / 365.25 if math.isfinite(orbit.period_days) else None,
        "orbit_type": "elliptic"
        if orbit.e < 1.0
        else ("parabolic" if orbit.e == 1.0 else "hyperbolic"),
        "nongrav": orbit.nongrav is not None,
        "covariance": orbit.covariance is not None,
        "solutions": len(orbit.solutions),
    }
    if args.json:
        print(json.dumps(summary, indent=2))
        return 0
    width = max(len(k) for k in summary)
    print(f"Orbit {orbit.name}: valid")
    for key, value in summary.items():
        if key == "name":
            continue
        shown = "-" if value is None else (f"{value:.6g}" if isinstance(value, float) else value)
        print(f"  {key:<{width}}  {shown}")
    return 0


def cmd_solar_longitude(args) -> int:
    import numpy as np

    from dynamics.solar_longitude import solar_longitude_deg, times_of_solar_longitude_tdb
    from dynamics.timescales import calendar_year_tdb_jd, format_utc, iso_to_tdb_jd

    if args.at is not None:
        t = iso_to_tdb_jd(args.at)
        lam = float(solar_longitude_deg(t, kind=args.kind))
        out = {
            "time_utc": format_utc(t),
            "solar_longitude_deg": lam,
            "kind": args.kind,
            "equinox": "J2000",
        }
        print(
            json.dumps(out, indent=2)
            if args.json
            else f"{out['time_utc']}  lambda_sun = {lam:.5f} deg ({args.kind}, J2000)"
        )
        return 0
    if args.longitude is None or args.year is None:
        raise UsageError("give --at TIME, or LONGITUDE_DEG with --year YEAR")
    if not 0.0 <= args.longitude < 360.0:
        raise UsageError(f"longitude must be in [0, 360) deg, got {args.longitude}")
    start, end = calendar_year_tdb_jd(args.year)
    times = np.atleast_1d(times_of_solar_longitude_tdb(args.longitude, start, end, kind=args.kind))
    instants = [format_utc(t, decimals=0) for t in times]
    if args.json:
        print(
            json.dumps(
                {
                    "solar_longitude_deg": args.longitude,
                    "kind": args.kind,
                    "year": args.year,
                    "times_utc": instants,
                },
                indent=2,
            )
        )
    else:
        for s in instants:
            print(f"{s}  lambda_sun = {args.longitude:.5f} deg ({args.kind}, J2000)")
    return 0


def cmd_geometry(args) -> int:
    from dynamics.geometry import quick_look

    orbit = load_orbit_file(args.orbit)
    result = quick_look(orbit, args.year).to_json()
    if args.json:
        print(json.dumps(result, indent=2))
        return 0
    print(_geometry_table(result))
    return 0


def _fmt(value, spec: str) -> str:
    return "-" if value is None else format(value, spec)


def _geometry_table(res: dict) -> str:
    """Readable quick-look table (the same numbers as the JSON)."""
    eo = res["earth_orbit"]
    lines = [
        f"Geometry of {res['name']} against Earth's orbit ({eo['model']})",
        f"  MOID  {_fmt(res['moid_au'], '.5f')} au",
        "",
        "  Closest points (every local minimum of the orbit distance; lambda_sun geometric, J2000)",
        "    dist_au   lambda_sun   RA      Dec     Vg km/s  Vinf km/s  Earth passes (UTC)",
    ]
    for p in res["moid_points"]:
        r = p["radiant"] or {}
        lines.append(
            f"    {p['distance_au']:<9.5f} {p['solar_longitude_deg']:>8.3f}   "
            f"{_fmt(r.get('ra_deg'), '6.1f')}  {_fmt(r.get('dec_deg'), '+6.1f')}  "
            f"{_fmt(r.get('vg_km_s'), '7.2f')}  {_fmt(r.get('vinf_km_s'), '9.2f')}  "
            f"{p['earth_passage_utc'] or '-'}"
        )
    lines += [
        "",
        "  Nodes (miss distance = parent minus Earth's orbit at the node's longitude)",
        "    node        r_au      miss_au     lambda_sun   Earth passes (UTC)",
    ]
    for n in res["nodes"]:
        lines.append(
            f"    {n['kind']:<11} {_fmt(n['r_au'], '<9.5f'):<9} {_fmt(n['miss_distance_au'], '+.5f'):>9}"
            f"   {_fmt(n['solar_longitude_deg'], '8.3f'):>8}     {n['earth_passage_utc'] or '-'}"
        )
    rad = res["radiant"]
    if rad:
        lines += ["", f"  Radiant method: {rad['method']}"]
    rule = res["similar_showers_rule"]
    shown = ", ".join(f"{s['name']} (D_SH {s['d_sh']:.3f})" for s in res["similar_showers"])
    lines += [
        f"  Similar showers (D_SH < {rule['max']}): {shown or 'none'}",
        "",
        f"  Verdict: {res['verdict']}",
    ]
    lines += [f"  Note: {n}" for n in res["notes"]]
    lines += ["", *(f"  Caution: {c}" for c in res["cautions"])]
    return "\n".join(lines)


def _parse_years(text: str) -> tuple[int, int]:
    try:
        parts = [int(x) for x in text.split(":")]
    except ValueError:
        raise UsageError(f"--years takes Y or Y1:Y2, got {text!r}") from None
    if len(parts) == 1:
        parts = parts * 2
    if len(parts) != 2 or parts[1] < parts[0]:
        raise UsageError(f"--years takes Y or Y1:Y2 with Y1 <= Y2, got {text!r}")
    if parts[0] < 1800 or parts[1] > 2199:
        raise UsageError("--years must lie within 1800-2199 (the DE423 ephemeris span)")
    if parts[1] - parts[0] > 100:
        raise UsageError("--years spans more than 100 years; split the request")
    return parts[0], parts[1]


def checked_options(args, surface: str, first: int, last: int) -> dict:
    """The API's ``options`` for the parsed arguments, checked by the API's own request model
    (built from the same option table), so that every command refuses what ``POST /v1/forecasts``
    (or ``/v1/screenings``) refuses, with the flag's name: one line, exit 2."""
    from pydantic import ValidationError

    from . import options as table
    from .models import ForecastIn, ForecastOptionsIn, ScreeningOptionsIn

    try:
        values = table.values_from_args(args, surface)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    model = ScreeningOptionsIn if surface == table.SCREEN else ForecastOptionsIn
    try:
        checked = model(**values)
        if surface != table.SCREEN:
            ForecastIn.model_construct(
                years=[first, last], options=checked, particles=None
            )._consistent()
    except ValidationError as exc:
        e = exc.errors()[0]
        loc = [str(p) for p in e.get("loc", ())]
        option = table.BY_NAME.get(loc[0]) if loc else None
        where = option.flag if option else "an option"
        if len(loc) > 1 and not loc[1].isdigit():
            where += f" {'.'.join(loc[1:])}"
        raise UsageError(
            f"{where}: {str(e.get('msg', 'invalid')).removeprefix('Value error, ')}"
        ) from None
    except ValueError as exc:  # what only the whole request shows
        field, _, msg = str(exc).partition(": ")
        option = table.BY_NAME.get(field.split(".")[-1])
        raise UsageError(f"{option.flag if option else field}: {msg or exc}") from None
    return checked.model_dump()


def _workers(args) -> int:
    from .options import resolve_workers

    try:
        return resolve_workers(args.workers)
    except ValueError as exc:
        raise UsageError(str(exc)) from None


def forecast_options_from_args(args):
    """ForecastOptions for the parsed `forecast` arguments: the checked API options turned into
    the engine's by the same function a service job uses."""
    from .options import FORECAST, forecast_options

    first, last = _parse_years(args.years)
    checked = checked_options(args, FORECAST, first, last)
    events = tuple(_parse_event(t) for t in (args.events or ()))
    return forecast_options(first, last, checked, _workers(args), events)


def _parse_event(text):
    """--event KIND:START[:SPEED_MULTIPLIER[:DAYS]] -> EjectionEvent (a break-up or outburst).

    START is a calendar date YYYY-MM-DD (taken as 0h TDB) or a Julian date (TDB).
    """
    from dynamics.errors import InvalidTime, OutsideTimeSpan
    from dynamics.release import EVENT_KINDS, EjectionEvent
    from dynamics.timescales import parse_time_tdb_jd

    fields = text.split(":")
    usage = (
        "--event takes KIND:START[:SPEED_MULTIPLIER[:DAYS]], KIND one of "
        f"{', '.join(EVENT_KINDS)}, START a date YYYY-MM-DD or a JD, e.g. "
        f"fragmentation:1995-09-10:8:5; got {text!r}"
    )
    if not 2 <= len(fields) <= 4 or fields[0] not in EVENT_KINDS:
        raise UsageError(usage)
    if not all(_is_number(f) for f in fields[2:]):
        raise UsageError(usage)
    start_text = fields[1].strip()
    try:
        if _is_number(start_text):
            start = parse_time_tdb_jd(float(start_text))
        else:
            start = parse_time_tdb_jd(f"{start_text}T00:00:00 TDB")
    except (InvalidTime, OutsideTimeSpan) as exc:
        raise UsageError(f"--event start: {exc}") from None
    mult = float(fields[2]) if len(fields) > 2 else 1.0
    days = float(fields[3]) if len(fields) > 3 else 5.0
    if not (0.0 < mult <= 100.0 and 0.0 < days <= 365.0):
        raise UsageError("--event: speed multiplier in (0, 100], duration in (0, 365] days")
    return EjectionEvent(fields[0], start, days, mult, source="command line")


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def cmd_forecast(args) -> int:
    from dynamics.forecast import forecast
    from dynamics.uncertainty import forecast_solutions

    orbit = load_orbit_file(args.orbit)
    options = forecast_options_from_args(args)
    show = sys.stderr.isatty() and not args.json

    def progress(fraction, stage):
        if show:
            print(f"\r  {100 * fraction:5.1f}%  {stage:<40}", end="", file=sys.stderr, flush=True)

    from .runner import make_local_pool

    # our own pool (its workers die with this process), one for every solution
    pool = make_local_pool(options.workers) if options.workers > 1 else None
    try:
        if orbit.solutions or orbit.covariance is not None:
            result = forecast_solutions(
                orbit, options, clones=args.clones, progress=progress, executor=pool
            ).to_json()
        else:
            result = forecast(orbit, options, progress=progress, executor=pool).to_json()
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    if show:
        print(file=sys.stderr)
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print(forecast_table(result))
    return 0


def forecast_table(res: dict) -> str:
    """Readable forecast table (the same numbers as the JSON); solutions side by side."""
    model = res["model"]
    multi = "solutions" in res
    lines = [
        f"Dust-trail forecast for {res['parent']['name']}",
        f"  years {model['options']['years'][0]}-{model['options']['years'][1]}, "
        f"{model['particles_integrated']} meteoroids integrated "
        f"({model['particles_contributing']} contributing), seed {model['seed']}, "
        f"{model['integrator']['integrator']}, ejection {model['ejection_model']['speed_law']}, "
        f"ZHR {model['zhr_mode']}",
        "  times UTC; solar longitude geometric J2000; radiant RA/Dec J2000; miss = trail minus Earth (au)",
        "",
    ]
    if multi:
        lines.append("Orbit solutions (each run with the same random draws)")
        lines.append(
            "  solution      q_au      e          period_yr   previous perihelion (TDB)   enc  near"
        )
        for p in res["solutions"]:
            period = "-" if p["period_years"] is None else f"{p['period_years']:.1f}"
            lines.append(
                f"  {p['solution']:<12}  {p['q_au']:.6f}  {p['e']:.7f}  {period:>10}  "
                f"{p['previous_perihelion_tdb'] or 'none found':<26}  {p['encounters']:>3}  {p['near_misses']:>4}"
            )
        lines.append("")
    sol_col = "solution      " if multi else ""
    header = (
        f"  {sol_col}year  trail  rev  peak (UTC)            lambda_sun  miss_au   +-au     FWHM_h  "
        "RA     Dec    Vg    n     ZHR (low-high)"
    )

    from dynamics.activity import ENCOUNTER_MIN_ZHR, zhr_text

    from .exports import kind_of

    def rows(items):
        out = []
        for e in items:
            z = e["zhr"]
            sol = f"{e['solution']:<12}  " if multi else ""
            c = e.get("classification") or {}
            level = c.get("zhr_level") or ENCOUNTER_MIN_ZHR
            high = (
                f"  high end reaches {level:g}"
                if c.get("label") != "encounter" and z["high"] >= level
                else ""
            )
            hit = z.get("direct_hit") or {}
            if c.get("label") != "encounter" and (hit.get("zhr") or 0) >= level:
                high += f"  densest line {hit['miss_au']:+.5f} au: ZHR {zhr_text(hit['zhr'])}"
            out.append(
                f"  {sol}{e['year']}  {e['trail']['perihelion_year']:>5}  {e['trail']['revolutions']:>3}  "
                f"{e['peak_utc']:<20}  {e['solar_longitude_deg']:>9.4f}  {e['miss_distance_au']:+.5f}  "
                f"{e['miss_distance_spread_au']:.5f}  {e['fwhm_hours']:6.2f}  {e['radiant']['ra_deg']:5.1f}  "
                f"{e['radiant']['dec_deg']:+5.1f}  {e['vg_km_s']:4.1f}  {e['particles']:>4}  "
                f"{zhr_text(z['estimate'])} ({zhr_text(z['low'])}-{zhr_text(z['high'])}){high}"
            )
        return out

    reported = [(k, e) for k in ("encounters", "near_misses") for e in res[k]]
    level = f"{ENCOUNTER_MIN_ZHR:g}"
    sections = (
        ("encounter", f"Encounters (predicted peak ZHR at or above {level})"),
        (
            "negligible",
            "Negligible (trail passes close to Earth's path, but the predicted peak ZHR stays "
            f"below {level})",
        ),
        (
            "near_miss",
            f"Near misses (trail passes farther; predicted peak ZHR below {level}: no outburst "
            "expected from it)",
        ),
    )
    for n, (kind, title) in enumerate(sections):
        picked = [e for k, e in reported if kind_of(e, k) == kind]
        lines += ([""] if n else []) + [title, header] + (rows(picked) or ["  none"])
    if multi and res["solution_summary"]:
        lines += ["", "How the solutions differ"]
        lines += [f"  {row['explanation']}" for row in res["solution_summary"]]
    for note in res["notes"]:
        lines.append(f"Note: {note}")
    lines += ["", *("Caution: " + c for c in res["cautions"])]
    return "\n".join(lines)


def cmd_screen(args) -> int:
    import os
    from datetime import UTC, datetime

    from dynamics.screening import ScreeningRule, screen_batch

    from .batch import read_batch
    from .files import ResultDir
    from .options import SCREEN, screening_options
    from .runner import make_local_pool
    from .screening_report import ProgressBar, assemble, report_text, write_outputs

    if args.years is None:
        now = datetime.now(UTC).year
        args.years = f"{now}:{now + 9}"
    first, last = _parse_years(args.years)
    checked = checked_options(args, SCREEN, first, last)
    workers = _workers(args)
    try:
        rule = ScreeningRule(moid_max_au=args.moid_max, node_max_au=args.node_max)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    options = screening_options(first, last, checked)
    path = Path(args.orbits)
    try:
        rows = read_batch(path)
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise UsageError(f"{path}: not UTF-8 text") from None
    out_dir = Path(args.out) if args.out else Path(f"{path.stem}-screening")
    store = ResultDir(out_dir)
    for r in rows:
        if r.orbit is None:
            print(
                f"trailcast screen: line {r.line}: skipped: {r.error['message']}", file=sys.stderr
            )
    bar = ProgressBar(sys.stderr)
    bar.enabled = bar.enabled and not args.json
    scheduler = os.environ.get("TRAILCAST_DASK_SCHEDULER") or None
    client = pool = None
    try:
        if scheduler:
            from distributed import Client

            client = Client(scheduler, timeout=10, set_as_default=False)
        elif workers > 1:  # our own pool: its workers die with this process
            pool = make_local_pool(workers)
        run = screen_batch(
            [r.orbit for r in rows if r.orbit is not None],
            rule,
            options,
            executor=client.get_executor() if client else pool,
            workers=workers,
            lookup=store.lookup,
            save=store.save,
            progress=bar,
        )
    finally:
        bar.close()
        if client is not None:
            client.close()
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    result = assemble(rows, run, rule, options, source=str(path))
    paths = write_outputs(out_dir, result)
    if args.json:
        print(json.dumps(result["screening"], indent=2))
    else:
        print(report_text(result, every_orbit=False), end="")
        print(f"Wrote {paths['json']}, {paths['csv']} and {paths['report']}")
    return 0


# --- parser -------------------------------------------------------------------------------------


class _Parser(argparse.ArgumentParser):
    """argparse with the project's error form: one line on stderr, exit status 2."""

    def error(self, message):
        self.exit(2, f"{self.prog}: {message} (see {self.prog} --help)\n")


ORBIT_HELP = (
    "the parent's orbit: a JSON file of heliocentric osculating elements, ecliptic and "
    "equinox J2000 (README, 'The orbit input'; e.g. examples/demo-comet.json)"
)
YEARS_HELP = "calendar years to forecast (UTC), Y or Y1:Y2, within 1800-2199 (DE423 span)"


def build_parser() -> argparse.ArgumentParser:
    from .options import FORECAST, SCREEN, SUBMIT
    from .options import add_arguments as add_option_arguments

    parser = _Parser(
        prog="trailcast",
        description="Predict meteor-shower outbursts from the orbits of parent comets.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"trailcast {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("serve", help="run the web service (what `make run` starts)")
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8000, help="port (default 8000)")
    p.add_argument(
        "--server-processes",
        type=int,
        metavar="N",
        help=f"web server processes, each running jobs on its own worker pool "
        f"(TRAILCAST_WORKERS); 1-{MAX_SERVER_PROCESSES} (default 1)",
    )
    p.add_argument(  # its old name; deprecated: elsewhere --workers means worker processes
        "--workers", dest="workers_deprecated", type=int, help=argparse.SUPPRESS
    )
    p.set_defaults(func=cmd_serve)

    p = sub.add_parser("check", help="validate an orbit file and summarise it")
    p.add_argument("orbit", metavar="ORBIT.json", help=ORBIT_HELP)
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser(
        "solar-longitude",
        help="solar longitude (J2000) at a time, or the UTC instants of a longitude in a year",
    )
    p.add_argument("longitude", nargs="?", type=float, metavar="LONGITUDE_DEG")
    p.add_argument("--year", type=int, help="calendar year (UTC) to search")
    p.add_argument(
        "--at", metavar="TIME", help="ISO 8601 time with scale, e.g. 1999-11-18T02:04:00Z"
    )
    p.add_argument(
        "--kind",
        choices=("geometric", "apparent"),
        default="geometric",
        help="geometric (default) or apparent (with aberration) solar longitude",
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_solar_longitude)

    p = sub.add_parser(
        "geometry",
        help="quick-look geometry: Earth MOID, nodes, theoretical radiant, similar showers",
    )
    p.add_argument("orbit", metavar="ORBIT.json", help=ORBIT_HELP)
    p.add_argument(
        "--year", type=int, help="calendar year (UTC, 1800-2199) for Earth's passage times"
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=cmd_geometry)
    p = sub.add_parser("forecast", help="dust-trail encounters of a parent's trails with Earth")
    p.add_argument("orbit", metavar="ORBIT.json", help=ORBIT_HELP)
    p.add_argument("--years", required=True, metavar="Y1[:Y2]", help=YEARS_HELP)
    add_option_arguments(p, FORECAST)
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=cmd_forecast)

    p = sub.add_parser(
        "screen",
        help="screen a batch of orbits: geometry for all, trail forecasts for candidates",
        epilog=CAUTION,
    )
    p.add_argument(
        "orbits",
        metavar="ORBITS",
        help="JSON-lines file (one orbit object per line) or .csv (columns as the orbit keys)",
    )
    p.add_argument(
        "--years", metavar="Y1[:Y2]", help="calendar years (UTC); default this year and 9 more"
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="output folder (default ORBITS-stem-screening); reused to resume",
    )
    add_option_arguments(p, SCREEN)
    p.add_argument(
        "--moid-max", type=float, default=0.05, help="rule: MOID below this, au (default 0.05)"
    )
    p.add_argument(
        "--node-max",
        type=float,
        default=0.25,
        help="rule: nearer node within this of Earth's orbit, au (default 0.25)",
    )
    p.add_argument("--json", action="store_true", help="print the JSON summary's counts")
    p.set_defaults(func=cmd_screen)

    def add_service_options(p, wait_help):
        p.add_argument("--url", help=f"service address (default $TRAILCAST_URL or {DEFAULT_URL})")
        p.add_argument("--token", help="bearer token (default $TRAILCAST_API_TOKEN)")
        p.add_argument("--wait", action="store_true", help=wait_help)
        p.add_argument(
            "--timeout", type=float, default=3600.0, help="longest wait, s (default 3600)"
        )
        p.add_argument("--poll", type=float, default=1.0, help="seconds between polls (default 1)")
        p.add_argument("--json", action="store_true", help="print JSON instead of a table")

    p = sub.add_parser("submit", help="submit a forecast job to a running trailcast service")
    p.add_argument("orbit", metavar="ORBIT.json", help=ORBIT_HELP)
    p.add_argument("--years", required=True, metavar="Y1[:Y2]", help=YEARS_HELP)
    add_option_arguments(p, SUBMIT)
    add_service_options(p, "wait for the job and print the forecast")
    p.set_defaults(func=cmd_submit)

    p = sub.add_parser("status", help="state, progress and result of a job on a running service")
    p.add_argument("id", metavar="ID", help="job id printed by `trailcast submit`")
    add_service_options(p, "wait until the job is done, failed or cancelled")
    p.set_defaults(func=cmd_status)

    from . import cli_observing  # `trailcast observe`: sites, Sun, Moon, world maps

    cli_observing.add_parser(sub)

    from .hindcast import add_parser as add_hindcast_parser

    add_hindcast_parser(sub, UsageError)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed its one-line usage error
        return int(exc.code or 0)
    try:
        return int(args.func(args) or 0)
    except (UsageError, TrailcastError) as exc:
        print(f"trailcast {args.command}: {exc}", file=sys.stderr)
        return 2
    except (ServiceUnreachable, JobDidNotFinish) as exc:
        print(f"trailcast {args.command}: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("trailcast: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
