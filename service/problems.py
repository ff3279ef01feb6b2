"""RFC 9457 problem details: every error the service returns is ``application/problem+json``."""

import re
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from dynamics.errors import InvalidOrbit, InvalidTime, OutsideTimeSpan, TrailcastError

from .models.common import LimitExceeded

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

    @app.exception_handler(LimitExceeded)
    async def _limit(request: Request, exc: LimitExceeded):
        return problem(
            422, "Limit exceeded", str(exc), _TYPE_BASE + "limit-exceeded", field=exc.field
        )

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        # A route that needs the token says 401 before looking at the body.
        denied = token_problem(request)
        if denied is not None:
            return denied
        errors = [_error_entry(e) for e in exc.errors()]
        first = errors[0] if errors else {"field": "body", "message": "invalid"}
        return problem(
            422,
            "Invalid request",
            f"{first['field']}: {first['message']}",
            _TYPE_BASE + "invalid-request",
            field=first["field"],
            errors=errors,
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


def _error_entry(e: dict) -> dict:
    """One validation error as ``{"field", "message"}``; a body that is not JSON at all names
    the body and the character where reading stopped (not the position as a "field")."""
    loc = tuple(e.get("loc", ()))
    if e.get("type") == "json_invalid":
        pos = loc[1] if len(loc) > 1 else None
        reason = (e.get("ctx") or {}).get("error", "not valid JSON")
        where = f" at character {pos}" if isinstance(pos, int) else ""
        return {"field": "body", "message": f"the body is not valid JSON ({reason}{where})"}
    field = ".".join(str(p) for p in loc[1:]) or "body"
    msg = str(e.get("msg", "invalid"))
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
        # a check over several keys names its field first: "years: last precedes first"
        named = _NAMED_MESSAGE.match(msg)
        if named:
            inner, msg = named.groups()
            field = inner if field == "body" else f"{field}.{inner}"
    return {"field": field, "message": msg}


_NAMED_MESSAGE = re.compile(r"^([A-Za-z_][\w.]*): (.+)$", re.S)


def token_problem(request: Request):
    """The 401 problem when this request changes state and lacks the server's token, else None."""
    from .security import token_ok

    settings = getattr(request.app.state, "settings", None)
    if request.method not in ("POST", "DELETE") or settings is None or not settings.api_token:
        return None
    if token_ok(request.headers.get("authorization"), settings.api_token):
        return None
    return problem(
        401,
        "Unauthorized",
        UNAUTHORIZED_DETAIL,
        _TYPE_BASE + "unauthorized",
        headers={"WWW-Authenticate": 'Bearer realm="trailcast"'},
    )


UNAUTHORIZED_DETAIL = (
    "this route needs the header 'Authorization: Bearer <token>' with the server's token"
)


def _title(status: int) -> str:
    from http import HTTPStatus

    try:
        return HTTPStatus(status).phrase
    except ValueError:
        return "Error"
