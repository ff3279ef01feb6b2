"""RFC 9457 problem details: every error the service returns is ``application/problem+json``."""

from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from dynamics.errors import InvalidOrbit, InvalidTime, OutsideTimeSpan, TrailcastError

PROBLEM_MEDIA_TYPE = "application/problem+json"
_TYPE_BASE = "https://trailcast.invalid/problems/"  # stable identifiers, not fetched


TYPE_BASE = _TYPE_BASE


class Problem(BaseModel):
    """RFC 9457 problem details (``application/problem+json``)."""

    model_config = ConfigDict(
        extra="allow",
        json_schema_extra={
            "examples": [
                {
                    "type": _TYPE_BASE + "invalid-orbit",
                    "title": "Invalid orbit",
                    "status": 422,
                    "detail": "orbit.e: must be >= 0, got -1",
                    "field": "orbit.e",
                }
            ]
        },
    )

    type: str = Field("about:blank", description="URI identifying the kind of problem")
    title: str = Field(..., description="Short summary of the kind of problem")
    status: int = Field(..., description="HTTP status code")
    detail: str = Field(..., description="What went wrong this time")
    field: str | None = Field(None, description="Input field at fault (dotted path), if one")


_DESCRIPTIONS = {
    400: "Bad request (problem+json)",
    401: "Bearer token missing or wrong (problem+json)",
    404: "No such resource (problem+json)",
    409: "Conflicts with the resource's state (problem+json)",
    413: "Request body too large (problem+json)",
    422: "Invalid input, naming the field (problem+json)",
    429: "Job queue full; retry later (problem+json, Retry-After header)",
    503: "A dependency is unreachable (problem+json)",
}


def problem_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """OpenAPI ``responses`` entries declaring problem+json bodies for these status codes."""
    return {
        status: {
            "description": _DESCRIPTIONS.get(status, "Error (problem+json)"),
            "content": {PROBLEM_MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}},
        }
        for status in statuses
    }


class ProblemError(Exception):
    """Raise from a handler or dependency to answer with a problem+json response."""

    def __init__(
        self,
        status: int,
        title: str,
        detail: str,
        type_: str = "about:blank",
        headers: dict[str, str] | None = None,
        **extra,
    ):
        super().__init__(detail)
        self.status, self.title, self.detail, self.type_ = status, title, detail, type_
        self.headers = headers or {}
        self.extra = extra


def problem(
    status: int,
    title: str,
    detail: str,
    type_: str = "about:blank",
    headers: dict[str, str] | None = None,
    **extra,
) -> JSONResponse:
    """Build an RFC 9457 problem response."""
    body = {"type": type_, "title": title, "status": status, "detail": detail, **extra}
    return JSONResponse(body, status_code=status, media_type=PROBLEM_MEDIA_TYPE, headers=headers)


def install_problem_handlers(app: FastAPI) -> None:
    """Map trailcast's domain errors and FastAPI's own errors to problem+json in one place."""

    @app.exception_handler(ProblemError)
    async def _problem_error(request: Request, exc: ProblemError):
        return problem(
            exc.status, exc.title, exc.detail, exc.type_, headers=exc.headers, **exc.extra
        )

    @app.exception_handler(InvalidOrbit)
    async def _invalid_orbit(request: Request, exc: InvalidOrbit):
        return problem(
            422, "Invalid orbit", str(exc), _TYPE_BASE + "invalid-orbit", field=exc.field
        )

    @app.exception_handler(InvalidTime)
    async def _invalid_time(request: Request, exc: InvalidTime):
        return problem(422, "Invalid time", str(exc), _TYPE_BASE + "invalid-time")

    @app.exception_handler(OutsideTimeSpan)
    async def _outside_span(request: Request, exc: OutsideTimeSpan):
        return problem(
            422, "Outside supported time span", str(exc), _TYPE_BASE + "outside-time-span"
        )

    @app.exception_handler(TrailcastError)
    async def _trailcast_error(request: Request, exc: TrailcastError):
        return problem(422, "Cannot compute", str(exc), _TYPE_BASE + "computation")

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        errors = exc.errors()
        first = errors[0] if errors else {}
        field = ".".join(str(p) for p in first.get("loc", ())[1:]) or "body"
        return problem(
            422,
            "Invalid request",
            f"{field}: {first.get('msg', 'invalid')}",
            _TYPE_BASE + "invalid-request",
            field=field,
            errors=[
                {"field": ".".join(str(p) for p in e.get("loc", ())[1:]), "message": e.get("msg")}
                for e in errors
            ],
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException):
        return problem(
            exc.status_code,
            _title(exc.status_code),
            str(exc.detail),
            headers=dict(exc.headers or {}),
        )

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception):
        # Logged by the server; the client gets a problem, never a traceback.
        return problem(500, "Internal Server Error", "unexpected error; see the server log")


def _title(status: int) -> str:
    from http import HTTPStatus

    try:
        return HTTPStatus(status).phrase
    except ValueError:
        return "Error"
