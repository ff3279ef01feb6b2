"""Optional bearer token for the routes that change state (POST, DELETE).

When ``TRAILCAST_API_TOKEN`` is set, those routes answer 401 problem+json unless the request
carries ``Authorization: Bearer <token>``; when it is unset they are open (fine on loopback or
behind a proxy that authenticates). Reading routes are always open.
"""

import secrets
from typing import Annotated

from fastapi import Depends
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from .problems import TYPE_BASE, UNAUTHORIZED_DETAIL, ProblemError
from .settings import Settings, get_settings

_bearer = HTTPBearer(
    auto_error=False,
    description="Required for POST and DELETE when the server sets TRAILCAST_API_TOKEN.",
)


def token_ok(authorization: str | None, token: str) -> bool:
    """Whether an ``Authorization`` header value carries ``token`` as a bearer token."""
    scheme, _, given = (authorization or "").partition(" ")
    if scheme.lower() != "bearer":
        given = ""
    return secrets.compare_digest(
        given.strip().encode("utf-8", "surrogatepass"), token.encode("utf-8")
    )


def require_token(
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
    settings: Annotated[Settings, Depends(get_settings)],
) -> None:
    """Dependency: pass when no token is configured or the bearer token matches."""
    if not settings.api_token:
        return
    given = credentials.credentials if credentials is not None else ""
    if not secrets.compare_digest(given.encode("utf-8"), settings.api_token.encode("utf-8")):
        raise ProblemError(
            401,
            "Unauthorized",
            UNAUTHORIZED_DETAIL,
            TYPE_BASE + "unauthorized",
            headers={"WWW-Authenticate": 'Bearer realm="trailcast"'},
        )
