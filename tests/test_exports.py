"""Human exports in process: the iCalendar read back with the general-purpose ``icalendar``
library (RFC 5545) reads in words, the encounters CSV read back with Python's ``csv`` module has
one value per column, the profiles CSV holds every profile point, and both screening CSVs (CLI
and API) number orbits from 1, as the lines of a batch file.

The encounters are the hand-made stored result of ``test_dashboard_plots`` (numbers chosen there,
not computed); the checks are on wording and layout, not on physics.
"""

import csv
import io

import icalendar
import pytest
from test_dashboard_plots import (
    N_2013,
    N_2026,
    PARENT,
    _result,
    client_with_jobs,  # noqa: F401 - the fixture, shared
)

from service import exports
from service.screening import table_csv


def _rows(result: dict) -> list[dict]:
    return [
        {"forecast_id": "f" * 32, "parent": PARENT, "kind": exports.kind_of(e, key), **e}
        for key in ("encounters", "near_misses")
        for e in result[key]
    ]


@pytest.mark.parametrize(
    ("x", "text"),
    [
        # Two significant figures (exports.ZHR_SIGNIFICANT_FIGURES), thousands separated.
        (408.0, "410"),
        (68.0, "68"),
        (2448.0, "2,400"),
        (12_345.0, "12,000"),
        (0.52, "0.52"),
        (7.0, "7.0"),
        (0.0, "0"),
    ],
)
def test_numbers_in_words_keep_two_significant_figures(x, text):
    assert exports.rounded(x) == text


def test_calendar_events_read_in_words():
    result = _result()
    items = [("f" * 32, k, PARENT, e, None) for k, e in enumerate(result["encounters"])]
    cal = icalendar.Calendar.from_ical(exports.encounters_ics(items, "t", ["Be careful."]))
    events = list(cal.walk("VEVENT"))
    assert len(events) == 2
    by_trail = {str(ev.get("summary")).split(", ")[1]: ev for ev in events}
    # The 1975 trail: ZHR 300 (50-1800) in the hand-made result, 5 revolutions.
    ev = by_trail["1975 trail"]
    assert str(ev.get("summary")) == (
        f"Possible meteor outburst: {PARENT}, 1975 trail, ZHR about 300 (50-1,800)"
    )
    text = str(ev.get("description"))
    assert "shed at its 1975 perihelion (5 revolutions ago)" in text
    assert "Peak: 2039-04-11 08:20 UTC (solar longitude 21.500 deg" in text
    assert "ZHR about 300 (50-1,800), a model estimate (absolute mode)." in text
    assert "From 2039-04-11 07:30 UTC to 2039-04-11 09:30 UTC." in text
    assert "Window: the predicted activity window" in text
    assert "Radiant: RA 235.1 deg, Dec +57.20 deg (J2000)" in text
    assert "Caution: Be careful." in text
    # No raw JSON, no promise of a model that has already run.
    assert "{" not in text and '"estimate"' not in text and '"low"' not in text
    assert "will replace" not in text
    # One revolution is singular.
    text = str(by_trail["2026 trail"].get("description"))
    assert "(1 revolution ago)" in text and "1 revolutions" not in text


def test_calendars_hold_encounters_only():
    # A stored crossing whose classification is not "encounter" (an older result labelled on
    # reading) gets no event: a calendar entry promises an outburst.
    result = _result()
    weak = dict(result["encounters"][1], classification={"label": "negligible", "reason": "r"})
    items = [
        ("f" * 32, 0, PARENT, result["encounters"][0], None),
        ("f" * 32, 1, PARENT, weak, None),
    ]
    cal = icalendar.Calendar.from_ical(exports.encounters_ics(items, "t", []))
    assert [str(ev.get("summary")).split(", ")[1] for ev in cal.walk("VEVENT")] == ["1975 trail"]


def test_calendar_window_without_an_activity_window_says_why():
    e = _result()["near_misses"][0]  # ZHR 0.5: below the window's floor, window null
    start, end, note = exports.event_window(e)
    # fwhm_hours 0.8 in the hand-made result: 24 min either side of the peak.
    assert (end - start).total_seconds() == 2 * 24 * 60
    assert "activity stays too low for an activity window" in note
    assert "24 min" in note and "will replace" not in note
    e = {k: v for k, v in e.items() if k not in ("zhr", "window", "profile")}
    assert "no activity profile" in exports.event_window(e)[2]


def test_encounters_csv_has_one_value_per_column():
    result = _result()
    text = exports.encounters_csv(_rows(result))
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 3
    columns = list(rows[0])
    assert "profile" not in columns and "window" not in columns
    assert {"window.start_utc", "window.end_utc", "zhr.estimate", "zhr.low"} <= set(columns)
    for row in rows:
        for key, value in row.items():
            assert not value.startswith(("[", "{")), (key, value)
    near = next(r for r in rows if r["trail.perihelion_year"] == "2013")
    assert near["kind"] == "near_miss"  # no classification in the hand-made result: its list
    assert near["window.start_utc"] == "" and float(near["zhr.estimate"]) == 0.5
    enc = next(r for r in rows if r["trail.perihelion_year"] == "2026")
    assert enc["window.start_utc"] == "2040-04-11T07:30:00Z"


def test_profiles_csv_has_every_profile_point():
    result = _result()
    rows = list(csv.DictReader(io.StringIO(exports.profiles_csv(_rows(result)))))
    assert tuple(rows[0]) == exports.PROFILE_COLUMNS
    n_points = sum(len(e["profile"]) for k in ("encounters", "near_misses") for e in result[k])
    assert len(rows) == n_points == 15
    trail_2026 = [r for r in rows if r["trail.perihelion_year"] == "2026"]
    assert [float(r["zhr"]) for r in trail_2026] == [0.0, 30.0, 120.0, 30.0, 0.0]
    assert trail_2026[2]["time_utc"] == "2040-04-11T08:00:00Z"


def test_profiles_csv_route(client_with_jobs):  # noqa: F811 - the imported fixture
    client, done_id, queued_id = client_with_jobs
    index = client.get(f"/v1/forecasts/{done_id}/plots").json()
    r = client.get(index["profiles_csv"])
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "Spacecraft operators" in r.headers["trailcast-cautions"]
    assert len(list(csv.DictReader(io.StringIO(r.text)))) == 15
    assert client.get(f"/v1/forecasts/{queued_id}/profiles.csv").status_code == 409
    # The encounters CSV of the same job: no list column, points counted per trail.
    rows = list(
        csv.DictReader(io.StringIO(client.get(f"/v1/forecasts/{done_id}/encounters.csv").text))
    )
    assert "profile" not in rows[0]
    assert sorted(int(r["particles"]) for r in rows) == sorted([N_2026, N_2013, 11])
    # Read through the store, each crossing is labelled by today's rule (level ZHR 10, common
    # practice, no source): the 2013 trail, 0.5 widths out at ZHR 0.5, is negligible, and says so.
    kinds = {r["trail.perihelion_year"]: r["kind"] for r in rows}
    assert kinds == {"1975": "encounter", "2026": "encounter", "2013": "negligible"}
    weak = next(r for r in rows if r["kind"] == "negligible")
    assert "predicted peak ZHR 0.5 is below 10" in weak["classification.reason"]


def test_screening_csv_numbers_orbits_from_one():
    # The CLI's table: `line` is the batch file's line number (first line = 1).
    records = [{"line": n, "verdict": "not a candidate"} for n in (1, 2, 5)]
    rows = list(csv.DictReader(io.StringIO(table_csv({"orbits": records}))))
    assert [r["line"] for r in rows] == ["1", "2", "5"]
