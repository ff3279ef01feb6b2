"""Encounters as CSV (one row each, nested keys flattened) and as iCalendar (RFC 5545) events.

Both pass through every key the forecast JSON has, so fields added to encounters later (e.g. an
activity model's ``zhr`` or ``window``) appear without a change here.

The calendar event's window: an encounter's own ``window`` (``start_utc``/``end_utc``) when the
forecast gives one; until then the peak time plus and minus half the FWHM of the simulated
meteoroids' Earth passage times, which each event's description says.
"""

import csv
import io
import json
from datetime import UTC, datetime, timedelta

from icalendar import Calendar, Event

from dynamics import __version__

#: Shortest half-window of a calendar event (minutes), so that an event never has zero length.
MIN_HALF_WINDOW_MIN = 5.0

#: Columns that come first, in this order, when present; other keys follow sorted.
_LEADING_COLUMNS = (
    "forecast_id",
    "parent",
    "kind",
    "year",
    "trail.perihelion_year",
    "trail.revolutions",
    "trail.perihelion_tdb",
    "node",
    "peak_utc",
    "solar_longitude_deg",
    "miss_distance_au",
    "miss_distance_spread_au",
    "fwhm_hours",
    "radiant.ra_deg",
    "radiant.dec_deg",
    "vg_km_s",
    "vinf_km_s",
    "particles",
    "dilution",
)


def flatten(obj: dict, prefix: str = "") -> dict:
    """``{"radiant": {"ra_deg": 1}}`` -> ``{"radiant.ra_deg": 1}``; lists become JSON text."""
    out = {}
    for key, value in obj.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out.update(flatten(value, name + "."))
        elif isinstance(value, list):
            out[name] = json.dumps(value)
        else:
            out[name] = value
    return out


#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(value):
    """A CSV cell that a spreadsheet shows as text: a string starting with ``= + - @``, a tab or
    a carriage return gets a leading apostrophe (OWASP's advice); numbers pass unchanged, and a
    lone surrogate becomes U+FFFD (it cannot be written as UTF-8)."""
    if value is None:
        return ""
    if isinstance(value, str):
        value = value.encode("utf-8", "replace").decode("utf-8") if _has_surrogate(value) else value
        if value.startswith(_FORMULA_STARTS):
            return "'" + value
    return value


def one_line(text: str) -> str:
    """``text`` without line breaks, control characters or lone surrogates (for iCalendar
    property values, which a CR or LF would end)."""
    text = text.encode("utf-8", "replace").decode("utf-8") if _has_surrogate(text) else text
    return "".join(
        " " if (ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 or c in "\u2028\u2029") else c for c in text
    )


def _has_surrogate(text: str) -> bool:
    return any(0xD800 <= ord(c) <= 0xDFFF for c in text)


def encounters_csv(rows: list[dict]) -> str:
    """CSV text of flat rows: leading columns first, then every other key, sorted."""
    flat = [flatten(r) for r in rows]
    keys = set().union(*flat) if flat else set(_LEADING_COLUMNS)
    columns = [c for c in _LEADING_COLUMNS if c in keys] + sorted(keys - set(_LEADING_COLUMNS))
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=columns, lineterminator="\r\n")
    writer.writeheader()
    for r in flat:
        writer.writerow({k: csv_cell(r.get(k)) for k in columns})
    return buf.getvalue()


def _utc(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(UTC)


def event_window(encounter: dict) -> tuple[datetime, datetime, str]:
    """Start, end and a sentence saying where the window comes from."""
    window = encounter.get("window")
    if isinstance(window, dict) and window.get("start_utc") and window.get("end_utc"):
        return (
            _utc(window["start_utc"]),
            _utc(window["end_utc"]),
            "Window: the activity window the forecast gives.",
        )
    peak = _utc(encounter["peak_utc"])
    fwhm_h = encounter.get("fwhm_hours") or 0.0
    half_min = max(60.0 * float(fwhm_h) / 2.0, MIN_HALF_WINDOW_MIN)
    half = timedelta(minutes=half_min)
    return (
        peak - half,
        peak + half,
        f"Window: peak +/- FWHM/2 ({half_min:.0f} min either side; FWHM of the simulated "
        f"meteoroids' Earth passage times, at least {MIN_HALF_WINDOW_MIN:.0f} min). This is "
        "not an activity profile: the activity model will replace it.",
    )


def _description(parent: str, e: dict, window_note: str, cautions: list[str]) -> str:
    trail = e.get("trail", {})
    radiant = e.get("radiant", {})
    lines = [
        f"Predicted encounter of Earth with the {trail.get('perihelion_year', '?')} dust trail of "
        f"{parent} ({trail.get('revolutions', '?')} revolutions old).",
        f"Peak: {e.get('peak_utc')} UTC, solar longitude {e.get('solar_longitude_deg')} deg "
        "(geometric, J2000).",
        f"Radiant: RA {radiant.get('ra_deg')} deg, Dec {radiant.get('dec_deg')} deg (J2000); "
        f"Vg {e.get('vg_km_s')} km/s.",
        f"Miss distance: {e.get('miss_distance_au')} au (+/- {e.get('miss_distance_spread_au')} "
        f"au), trail minus Earth; FWHM {e.get('fwhm_hours')} h; {e.get('particles')} simulated "
        "meteoroids.",
    ]
    zhr = e.get("zhr")
    if zhr is not None:
        lines.append(f"ZHR: {json.dumps(zhr)}")
    lines.append(window_note)
    lines += [f"Caution: {c}" for c in cautions]
    return "\n".join(lines)


def encounters_ics(
    items: list[tuple[str, int, str, dict, str | None]],
    calendar_name: str,
    cautions: list[str],
) -> bytes:
    """An iCalendar of ``(forecast_id, index, parent, encounter, finished_utc)`` items."""
    cal = Calendar()
    cal.add("prodid", f"-//trailcast//trailcast {__version__}//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    cal.add("method", "PUBLISH")
    cal.add("x-wr-calname", one_line(calendar_name))
    cal.add(
        "x-wr-caldesc",
        "Predicted meteor-shower encounters with comet dust trails. " + " ".join(cautions),
    )
    for forecast_id, idx, parent, e, finished_utc in items:
        parent = one_line(parent)
        start, end, note = event_window(e)
        ev = Event()
        ev.add("uid", f"{forecast_id}-{idx}@trailcast")
        ev.add("dtstamp", _utc(finished_utc) if finished_utc else datetime.now(UTC))
        ev.add("dtstart", start)
        ev.add("dtend", end)
        trail = e.get("trail", {})
        ev.add(
            "summary",
            f"Possible meteor outburst: {parent}, {trail.get('perihelion_year', '?')} trail",
        )
        ev.add("description", _description(parent, e, note, cautions))
        ev.add("categories", ["Meteor forecast"])
        ev.add("transp", "TRANSPARENT")
        cal.add_component(ev)
    return cal.to_ical()
