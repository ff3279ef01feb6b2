"""Every predicted encounter across stored forecasts: ``/v1/encounters`` (JSON, paginated) and
``/v1/encounters.ics`` (a calendar to subscribe to), for dashboards and observers.

Only encounters of finished (``done``) forecasts are listed, ordered by peak time; near misses
and negligible close passes are not (no outburst is expected from them: fetch a forecast's CSV
for those). Each carries its ``classification``; encounters stored before crossings were
classified by predicted activity get it on reading, and those it calls negligible or near miss
stay listed with that label but get no calendar event. ``min_zhr`` filters
only encounters that carry a ``zhr`` (added by the activity stage); encounters without one are
always kept, because nothing says they are weak.
"""

import base64
import binascii
import json
import re
from datetime import UTC, date, datetime, timedelta
from urllib.parse import urlencode

from fastapi import APIRouter, Query, Response
from pydantic import BaseModel, ConfigDict, Field

from dynamics.forecast import CAUTIONS

from ..exports import encounters_ics
from ..job_kinds.forecast import ZHR_KEYS, stored_encounter
from ..job_kinds.forecast import list_encounters as stored_encounters
from ..jobs import format_wall_utc
from ..problems import TYPE_BASE, ProblemError, problem_responses
from ..schemas import EXAMPLE_ENCOUNTER, EncounterOut
from ._site import SITE_ICS_NOTE, SITE_LAT, SITE_LON, optional_site

router = APIRouter(prefix="/v1", tags=["encounters"])

ZHR_NOTE = (
    "min_zhr filters only encounters that carry a zhr (from the activity stage; its number is "
    f"the zhr value itself or the first of {', '.join(ZHR_KEYS)} in a zhr object); encounters "
    "without a zhr are kept."
)
_EXAMPLE_ID = "5d2c3f0e9a1b4c7d8e6f5a4b3c2d1e0f"


from ._jobs import Jobs  # noqa: E402


class EncounterLinksOut(BaseModel):
    forecast: str = Field(..., examples=[f"/v1/forecasts/{_EXAMPLE_ID}"])


class EncounterItemOut(BaseModel):
    forecast_id: str
    parent_name: str
    encounter: EncounterOut = Field(..., description="As the forecast gives it (extra keys kept)")
    links: EncounterLinksOut


class PageLinksOut(BaseModel):
    next: str | None = Field(None, description="The next page, when there is one")
    ics: str = Field(..., description="The same selection as an iCalendar")


class EncountersPageOut(BaseModel):
    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "items": [
                        {
                            "forecast_id": _EXAMPLE_ID,
                            "parent_name": "P/2026 W3 (Hollow Pine) [invented demo comet]",
                            "encounter": EXAMPLE_ENCOUNTER,
                            "links": {"forecast": f"/v1/forecasts/{_EXAMPLE_ID}"},
                        }
                    ],
                    "count": 1,
                    "next_cursor": None,
                    "links": {"next": None, "ics": "/v1/encounters.ics?from=2040-01-01"},
                    "filters": {"from": "2040-01-01T00:00:00.000Z"},
                    "notes": [ZHR_NOTE],
                    "cautions": list(CAUTIONS),
                }
            ]
        }
    )

    items: list[EncounterItemOut]
    count: int = Field(..., description="Items on this page")
    next_cursor: str | None = Field(None, description="Pass as `cursor` for the next page")
    links: PageLinksOut
    filters: dict[str, str | float | None]
    notes: list[str]
    cautions: list[str]


def _bound(text: str | None, name: str, end_of_day: bool) -> str | None:
    """A ``from``/``to`` value as the stored peak format; a bare date means the whole day."""
    if text is None:
        return None
    try:
        if len(text) == 10:
            day = date.fromisoformat(text)
            t = datetime(day.year, day.month, day.day, tzinfo=UTC)
            if end_of_day:
                t += timedelta(days=1) - timedelta(milliseconds=1)
        else:
            t = datetime.fromisoformat(text.replace("Z", "+00:00").replace("z", "+00:00"))
            if t.tzinfo is None:
                t = t.replace(tzinfo=UTC)
        return format_wall_utc(t)
    except (ValueError, OverflowError):
        raise ProblemError(
            422,
            "Invalid request",
            f"{name}: not an ISO 8601 date or UTC time: {text!r}",
            TYPE_BASE + "invalid-request",
            field=name,
        ) from None


#: What a cursor this service gives out holds: a stored peak time and a job id.
_CURSOR_PEAK = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}\.\d{3}Z")
_CURSOR_JOB = re.compile(r"[0-9a-f]{32}")


def _cursor_out(row) -> str:
    raw = json.dumps([row["peak_utc"], row["job_id"], row["idx"]]).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def _cursor_in(text: str | None) -> tuple[str, str, int] | None:
    if text is None:
        return None
    try:
        raw = base64.urlsafe_b64decode(text + "=" * (-len(text) % 4))
        peak, job_id, idx = json.loads(raw)
        if not (
            isinstance(peak, str)
            and isinstance(job_id, str)
            and isinstance(idx, int)
            and not isinstance(idx, bool)
            and 0 <= idx < 2**63  # an SQLite integer
            and _CURSOR_PEAK.fullmatch(peak)
            and _CURSOR_JOB.fullmatch(job_id)
        ):
            raise ValueError
        return peak, job_id, idx
    except (ValueError, TypeError, binascii.Error, UnicodeDecodeError, RecursionError):
        raise ProblemError(
            422,
            "Invalid request",
            "cursor: not a cursor this service gave out",
            TYPE_BASE + "invalid-request",
            field="cursor",
        ) from None


_FROM = Query(
    None,
    alias="from",
    description="Earliest peak: ISO 8601 date (start of day, UTC) or time (UTC if no offset)",
    examples=["2040-01-01"],
)
_TO = Query(
    None,
    description="Latest peak, inclusive: ISO 8601 date (the whole day, UTC) or time",
    examples=["2040-12-31"],
)
_MIN_ZHR = Query(None, ge=0.0, description=ZHR_NOTE, examples=[10.0])
_PARENT = Query(
    None,
    max_length=200,
    description="Parent name contains this text (case-insensitive for ASCII)",
    examples=["Hollow Pine"],
)


_SUPERSEDED = Query(
    False,
    description="Also list encounters of older forecasts of the same parent with the same "
    "options (by default only the latest done forecast covering each year is listed)",
)
SUPERSEDED_NOTE = (
    "Each encounter comes from the latest done forecast of its parent with the same options "
    "that covers its year, unless include_superseded=true."
)


def _filters(from_, to, min_zhr, parent) -> dict:
    return {
        "from": _bound(from_, "from", end_of_day=False),
        "to": _bound(to, "to", end_of_day=True),
        "min_zhr": min_zhr,
        "parent": parent,
    }


def _query_string(params: dict) -> str:
    return urlencode({k: v for k, v in params.items() if v is not None})


@router.get(
    "/encounters",
    response_model=EncountersPageOut,
    summary="Predicted encounters across all stored forecasts, by peak time (paginated)",
    description=(
        "Every encounter of the done forecasts, ordered by peak time (UTC), filtered by peak "
        "time (`from`, `to`), parent name (`parent`) and `min_zhr`. "
        + SUPERSEDED_NOTE
        + " "
        + ZHR_NOTE
        + " Pages hold "
        "`limit` items; follow `links.next` (or pass `next_cursor` as `cursor`). Predictions "
        "are model estimates; spacecraft operators defer to the responsible agencies; "
        "observers mind the usual night-time safety."
    ),
    responses=problem_responses(422),
)
def list_encounters(
    jobs: Jobs,
    from_: str | None = _FROM,
    to: str | None = _TO,
    min_zhr: float | None = _MIN_ZHR,
    parent: str | None = _PARENT,
    limit: int = Query(100, ge=1, le=500, description="Items per page"),
    cursor: str | None = Query(None, max_length=500, description="From a previous page"),
    include_superseded: bool = _SUPERSEDED,
) -> EncountersPageOut:
    f = _filters(from_, to, min_zhr, parent)
    rows = stored_encounters(
        jobs.store,
        f["from"],
        f["to"],
        parent,
        min_zhr,
        _cursor_in(cursor),
        limit + 1,
        include_superseded,
    )
    more = len(rows) > limit
    rows = rows[:limit]
    next_cursor = _cursor_out(rows[-1]) if more and rows else None
    query = {
        "from": from_,
        "to": to,
        "min_zhr": min_zhr,
        "parent": parent,
        "include_superseded": "true" if include_superseded else None,
    }
    return EncountersPageOut(
        items=[
            EncounterItemOut(
                forecast_id=r["job_id"],
                parent_name=r["parent_name"],
                encounter=stored_encounter(r),
                links=EncounterLinksOut(forecast=f"/v1/forecasts/{r['job_id']}"),
            )
            for r in rows
        ],
        count=len(rows),
        next_cursor=next_cursor,
        links=PageLinksOut(
            next=(
                "/v1/encounters?" + _query_string({**query, "limit": limit, "cursor": next_cursor})
                if next_cursor
                else None
            ),
            ics="/v1/encounters.ics" + ("?" + _query_string(query) if any(query.values()) else ""),
        ),
        filters=f,
        notes=[ZHR_NOTE, SUPERSEDED_NOTE],
        cautions=list(CAUTIONS),
    )


@router.get(
    "/encounters.ics",
    response_class=Response,
    summary="Predicted encounters across stored forecasts as an iCalendar to subscribe to",
    description=(
        "The selection of `GET /v1/encounters` (same filters; the first `limit` by peak time) as "
        "RFC 5545 events: one per encounter (stored crossings whose `classification` is not "
        "`encounter` get none), spanning its activity window when the forecast "
        "gives one, until then peak +/- FWHM/2, as each description says, with the radiant, "
        "speed and the cautions. " + ZHR_NOTE + SITE_ICS_NOTE
    ),
    responses={
        200: {
            "content": {
                "text/calendar": {
                    "schema": {"type": "string"},
                    "example": "BEGIN:VCALENDAR\r\nVERSION:2.0\r\n...\r\nEND:VCALENDAR\r\n",
                }
            }
        },
        **problem_responses(422),
    },
)
def list_encounters_ics(
    jobs: Jobs,
    from_: str | None = _FROM,
    to: str | None = _TO,
    min_zhr: float | None = _MIN_ZHR,
    parent: str | None = _PARENT,
    limit: int = Query(1000, ge=1, le=5000, description="Most events in the calendar"),
    lat: float | None = SITE_LAT,
    lon: float | None = SITE_LON,
    include_superseded: bool = _SUPERSEDED,
) -> Response:
    site = optional_site(lat, lon)
    f = _filters(from_, to, min_zhr, parent)
    rows = stored_encounters(
        jobs.store, f["from"], f["to"], parent, min_zhr, None, limit, include_superseded
    )
    items = [
        (
            r["job_id"],
            r["idx"],
            r["parent_name"],
            stored_encounter(r),
            r["finished_utc"],
        )
        for r in rows
    ]
    body = encounters_ics(
        items, "trailcast: predicted meteor encounters", list(CAUTIONS), site=site
    )
    return Response(
        body,
        media_type="text/calendar; charset=utf-8",
        headers={"Content-Disposition": 'inline; filename="trailcast-encounters.ics"'},
    )
