"""The dashboard's observing panel in a real browser (Debian's Chromium through Playwright, as in
test_dashboard_browser.py): for a stored done forecast (the invented demo comet's 2039 result
from examples/), the world map and its regions, a site's chart and numbers, and the form's
messages equal to the API's, at 1280x800 and 390x844. Screenshots go to
test-artifacts/dashboard/.
"""

import json
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient
from playwright import sync_api as playwright_api
from test_dashboard_browser import (
    ARTIFACTS,
    CHROMIUM,
    CHROMIUM_ARGS,
    WAIT_MS,
    Requests,
    _no_horizontal_scroll,
    _shot,
    pytestmark,  # noqa: F401  (skipped without Chromium outside CI, as the dashboard test)
)
from test_jobs_http import Server

from service.jobs import canonical_request
from service.main import create_app
from service.settings import Settings

RESULT = json.loads(
    (Path(__file__).resolve().parents[1] / "examples" / "demo-forecast-2039.json").read_text()
)
PARENT = RESULT["parent"]["name"]
#: A site where the demo peak is observable (radiant 68 deg high at night) and one where it is
#: not (radiant below the horizon): plain coordinates, no real observatory.
SITES = {"north": ("50", "10"), "south": ("-33.9", "18.4")}


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """`trailcast serve` over a database that already holds the demo result as a done job."""
    data = tmp_path_factory.mktemp("observing-browser") / "var"
    data.mkdir()
    app = create_app(Settings(data_dir=data, job_runners=0))
    with TestClient(app):
        jobs = app.state.jobs
        job, _ = jobs.submit(canonical_request({"name": PARENT}, 2039, 2039, {}), PARENT, 10)
        assert jobs.claim_next("test:0:runner").id == job.id
        assert jobs.finish_done(job.id, "test:0:runner", RESULT)
    server = Server(data, TRAILCAST_JOB_RUNNERS="0")
    try:
        yield server, job.id
    finally:
        server.stop()


@pytest.mark.slow
@pytest.mark.parametrize(("width", "height"), [(1280, 800), (390, 844)])
def test_map_and_site_chart_render_in_the_forecast_view(served, width, height):
    server, job_id = served
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    with playwright_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            context = browser.new_context(viewport={"width": width, "height": height})
            requests = Requests(context, server.url)
            page = context.new_page()
            errors: list[str] = []
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.goto(f"{server.url}/#/forecasts/{job_id}")
            page.wait_for_selector("#fc-done:not([hidden])", timeout=WAIT_MS)

            # The world map: drawn (its rate layer and coastlines are in the SVG), with regions.
            page.wait_for_selector("#obs-map .obs-svg svg #observable-rate", timeout=WAIT_MS)
            assert page.locator("#obs-map .obs-svg svg #coastlines").count() == 1
            api_map = httpx.get(f"{server.url}/v1/forecasts/{job_id}/map/0", timeout=60).json()
            page.wait_for_selector("#obs-regions li")
            shown = page.locator("#obs-regions li").all_inner_texts()
            assert shown[: len(api_map["regions"])] == [r["text"] for r in api_map["regions"]]
            assert "company" in page.inner_text("#obs-cautions")

            # A bad site is refused in the API's own words, before any request.
            page.fill("#obs-lat", "95")
            page.fill("#obs-lon", "10")
            page.click("#obs-site-button")
            api = httpx.get(
                f"{server.url}/v1/forecasts/{job_id}/visibility?lat=95&lon=10", timeout=60
            )
            page.locator("#obs-site-error").wait_for(state="visible")
            assert page.inner_text("#obs-site-error") == api.json()["detail"]

            # A site where the peak is observable, then one where it is not.
            for name, (lat, lon) in SITES.items():
                page.fill("#obs-lat", lat)
                page.fill("#obs-lon", lon)
                page.click("#obs-site-button")
                api = httpx.get(
                    f"{server.url}/v1/forecasts/{job_id}/visibility?lat={lat}&lon={lon}"
                    "&timeline=false",
                    timeout=60,
                ).json()
                verdict = api["encounters"][0]["verdict"]
                page.wait_for_selector(f"#obs-verdict:has-text('At {float(lat):g}°')")
                assert page.inner_text("#obs-verdict").endswith(verdict + ".")
                page.wait_for_selector(
                    f"#obs-chart .obs-svg svg:has(#hourly-rate) >> text=/{float(lat):.2f}°/",
                    timeout=WAIT_MS,
                )
                assert page.locator("#obs-events li").count() == len(api["encounters"][0]["events"])
                ics = page.get_attribute("#obs-ics", "href")
                assert ics == f"/v1/forecasts/{job_id}/encounters.ics?lat={lat}&lon={lon}"
                _shot(page, f"observing-{name}-{width}x{height}")
                page.locator("#observing-panel").screenshot(
                    path=str(ARTIFACTS / f"observing-panel-{name}-{width}x{height}.png")
                )

            # The charts fit the screen; nothing scrolls sideways; nothing left loopback.
            for fig in ("#obs-map", "#obs-chart"):
                assert page.locator(f"{fig} .obs-svg svg").bounding_box()["width"] <= width
            assert _no_horizontal_scroll(page)
            assert requests.refused == [] and requests.hosts() <= {"127.0.0.1"}
            assert errors == []
        finally:
            browser.close()
