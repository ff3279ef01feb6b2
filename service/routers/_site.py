"""The optional observing site of the calendar routes (``lat`` and ``lon`` query parameters).

Kept apart from :mod:`service.routers.observing` so that the forecast and encounter routers can
take a site without importing the observing router (which imports the chart router).
"""

from fastapi import Query

from dynamics import observing

from ..problems import TYPE_BASE, ProblemError

SITE_LAT = Query(
    None,
    ge=-90.0,
    le=90.0,
    description="Observing site latitude, deg (with `lon`)",
    examples=[50.0],
)
SITE_LON = Query(
    None,
    ge=-180.0,
    le=360.0,
    description="Observing site longitude, deg east (with `lat`)",
    examples=[10.0],
)
SITE_ICS_NOTE = (
    " With `lat` and `lon` (a site), each event also says whether the peak is observable there, "
    "the expected hourly rate and when the radiant rises."
)


def optional_site(lat: float | None, lon: float | None) -> observing.Site | None:
    """The calendar routes' optional site: both coordinates or neither (422 naming the other)."""
    if lat is None and lon is None:
        return None
    if lat is None or lon is None:
        missing = "lat" if lat is None else "lon"
        raise ProblemError(
            422,
            "Invalid request",
            f"{missing}: give both lat and lon for a site, or neither",
            TYPE_BASE + "invalid-request",
            field=missing,
        )
    return observing.Site(lat, lon)
