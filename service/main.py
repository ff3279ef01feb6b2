"""The FastAPI application: settings, storage, job runner, routers and problem handlers wired together."""

import time
from contextlib import asynccontextmanager

from fastapi import Depends, FastAPI, HTTPException
from fastapi.staticfiles import StaticFiles
from fastapi_offline import FastAPIOffline

from dynamics import __version__

from .jobs import JobStore
from .metrics import RequestLatencies
from .problems import TYPE_BASE, install_problem_handlers, problem
from .routers import (
    dashboard,
    encounters,
    forecasts,
    geometry,
    observing,
    plots,
    screenings,
    system,
)
from .runner import JobRunner
from .security import require_token
from .settings import Settings, get_settings
from .storage import Store

DESCRIPTION = """\
trailcast predicts meteor-shower outbursts from the orbits of parent comets.

Forecasts take minutes, so they are jobs: `POST /v1/forecasts` queues one and answers with its id;
`GET /v1/forecasts/{id}` shows progress and, when done, the result; CSV and iCalendar exports
follow. `GET /v1/encounters` lists every predicted encounter across stored forecasts.
`POST /v1/screenings` screens a batch of orbits (geometry for all, small trail forecasts for the
candidates) as a job with per-orbit progress; results as JSON and CSV.

Units: au, km/s, degrees; times ISO 8601 UTC (`Z`); solar longitudes referred to the equinox
J2000.0. Errors are RFC 9457 `application/problem+json`. When the server sets
`TRAILCAST_API_TOKEN`, POST and DELETE need `Authorization: Bearer <token>`.

**Cautions.** Predictions are model estimates with real uncertainty, above all in intensity.
Spacecraft operators: defer to the responsible agencies' meteoroid environment assessments.
Observers: follow the usual night-time and outdoor safety practice.
"""


#: Where the interactive API documentation's scripts and styles are served (fastapi-offline).
DOCS_ASSETS_URL = "/docs-assets"


class BodySizeLimit:
    """ASGI middleware: 413 problem+json for bodies above ``max_bytes``, declared or streamed."""

    def __init__(self, app, max_bytes: int):
        self.app = app
        self.max_bytes = max_bytes

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        headers = dict(scope.get("headers") or [])
        length = headers.get(b"content-length", b"").decode("latin-1")
        if length.isdigit() and int(length) > self.max_bytes:
            return await self._too_large(scope, receive, send)
        received = 0
        started = False

        async def limited_receive():
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.max_bytes:
                    raise _BodyTooLarge(self.max_bytes)
            return message

        async def tracking_send(message):
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except _BodyTooLarge:
            if not started:
                await self._too_large(scope, receive, send)

    async def _too_large(self, scope, receive, send):
        response = problem(
            413,
            "Content Too Large",
            f"request body above {self.max_bytes} bytes",
            TYPE_BASE + "body-too-large",
        )
        await response(scope, receive, send)


class RequestTiming:
    """ASGI middleware: each request's latency into :class:`service.metrics.RequestLatencies`."""

    def __init__(self, app, latencies: RequestLatencies):
        self.app = app
        self.latencies = latencies

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        t0 = time.perf_counter()
        status = 500

        async def timed_send(message):
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, timed_send)
        finally:
            route = scope.get("route")
            self.latencies.observe(
                scope["method"],
                getattr(route, "path", "unmatched"),
                status,
                time.perf_counter() - t0,
            )


class _BodyTooLarge(HTTPException):
    """Raised while reading a streamed body; an HTTPException so that FastAPI passes it on."""

    def __init__(self, max_bytes: int):
        super().__init__(413, f"request body above {max_bytes} bytes")


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the application; ``settings`` defaults to the environment's."""
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        store = Store(settings.database_path)
        app.state.store = store
        app.state.db = store.conn
        app.state.jobs = JobStore(store)  # every kind of job: forecasts, screenings
        app.state.runner = JobRunner(app.state.jobs, settings)
        app.state.runner.start()
        try:
            yield
        finally:
            app.state.runner.stop()
            geometry.close_workers(app)
            store.close()

    # /docs (Swagger UI) and /redoc from the assets that the fastapi-offline package installs,
    # not from a CDN: the pages work with no network, as the dashboard does.
    app: FastAPI = FastAPIOffline(
        title="trailcast",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
        openapi_url="/openapi.json",
        static_url=DOCS_ASSETS_URL,
        favicon_url="data:,",
    )
    app.state.settings = settings
    app.state.latencies = RequestLatencies()
    app.dependency_overrides[get_settings] = lambda: settings
    install_problem_handlers(app)

    app.add_middleware(RequestTiming, latencies=app.state.latencies)
    app.add_middleware(BodySizeLimit, max_bytes=settings.max_body_bytes)

    app.include_router(system.router)
    app.include_router(geometry.router, dependencies=[Depends(require_token)])
    app.include_router(forecasts.router)
    app.include_router(encounters.router)
    app.include_router(screenings.router)
    app.include_router(plots.router)
    app.include_router(observing.router)
    app.include_router(dashboard.router)
    app.mount("/static", StaticFiles(directory=dashboard.STATIC_DIR), name="static")
    _declare_problem_schema(app)
    return app


def _declare_problem_schema(app: FastAPI) -> None:
    """Put the Problem schema into the OpenAPI components (routes refer to it by $ref)."""
    from fastapi.openapi.utils import get_openapi

    from .problems import Problem, problem_responses

    def openapi():
        if app.openapi_schema:
            return app.openapi_schema
        schema = get_openapi(
            title=app.title,
            version=app.version,
            description=app.description,
            routes=app.routes,
        )
        components = schema.setdefault("components", {}).setdefault("schemas", {})
        components["Problem"] = Problem.model_json_schema(
            ref_template="#/components/schemas/{model}"
        )
        # Every error response is problem+json; routes that change state may also answer 401
        # (token) and 413 (body size), including the geometry route that predates both; a body
        # that cannot be decoded at all is 400.
        problem_content = problem_responses(400)[400]["content"]
        for item in schema.get("paths", {}).values():
            for method, op in item.items():
                responses = op.setdefault("responses", {})
                if method in ("post", "delete"):
                    for code, entry in problem_responses(401, 413).items():
                        responses.setdefault(str(code), entry)
                if "requestBody" in op:  # bytes that are not text at all
                    responses.setdefault("400", problem_responses(400)[400])
                for code, entry in responses.items():
                    if code[0] in "45":
                        entry["content"] = problem_content
        app.openapi_schema = schema
        return schema

    app.openapi = openapi
