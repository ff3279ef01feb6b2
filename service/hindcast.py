"""``trailcast hindcast``: run the hindcast catalogue and write the report (JSON, Markdown, PNG, SVG).

The catalogue is ``validation/hindcasts.json`` (its fields: ``validation/README.md``): ``orbits``
by parent designation and ``rows`` of past outbursts and no-outburst returns. This module reads
and checks what the run needs, converts each orbit to the orbit JSON the rest of trailcast
reads, runs :func:`dynamics.hindcast.run_catalogue`, scores with :func:`dynamics.hindcast.score`
and writes the report; the numerical part lives in :mod:`dynamics.hindcast`.
"""

import functools
import io
import json
import os
import sys
from datetime import UTC, datetime
from pathlib import Path

from dynamics.hindcast import DEFAULT_PARTICLES, run_catalogue, score
from dynamics.orbit_input import parse_orbit
from dynamics.timescales import iso_to_tdb_jd

DEFAULT_CATALOGUE = "validation/hindcasts.json"
DEFAULT_OUT = "validation/report"
CAUTION = (
    "Hindcasts measure the model against past outbursts; predictions of future ones remain model "
    "estimates with real uncertainty, above all in intensity. Spacecraft operators: defer to the "
    "responsible agencies' meteoroid assessments. Observers: usual night-time and outdoor safety."
)


class CatalogueError(ValueError):
    """The catalogue file is not what :func:`load_catalogue` expects (names the field)."""


#: Catalogue orbit fields -> the orbit JSON keys of :mod:`dynamics.orbit_input`.
_ORBIT_FIELDS = {
    "epoch_tdb_jd": "epoch",
    "q_au": "q",
    "e": "e",
    "incl_deg": "i",
    "node_deg": "node",
    "peri_deg": "peri",
    "tp_tdb_jd": "tp",
}


def orbit_json(name: str, entry: dict) -> dict:
    """The orbit JSON of one catalogue parent (nominal solution; non-gravitational terms and
    observed perihelion times of earlier returns when the catalogue gives them)."""
    out = {"name": name}
    for src, dst in _ORBIT_FIELDS.items():
        if src not in entry:
            raise CatalogueError(f"orbits.{name}.{src}: missing (required)")
        out[dst] = entry[src]
    ng = entry.get("nongrav_au_d2")
    if ng:
        out["nongrav"] = {k: ng[k] for k in ("a1", "a2", "a3") if k in ng}
        if entry.get("nongrav_dt_days"):  # the asymmetric model's offset (days)
            out["nongrav"]["dt"] = entry["nongrav_dt_days"]
    observed = entry.get("observed_perihelia")
    if observed:  # earlier returns' perihelion times, which hold the parent history
        out["observed_perihelia"] = [
            {"tp": p["tp_tdb_jd"], "source": p.get("source", "")}
            | ({"source": f"{p.get('source', '')} (from memory)"} if p.get("from_memory") else {})
            for p in observed
        ]
    mag = entry.get("magnitude")
    if mag:  # the parent's brightness sets its dust production (absolute mode)
        out["m1"] = mag["m1"]
        if mag.get("k1") is not None:
            out["k1"] = mag["k1"]
    return out


def load_catalogue(path) -> tuple[list[dict], dict[str, dict], dict]:
    """Read and check a hindcast catalogue: (rows, orbit JSON by parent, the whole document)."""
    try:
        doc = json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise CatalogueError(f"cannot read {path}: {exc.strerror or exc}") from None
    except json.JSONDecodeError as exc:
        raise CatalogueError(f"{path}: not valid JSON ({exc.msg} at line {exc.lineno})") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("rows"), list):
        raise CatalogueError(f"{path}: expected an object with a list 'rows'")
    parents = doc.get("orbits")
    if not isinstance(parents, dict) or not parents:
        raise CatalogueError(f"{path}: expected an object 'orbits' of parent orbits by name")
    orbits = {}
    for name, entry in parents.items():
        if not isinstance(entry, dict):
            raise CatalogueError(f"{path}: orbits.{name}: expected an object")
        orbit = orbit_json(name, entry)
        try:
            parse_orbit(orbit)
        except ValueError as exc:
            raise CatalogueError(f"{path}: orbits.{name}: {exc}") from None
        orbits[name] = orbit
    seen = set()
    for k, row in enumerate(doc["rows"]):
        where = f"{path}: rows[{k}]"
        if not isinstance(row, dict):
            raise CatalogueError(f"{where}: expected an object")
        for key in ("id", "parent", "year", "kind", "observed"):
            if key not in row:
                raise CatalogueError(f"{where}.{key}: missing (required)")
        if row["id"] in seen:
            raise CatalogueError(f"{where}.id: {row['id']!r} appears twice")
        seen.add(row["id"])
        if row["parent"] not in orbits:
            raise CatalogueError(f"{where}.parent: {row['parent']!r} is not in 'orbits'")
        if not isinstance(row["year"], int) or isinstance(row["year"], bool):
            raise CatalogueError(f"{where}.year: expected an integer year")
        for j, trail in enumerate(row.get("trails") or []):
            y = trail.get("perihelion_year") if isinstance(trail, dict) else None
            if not isinstance(y, int) or isinstance(y, bool) or y >= row["year"]:
                raise CatalogueError(
                    f"{where}.trails[{j}].perihelion_year: expected a year before {row['year']}"
                )
        obs = row["observed"]
        if not isinstance(obs, dict):
            raise CatalogueError(f"{where}.observed: expected an object")
        for key in ("zhr", "zhr_low", "zhr_high", "fwhm_min"):
            v = obs.get(key)
            if v is not None and (
                not isinstance(v, int | float) or isinstance(v, bool) or not v >= 0
            ):
                raise CatalogueError(f"{where}.observed.{key}: expected a number >= 0")
        times = [("observed.peak_utc", obs.get("peak_utc"))]
        times += [("check_window_utc", t) for t in row.get("check_window_utc") or []]
        for field, text in times:
            if text is None:
                continue
            try:
                iso_to_tdb_jd(text)
            except ValueError as exc:
                raise CatalogueError(f"{where}.{field}: {exc}") from None
        tol = row.get("tolerance_min")
        if tol is not None and (not isinstance(tol, int | float) or not tol > 0):
            raise CatalogueError(f"{where}.tolerance_min: expected minutes > 0")
    return list(doc["rows"]), orbits, doc


# --- the report ---------------------------------------------------------------------------------


def _fmt(x, spec):
    return "-" if x is None else format(x, spec)


def _yes(x):
    return "-" if x is None else ("yes" if x else "no")


def markdown(report: dict) -> str:
    """The report as Markdown: both summaries, then the per-row tables."""
    lines = [
        "# Hindcast report",
        "",
        f"Run {report['run_utc']} with `{report['command']}` on {report['catalogue']} "
        f"({report['particles']} meteoroids per trail, seed {report['seed']}, trailcast "
        f"{report['version']}).",
        ""
        if report.get("rows_run", 0) >= report.get("rows_requested", 0)
        else f"**Partial: {report['rows_run']} of {report['rows_requested']} rows run so far.**",
        "",
        "Offsets are predicted minus observed peak (minutes); ratios are predicted/observed. "
        "ZHR in absolute mode comes from the parent's total magnitude where the catalogue gives one "
        "(Jorda et al. 2008 water production, dust/gas 1), else the nucleus rule; calibrated: "
        + report["scores"]["rule"],
        "",
    ]
    for mode in ("absolute", "calibrated"):
        block = report["scores"][mode]
        s = block["summary"]
        lines += [
            f"## {mode.capitalize()}",
            "",
            "| figure | value |",
            "|---|---|",
            f"| rows (outbursts / no outburst) | {s['rows']} ({s['outburst_rows']} / "
            f"{s['no_outburst_rows']}) |",
            f"| outbursts without a predicted crossing | {s['outbursts_without_prediction']} |",
            f"| median abs. peak offset (min) | {_fmt(s['median_abs_offset_min'], '.1f')} |",
            f"| fraction within 15 min | {_fmt(s['fraction_within_15_min'], '.2f')} |",
            f"| fraction within the row's tolerance | "
            f"{_fmt(s['fraction_within_row_tolerance'], '.2f')} |",
            f"| fraction ZHR within x3 | {_fmt(s['fraction_zhr_within_x3'], '.2f')} |",
            f"| median ZHR ratio | {_fmt(s['median_zhr_ratio'], '.3g')} |",
            f"| fraction direct-hit ZHR within x3 (the trail's dust, its position aside) | "
            f"{_fmt(s.get('fraction_direct_hit_within_x3'), '.2f')} |",
            f"| median direct-hit ZHR ratio | {_fmt(s.get('median_direct_hit_ratio'), '.3g')} |",
            f"| median FWHM ratio | {_fmt(s['median_fwhm_ratio'], '.3g')} |",
            f"| storms (ZHR > 1000) predicted where none was seen | "
            f"{s['storms_predicted_where_none_seen']} |",
            f"| no-outburst rows predicted above x3 the level seen | "
            f"{s['no_outburst_rows_over_x3_observed']} |",
            f"| rows that could not run (reasons in the JSON) | {s['rows_failed']} |",
            "",
            "| row | parent | year | trails | outburst | offset (min) | tol. | miss (au) | "
            "ZHR pred. | ZHR obs. | ZHR ratio | direct hit | ratio | FWHM ratio | label | "
            "estimators disagree |",
            "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
        ]
        for r in block["rows"]:
            lines.append(
                f"| {r['id']} | {r['parent']} | {r['year']} | "
                f"{', '.join(map(str, r['trails'])) or 'all'} | "
                f"{_yes(r['outburst'])} | {_fmt(r['offset_min'], '+.1f')} | "
                f"{_fmt(r['tolerance_min'], 'g')} | {_fmt(r['miss_distance_au'], '+.5f')} | "
                f"{_fmt(r['predicted_zhr'], '.3g')} | {_fmt(r['observed_zhr'], 'g')} | "
                f"{_fmt(r['zhr_ratio'], '.3g')} | {_fmt(r.get('direct_hit_zhr'), '.3g')} | "
                f"{_fmt(r.get('direct_hit_ratio'), '.3g')} | {_fmt(r['fwhm_ratio'], '.3g')} | "
                f"{r['label'] or ('failed' if r['error'] else 'no crossing')} | "
                f"{_yes(r['estimators_disagree'])} |"
            )
        lines.append("")
    cal = report["scores"]["calibration"]
    if cal:
        lines += ["## Calibration", "", "| parent | calibration row | factor |", "|---|---|---|"]
        for parent, c in cal.items():
            lines.append(f"| {parent} | {c['row'] or '-'} | {_fmt(c['factor'], '.3g')} |")
        lines.append("")
    lines += [f"_{CAUTION}_", ""]
    return "\n".join(lines)


def draw(report: dict):
    """Two panels: peak offset by case; predicted vs observed ZHR on log axes."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    absolute = report["scores"]["absolute"]["rows"]
    calibrated = {r["id"]: r for r in report["scores"]["calibrated"]["rows"]}
    fig = Figure(figsize=(11.0, 5.2))
    ax1, ax2 = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.1, 1.0]})
    timed = [r for r in absolute if r["offset_min"] is not None]
    ys = list(range(len(timed)))
    for y, r in zip(ys, timed, strict=True):
        tol = r["tolerance_min"]
        if tol is not None:
            ax1.plot([-tol, tol], [y, y], color="#bbbbbb", lw=6, solid_capstyle="butt")
        ok = r["within_tolerance"]
        ax1.plot(
            r["offset_min"],
            y,
            marker="o" if ok else "X",
            color="#0072B2" if ok else "#D55E00",
            ms=8,
            ls="none",
        )
    ax1.axvline(0.0, color="#444444", lw=1)
    ax1.set_yticks(ys, [f"{r['id']}" for r in timed], fontsize=8)
    ax1.set_xlabel("peak offset, predicted - observed (min)")
    ax1.set_title("Peak timing (grey: the row's tolerance)")
    ax1.invert_yaxis()
    pts = [r for r in absolute if r["observed_zhr"] and r["predicted_zhr"]]
    lo, hi = 1.0, 10.0
    for r in pts:
        obs, pred = float(r["observed_zhr"]), max(float(r["predicted_zhr"]), 1e-2)
        lo, hi = min(lo, obs, pred), max(hi, obs, pred)
        mark = "o" if r["outburst"] else "^"  # triangles: no-outburst rows (level seen)
        ax2.plot(obs, pred, marker=mark, mfc="none", color="#0072B2", ms=8, ls="none")
        c = calibrated.get(r["id"])
        if c is not None and c["calibration_factor"] is not None and c["predicted_zhr"]:
            cp = max(float(c["predicted_zhr"]), 1e-2)
            hi, lo = max(hi, cp), min(lo, cp)
            ax2.plot(obs, cp, marker="s", color="#E69F00", ms=7, ls="none")
            ax2.plot([obs, obs], [pred, cp], color="#E69F00", lw=0.8)
        hit = r.get("direct_hit_zhr")
        if r["outburst"] and hit and hit > pred:  # the trail's dust on its densest line
            hp = float(hit)
            hi = max(hi, hp)
            ax2.plot(obs, hp, marker="+", color="#009E73", ms=9, ls="none")
            ax2.plot([obs, obs], [pred, hp], color="#009E73", lw=0.6, ls=":")
        ax2.annotate(r["id"], (obs, pred), fontsize=7, xytext=(4, 3), textcoords="offset points")
    lo, hi = lo / 3.0, hi * 3.0
    ax2.plot([lo, hi], [lo, hi], color="#444444", lw=1)
    ax2.fill_between([lo, hi], [lo / 3, hi / 3], [lo * 3, hi * 3], color="#dddddd", zorder=0)
    ax2.set_xscale("log")
    ax2.set_yscale("log")
    ax2.set_xlim(lo, hi)
    ax2.set_ylim(lo, hi)
    ax2.set_xlabel("observed peak ZHR")
    ax2.set_ylabel("predicted peak ZHR")
    ax2.set_title(
        "ZHR (open: absolute, filled: calibrated; ^: no outburst; band: x3)\n"
        "+: the trail's densest line (direct hit), where above the prediction",
        fontsize=10,
    )
    fig.suptitle(f"trailcast hindcast, {report['run_utc'][:10]}", fontsize=11)
    fig.tight_layout()
    return fig


def write_report(out_dir, report: dict) -> dict[str, Path]:
    """Write hindcast.json, hindcast.md, hindcast.png and hindcast.svg into ``out_dir``.

    Each file is written to a temporary name and renamed, so an interrupted run never leaves a
    half-written report in place of a complete one.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {ext: out / f"hindcast.{ext}" for ext in ("json", "md", "png", "svg")}

    def put(path: Path, data: bytes):
        tmp = path.with_suffix(path.suffix + ".part")
        tmp.write_bytes(data)
        os.replace(tmp, path)

    put(paths["json"], (json.dumps(report, indent=2) + "\n").encode())
    put(paths["md"], markdown(report).encode())
    fig = draw(report)
    for ext in ("png", "svg"):
        buf = io.BytesIO()
        fig.savefig(buf, format=ext, dpi=100)
        put(paths[ext], buf.getvalue())
    return paths


def build_report(rows, orbits, results, *, catalogue, particles, seed, command) -> dict:
    from dynamics import __version__

    return {
        "run_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "command": command,
        "catalogue": str(catalogue),
        "version": __version__,
        "particles": particles,
        "seed": seed,
        "results": results,
        "scores": score(rows, results),
        "cautions": [CAUTION],
    }


# --- the command --------------------------------------------------------------------------------


def cmd_hindcast(args, usage_error=ValueError) -> int:
    """Run the command; bad input raises ``usage_error`` (the CLI's one-line, exit-2 error)."""
    UsageError = usage_error  # noqa: N806 - the CLI's exception class
    try:
        rows, orbits, _ = load_catalogue(args.catalogue)
    except CatalogueError as exc:
        raise UsageError(str(exc)) from None
    if args.rows:
        wanted = [s.strip() for s in args.rows.split(",") if s.strip()]
        missing = [w for w in wanted if w not in {r["id"] for r in rows}]
        if missing:
            raise UsageError(f"--rows: no row {missing[0]!r} in {args.catalogue}")
        rows = [r for r in rows if r["id"] in wanted]
    if args.particles < 10 or args.particles > 100_000:
        raise UsageError("--particles must be between 10 and 100000")
    from .options import resolve_workers

    try:  # the one meaning of --workers: worker processes, default one per core
        workers = resolve_workers(args.workers)
    except ValueError as exc:
        raise UsageError(str(exc)) from None

    def progress(k, n, rid):
        if not args.json:
            print(f"[{k}/{n}] {rid}" if rid else f"[{n}/{n}] done", file=sys.stderr, flush=True)

    command = "trailcast hindcast " + " ".join(sys.argv[2:]) if len(sys.argv) > 1 else ""

    def report_of(results):
        done = rows[: len(results)]
        report = build_report(
            done,
            orbits,
            results,
            catalogue=args.catalogue,
            particles=args.particles,
            seed=args.seed,
            command=command.strip() or "trailcast hindcast",
        )
        report["rows_run"], report["rows_requested"] = len(results), len(rows)
        return report

    def save_partial(results):  # an interrupted run keeps the rows it finished
        if len(results) < len(rows):
            write_report(args.out, report_of(results))

    results = run_catalogue(
        rows,
        orbits,
        particles=args.particles,
        seed=args.seed,
        workers=workers,
        progress=progress,
        on_result=save_partial,
    )
    report = report_of(results)
    paths = write_report(args.out, report)
    if args.json:
        print(json.dumps({m: report["scores"][m]["summary"] for m in ("absolute", "calibrated")}))
    else:
        for mode in ("absolute", "calibrated"):
            s = report["scores"][mode]["summary"]
            med = s["median_abs_offset_min"]
            print(
                f"{mode}: {s['rows']} rows; median |offset| "
                f"{'-' if med is None else f'{med:.1f}'} min; within 15 min "
                f"{_fmt(s['fraction_within_15_min'], '.2f')}; ZHR within x3 "
                f"{_fmt(s['fraction_zhr_within_x3'], '.2f')}; storms where none seen "
                f"{s['storms_predicted_where_none_seen']}"
            )
        print("Wrote " + ", ".join(str(p) for p in paths.values()))
        print(CAUTION)
    return 0


def add_parser(sub, usage_error=ValueError) -> None:
    """Register ``trailcast hindcast`` on the CLI's subparsers; ``usage_error`` is the CLI's
    exception for bad input (one line on stderr, exit status 2)."""
    p = sub.add_parser(
        "hindcast",
        help="run the hindcast catalogue (past outbursts) and write the report",
        epilog=CAUTION,
    )
    p.add_argument(
        "catalogue",
        nargs="?",
        default=DEFAULT_CATALOGUE,
        metavar="CATALOGUE.json",
        help=f"hindcast catalogue (default {DEFAULT_CATALOGUE})",
    )
    p.add_argument("--out", default=DEFAULT_OUT, metavar="DIR", help=f"default {DEFAULT_OUT}")
    p.add_argument("--rows", metavar="IDS", help="only these rows, by id, comma-separated")
    p.add_argument(
        "--particles",
        type=int,
        default=DEFAULT_PARTICLES,
        help=f"meteoroids per trail (default {DEFAULT_PARTICLES})",
    )
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    from .options import HINDCAST, add_arguments

    add_arguments(p, HINDCAST)  # --workers, as forecast and screen take it
    p.add_argument("--json", action="store_true", help="print the summaries as JSON")
    p.set_defaults(func=functools.partial(cmd_hindcast, usage_error=usage_error))


__all__ = ["CatalogueError", "add_parser", "build_report", "load_catalogue", "write_report"]
