"""What a screening produces: the JSON summary, the CSV table (one row per orbit), the short
readable report, and the terminal progress bar of ``trailcast screen``."""

import csv
import io
import json
import sys
import time
from pathlib import Path

from dynamics.activity import zhr_text

from .batch import BatchRow
from .exports import csv_cell
from .files import write_atomic


def invalid_record(row: BatchRow) -> dict:
    return {
        "line": row.line,
        "name": row.name,
        "candidate": False,
        "verdict": "invalid",
        "geometry": None,
        "forecast": None,
        "error": row.error,
        "rank": None,
        "key": None,
    }


def assemble(rows: list[BatchRow], run, rule, options, source: str) -> dict:
    """The JSON summary: counts, rule, options, every orbit in input order, cautions."""
    from dynamics.screening import screening_summary

    records = []
    it = iter(run.records if run is not None else [])
    first_line_of: dict[str, int] = {}
    for row in rows:
        if row.orbit is None:
            records.append(invalid_record(row))
        else:
            records.append({"line": row.line, **next(it)})
        if row.name is not None:
            # a name given twice is flagged (a batch built twice from the same list, or a typo)
            earlier = first_line_of.setdefault(row.name.strip(), row.line)
            records[-1]["duplicate_name_of"] = earlier if earlier != row.line else None
    summary = screening_summary(records, rule, options)
    summary["source"] = source
    summary["reused"] = run.reused if run is not None else 0
    summary["computed"] = run.computed if run is not None else 0
    return {"screening": summary, "orbits": records}


#: Columns of the CSV table, one row per orbit.
TABLE_COLUMNS = (
    "line",
    "rank",
    "name",
    "verdict",
    "candidate",
    "moid_au",
    "nearest_node_au",
    "ascending_miss_distance_au",
    "descending_miss_distance_au",
    "encounters",
    "near_misses",
    "first_encounter_peak_utc",
    "closest_encounter_miss_distance_au",
    "max_zhr",
    "error",
    "key",
)


def _table_row(r: dict) -> dict:
    g = r.get("geometry") or {}
    f = r.get("forecast") or {}
    enc = f.get("encounters") or []
    err = r.get("error")
    return {
        "line": r["line"],
        "rank": r.get("rank"),
        "name": r.get("name"),
        "verdict": r["verdict"],
        "candidate": r.get("candidate"),
        "moid_au": g.get("moid_au"),
        "nearest_node_au": g.get("nearest_node_au"),
        "ascending_miss_distance_au": g.get("ascending_miss_distance_au"),
        "descending_miss_distance_au": g.get("descending_miss_distance_au"),
        "encounters": len(enc) if r.get("forecast") else None,
        "near_misses": len(f.get("near_misses") or []) if r.get("forecast") else None,
        "first_encounter_peak_utc": min((e["peak_utc"] for e in enc), default=None),
        "closest_encounter_miss_distance_au": min(
            (e["miss_distance_au"] for e in enc), key=abs, default=None
        ),
        "max_zhr": max((e["zhr"]["estimate"] for e in enc), default=None),
        "error": None if not err else err.get("message"),
        "key": r.get("key"),
    }


def table_csv(result: dict) -> str:
    """One row per orbit (input order), columns :data:`TABLE_COLUMNS`."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=TABLE_COLUMNS, lineterminator="\r\n")
    w.writeheader()
    for r in result["orbits"]:
        w.writerow({k: csv_cell(v) for k, v in _table_row(r).items()})
    return buf.getvalue()


def _f(v, spec):
    return "-" if v is None else format(v, spec)


def report_text(result: dict, every_orbit: bool = True) -> str:
    """The short readable report: counts, the rule, candidates with encounters, every orbit
    (``every_orbit``; the terminal shows the rest only)."""
    s = result["screening"]
    v = s["verdicts"]
    rule = s["rule"]
    lines = [
        f"Screening of {s['orbits']} orbit rows from {s['source']}, years "
        f"{s['years'][0]}-{s['years'][1]}",
        f"  rule: candidate when MOID < {rule['moid_max_au']} au and the nearer node lies within "
        f"{rule['node_max_au']} au of Earth's orbit ({rule['sources']['moid_max_au']})",
        f"  candidates {s['candidates']}; "
        + ", ".join(f"{k} {n}" for k, n in v.items() if n)
        + f"; reused {s['reused']}, computed {s['computed']}",
        f"  trail forecasts: {s['forecast_options']['particles_per_trail']} meteoroids per trail "
        f"and passage, trails up to {s['forecast_options']['max_trail_age_years']:g} years old, "
        f"seed {s['forecast_options']['seed']}",
        "  times UTC; miss = trail minus Earth (au); solar longitude geometric J2000",
        "",
        "Candidates (trail forecasts)",
    ]
    cands = [r for r in result["orbits"] if r.get("candidate")]
    for r in sorted(cands, key=lambda r: r["rank"]):
        g = r["geometry"]
        lines.append(
            f"  line {r['line']:>4}  {r['name']}: {r['verdict']} (MOID {g['moid_au']:.5f} au, "
            f"nearest node {_f(g['nearest_node_au'], '.5f')} au)"
        )
        f = r.get("forecast") or {}
        for e in f.get("encounters") or []:
            lines.append(
                f"      encounter  {e['peak_utc']}  lambda_sun {e['solar_longitude_deg']:.4f}  "
                f"trail {e['trail']['perihelion_year']} ({e['trail']['revolutions']} rev)  miss "
                f"{e['miss_distance_au']:+.5f}  RA {e['radiant']['ra_deg']:.1f} Dec "
                f"{e['radiant']['dec_deg']:+.1f}  Vg {e['vg_km_s']:.1f} km/s  ZHR "
                f"{zhr_text(e['zhr']['estimate'])} "
                f"({zhr_text(e['zhr']['low'])}-{zhr_text(e['zhr']['high'])})"
            )
        if f.get("near_misses"):
            weak = sum(
                1
                for e in f["near_misses"]
                if (e.get("classification") or {}).get("label") == "negligible"
            )
            close = f", {weak} of them close with negligible activity" if weak else ""
            lines.append(f"      near misses: {len(f['near_misses'])}{close} (see the JSON)")
        if r.get("error"):
            lines.append(f"      error: {r['error']['message']}")
    if not cands:
        lines.append("  none")
    if every_orbit:
        lines += [
            "",
            "Every orbit (input order)",
            "  line  rank  verdict              MOID_au   node_au   name",
        ]
    for r in result["orbits"] if every_orbit else ():
        g = r.get("geometry") or {}
        lines.append(
            f"  {r['line']:>4}  {_f(r.get('rank'), '>4')}  {r['verdict']:<19}  "
            f"{_f(g.get('moid_au'), '.5f'):>8}  {_f(g.get('nearest_node_au'), '.5f'):>8}  "
            f"{r.get('name') or '-'}"
            + (f"  [{r['error']['message']}]" if r["verdict"] == "invalid" else "")
        )
    lines += ["", *(f"Caution: {c}" for c in s["cautions"])]
    return "\n".join(lines) + "\n"


def write_outputs(out_dir: Path, result: dict) -> dict[str, Path]:
    """``screening.json``, ``screening.csv`` and ``screening.txt`` in ``out_dir`` (atomic)."""
    out_dir = Path(out_dir)
    paths = {
        "json": out_dir / "screening.json",
        "csv": out_dir / "screening.csv",
        "report": out_dir / "screening.txt",
    }
    write_atomic(paths["json"], json.dumps(result, indent=2, allow_nan=False))
    write_atomic(paths["csv"], table_csv(result))
    write_atomic(paths["report"], report_text(result))
    return paths


class ProgressBar:
    """``[#####.....]  120/200 orbits  stage  ETA 0:42`` on stderr when it is a terminal."""

    def __init__(self, stream=None, width: int = 30):
        self.stream = stream or sys.stderr
        self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.width = width
        self.t0 = time.monotonic()
        self.first_done: int | None = None

    def __call__(self, done: int, total: int, stage: str) -> None:
        if not self.enabled:
            return
        if self.first_done is None:
            self.first_done, self.t0 = done, time.monotonic()
        frac = done / total if total else 1.0
        fill = int(round(self.width * frac))
        new = done - self.first_done
        elapsed = time.monotonic() - self.t0
        if new > 0 and done < total:
            eta_s = int(elapsed / new * (total - done))
            eta = f"ETA {eta_s // 3600}:{eta_s // 60 % 60:02d}:{eta_s % 60:02d}"
        else:
            eta = "ETA --:--:--" if done < total else "done"
        self.stream.write(
            f"\r[{'#' * fill}{'.' * (self.width - fill)}] {done}/{total} orbits  "
            f"{stage:<16} {eta}   "
        )
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
