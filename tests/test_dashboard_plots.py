"""Server-side charts (service/plots.py) and their routes, in process: a hand-made stored result
with known numbers of meteoroids per trail, so that every plotted point can be counted in the
SVG; the PNG's size; the problem+json answers; the dashboard's files and their offline promise.
"""

import re
import struct
import xml.etree.ElementTree as ET

import pytest
from fastapi.testclient import TestClient

from service import plots
from service.jobs import JobStore, canonical_request
from service.main import create_app
from service.routers.dashboard import STATIC_DIR
from service.settings import Settings

SVG_NS = "{http://www.w3.org/2000/svg}"
PROBLEM = "application/problem+json"
PARENT = "P/2026 W3 (Hollow Pine) [invented demo comet]"


def _encounter(year, perihelion_year, revolutions, peak_utc, n, zhr, window=True):
    profile = [
        {"time_utc": f"{peak_utc[:11]}{h:02d}:00:00Z", "zhr": z}
        for h, z in zip(range(6, 11), (0.0, zhr / 4, zhr, zhr / 4, 0.0), strict=True)
    ]
    return {
        "year": year,
        "trail": {
            "perihelion_tdb": f"{perihelion_year}-10-30T06:00:00 TDB",
            "perihelion_year": perihelion_year,
            "revolutions": revolutions,
        },
        "node": "descending",
        "peak_utc": peak_utc,
        "solar_longitude_deg": 21.5,
        "miss_distance_au": 0.0002,
        "miss_distance_spread_au": 0.0004,
        "fwhm_hours": 0.8,
        "radiant": {"ra_deg": 235.1, "dec_deg": 57.2},
        "vg_km_s": 25.7,
        "vinf_km_s": 28.0,
        "particles": n,
        "dilution": 0.99,
        "population_index": 2.5,
        "zhr": {"estimate": zhr, "low": zhr / 6, "high": zhr * 6, "mode": "absolute"},
        "window": {"start_utc": f"{peak_utc[:11]}07:30:00Z", "end_utc": f"{peak_utc[:11]}09:30:00Z"}
        if window
        else None,
        "profile": profile,
    }


def _crossings(kind, index, e, n):
    day = e["peak_utc"][:11]
    return {
        "kind": kind,
        "index": index,
        "year": e["year"],
        "perihelion_year": e["trail"]["perihelion_year"],
        "revolutions": e["trail"]["revolutions"],
        "t_earth_utc": [f"{day}08:{k % 60:02d}:00Z" for k in range(n)],
        "solar_longitude_deg": [21.5 + 0.0007 * k for k in range(n)],
        "miss_distance_au": [0.0001 * ((k % 7) - 3) for k in range(n)],
        "ra_deg": [235.0 + 0.01 * (k % 5) for k in range(n)],
        "dec_deg": [57.2 + 0.01 * (k % 3) for k in range(n)],
    }


#: Points per trail, chosen unequal so that a mix-up between trails shows.
N_2026, N_2013, N_1975 = 23, 17, 11


def _result() -> dict:
    enc = _encounter(2040, 2026, 1, "2040-04-11T08:30:00Z", N_2026, 120.0)
    near = _encounter(2040, 2013, 2, "2040-04-11T08:50:00Z", N_2013, 0.5, window=False)
    other = _encounter(2039, 1975, 5, "2039-04-11T08:20:00Z", N_1975, 300.0)
    return {
        "parent": {"name": PARENT},
        "model": {"options": {"years": [2039, 2041]}},
        "conventions": {},
        "encounters": [other, enc],
        "near_misses": [near],
        "notes": [],
        "cautions": ["Predictions are model estimates."],
        "particle_crossings": [
            _crossings("encounter", 0, other, N_1975),
            _crossings("encounter", 1, enc, N_2026),
            _crossings("near_miss", 0, near, N_2013),
        ],
    }


def _svg(body: bytes) -> ET.Element:
    return ET.fromstring(body)


def _group(root: ET.Element, gid: str) -> ET.Element | None:
    return next((g for g in root.iter(f"{SVG_NS}g") if g.get("id") == gid), None)


def _texts(root: ET.Element) -> str:
    return " ".join("".join(t.itertext()) for t in root.iter(f"{SVG_NS}text"))


def test_crossing_chart_plots_every_meteoroid_of_every_trail_in_the_year():
    root = _svg(plots.render(_result(), "crossings", 2040, "svg"))
    trail_groups = [g for g in root.iter(f"{SVG_NS}g") if g.get("id", "").startswith("trail-")]
    assert sorted(g.get("id") for g in trail_groups) == ["trail-2013", "trail-2026"]
    assert len(_group(root, "trail-2026").findall(f".//{SVG_NS}use")) == N_2026
    assert len(_group(root, "trail-2013").findall(f".//{SVG_NS}use")) == N_2013
    assert _group(root, "earth-path") is not None
    text = _texts(root)
    assert "miss distance, trail minus Earth (au)" in text
    assert "(UTC)" in text and "solar longitude λ☉ (deg" in text
    # The legend names each trail by ejection year and revolutions.
    assert "2026 trail (1 rev), encounter" in text and "2013 trail (2 rev), near miss" in text


def test_profile_chart_has_band_and_window_and_radiant_chart_every_radiant():
    result = _result()
    root = _svg(plots.render(result, "profile", 2040, "svg"))
    for gid in ("profile-2026", "band-2026", "window-2026", "profile-2013", "band-2013"):
        assert _group(root, gid) is not None, gid
    assert _group(root, "window-2013") is None  # that near miss has no window
    assert "ZHR (meteors per hour, zenithal)" in _texts(root) and "time (UTC)" in _texts(root)

    root = _svg(plots.render(result, "radiants", 2039, "svg"))
    assert len(_group(root, "radiants-1975").findall(f".//{SVG_NS}use")) == N_1975
    assert len(_group(root, "radiant-1975").findall(f".//{SVG_NS}use")) == 1
    text = _texts(root)
    assert "right ascension α (deg, J2000" in text and "declination δ (deg, J2000)" in text


def test_a_year_without_crossings_says_so_instead_of_an_empty_frame():
    root = _svg(plots.render(_result(), "crossings", 2041, "svg"))
    assert not [g for g in root.iter(f"{SVG_NS}g") if g.get("id", "").startswith("trail-")]
    assert "no trail crosses Earth's path" in _texts(root)


def test_trail_styles_stay_apart_without_colour():
    # Greyscale keeps marker shape and line dash: every one of the first eight trails has its
    # own pair, so trails can be told apart on a black-and-white print.
    result = {
        "encounters": [
            {"trail": {"perihelion_year": 1900 + 13 * k}, "year": 2040} for k in range(8)
        ],
        "near_misses": [],
    }
    styles = plots.trail_styles(result)
    assert len({(s["marker"], str(s["linestyle"])) for s in styles.values()}) == 8
    assert len({s["marker"] for s in styles.values()}) == 8


def test_png_is_a_png_of_the_documented_size():
    body = plots.render(_result(), "crossings", 2040, "png")
    assert body[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", body[16:24])  # IHDR (PNG specification, 11.2.2)
    assert (width, height) == (
        int(plots.FIGSIZE_IN[0] * plots.PNG_DPI),
        int(plots.FIGSIZE_IN[1] * plots.PNG_DPI),
    )


@pytest.fixture
def client_with_jobs(tmp_path):
    """A service that runs no jobs, holding one done forecast and one queued one."""
    app = create_app(Settings(data_dir=tmp_path, job_runners=0))
    with TestClient(app) as client:
        jobs: JobStore = app.state.jobs
        done, _ = jobs.submit(canonical_request({"name": PARENT}, 2039, 2041, {}), PARENT, 10)
        assert jobs.claim_next("test:0:runner").id == done.id
        assert jobs.finish_done(done.id, "test:0:runner", _result())
        queued, _ = jobs.submit(
            canonical_request({"name": PARENT}, 2040, 2040, {"seed": 2}), PARENT, 10
        )
        yield client, done.id, queued.id


def test_plot_routes_serve_svg_png_and_problems(client_with_jobs):
    client, done_id, queued_id = client_with_jobs
    index = client.get(f"/v1/forecasts/{done_id}/plots").json()
    assert index["years"] == [2039, 2040, 2041] and index["default_year"] == 2039
    assert index["particle_crossings"] is True
    assert len(index["plots"]) == 3 * 3
    link = next(p for p in index["plots"] if p["chart"] == "crossings" and p["year"] == 2040)

    r = client.get(link["links"]["svg"])
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    assert len(_group(_svg(r.content), "trail-2026").findall(f".//{SVG_NS}use")) == N_2026
    # The stored hand-made result has no classification: it is labelled on reading by today's
    # rule (dynamics.activity.classify_crossing, level ZHR 10, common practice, no source). The
    # 2013 trail passes 0.0002 au out with a spread of 0.0004 au (close) at ZHR 0.5: negligible.
    text = _texts(_svg(r.content))
    assert "2026 trail (1 rev), encounter" in text and "2013 trail (2 rev), negligible" in text
    r = client.get(link["links"]["png"] + "&download=true")
    assert r.status_code == 200 and r.headers["content-type"] == "image/png"
    assert r.headers["content-disposition"].startswith("attachment;")
    assert r.content[:4] == b"\x89PNG"

    for url, status, field in (
        ("/v1/forecasts/" + "0" * 32 + "/plots/crossings.svg", 404, None),
        (f"/v1/forecasts/{queued_id}/plots/crossings.svg", 409, None),
        (f"/v1/forecasts/{queued_id}/plots", 409, None),
        (f"/v1/forecasts/{done_id}/plots/crossings.svg?year=2050", 422, "year"),
        (f"/v1/forecasts/{done_id}/plots/orbits.svg", 422, "chart"),
        (f"/v1/forecasts/{done_id}/plots/crossings.gif", 422, "fmt"),
    ):
        r = client.get(url)
        assert r.status_code == status and r.headers["content-type"].startswith(PROBLEM), url
        if field:
            assert r.json()["field"] == field


def test_dashboard_page_and_assets_are_served_and_load_nothing_from_elsewhere(client_with_jobs):
    client, _, _ = client_with_jobs
    r = client.get("/")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
    assert "Spacecraft operators" in r.text and "Observers" in r.text  # cautions on the page
    for name, media in (("dashboard.js", "javascript"), ("dashboard.css", "text/css")):
        asset = client.get(f"/static/{name}")
        assert asset.status_code == 200 and media in asset.headers["content-type"]
    # Every URL the page's files name is relative to this service: no scheme, no other host.
    # A weak, textual check: the browser test records every request the page really makes.
    for path in STATIC_DIR.iterdir():
        text = path.read_text(encoding="utf-8")
        for url in re.findall(r"""(?:src|href)=["']([^"']*)["']|url\(["']?([^"')]*)""", text):
            url = "".join(url)
            assert url.startswith(("/", "#", "data:")), (path.name, url)
        assert not re.search(r"https?://", text), path.name
    assert client.get("/static/nothing.js").status_code == 404


def _late_evening_result() -> dict:
    """One encounter peaking at 23:20 UTC on 11 April 2039, its meteoroids passing from 23:00 on
    the 11th to 00:40 on the 12th: the axis must say April 11 (issue 14, point 3)."""
    e = _encounter(2039, 1975, 5, "2039-04-11T23:20:00Z", 50, 300.0)
    e["profile"] = [
        {"time_utc": t, "zhr": z}
        for t, z in (
            ("2039-04-11T22:20:00Z", 0.0),
            ("2039-04-11T22:50:00Z", 75.0),
            ("2039-04-11T23:20:00Z", 300.0),
            ("2039-04-11T23:50:00Z", 75.0),
            ("2039-04-12T00:20:00Z", 0.0),
        )
    ]
    e["window"] = {"start_utc": "2039-04-11T22:50:00Z", "end_utc": "2039-04-11T23:50:00Z"}
    c = _crossings("encounter", 0, e, 50)
    c["t_earth_utc"] = [
        f"2039-04-{11 + (23 * 60 + 2 * k) // 1440:02d}T"
        f"{((23 * 60 + 2 * k) % 1440) // 60:02d}:{(2 * k) % 60:02d}:00Z"
        for k in range(50)
    ]
    return {
        "parent": {"name": PARENT},
        "model": {"options": {"years": [2039, 2039]}},
        "encounters": [e],
        "near_misses": [],
        "particle_crossings": [c],
    }


@pytest.mark.parametrize("size", ["wide", "narrow"])
@pytest.mark.parametrize("chart", ["crossings", "profile"])
def test_time_axes_name_the_peak_date(chart, size):
    result = _late_evening_result()
    assert result["particle_crossings"][0]["t_earth_utc"][-1] == "2039-04-12T00:38:00Z"
    text = _texts(_svg(plots.render(result, chart, 2039, "svg", size)))
    # The peak, to the minute, and the day it falls on (11 April, not the 12th the axis reaches).
    assert "peak 2039-04-11 23:20 UTC" in text
    assert "Apr 11" in text
    if chart == "crossings":  # the meteoroids pass until after midnight: the new day is named
        assert "Apr 12" in text
    # No corner offset label of the 12th (what the issue saw).
    assert "2039-Apr-12" not in text


def test_the_formatter_puts_the_date_under_the_first_tick_and_at_day_changes():
    from datetime import UTC, datetime

    from matplotlib import dates as mdates

    ticks = [
        mdates.date2num(datetime(2039, 4, d, h, 0, tzinfo=UTC))
        for d, h in ((11, 22), (11, 23), (12, 0), (12, 1))
    ]
    assert plots.UtcDayFormatter().format_ticks(ticks) == [
        "22:00\nApr 11",
        "23:00",
        "00:00\nApr 12",
        "01:00",
    ]
    days = [mdates.date2num(datetime(2039, 4, d, tzinfo=UTC)) for d in (10, 11, 12)]
    assert plots.UtcDayFormatter().format_ticks(days) == ["Apr 10", "Apr 11", "Apr 12"]


#: Smallest text (px) on a phone: the narrow layout is drawn 331 pt wide for a box of 340-380
#: px, so 1 SVG unit shows as at least 1 px; 11 px is the size the issue asks for.
MIN_PHONE_TEXT_PX = 11.0
#: Widest narrow chart (SVG units = pt): the box on a 390 px phone (the page's margins and
#: the figure's padding take about 35 px, measured in the browser test).
MAX_NARROW_WIDTH_PT = 355.0


@pytest.mark.parametrize("chart", plots.CHARTS)
def test_narrow_charts_keep_text_readable_on_a_phone(chart):
    root = _svg(plots.render(_result(), chart, 2040, "svg", "narrow"))
    assert float(root.get("width").removesuffix("pt")) <= MAX_NARROW_WIDTH_PT
    sizes = [
        float(m.group(1))
        for t in root.iter(f"{SVG_NS}text")
        if (m := re.search(r"font-size:\s*([\d.]+)px", t.get("style", "")))
    ]
    assert sizes and min(sizes) >= MIN_PHONE_TEXT_PX, sorted(sizes)[:3]
    # The same points as the wide layout: only the drawing changes.
    if chart == "crossings":
        assert len(_group(root, "trail-2026").findall(f".//{SVG_NS}use")) == N_2026


def test_api_docs_pages_load_their_assets_from_this_service(client_with_jobs):
    # /docs and /redoc name only this service's URLs (the fastapi-offline package's copies of
    # Swagger UI and ReDoc), each of which answers; the browser test renders /docs offline.
    client, _, _ = client_with_jobs
    for page in ("/docs", "/redoc"):
        r = client.get(page)
        assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
        urls = re.findall(r"""(?:src|href|spec-url)=["']([^"']+)["']""", r.text)
        assert urls and not re.search(r"https?://", r.text), page
        for url in urls:
            assert url.startswith(("/", "data:")), (page, url)
            if url.startswith("/"):
                asset = client.get(url)
                assert asset.status_code == 200 and len(asset.content) > 1000, url
