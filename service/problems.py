"""RFC 9457 problem details: every error the service returns is ``application/problem+json``."""

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from dynamics.errors import InvalidOrbit, InvalidTime, OutsideTimeSpan, TrailcastError

PROBLEM_MEDIA_TYPE = "application/problem+json"
_TYPE_BASE = "https://trailcast.invalid/problems/"  # stable identifiers, not fetched


def problem(
    status: int, title: str, detail: str, type_: str = "about:blank", **extra
) -> JSONResponse:
    """Build an RFC 9457 problem response."""
    body = {"type": type_, "title": title, "status": status, "detail": detail, **extra}
    return JSONResponse(body, status_code=status, media_type=PROBLEM_MEDIA_TYPE)


def install_problem_handlers(app: FastAPI) -> None:
    """Map trailcast's domain errors and FastAPI's own errors to problem+json in one place."""

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
        return problem(exc.status_code, _title(exc.status_code), str(exc.detail))


def _title(status: int) -> str:
    from http import HTTPStatus

    try:
        return HTTPStatus(status).phrase
    except ValueError:
        return "Error"
