"""Structure and consistency of the hindcast catalogue, validation/hindcasts.json.

The catalogue lists published past meteor outbursts (and returns without one) of real parent
comets, for hindcasting only. These tests check the file, not the forecasts: every row carries
its sources, a peak-time tolerance set in advance, physical ranges, and the mix of cases the
hindcast report needs (issue 12). Numbers derived in the file (perihelion times from the
elements-file rows, solar longitudes from UTC peak times) are re-derived here with erfa.

`catalogue_problems` returns a list of readable problems; the tests assert it is empty for the
real file and non-empty for deliberately broken copies, so each rule is shown able to fail.
"""

import copy
import json
import math
import re
from datetime import datetime
from pathlib import Path

import erfa
import pytest

CATALOGUE_PATH = Path(__file__).resolve().parent.parent / "validation" / "hindcasts.json"

# What issue 12 asks of the catalogue (the issue text, "A hindcast catalogue and report").
MIN_ROWS = 15
MIN_PARENTS = 6
MIN_NO_OUTBURST_ROWS = 3
REQUIRED_KINDS = {"storm", "outburst", "weak", "no-outburst", "resonant", "split", "one-revolution"}
REQUIRED_PARENT_CLASSES = {"Jupiter-family", "Halley-type", "long-period"}
REQUIRED_SPEED_CLASSES = {"fast", "slow"}
LEVEL_KINDS = {"storm", "outburst", "weak", "no-outburst"}  # exactly one per row

# Activity levels behind the kind tags, in ZHR (meteors per hour). A storm is ZHR >= 1000 by
# the usual convention (common practice, no source); the 100/h line between "outburst" and
# "weak" is our own choice, stated in the catalogue's conventions (no source).
STORM_ZHR = 1000.0
OUTBURST_ZHR = 100.0
# A no-outburst row may still show enhanced background activity: in 1998 the Leonids ran at
# ZHR about 100 near the node where a storm had been expected (imo-1998-initial). 150 bounds
# that (our own choice, no source); a row above it is an outburst, not a failed one.
NO_OUTBURST_MAX_ZHR = 150.0
# Speed classes, km/s: one split at 40 km/s (our own choice, no source). Draconids, Bootids,
# tau-Herculids and Camelopardalids (about 14-21) and the Ursids (33) are slow; Leonids,
# Orionids and Aurigids (66-71) fast.
FAST_MIN_KM_S = 40.0

# Peak-time tolerance, minutes: at least 5 (a minute-level match is not meaningful for
# visual ZHR profiles), at most 1440 (one day; broader returns belong elsewhere). Above 30 min
# a written reason of some length is required (common practice, no source).
TOLERANCE_MIN_MIN = 5
TOLERANCE_MAX_MIN = 1440
WELL_TIMED_MAX_MIN = 30
MIN_REASON_CHARS = 30

# Solar longitude check, degrees. Published values differ from our geometric erfa value by the
# source's own rounding (its stated uncertainty) plus up to the aberration, 20.5 arcsec =
# 0.0057 deg, and the source's ephemeris; 0.008 deg (about 11 min of time) covers both.
PUBLISHED_LAMBDA_SLACK_DEG = 0.008
# Values computed for the catalogue are stored to 4 decimals: 0.0005 deg allows the rounding.
COMPUTED_LAMBDA_TOL_DEG = 0.0005
# Perihelion times re-derived from the elements file's YYYYMMDD.ddddd (TT) must agree to the
# file's last digit, 1e-5 day; the two full-precision solutions agree with it to 5e-5 day.
TP_TOL_DAY = 5e-5
# IAU 1976 obliquity of the ecliptic at J2000, arcsec (docs/domain.md section 2).
OBLIQUITY_J2000_ARCSEC = 84381.448
# Row years must lie in the span of well-documented outbursts (our own bounds, no source).
EARLIEST_YEAR = 1800
LATEST_YEAR = 2100


def _espenak_meeus_delta_t_s(year: float) -> float:
    """Delta T = TT - UT in seconds, Espenak & Meeus (2006) polynomials for 1920-1961."""
    if 1920 <= year < 1941:
        t = year - 1920
        return 21.20 + 0.84493 * t - 0.076100 * t**2 + 0.0020936 * t**3
    if 1941 <= year < 1961:
        t = year - 1950
        return 29.07 + 0.407 * t - t**2 / 233 + t**3 / 2547
    raise ValueError(f"no Delta T polynomial here for {year}")


def _tt_jd(peak_utc: str) -> tuple[float, float]:
    """Two-part TT Julian date of an ISO 8601 'YYYY-MM-DDTHH:MM:SSZ' time (UT before 1960)."""
    t = datetime.strptime(peak_utc, "%Y-%m-%dT%H:%M:%SZ")
    if t.year >= 1960:
        u1, u2 = erfa.dtf2d("UTC", t.year, t.month, t.day, t.hour, t.minute, float(t.second))
        return erfa.taitt(*erfa.utctai(u1, u2))
    j1, j2 = erfa.cal2jd(t.year, t.month, t.day)
    seconds = t.hour * 3600 + t.minute * 60 + t.second
    seconds += _espenak_meeus_delta_t_s(t.year + (t.month - 0.5) / 12)
    return j1, j2 + seconds / 86400.0


def _solar_longitude_deg(peak_utc: str) -> float:
    """Geometric solar longitude, ecliptic and equinox J2000, from erfa.epv00 (TT for TDB)."""
    heliocentric, _barycentric = erfa.epv00(*_tt_jd(peak_utc))
    x, y, z = heliocentric[0]
    eps = math.radians(OBLIQUITY_J2000_ARCSEC / 3600.0)
    y_ecl = y * math.cos(eps) + z * math.sin(eps)
    return (math.degrees(math.atan2(y_ecl, x)) + 180.0) % 360.0


def _angle_diff_deg(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)


def _tp_from_elements_row(tp_tt_calendar: str) -> float:
    """JD of the elements file's 'YYYYMMDD.ddddd' perihelion time (TT; TDB-TT < 2 ms ignored)."""
    m = re.fullmatch(r"(\d{4})(\d{2})(\d{2})(\.\d+)", tp_tt_calendar)
    if m is None:
        raise ValueError(f"not YYYYMMDD.ddddd: {tp_tt_calendar!r}")
    j1, j2 = erfa.cal2jd(int(m[1]), int(m[2]), int(m[3]))
    return j1 + j2 + float(m[4])


def _check_orbit(name: str, orbit: dict, sources: dict, problems: list[str]) -> None:
    where = f"orbit {name}"
    for key in ("q_au", "e", "incl_deg", "node_deg", "peri_deg", "tp_tdb_jd", "epoch_tdb_jd"):
        if not isinstance(orbit.get(key), (int, float)):
            problems.append(f"{where}: {key} missing or not a number")
            return
    if not 0.0 < orbit["q_au"] < 10.0:
        problems.append(f"{where}: q_au {orbit['q_au']} outside (0, 10)")
    if not 0.0 <= orbit["e"] < 1.0:
        problems.append(
            f"{where}: e {orbit['e']} outside [0, 1) (all catalogued parents are bound)"
        )
    if not 0.0 <= orbit["incl_deg"] <= 180.0:
        problems.append(f"{where}: incl_deg outside [0, 180]")
    for key in ("node_deg", "peri_deg"):
        if not 0.0 <= orbit[key] < 360.0:
            problems.append(f"{where}: {key} outside [0, 360)")
    for key in ("tp_tdb_jd", "epoch_tdb_jd"):
        if not 2.3e6 < orbit[key] < 2.5e6:  # JD of years 1585-2132
            problems.append(f"{where}: {key} {orbit[key]} is not a plausible JD")
    if orbit.get("source") not in sources:
        problems.append(f"{where}: source {orbit.get('source')!r} not in sources")
    if not orbit.get("solution"):
        problems.append(f"{where}: no published solution reference")
    if orbit.get("parent_class") not in REQUIRED_PARENT_CLASSES:
        problems.append(f"{where}: parent_class {orbit.get('parent_class')!r} unknown")
    nongrav = orbit.get("nongrav_au_d2", "missing")
    if nongrav is None:
        if not orbit.get("nongrav_note"):
            problems.append(f"{where}: no non-gravitational terms and no note saying why")
    elif not (
        isinstance(nongrav, dict)
        and set(nongrav) == {"a1", "a2", "a3"}
        and all(abs(v) < 1e-6 for v in nongrav.values())
    ):
        problems.append(f"{where}: nongrav_au_d2 must be null or a1/a2/a3 below 1e-6 au/day^2")
    dt = orbit.get("nongrav_dt_days")
    if dt is not None and (nongrav is None or not isinstance(dt, float) or not abs(dt) <= 365.0):
        problems.append(
            f"{where}: nongrav_dt_days needs a1/a2/a3 and a number of days within a year"
        )
    mag = orbit.get("magnitude", "missing")
    if mag == "missing" and " / " in name:
        pass  # an alternative solution shares its parent's magnitude
    elif mag is None:
        if not orbit.get("magnitude_note"):
            problems.append(f"{where}: no total magnitude and no note saying why")
    elif not (
        isinstance(mag, dict)
        and mag.get("source") in sources
        and -5.0 <= mag.get("m1", 99.0) <= 25.0
        and 0.0 <= mag.get("k1", -1.0) <= 50.0
    ):
        problems.append(f"{where}: magnitude needs m1 in [-5, 25], k1 in [0, 50] and a source")
    row = orbit.get("elements_file_row")
    if row is None:
        problems.append(f"{where}: no elements_file_row to re-derive times from")
    else:
        if abs(orbit["epoch_tdb_jd"] - (row["epoch_mjd"] + 2400000.5)) > 1e-9:
            problems.append(f"{where}: epoch_tdb_jd does not equal epoch_mjd + 2400000.5")
        tp = _tp_from_elements_row(row["tp_tt_calendar"])
        if abs(orbit["tp_tdb_jd"] - tp) > TP_TOL_DAY:
            problems.append(
                f"{where}: tp_tdb_jd {orbit['tp_tdb_jd']} != {tp} from the elements row"
            )
    for k, obs in enumerate(orbit.get("observed_perihelia") or []):
        # an earlier return's perihelion time: a plausible JD before the solution's own,
        # with its source, which is either checked in a stored copy or flagged from memory
        tp = obs.get("tp_tdb_jd")
        if not isinstance(tp, (int, float)) or not 1.0e6 < tp < orbit["tp_tdb_jd"] - 365.0:
            problems.append(f"{where}: observed_perihelia[{k}] is not a JD before the orbit's tp")
        if obs.get("source") not in sources:
            problems.append(f"{where}: observed_perihelia[{k}] source not in sources")
        elif not _source_verified(sources, obs["source"]) and not obs.get("from_memory"):
            problems.append(f"{where}: observed_perihelia[{k}] unverified, not flagged from memory")
    for alt in orbit.get("alternative_solutions", []):
        _check_orbit(f"{name} / {alt.get('designation')}", alt, sources, problems)


def _source_verified(sources: dict, key: str | None) -> bool:
    return key is not None and bool(sources.get(key, {}).get("verified_in_stored_copy"))


def _check_row(row: dict, cat: dict, problems: list[str]) -> None:
    sources, orbits = cat["sources"], cat["orbits"]
    rid = row.get("id", "?")
    where = f"row {rid}"
    for key in (
        "id",
        "parent",
        "shower",
        "year",
        "kind",
        "speed_class",
        "speed_km_s",
        "speed_source",
        "parent_class",
        "trails",
        "observed",
        "tolerance_min",
        "tolerance_reason",
        "from_memory",
        "notes",
    ):
        if key not in row:
            problems.append(f"{where}: missing {key}")
            return
    if not EARLIEST_YEAR <= row["year"] <= LATEST_YEAR:
        problems.append(f"{where}: year {row['year']} outside {EARLIEST_YEAR}-{LATEST_YEAR}")
    orbit = orbits.get(row["parent"])
    if orbit is None:
        problems.append(f"{where}: parent {row['parent']!r} has no orbit")
    elif row["parent_class"] != orbit["parent_class"]:
        problems.append(f"{where}: parent_class differs from the orbit's")

    kinds = set(row["kind"])
    if not kinds <= REQUIRED_KINDS:
        problems.append(f"{where}: unknown kind tags {sorted(kinds - REQUIRED_KINDS)}")
    if len(kinds & LEVEL_KINDS) != 1:
        problems.append(f"{where}: needs exactly one of {sorted(LEVEL_KINDS)}")

    speed = row["speed_km_s"]
    if row["speed_class"] == "fast" and speed < FAST_MIN_KM_S:
        problems.append(f"{where}: fast but {speed} km/s")
    if row["speed_class"] == "slow" and speed >= FAST_MIN_KM_S:
        problems.append(f"{where}: slow but {speed} km/s")
    if row["speed_class"] not in REQUIRED_SPEED_CLASSES:
        problems.append(f"{where}: speed_class {row['speed_class']!r} unknown")

    from_memory = row["from_memory"]

    def needs_memory_flag(field: str, source_key: str | None) -> None:
        if source_key not in sources:
            problems.append(f"{where}: source {source_key!r} of {field} not in sources")
        elif not _source_verified(sources, source_key) and not any(
            f.startswith(field) for f in from_memory
        ):
            problems.append(
                f"{where}: {field} comes from an unverified source but is not marked from memory"
            )

    needs_memory_flag("speed_km_s", row["speed_source"])

    if not row["trails"] and not row.get("trail_note"):
        problems.append(f"{where}: no trails and no trail_note")
    for trail in row["trails"]:
        if (
            not isinstance(trail.get("perihelion_year"), int)
            or trail["perihelion_year"] > row["year"]
        ):
            problems.append(
                f"{where}: trail perihelion_year must be an integer year before the event"
            )
        revs = trail.get("revolutions")
        if revs is not None and not (isinstance(revs, int) and revs >= 1):
            problems.append(f"{where}: trail revolutions must be a positive integer")
        needs_memory_flag("trails", trail.get("source"))

    obs = row["observed"]
    peak = obs.get("peak_utc")
    zhr = obs.get("zhr")
    is_no_outburst = "no-outburst" in kinds
    if peak is None:
        if not is_no_outburst:
            problems.append(f"{where}: only no-outburst rows may lack an observed peak time")
        if not row.get("check_window_utc"):
            problems.append(f"{where}: no peak time and no check_window_utc")
        if row["tolerance_min"] is not None:
            problems.append(f"{where}: tolerance without a peak time to apply it to")
    else:
        try:
            t = datetime.strptime(peak, "%Y-%m-%dT%H:%M:%SZ")
        except ValueError:
            problems.append(f"{where}: peak_utc {peak!r} is not ISO 8601 'YYYY-MM-DDTHH:MM:SSZ'")
            return
        if t.year != row["year"]:
            problems.append(f"{where}: peak_utc year differs from the row year")
        needs_memory_flag("peak_utc", obs.get("peak_utc_source"))
        tol = row["tolerance_min"]
        if not isinstance(tol, int) or not TOLERANCE_MIN_MIN <= tol <= TOLERANCE_MAX_MIN:
            problems.append(
                f"{where}: tolerance_min {tol!r} outside {TOLERANCE_MIN_MIN}-{TOLERANCE_MAX_MIN}"
            )
        lam = obs.get("solar_longitude_deg")
        origin = obs.get("solar_longitude_origin")
        if lam is None or origin not in ("published", "computed"):
            problems.append(f"{where}: peak without a solar longitude and its origin")
        else:
            computed = _solar_longitude_deg(peak)
            if origin == "computed":
                allowed = COMPUTED_LAMBDA_TOL_DEG
            else:
                allowed = (obs.get("solar_longitude_unc_deg") or 0.0) + PUBLISHED_LAMBDA_SLACK_DEG
                needs_memory_flag("solar_longitude_deg", obs.get("solar_longitude_source"))
            if _angle_diff_deg(lam, computed) > allowed:
                problems.append(
                    f"{where}: solar longitude {lam} vs {computed:.4f} from peak_utc (allowed {allowed})"
                )
    reason = row["tolerance_reason"] or ""
    if len(reason) < MIN_REASON_CHARS and (
        row["tolerance_min"] is None or row["tolerance_min"] > WELL_TIMED_MAX_MIN
    ):
        problems.append(f"{where}: a wide or missing tolerance needs a reason")
    if not reason:
        problems.append(f"{where}: tolerance_reason empty")

    if zhr is None:
        if not is_no_outburst:
            problems.append(f"{where}: only no-outburst rows may lack a ZHR")
        if not obs.get("zhr_note"):
            problems.append(f"{where}: missing ZHR without a zhr_note")
    else:
        needs_memory_flag("zhr", obs.get("zhr_source"))
        if zhr <= 0:
            problems.append(f"{where}: ZHR must be positive")
        low, high = obs.get("zhr_low"), obs.get("zhr_high")
        if (low is None) != (high is None):
            problems.append(f"{where}: give both zhr_low and zhr_high or neither")
        elif low is not None and not low <= zhr <= high:
            problems.append(f"{where}: zhr {zhr} outside [{low}, {high}]")
        if low is None and not obs.get("zhr_note"):
            problems.append(f"{where}: ZHR without bounds needs a zhr_note on its uncertainty")
        if "storm" in kinds and zhr < STORM_ZHR:
            problems.append(f"{where}: storm with ZHR {zhr}")
        if "outburst" in kinds and not OUTBURST_ZHR <= zhr < STORM_ZHR:
            problems.append(f"{where}: outburst with ZHR {zhr}")
        if "weak" in kinds and zhr >= OUTBURST_ZHR:
            problems.append(f"{where}: weak row with ZHR {zhr}")
        if is_no_outburst and zhr >= NO_OUTBURST_MAX_ZHR:
            problems.append(f"{where}: no-outburst row with ZHR {zhr}")
    fwhm = obs.get("fwhm_min")
    if fwhm is not None and (not 0 < fwhm < 10000 or obs.get("fwhm_source") not in sources):
        problems.append(f"{where}: fwhm_min needs a positive value below 10000 and a source")


def catalogue_problems(cat: dict) -> list[str]:
    """Every rule the catalogue must meet; returns readable problems (empty when all hold)."""
    problems: list[str] = []
    for key in ("sources", "orbits", "rows", "conventions"):
        if key not in cat:
            return [f"catalogue: missing {key}"]
    for key, src in cat["sources"].items():
        if (
            not src.get("citation")
            or not src.get("quality")
            or "verified_in_stored_copy" not in src
        ):
            problems.append(f"source {key}: needs citation, quality and verified_in_stored_copy")
        if not src.get("verified_in_stored_copy") and "memory" not in src.get("quality", ""):
            problems.append(f"source {key}: unverified sources must say 'from memory' in quality")
    for name, orbit in cat["orbits"].items():
        if orbit.get("designation") != name:
            problems.append(f"orbit {name}: designation differs from its key")
        _check_orbit(name, orbit, cat["sources"], problems)
    rows = cat["rows"]
    ids = [r.get("id") for r in rows]
    if len(ids) != len(set(ids)):
        problems.append("rows: ids are not unique")
    for row in rows:
        _check_row(row, cat, problems)
    if len(rows) < MIN_ROWS:
        problems.append(f"rows: {len(rows)} rows, need {MIN_ROWS}")
    parents = {r.get("parent") for r in rows}
    if len(parents) < MIN_PARENTS:
        problems.append(f"rows: {len(parents)} parents, need {MIN_PARENTS}")
    n_none = sum("no-outburst" in r.get("kind", []) for r in rows)
    if n_none < MIN_NO_OUTBURST_ROWS:
        problems.append(f"rows: {n_none} no-outburst rows, need {MIN_NO_OUTBURST_ROWS}")
    kinds = set().union(*(set(r.get("kind", [])) for r in rows)) if rows else set()
    if not REQUIRED_KINDS <= kinds:
        problems.append(f"rows: kinds missing {sorted(REQUIRED_KINDS - kinds)}")
    classes = {r.get("parent_class") for r in rows}
    if not REQUIRED_PARENT_CLASSES <= classes:
        problems.append(f"rows: parent classes missing {sorted(REQUIRED_PARENT_CLASSES - classes)}")
    speeds = {r.get("speed_class") for r in rows}
    if not REQUIRED_SPEED_CLASSES <= speeds:
        problems.append(f"rows: speed classes missing {sorted(REQUIRED_SPEED_CLASSES - speeds)}")
    return problems


@pytest.fixture(scope="module")
def catalogue() -> dict:
    return json.loads(CATALOGUE_PATH.read_text(encoding="utf-8"))


@pytest.mark.reference
def test_catalogue_meets_every_rule(catalogue):
    # Includes re-deriving perihelion times (erfa.cal2jd) and solar longitudes (erfa.epv00).
    assert catalogue_problems(catalogue) == []


@pytest.mark.reference
def test_solar_longitude_helper_matches_a_published_value():
    # CBET 698 (2006): Orionid maximum at 2006 Oct 21 1h55m UT, solar longitude 207.44 (J2000),
    # printed to 0.01 deg; our geometric value must agree to that rounding plus the aberration.
    assert _angle_diff_deg(_solar_longitude_deg("2006-10-21T01:55:00Z"), 207.44) < 0.005 + 0.0057


def _break(cat: dict, row_id: str, edit) -> dict:
    broken = copy.deepcopy(cat)
    edit(next(r for r in broken["rows"] if r["id"] == row_id), broken)
    return broken


BROKEN_COPIES = {
    "row without peak source": (
        "dra-2011-1900",
        lambda r, c: r["observed"].update(peak_utc_source="nowhere"),
    ),
    "storm with a small ZHR": (
        "leo-1999-1899",
        lambda r, c: r["observed"].update(zhr=500, zhr_low=400, zhr_high=600),
    ),
    "tolerance of zero": ("dra-2011-1900", lambda r, c: r.update(tolerance_min=0)),
    "wide tolerance, no reason": ("ori-2006", lambda r, c: r.update(tolerance_reason="broad")),
    "solar longitude typo": (
        "ori-2006",
        lambda r, c: r["observed"].update(solar_longitude_deg=208.44),
    ),
    "peak time off by an hour": (
        "dra-2011-1900",
        lambda r, c: r["observed"].update(peak_utc="2011-10-08T21:03:00Z"),
    ),
    "memory value not flagged": ("cam-2014", lambda r, c: r.update(from_memory=[])),
    "unphysical eccentricity": ("urs-2000", lambda r, c: c["orbits"]["8P/Tuttle"].update(e=1.7)),
    "perihelion time typo": (
        "urs-2000",
        lambda r, c: c["orbits"]["8P/Tuttle"].update(tp_tdb_jd=2454492.61802),
    ),
    "only two no-outburst rows": (
        "cam-2014",
        lambda r, c: c.update(
            rows=[
                x
                for x in c["rows"]
                if "no-outburst" not in x["kind"] or x["id"] in ("cam-2014", "dra-1972")
            ]
        ),
    ),
    "magnitude without a source": (
        "cam-2014",
        lambda r, c: c["orbits"]["209P/LINEAR"]["magnitude"].update(source="nowhere"),
    ),
    "observed perihelion from memory, not flagged": (
        "dra-2011-1900",
        lambda r, c: c["orbits"]["21P/Giacobini-Zinner"]["observed_perihelia"][0].update(
            from_memory=False
        ),
    ),
    "fast shower at 20 km/s": ("aur-2007-1rev", lambda r, c: r.update(speed_km_s=20)),
    "missing ZHR on an outburst": ("dra-2011-1900", lambda r, c: r["observed"].update(zhr=None)),
}


@pytest.mark.parametrize("label", sorted(BROKEN_COPIES))
def test_each_rule_can_fail(catalogue, label):
    row_id, edit = BROKEN_COPIES[label]
    assert catalogue_problems(_break(catalogue, row_id, edit)) != [], label


def test_too_few_rows_or_parents_fail(catalogue):
    small = copy.deepcopy(catalogue)
    small["rows"] = [
        r for r in small["rows"] if r["parent"] in ("55P/Tempel-Tuttle", "21P/Giacobini-Zinner")
    ]
    problems = catalogue_problems(small)
    assert any("parents" in p for p in problems)
    assert any("kinds missing" in p for p in problems)
