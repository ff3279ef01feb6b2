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
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror or exc}") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise UsageError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
    return parse_orbit(data)


# --- commands -----------------------------------------------------------------------------------


def cmd_serve(args) -> int:
    import uvicorn

    from .main import create_app
    from .settings import Settings

    settings = Settings.from_env()
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    uvicorn.run(create_app(settings), host=args.host, port=args.port, log_level="info")
    return 0


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


def _parse_trails(text: str | None):
    if text is None:
        return None
    try:
        return tuple(int(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise UsageError(
            f"--trails takes perihelion years separated by commas, got {text!r}"
        ) from None


def forecast_options_from_args(args):
    """Build ForecastOptions from parsed CLI arguments (shared with `submit`)."""
    from dataclasses import replace

    from dynamics.ejection import EJECTION_SPEED_LAWS
    from dynamics.forecast import ForecastOptions
    from dynamics.trails import EjectionModel

    first, last = _parse_years(args.years)
    if args.particles < 3 or args.particles > 100_000:
        raise UsageError("--particles must be between 3 and 100000")
    if args.workers < 1 or args.workers > 256:
        raise UsageError("--workers must be between 1 and 256")
    if args.speed_law not in EJECTION_SPEED_LAWS:
        raise UsageError(f"--speed-law must be one of {', '.join(sorted(EJECTION_SPEED_LAWS))}")
    if not 1.0 < args.mass_index < 3.0:
        raise UsageError("--mass-index must lie between 1 and 3")
    if not 0.05 <= args.density <= 8.0:
        raise UsageError("--density must lie between 0.05 and 8 g/cm^3")
    if not 0.01 <= args.nucleus_radius <= 100.0:
        raise UsageError("--nucleus-radius must lie between 0.01 and 100 km")
    model = replace(
        EjectionModel(),
        speed_law=args.speed_law,
        mass_index=args.mass_index,
        meteoroid_density_g_cm3=args.density,
        nucleus_radius_km=args.nucleus_radius,
    )
    return ForecastOptions(
        first_year=first,
        last_year=last,
        particles=args.particles,
        seed=args.seed,
        trails=_parse_trails(args.trails),
        max_trail_age_years=args.max_age,
        integrator=args.integrator,
        workers=args.workers,
        ejection=model,
    )


def cmd_forecast(args) -> int:
    from dynamics.forecast import forecast

    orbit = load_orbit_file(args.orbit)
    options = forecast_options_from_args(args)
    show = sys.stderr.isatty() and not args.json

    def progress(fraction, stage):
        if show:
            print(f"\r  {100 * fraction:5.1f}%  {stage:<20}", end="", file=sys.stderr, flush=True)

    result = forecast(orbit, options, progress=progress).to_json()
    if show:
        print(file=sys.stderr)
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print(forecast_table(result))
    return 0


def forecast_table(res: dict) -> str:
    """Readable forecast table (the same numbers as the JSON)."""
    model = res["model"]
    lines = [
        f"Dust-trail forecast for {res['parent']['name']}",
        f"  years {model['options']['years'][0]}-{model['options']['years'][1]}, "
        f"{model['particles_integrated']} meteoroids integrated "
        f"({model['particles_contributing']} contributing), seed {model['seed']}, "
        f"{model['integrator']['integrator']}, ejection {model['ejection_model']['speed_law']}",
        "  times UTC; solar longitude geometric J2000; radiant RA/Dec J2000; miss = trail minus Earth (au)",
        "",
    ]
    header = (
        "  year  trail  rev  peak (UTC)            lambda_sun  miss_au   +-au     FWHM_h  "
        "RA     Dec    Vg    n     dilution"
    )

    def rows(items):
        out = []
        for e in items:
            out.append(
                f"  {e['year']}  {e['trail']['perihelion_year']:>5}  {e['trail']['revolutions']:>3}  "
                f"{e['peak_utc']:<20}  {e['solar_longitude_deg']:>9.4f}  {e['miss_distance_au']:+.5f}  "
                f"{e['miss_distance_spread_au']:.5f}  {e['fwhm_hours']:6.2f}  {e['radiant']['ra_deg']:5.1f}  "
                f"{e['radiant']['dec_deg']:+5.1f}  {e['vg_km_s']:4.1f}  {e['particles']:>4}  {e['dilution']:.3f}"
            )
        return out

    lines.append("Encounters (trail within the encounter distance of Earth's path)")
    lines += [header] + (rows(res["encounters"]) or ["  none"])
    lines += [
        "",
        "Near misses (trail passes near but misses: no outburst expected from it)",
        header,
    ]
    lines += rows(res["near_misses"]) or ["  none"]
    for note in res["notes"]:
        lines.append(f"Note: {note}")
    lines += ["", *("Caution: " + c for c in res["cautions"])]
    return "\n".join(lines)


# --- parser -------------------------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="trailcast",
        description="Predict meteor-shower outbursts from the orbits of parent comets.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"trailcast {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("serve", help="run the web service (what `make run` starts)")
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8000, help="port (default 8000)")
    p.set_defaults(func=cmd_serve)

    p = sub.add_parser("check", help="validate an orbit file and summarise it")
    p.add_argument("orbit", metavar="ORBIT.json")
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
    p.add_argument("orbit", metavar="ORBIT.json")
    p.add_argument(
        "--year", type=int, help="calendar year (UTC, 1800-2199) for Earth's passage times"
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=cmd_geometry)
    p = sub.add_parser("forecast", help="dust-trail encounters of a parent's trails with Earth")
    p.add_argument("orbit", metavar="ORBIT.json")
    p.add_argument(
        "--years", required=True, metavar="Y1[:Y2]", help="calendar years to forecast (UTC)"
    )
    p.add_argument(
        "--particles",
        type=int,
        default=300,
        help="meteoroids per trail and Earth passage (default 300)",
    )
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    p.add_argument(
        "--trails", metavar="YEARS", help="only these trails, by perihelion year, e.g. 1899,1932"
    )
    p.add_argument(
        "--max-age", type=float, default=500.0, help="oldest trail in years (default 500)"
    )
    p.add_argument("--workers", type=int, default=1, help="worker processes (default 1)")
    p.add_argument(
        "--integrator", choices=("whfast", "ias15"), default="whfast", help="default whfast"
    )
    p.add_argument(
        "--speed-law", default="whipple1951", help="ejection speed law (default whipple1951)"
    )
    p.add_argument(
        "--mass-index", type=float, default=2.0, help="differential mass index s (default 2.0)"
    )
    p.add_argument(
        "--density", type=float, default=1.0, help="meteoroid bulk density, g/cm^3 (default 1.0)"
    )
    p.add_argument(
        "--nucleus-radius", type=float, default=2.0, help="nucleus radius, km (default 2.0)"
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=cmd_forecast)
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
    except KeyboardInterrupt:
        print("trailcast: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
