"""The FastAPI application: settings, storage, routers and problem handlers wired together."""

from contextlib import asynccontextmanager

from fastapi import FastAPI, Request

from dynamics import __version__

from . import storage
from .problems import install_problem_handlers, problem
from .routers import geometry, system
from .settings import Settings, get_settings

DESCRIPTION = """\
trailcast predicts meteor-shower outbursts from the orbits of parent comets.

Units: au, km/s, degrees; times ISO 8601 UTC (`Z`); solar longitudes referred to the equinox
J2000.0. Errors are RFC 9457 `application/problem+json`.

**Cautions.** Predictions are model estimates with real uncertainty, above all in intensity.
Spacecraft operators: defer to the responsible agencies' meteoroid environment assessments.
Observers: follow the usual night-time and outdoor safety practice.
"""


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the application; ``settings`` defaults to the environment's."""
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        app.state.db = storage.connect(settings.database_path)
        try:
            yield
        finally:
            app.state.db.close()

    app = FastAPI(
        title="trailcast",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
        openapi_url="/openapi.json",
    )
    app.state.settings = settings
    app.dependency_overrides[get_settings] = lambda: settings
    install_problem_handlers(app)

    @app.middleware("http")
    async def limit_body_size(request: Request, call_next):
        length = request.headers.get("content-length")
        if length is not None and length.isdigit() and int(length) > settings.max_body_bytes:
            return problem(
                413, "Content Too Large", f"request body above {settings.max_body_bytes} bytes"
            )
        return await call_next(request)

    app.include_router(system.router)
    app.include_router(geometry.router)
    return app
