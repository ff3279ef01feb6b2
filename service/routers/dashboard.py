"""The dashboard page at ``/``: upcoming encounters, one forecast's charts, a submission form.

The page is static HTML, CSS and plain JavaScript from ``service/static/`` (served under
``/static``), talking only to this service's JSON API; charts are the SVGs of
:mod:`service.routers.plots`. Nothing is loaded from elsewhere, so it works offline.
"""

from pathlib import Path

from fastapi import APIRouter
from fastapi.responses import FileResponse

#: The page's files: index.html, dashboard.css, dashboard.js.
STATIC_DIR = Path(__file__).resolve().parents[1] / "static"

router = APIRouter(tags=["dashboard"])


@router.get(
    "/",
    response_class=FileResponse,
    summary="The dashboard page (HTML)",
    include_in_schema=False,
)
def get_dashboard() -> FileResponse:
    return FileResponse(
        STATIC_DIR / "index.html",
        media_type="text/html; charset=utf-8",
        headers={"Cache-Control": "no-cache"},
    )
