"""Liveness, readiness and version: the routes a process supervisor and a dashboard poll."""

import platform
import sqlite3

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field

from dynamics import __version__
from dynamics.ephemeris import ephemeris_info

from .. import storage

router = APIRouter(tags=["system"])


class HealthOut(BaseModel):
    status: str = Field(..., examples=["ok"])


class VersionOut(BaseModel):
    name: str = Field("trailcast", examples=["trailcast"])
    version: str = Field(..., examples=[__version__])
    python: str = Field(..., examples=["3.11.7"])
    libraries: dict[str, str] = Field(..., description="Versions of the numerical libraries used.")
    ephemeris: dict = Field(..., description="Planetary ephemeris and its span.")
    schema_version: int = Field(..., description="Database schema version this build expects.")


class ReadyOut(BaseModel):
    status: str = Field(..., examples=["ready"])
    database: str = Field(..., examples=["ok"])
    schema_version: int


@router.get("/health", response_model=HealthOut, summary="Liveness: the process answers")
def get_health() -> HealthOut:
    return HealthOut(status="ok")


@router.get(
    "/ready",
    response_model=ReadyOut,
    summary="Readiness: the database answers",
    responses={503: {"description": "Database unreachable (problem+json)"}},
)
def get_ready(request: Request):
    from ..problems import problem

    try:
        version = request.app.state.db.execute("PRAGMA user_version").fetchone()[0]
    except (sqlite3.Error, AttributeError) as exc:
        return problem(503, "Service Unavailable", f"database not reachable: {exc}")
    return ReadyOut(status="ready", database="ok", schema_version=version)


@router.get(
    "/version", response_model=VersionOut, summary="Versions of trailcast and its libraries"
)
def get_version() -> VersionOut:
    return VersionOut(
        version=__version__,
        python=platform.python_version(),
        libraries=_library_versions(),
        ephemeris=ephemeris_info(),
        schema_version=storage.schema_version(),
    )


def _library_versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    out = {}
    for dist in (
        "numpy",
        "scipy",
        "pyerfa",
        "jplephem",
        "de423",
        "rebound",
        "reboundx",
        "fastapi",
        "pydantic",
    ):
        try:
            out[dist] = version(dist)
        except PackageNotFoundError:
            out[dist] = "not installed"
    return out
