"""Encounters as CSV (one row each, one value per column), their activity profiles as a second
CSV (one row per profile point), and encounters as iCalendar (RFC 5545) events in words.

The encounters CSV passes through every scalar key the forecast JSON has, so fields added to
encounters later appear without a change here; nested objects become dotted columns
(``radiant.ra_deg``), and lists (the activity ``profile``) are left out: they have their own CSV
(:func:`profiles_csv`). An object that is ``null`` in some rows (``window`` when the predicted ZHR
stays below the window's floor) never becomes a column of its own beside its dotted columns.

Each crossing's ``kind`` is its classification by predicted activity (``encounter``,
``negligible``, ``near_miss``; :func:`kind_of`), and calendars hold encounters only: a stored
crossing labelled otherwise (stored before crossings were classified by activity) gets no event.

The calendar event's window: an encounter's own activity ``window`` (``start_utc``/``end_utc``)
when the forecast gives one; otherwise the peak time plus and minus half the FWHM of the
simulated meteoroids' Earth passage times, which each event's description says in words.
"""

import csv
import io
import math
from datetime import UTC, datetime, timedelta

from icalendar import Calendar, Event

from dynamics import __version__

#: Shortest half-window of a calendar event (minutes), so that an event never has zero length.
MIN_HALF_WINDOW_MIN = 5.0
#: Significant figures of ZHR numbers in words: the model's uncertainty is a factor of several
#: (dynamics.activity.MODEL_UNCERTAINTY_FACTOR), so a third figure would claim too much
#: (common practice, no source).
ZHR_SIGNIFICANT_FIGURES = 2

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
    "zhr.estimate",
    "zhr.low",
    "zhr.high",
    "zhr.mode",
    "classification.reason",
    "window.start_utc",
    "window.end_utc",
)
#: Columns of the profiles CSV: which encounter (as in the encounters CSV), then one point.
PROFILE_COLUMNS = (
    "forecast_id",
    "parent",
    "kind",
    "year",
    "trail.perihelion_year",
    "trail.revolutions",
    "peak_utc",
    "time_utc",
    "zhr",
)


def kind_of(encounter: dict, listed_as: str) -> str:
    """A crossing's ``kind`` column: its classification label with ``_`` for spaces
    (``encounter``, ``negligible``, ``near_miss``); without one, the list it is in
    (``listed_as``: ``encounters`` or ``near_misses``).

    >>> kind_of({"classification": {"label": "near miss"}}, "near_misses")
    'near_miss'
    >>> kind_of({}, "encounters")
    'encounter'
    """
    c = encounter.get("classification")
    label = c.get("label") if isinstance(c, dict) else None
    if not label:
        label = "encounter" if listed_as == "encounters" else "near miss"
    return label.replace(" ", "_")


def flatten(obj: dict, prefix: str = "") -> dict:
    """``{"radiant": {"ra_deg": 1}}`` -> ``{"radiant.ra_deg": 1}``; lists are left out."""
    out = {}
    for key, value in obj.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out.update(flatten(value, name + "."))
        elif isinstance(value, list):
            continue  # one value per column: lists get their own CSV (profiles_csv)
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
    """CSV text of flat rows: leading columns first, then every other scalar key, sorted.

    A key that is ``null`` in a row and an object with dotted columns in another (``window``)
    keeps only its dotted columns, left empty where the object is ``null``.
    """
    flat = [flatten(r) for r in rows]
    keys = set().union(*flat) if flat else set(_LEADING_COLUMNS)
    parents = {k.rsplit(".", 1)[0] for k in keys if "." in k}
    keys = {k for k in keys if k not in parents}
    columns = [c for c in _LEADING_COLUMNS if c in keys] + sorted(keys - set(_LEADING_COLUMNS))
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=columns, lineterminator="\r\n")
    writer.writeheader()
    for r in flat:
        writer.writerow({k: csv_cell(r.get(k)) for k in columns})
    return buf.getvalue()


def profiles_csv(rows: list[dict]) -> str:
    """One row per point of each encounter's activity profile (:data:`PROFILE_COLUMNS`).

    ``rows`` as for :func:`encounters_csv` (``forecast_id``, ``parent``, ``kind`` and the
    encounter's keys); encounters without a profile add no row.
    """
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=PROFILE_COLUMNS, lineterminator="\r\n")
    writer.writeheader()
    for r in rows:
        trail = r.get("trail") or {}
        for point in r.get("profile") or []:
            writer.writerow(
                {
                    "forecast_id": r.get("forecast_id"),
                    "parent": r.get("parent"),
                    "kind": r.get("kind"),
                    "year": r.get("year"),
                    "trail.perihelion_year": trail.get("perihelion_year"),
                    "trail.revolutions": trail.get("revolutions"),
                    "peak_utc": r.get("peak_utc"),
                    "time_utc": point.get("time_utc"),
                    "zhr": point.get("zhr"),
                }
            )
    return buf.getvalue()


def _utc(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(UTC)


def _when(t: datetime) -> str:
    return t.strftime("%Y-%m-%d %H:%M UTC")


def rounded(x: float, figures: int = ZHR_SIGNIFICANT_FIGURES) -> str:
    """A positive number to ``figures`` significant figures, with thousands separators.

    >>> rounded(408.0), rounded(68.0), rounded(2448.0), rounded(0.52), rounded(0.0)
    ('410', '68', '2,400', '0.52', '0')
    """
    if not (isinstance(x, int | float) and math.isfinite(x)) or x == 0:
        return "0"
    digits = figures - 1 - math.floor(math.log10(abs(x)))
    value = round(x, digits)
    return f"{value:,.{max(digits, 0)}f}"


def zhr_words(zhr) -> str | None:
    """``"ZHR about 410 (68-2,400)"`` from a ``zhr`` object, or None when there is none."""
    if not isinstance(zhr, dict) or not isinstance(zhr.get("estimate"), int | float):
        return None
    est = zhr["estimate"]
    low, high = zhr.get("low"), zhr.get("high")
    text = f"ZHR about {rounded(est)}"
    if isinstance(low, int | float) and isinstance(high, int | float):
        text += f" ({rounded(low)}-{rounded(high)})"
    return text


def revolutions_words(n) -> str:
    """``1 revolution``, ``2 revolutions``."""
    return f"{n} revolution" if n == 1 else f"{n} revolutions"


def _signed(x, digits: int) -> str:
    return f"{x:+.{digits}f}" if isinstance(x, int | float) else "?"


def event_window(encounter: dict) -> tuple[datetime, datetime, str]:
    """Start, end and a sentence saying where the window comes from."""
    window = encounter.get("window")
    if isinstance(window, dict) and window.get("start_utc") and window.get("end_utc"):
        return (
            _utc(window["start_utc"]),
            _utc(window["end_utc"]),
            "Window: the predicted activity window (where the activity profile stays above a "
            "tenth of its peak).",
        )
    peak = _utc(encounter["peak_utc"])
    fwhm_h = encounter.get("fwhm_hours") or 0.0
    half_min = max(60.0 * float(fwhm_h) / 2.0, MIN_HALF_WINDOW_MIN)
    half = timedelta(minutes=half_min)
    if isinstance(encounter.get("zhr"), dict):
        why = "the predicted activity stays too low for an activity window"
    else:
        why = "this forecast has no activity profile"
    return (
        peak - half,
        peak + half,
        f"Window: {why}, so the event spans the peak +/- {half_min:.0f} min (half the spread, "
        "FWHM, of the simulated meteoroids' times of Earth passage).",
    )


def event_summary(parent: str, e: dict) -> str:
    """``Possible meteor outburst: <parent>, 2026 trail, ZHR about 410 (68-2,400)``."""
    trail = e.get("trail", {})
    text = f"Possible meteor outburst: {parent}, {trail.get('perihelion_year', '?')} trail"
    zhr = zhr_words(e.get("zhr"))
    return f"{text}, {zhr}" if zhr else text


def event_description(parent: str, e: dict, window_note: str, cautions: list[str]) -> str:
    """The event's description in sentences: trail, peak, ZHR, window, radiant, distances."""
    trail = e.get("trail", {})
    radiant = e.get("radiant", {})
    start, end, _ = event_window(e)
    lines = [
        f"Earth meets the dust trail that {parent} shed at its "
        f"{trail.get('perihelion_year', '?')} perihelion "
        f"({revolutions_words(trail.get('revolutions', '?'))} ago).",
        f"Peak: {_when(_utc(e['peak_utc']))} (solar longitude "
        f"{e.get('solar_longitude_deg', float('nan')):.3f} deg, geometric J2000).",
    ]
    zhr = zhr_words(e.get("zhr"))
    if zhr:
        mode = (e.get("zhr") or {}).get("mode")
        lines.append(f"{zhr}, a model estimate" + (f" ({mode} mode)." if mode else "."))
    lines.append(f"From {_when(start)} to {_when(end)}. {window_note}")
    lines.append(
        f"Radiant: RA {radiant.get('ra_deg')} deg, Dec {_signed(radiant.get('dec_deg'), 2)} deg "
        f"(J2000); meteors enter at {e.get('vinf_km_s')} km/s (geocentric {e.get('vg_km_s')} "
        "km/s)."
    )
    lines.append(
        f"The trail passes {_signed(e.get('miss_distance_au'), 5)} au from Earth's path (trail "
        f"minus Earth; spread {e.get('miss_distance_spread_au')} au), from "
        f"{e.get('particles')} simulated meteoroids."
    )
    lines += [f"Caution: {c}" for c in cautions]
    return "\n".join(lines)


def encounters_ics(
    items: list[tuple[str, int, str, dict, str | None]],
    calendar_name: str,
    cautions: list[str],
    site=None,
) -> bytes:
    """An iCalendar of ``(forecast_id, index, parent, encounter, finished_utc)`` items: one
    event per item that is an encounter (:func:`kind_of`); others get none.

    With a ``site`` (:class:`dynamics.observing.Site`) each description ends with
    :func:`site_lines`.
    """
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
        if kind_of(e, "encounters") != "encounter":
            continue  # no outburst expected: no event in anyone's calendar
        parent = one_line(parent)
        start, end, note = event_window(e)
        ev = Event()
        ev.add("uid", f"{forecast_id}-{idx}@trailcast")
        ev.add("dtstamp", _utc(finished_utc) if finished_utc else datetime.now(UTC))
        ev.add("dtstart", start)
        ev.add("dtend", end)
        ev.add("summary", event_summary(parent, e))
        description = event_description(parent, e, note, cautions)
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
