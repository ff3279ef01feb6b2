"""The site view and world map through the API, the calendars and `trailcast observe`, in
process: the stored result is the demo comet's 2039 forecast (examples/, invented), and every
number shown is checked against :mod:`dynamics.observing` computed directly.
"""

import json
import struct
import xml.etree.ElementTree as ET
from pathlib import Path

import icalendar
import pytest
from fastapi.testclient import TestClient

from dynamics import observing as obs
from service import coastlines, observing_plots
from service.cli import main
from service.jobs import JobStore, canonical_request
from service.main import create_app
from service.settings import Settings

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO = EXAMPLES / "demo-forecast-2039.json"
RESULT = json.loads(DEMO.read_text())
PARENT = RESULT["parent"]["name"]
SVG_NS = "{http://www.w3.org/2000/svg}"
PROBLEM = "application/problem+json"


@pytest.fixture(scope="module")
def client(tmp_path_factory):
    """A service that runs no jobs, holding the demo result (done) and one queued job."""
    app = create_app(Settings(data_dir=tmp_path_factory.mktemp("observing"), job_runners=0))
    with TestClient(app) as c:
        jobs: JobStore = app.state.jobs
        done, _ = jobs.submit(canonical_request({"name": PARENT}, 2039, 2039, {}), PARENT, 10)
        assert jobs.claim_next("test:0:runner").id == done.id
        assert jobs.finish_done(done.id, "test:0:runner", RESULT)
        queued, _ = jobs.submit(canonical_request({"name": PARENT}, 2040, 2040, {}), PARENT, 10)
        yield c, done.id, queued.id


def _ids(body: bytes) -> set[str]:
    return {el.get("id") for el in ET.fromstring(body).iter() if el.get("id")}


def test_visibility_json_matches_the_numerical_core(client):
    c, done, _ = client
    r = c.get(f"/v1/forecasts/{done}/visibility?lat=50&lon=10&elevation_m=300&limiting_magnitude=6")
    assert r.status_code == 200
    body = r.json()
    direct = obs.site_encounter_view(
        obs.encounters_of(RESULT)[0], obs.Site(50, 10, 300), limiting_magnitude=6.0
    )
    assert body["encounters"][0]["at_peak"] == direct["at_peak"]
    assert body["thresholds"]["limiting_magnitude"] == 6.0
    assert any("company" in text for text in body["cautions"])
    assert body["links"]["svg"].startswith(f"/v1/forecasts/{done}/visibility.svg?lat=50&lon=10")


def test_site_chart_and_world_map_are_drawn_with_their_parts(client):
    c, done, _ = client
    r = c.get(f"/v1/forecasts/{done}/visibility.svg?lat=50&lon=10")
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    ids = _ids(r.content)
    assert {"hourly-rate", "radiant-altitude", "moon-altitude", "peak", "window"} <= ids
    assert any(i.startswith("sky-night") for i in ids) and any(i.startswith("moon-up") for i in ids)
    assert "expected meteors per hour (lm 6.5)" in r.text
    r = c.get(f"/v1/forecasts/{done}/map/0.svg")
    assert r.status_code == 200
    ids = _ids(r.content)
    assert {"observable-rate", "horizon-sun", "dark-limit", "moon-horizon", "sub-radiant"} <= ids
    assert "sub-lunar" in ids
    assert ("coastlines" in ids) == coastlines.available()
    r = c.get(f"/v1/forecasts/{done}/map/0.png?download=true")
    assert r.content[:4] == b"\x89PNG" and r.headers["content-disposition"].startswith("attachment")
    width, height = struct.unpack(">II", r.content[16:24])  # PNG IHDR (PNG spec. 11.2.2)
    assert (width, height) == (1000, 560)


def test_map_regions_in_words(client):
    c, done, _ = client
    body = c.get(f"/v1/forecasts/{done}/map/0").json()
    summary, grid = observing_plots.world_view(RESULT, 0)
    assert body["regions"] == summary["regions"] and body["regions"]
    # The peak at 23:20 UT with the radiant at Dec +57: best where it is high in the dark,
    # i.e. in the northern band of the sub-radiant latitude.
    top = body["regions"][0]
    assert (
        top["lat_from_deg"]
        <= RESULT["encounters"][0]["radiant"]["dec_deg"]
        < top["lat_to_deg"] + 10
    )
    assert "per hour" in top["text"] and "Eurasia" in top["land"]
    assert 0 < body["observable_fraction_of_earth"] < 0.5


def test_visibility_takes_several_sites_at_once(client):
    c, done, _ = client
    r = c.get(
        f"/v1/forecasts/{done}/visibility?lat=50&lon=10&site=-33.9,18.4&site=19.8,-155.5,4200"
        "&timeline=false"
    )
    assert r.status_code == 200
    body = r.json()
    assert [b["site"] for b in body["more_sites"]] == [
        {"lat_deg": -33.9, "lon_deg": 18.4, "elevation_m": 0.0},
        {"lat_deg": 19.8, "lon_deg": -155.5, "elevation_m": 4200.0},
    ]
    direct = obs.site_encounter_view(
        obs.encounters_of(RESULT)[0], obs.Site(-33.9, 18.4), timeline=False
    )
    assert body["more_sites"][0]["encounters"][0]["at_peak"] == direct["at_peak"]
    assert body["more_sites"][1]["links"]["svg"].endswith(
        "lat=19.8&lon=-155.5&elevation_m=4200&limiting_magnitude=6.5"
    )


@pytest.mark.parametrize(
    ("url", "status", "field"),
    [
        ("/visibility?lat=1&lon=1&site=95,1", 422, "site"),
        ("/visibility?lat=1&lon=1&site=north", 422, "site"),
        ("/visibility?lat=1&lon=1" + "&site=1,1" * 10, 422, "site"),
        ("/visibility?lat=91&lon=10", 422, "lat"),
        ("/visibility?lat=10&lon=-200", 422, "lon"),
        ("/visibility?lon=10", 422, "lat"),
        ("/visibility?lat=10&lon=10&limiting_magnitude=12", 422, "limiting_magnitude"),
        ("/visibility.svg?lat=10&lon=10&encounter=3", 422, "encounter"),
        ("/visibility.gif?lat=10&lon=10", 422, "fmt"),
        ("/map/5.svg", 404, "k"),
        ("/map/5", 404, "k"),
        ("/encounters.ics?lat=50", 422, "lon"),
    ],
)
def test_bad_input_is_problem_json_naming_the_field(client, url, status, field):
    c, done, _ = client
    r = c.get(f"/v1/forecasts/{done}{url}")
    assert r.status_code == status and r.headers["content-type"].startswith(PROBLEM)
    assert r.json()["field"] == field


def test_not_done_and_unknown_jobs(client):
    c, _, queued = client
    assert c.get(f"/v1/forecasts/{queued}/visibility?lat=1&lon=1").status_code == 409
    assert c.get(f"/v1/forecasts/{queued}/map/0.svg").status_code == 409
    assert c.get("/v1/forecasts/" + "0" * 32 + "/map/0").status_code == 404


def test_calendars_take_a_site(client):
    c, done, _ = client
    for url in (
        f"/v1/forecasts/{done}/encounters.ics?lat=50&lon=10",
        "/v1/encounters.ics?lat=50&lon=10",
    ):
        cal = icalendar.Calendar.from_ical(c.get(url).content)
        (event,) = [e for e in cal.walk("VEVENT")]
        text = str(event["description"])
        assert "At your site (50.000, 10.000): observable at the peak" in text
        assert "Expected hourly rate at the peak: 350" in text  # 376 sin(68.4 deg), lm 6.5
        assert "Radiant: always up" in text
    cal = icalendar.Calendar.from_ical(
        c.get(f"/v1/forecasts/{done}/encounters.ics?lat=-33.9&lon=18.4").content
    )
    text = str(next(iter(cal.walk("VEVENT")))["description"])
    assert "not observable at the peak: radiant below the horizon" in text
    plain = c.get(f"/v1/forecasts/{done}/encounters.ics").content
    assert b"At your site" not in plain


def test_openapi_documents_the_routes_with_problems(client):
    c, _, _ = client
    paths = c.get("/openapi.json").json()["paths"]
    for p in (
        "/v1/forecasts/{job_id}/visibility",
        "/v1/forecasts/{job_id}/visibility.{fmt}",
        "/v1/forecasts/{job_id}/map/{k}",
        "/v1/forecasts/{job_id}/map/{k}.{fmt}",
    ):
        responses = paths[p]["get"]["responses"]
        assert PROBLEM in responses["422"]["content"], p


# --- the command line ---------------------------------------------------------------------------


def test_observe_prints_regions_sites_and_cautions(capsys, tmp_path):
    code = main(
        [
            "observe",
            str(DEMO),
            "--site",
            "50,10,300",
            "--site=-33.9,18.4",
            "--charts",
            str(tmp_path / "charts"),
            "--format",
            "png",
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "best placed" in out and "per hour" in out
    assert "observable at the peak: radiant 68 deg high, night" in out
    assert "not observable at the peak: radiant below the horizon" in out
    assert "observe with company" in out
    written = sorted(p.name for p in (tmp_path / "charts").iterdir())
    assert written == ["map-0.png", "site--33.9_18.4-0.png", "site-50_10-0.png"]


def test_observe_json_matches_the_api(capsys):
    assert main(["observe", str(DEMO), "--site", "50,10", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    direct = obs.site_view(RESULT, [obs.Site(50, 10)])
    assert (
        out["sites"][0]["encounters"][0]["at_peak"]
        == direct["sites"][0]["encounters"][0]["at_peak"]
    )
    assert out["world"][0]["regions"]


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--site", "95,10"], "lat: latitude must be in [-90, 90]"),
        (["--site", "north,10"], "site: LAT,LON[,ELEV_M] must be numbers"),
        (["--limiting-magnitude", "11"], "--limiting-magnitude: must be in [1, 8]"),
    ],
)
def test_observe_bad_input_is_one_line_exit_2(capsys, args, message):
    assert main(["observe", str(DEMO), *args]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and message in err


def test_observe_refuses_what_is_not_a_forecast(capsys, tmp_path):
    bad = tmp_path / "orbit.json"
    bad.write_text(json.dumps({"name": "x"}))
    assert main(["observe", str(bad)]) == 2
    assert "not a forecast result" in capsys.readouterr().err
    assert main(["observe", str(tmp_path / "missing.json")]) == 2


@pytest.mark.reference
def test_coastline_land_mask_knows_land_from_sea():
    # Places (from memory, common geography): London, the Sahara, central Australia, Siberia and
    # Antarctica on land; the mid-Atlantic and the central Pacific at sea.
    lat = [51.5, 25.0, -25.0, 65.0, -80.0, 30.0, 0.0]
    lon = [-0.1, 15.0, 135.0, 100.0, 30.0, -40.0, -150.0]
    assert coastlines.land_mask(lat, lon).tolist() == [True] * 5 + [False] * 2
    # About 29 % of Earth's surface is land (common geography, from memory); crude shorelines
    # on a 2-degree grid: within 2 points.
    import numpy as np

    la, lo = np.meshgrid(np.arange(-89, 90, 2.0), np.arange(-179, 180, 2.0), indexing="ij")
    w = np.cos(np.radians(la))
    assert float((coastlines.land_mask(la, lo) * w).sum() / w.sum()) == pytest.approx(
        0.29, abs=0.02
    )


@pytest.mark.reference
def test_land_masses_are_named_where_they_are():
    # One point inside each named land mass (common geography, from memory: capitals, deserts,
    # plains, ice sheets); the names come from the GSHHG polygon ids (service/coastlines.py).
    places = {
        "Eurasia": (50.0, 80.0),
        "Africa": (0.0, 20.0),
        "North America": (40.0, -100.0),
        "South America": (-10.0, -60.0),
        "Antarctica": (-80.0, 30.0),
        "Australia": (-25.0, 135.0),
        "Greenland": (72.0, -40.0),
        "New Guinea": (-6.0, 143.0),
        "Borneo": (1.0, 114.0),
        "Madagascar": (-19.0, 47.0),
        "Baffin Island": (70.0, -72.0),
        "Sumatra": (0.0, 101.5),
        "Honshu": (35.7, 139.7),
        "Victoria Island": (71.0, -110.0),
        "": (30.0, -40.0),  # the mid-Atlantic
    }
    lat, lon = zip(*places.values(), strict=True)
    assert coastlines.land_names(lat, lon).tolist() == list(places)
    assert set(coastlines.LAND_NAMES.values()) == set(places) - {""}


def test_observe_reads_a_job_from_a_running_service(capsys, monkeypatch):
    # The job-id path: the command asks GET /v1/forecasts/{id} and observes its result. The HTTP
    # call is replaced here (tests/test_jobs_http.py covers the real client against a server).
    import service.cli as cli

    asked = []

    class Answer:
        def __init__(self, body):
            self.body = body

        def json(self):
            return self.body

    def fake_call(method, url, token=None, **kwargs):
        asked.append((method, url))
        state = "done" if url.endswith("a" * 32) else "running"
        return Answer({"state": state, "result": RESULT if state == "done" else None})

    monkeypatch.setattr(cli, "_service_call", fake_call)
    assert main(["observe", "a" * 32, "--url", "http://127.0.0.1:9", "--site", "50,10"]) == 0
    assert asked == [("GET", "http://127.0.0.1:9/v1/forecasts/" + "a" * 32)]
    assert "observable at the peak" in capsys.readouterr().out
    assert main(["observe", "b" * 32, "--url", "http://127.0.0.1:9"]) == 2
    assert "is running: no result to observe yet" in capsys.readouterr().err
