"""``trailcast observe``: where and when a forecast's peaks can be seen.

Reads a forecast result (a JSON file written by ``trailcast forecast --json``, or a job id on a
running service) and prints, per encounter, the best-placed regions of the world and, for each
``--site``, the radiant, Sun and Moon at the peak, the rise/set and twilight times around it and
the expected hourly rate through the night. ``--charts DIR`` also writes the site charts and the
world maps (SVG or PNG). Registered in :mod:`service.cli` by :func:`add_parser`.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from dynamics import observing
from dynamics.errors import InvalidSite

OBSERVE_EPILOG = " ".join(observing.OBSERVING_CAUTIONS)
_JOB_ID = re.compile("[0-9a-f]{32}")
#: Table rows: every this many minutes of the timeline while the Sun is below the horizon.
TABLE_STEP_MINUTES = 30


def add_parser(sub) -> None:
    """Register ``observe`` on the CLI's subparsers."""
    p = sub.add_parser(
        "observe",
        help="where and when a forecast's peaks can be seen: site rates, Sun, Moon, world regions",
        epilog=OBSERVE_EPILOG,
    )
    p.add_argument(
        "source",
        metavar="RESULT.json|JOB_ID",
        help="forecast result JSON (`trailcast forecast ... --json`) or a job id on a service",
    )
    p.add_argument(
        "--site",
        action="append",
        default=[],
        metavar="LAT,LON[,ELEV_M]",
        help="observing site: latitude, longitude east (deg), elevation (m); repeat for several",
    )
    p.add_argument(
        "--limiting-magnitude",
        type=float,
        default=observing.DEFAULT_LIMITING_MAGNITUDE,
        help="observer's naked-eye limiting magnitude (default 6.5, the ZHR standard)",
    )
    p.add_argument(
        "--min-radiant-alt",
        type=float,
        default=observing.DEFAULT_MIN_RADIANT_ALT_DEG,
        help="observable: radiant at least this high, deg (default 20)",
    )
    p.add_argument(
        "--max-sun-alt",
        type=float,
        default=observing.DEFAULT_MAX_SUN_ALT_DEG,
        help="observable: Sun at most this high, deg (default -12)",
    )
    p.add_argument(
        "--utc-offset",
        type=float,
        metavar="HOURS",
        help="local time = UTC + HOURS (default: mean solar time from the site's longitude)",
    )
    p.add_argument("--charts", metavar="DIR", help="write site charts and world maps into DIR")
    p.add_argument("--format", choices=("svg", "png"), default="svg", help="chart format (svg)")
    p.add_argument("--url", help="service address for a JOB_ID (default $TRAILCAST_URL)")
    p.add_argument("--token", help="bearer token (default $TRAILCAST_API_TOKEN)")
    p.add_argument("--json", action="store_true", help="print JSON instead of tables")
    p.set_defaults(func=cmd_observe)


def _check_range(name: str, value: float, low: float, high: float) -> None:
    if not low <= value <= high:
        raise InvalidSite(name, f"must be in [{low:g}, {high:g}], got {value:g}")


def load_result(args) -> dict:
    """The forecast result from a file or from a running service (job id)."""
    from .cli import UsageError as usage_error
    from .cli import _service_call as service_call
    from .cli import _service_url as service_url

    src = args.source
    path = Path(src)
    if not path.exists() and _JOB_ID.fullmatch(src):
        job = service_call("GET", f"{service_url(args)}/v1/forecasts/{src}").json()
        if job.get("state") != "done" or not job.get("result"):
            raise usage_error(f"job {src} is {job.get('state')}: no result to observe yet")
        return job["result"]
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise usage_error(f"cannot read {src}: {exc.strerror or exc}") from None
    except json.JSONDecodeError as exc:
        raise usage_error(f"{src}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
    if isinstance(data, dict) and "result" in data and "encounters" not in data:
        data = data["result"]  # a job record saved from the service
    if not isinstance(data, dict) or not isinstance(data.get("encounters"), list):
        raise usage_error(f"{src}: not a forecast result (no 'encounters' list)")
    return data


def _on_step(row: dict, view: dict) -> bool:
    """Whether a timeline row lies a whole number of table steps from the peak."""
    from datetime import datetime

    t = datetime.fromisoformat(row["time_utc"].replace("Z", "+00:00"))
    peak = datetime.fromisoformat(view["peak_utc"].replace("Z", "+00:00"))
    return abs((t - peak).total_seconds()) % (60 * TABLE_STEP_MINUTES) < 1.0


def _fmt(value, spec="", none="-"):
    return none if value is None else format(value, spec)


def _site_text(site: dict) -> str:
    return f"{site['lat_deg']:+.3f}, {site['lon_deg']:+.3f}, {site['elevation_m']:.0f} m"


def _print_site(site_block: dict, thresholds: dict) -> None:
    site = site_block["site"]
    print(f"\nSite {_site_text(site)} (lat, lon east, elevation)")
    for v in site_block["encounters"]:
        p = v["at_peak"]
        trail = v.get("trail") or {}
        print(
            f"  Encounter {v['index']}: {trail.get('perihelion_year', '?')} trail, peak "
            f"{v['peak_utc']} (local {p['local_time']}, {v['local_time']['kind']})"
        )
        print(f"    {v['verdict']}")
        print(
            f"    at the peak: radiant alt {p['radiant_alt_deg']:+.1f} az {p['radiant_az_deg']:.1f}"
            f" deg; Sun {p['sun_alt_deg']:+.1f} deg ({p['sky']}); Moon alt "
            f"{p['moon_alt_deg']:+.1f} deg, {100 * p['moon_illuminated_fraction']:.0f} % lit, "
            f"{p['moon_radiant_separation_deg']:.0f} deg from the radiant"
        )
        if v.get("window"):
            w = v["window"]
            print(
                f"    window {w['start_utc']} to {w['end_utc']}: radiant "
                f"{w['radiant_alt_deg_min']:+.1f} to {w['radiant_alt_deg_max']:+.1f} deg, "
                f"observable {100 * w['observable_fraction']:.0f} % of it"
            )
        if v.get("radiant_in_span"):
            print(f"    radiant {v['radiant_in_span']} from here around the peak")
        if v["events"]:
            print("    events (UTC, local):")
            for e in v["events"]:
                print(f"      {e['time_utc']}  {e['local_time']}  {e['event']}")
        rows = [r for r in v.get("timeline", []) if r["sun_alt_deg"] < 0 and _on_step(r, v)]
        if rows:
            print(
                f"    night timeline (every {TABLE_STEP_MINUTES} min while the Sun is down, and the"
                f" peak; lm {thresholds['limiting_magnitude']:g}):"
            )
            print(
                "      time (UTC)            local  sky                    rad alt  rad az  "
                "moon alt  ZHR       HR        observable"
            )
            for r in rows:
                print(
                    f"      {r['time_utc']}  {r['local_time']}  {r['sky']:<21}  "
                    f"{r['radiant_alt_deg']:+7.1f}  {r['radiant_az_deg']:6.1f}  "
                    f"{r['moon_alt_deg']:+8.1f}  {_fmt(r['zhr'], '<9.3g')} "
                    f"{_fmt(r['hourly_rate'], '<9.3g')} {'yes' if r['observable'] else 'no'}"
                )


def cmd_observe(args) -> int:
    from . import observing_plots
    from .cli import UsageError as usage_error

    _check_range("--limiting-magnitude", args.limiting_magnitude, 1.0, 8.0)
    _check_range("--min-radiant-alt", args.min_radiant_alt, 0.0, 90.0)
    _check_range("--max-sun-alt", args.max_sun_alt, -90.0, 10.0)
    if args.utc_offset is not None:
        _check_range("--utc-offset", args.utc_offset, -12.0, 14.0)
    sites = [observing.parse_site(s) for s in args.site]
    charts = Path(args.charts) if args.charts else None
    if charts is not None and charts.exists() and not charts.is_dir():
        raise usage_error(f"--charts {charts}: exists and is not a folder")
    result = load_result(args)
    opts = {
        "limiting_magnitude": args.limiting_magnitude,
        "min_radiant_alt_deg": args.min_radiant_alt,
        "max_sun_alt_deg": args.max_sun_alt,
    }
    parent = (result.get("parent") or {}).get("name", "")
    worlds = [
        observing_plots.world_view(result, k, **opts)
        for k in range(len(result.get("encounters") or []))
    ]
    view = observing.site_view(result, sites, utc_offset_hours=args.utc_offset, **opts)
    out = {
        **view,
        "world": [w[0] for w in worlds],
        "coastlines": observing_plots.coastlines_note(),
    }
    written = []
    if charts is not None:
        charts.mkdir(parents=True, exist_ok=True)
        for k, (summary, grid) in enumerate(worlds):
            path = charts / f"map-{k}.{args.format}"
            path.write_bytes(observing_plots.render_map(summary, grid, parent, args.format))
            written.append(str(path))
        for s, block in zip(sites, view["sites"], strict=True):
            for v in block["encounters"]:
                v = {**v, "_limiting_magnitude": args.limiting_magnitude}
                name = f"site-{s.lat_deg:g}_{s.lon_deg:g}-{v['index']}.{args.format}"
                path = charts / name
                path.write_bytes(observing_plots.render_site(v, s.to_json(), parent, args.format))
                written.append(str(path))
        out["charts"] = written
    if args.json:
        print(json.dumps(out, indent=2))
        return 0
    th = view["thresholds"]
    print(f"Where and when the predicted peaks of {parent} can be seen")
    print(
        f"  observable: radiant >= {th['min_radiant_alt_deg']:g} deg, Sun <= "
        f"{th['max_sun_alt_deg']:g} deg; HR = ZHR sin(h) / r^(6.5 - lm), lm "
        f"{th['limiting_magnitude']:g}; no refraction; the Moon is reported, not in the rate"
    )
    if not worlds:
        print("\nNo encounters in this forecast: nothing to observe.")
    for summary, _grid in worlds:
        trail = summary.get("trail") or {}
        print(
            f"\nEncounter {summary['index']}: {trail.get('perihelion_year', '?')} trail, peak "
            f"{summary['peak_utc']}, radiant RA {summary['radiant']['ra_deg']} Dec "
            f"{summary['radiant']['dec_deg']}, ZHR {(summary.get('zhr') or {}).get('estimate')}"
        )
        print(
            f"  observable from {100 * summary['observable_fraction_of_earth']:.0f} % of Earth's "
            f"surface; Moon {100 * summary['moon']['illuminated_fraction']:.0f} % lit, "
            f"{summary['moon']['radiant_separation_deg']:.0f} deg from the radiant"
        )
        if summary["regions"]:
            print("  best placed (rate at least half the best; sea-level sites):")
            for r in summary["regions"]:
                print(f"    {r['text']}")
        else:
            print("  nowhere on Earth: the radiant is never high in a dark sky at the peak")
    for block in view["sites"]:
        _print_site(block, th)
    if written:
        print("\nWrote " + ", ".join(written))
    print("\nCautions:")
    for c in observing.OBSERVING_CAUTIONS:
        print(f"  - {c}")
    return 0
