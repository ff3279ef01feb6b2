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


def encounters_csv(rows: list[dict]) -> str:
    """CSV text of flat rows: leading columns first, then every other key, sorted."""
    flat = [flatten(r) for r in rows]
    keys = set().union(*flat) if flat else set(_LEADING_COLUMNS)
    columns = [c for c in _LEADING_COLUMNS if c in keys] + sorted(keys - set(_LEADING_COLUMNS))
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=columns, lineterminator="\r\n")
    writer.writeheader()
    for r in flat:
        writer.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in columns})
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
    site=None,
) -> bytes:
    """An iCalendar of ``(forecast_id, index, parent, encounter, finished_utc)`` items.

    With a ``site`` (:class:`dynamics.observing.Site`) each description ends with
    :func:`site_lines`.
    """
    cal = Calendar()
    cal.add("prodid", f"-//trailcast//trailcast {__version__}//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    cal.add("method", "PUBLISH")
    cal.add("x-wr-calname", calendar_name)
    cal.add(
        "x-wr-caldesc",
        "Predicted meteor-shower encounters with comet dust trails. " + " ".join(cautions),
    )
    for forecast_id, idx, parent, e, finished_utc in items:
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
        description = _description(parent, e, note, cautions)
        if site is not None:
            description += "\n" + "\n".join(site_lines(e, site))
        ev.add("description", description)
        ev.add("categories", ["Meteor forecast"])
        ev.add("transp", "TRANSPARENT")
        cal.add_component(ev)
    return cal.to_ical()


# --- per-site lines (issue 15): appended to each event, never rewriting the text above ---------


def site_lines(encounter: dict, site) -> list[str]:
    """What an observer at ``site`` needs in a calendar event: observable or not at the peak, the
    expected hourly rate (lm 6.5, radiant >= 20 deg and Sun <= -12 deg for "observable") and
    when the radiant rises, from :func:`dynamics.observing.site_encounter_view`."""
    from dynamics import observing

    where = f"{site.lat_deg:.3f}, {site.lon_deg:.3f}"
    v = observing.site_encounter_view(encounter, site, timeline=False)
    p = v["at_peak"]
    lines = [f"At your site ({where}): {v['verdict']}."]
    if p["hourly_rate"] is not None:
        lines.append(
            f"Expected hourly rate at the peak: {observing.rate_text(p['hourly_rate'])} "
            f"(lm {observing.DEFAULT_LIMITING_MAGNITUDE:g}; radiant {p['radiant_alt_deg']:.0f} deg "
            f"high, Sun {p['sun_alt_deg']:.0f} deg, {p['sky']})."
        )
    radiant = [x for x in v["events"] if x["event"].startswith("radiant")]
    if v.get("radiant_in_span"):
        lines.append(f"Radiant: {v['radiant_in_span']} within 9 h of the peak.")
    if radiant:
        lines.append(
            "Radiant (UTC, within 9 h of the peak): "
            + "; ".join(f"{x['event'].removeprefix('radiant ')} {x['time_utc']}" for x in radiant)
            + "."
        )
    lines.append(
        f"Moon at the peak: {p['moon_alt_deg']:.0f} deg high, "
        f"{100 * p['moon_illuminated_fraction']:.0f} % lit, "
        f"{p['moon_radiant_separation_deg']:.0f} deg from the radiant (not in the rate)."
    )
    lines.append("Caution: " + observing.OBSERVING_CAUTIONS[0])
    lines.append("Caution: " + observing.OBSERVING_CAUTIONS[2])
    return lines
