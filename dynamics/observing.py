"""Where and when a predicted peak can be seen: radiant, Sun and Moon at a site, expected rates.

For observing sites (geodetic latitude, longitude, elevation) and instants (UTC) this module gives

- the radiant's altitude and azimuth (RA/Dec J2000 -> observed alt/az),
- the Sun's altitude and the sky class (day, civil, nautical, astronomical twilight, night),
- the Moon's altitude, azimuth, illuminated fraction and angular distance from the radiant,
- the expected hourly rate of a visual observer from a predicted ZHR,

and, built on these, the *site view* and the *world view* of each encounter of a forecast result
(the JSON of :meth:`dynamics.forecast.ForecastResult.to_json`).

Method
------
Earth orientation and the observed place come from ERFA (the IAU SOFA routines): bias-precession-
nutation IAU 2006/2000A (``erfa.pnm06a``, ``erfa.s06``), the Earth rotation angle (``erfa.era00``)
and the star-independent parameters of a terrestrial observer (``erfa.apco``, with the observer's
barycentric position and velocity from DE423), then CIRS -> observed (``erfa.atioq``).

- The Sun and the Moon: DE423 (Folkner 2010) barycentric positions at the light-time-corrected
  instant, seen from the *observer* (topocentric: the Moon's parallax reaches 1 deg), with annual
  plus diurnal aberration (``erfa.ab``). Light deflection is neglected (below 2 arcsec this far
  from the Sun's limb, and meaningless for the Sun itself).
- The radiant is a direction of meteoroid velocities relative to Earth, not light from a distant
  source: it is rotated by precession-nutation and Earth rotation only (no aberration or light
  deflection, which differ by at most 21 arcsec), and, like the forecast's radiant, it carries no
  zenith attraction and no diurnal aberration of the meteors.
- No atmospheric refraction anywhere: altitudes are geometric (airless). Twilight limits are
  defined on the geometric altitude of the Sun's centre; "day" starts at -0.833 deg (refraction
  and semi-diameter of the rising Sun's upper limb, the almanac convention).

Time: UT1 is taken equal to UTC (|UT1 - UTC| < 0.9 s by the definition of UTC, i.e. less than
0.004 deg of Earth rotation); before 1960 the input is Universal Time and TT follows from the
Delta T model of Espenak & Meeus (2006) through :mod:`dynamics.timescales`. Polar motion
(< 1 arcsec) is neglected.

Expected hourly rate of a visual observer (the inverse of the ZHR definition, Koschack & Rendtel
1990, WGN 18, 44; the form used in Rendtel, Arlt & McBeath 1995, *Handbook for Visual Meteor
Observers*)::

    HR = ZHR * sin(h_R) / r ** (6.5 - lm)

with h_R the radiant's altitude (HR = 0 below the horizon), r the population index and lm the
observer's limiting magnitude (default 6.5). The Moon is *not* in the formula: its brightness
enters only through lm, so the Moon's altitude, phase and distance from the radiant are reported
for the user to judge, never folded into the rate.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import erfa
import numpy as np
from scipy.optimize import brentq

from .constants import AU_KM, DAY_S
from .ephemeris import barycentric_states
from .errors import InvalidSite
from .frames import (
    angular_separation_deg,
    ecliptic_to_equatorial,
    ecliptic_to_radec,
    spherical_to_cartesian,
)
from .timescales import format_utc, from_tdb_jd, parse_iso, to_tdb_jd, utc_to_tdb_jd

# --- constants ----------------------------------------------------------------------------------

#: Speed of light, km/s (exact, SI definition of the metre).
C_KM_S = 299_792.458
#: Speed of light in au/day (IAU 2012 au).
C_AU_D = C_KM_S * DAY_S / AU_KM
#: Limiting magnitude of the ZHR's standard observer (Koschack & Rendtel 1990, WGN 18, 44).
STANDARD_LIMITING_MAGNITUDE = 6.5
#: Default limiting magnitude of a site: the standard observer's (stated in every output).
DEFAULT_LIMITING_MAGNITUDE = 6.5
#: Sun altitude (deg, geometric centre) above which it is day: the upper limb at the horizon with
#: 34 arcmin of refraction and 16 arcmin semi-diameter (the almanac convention, from memory).
SUN_DAY_ALT_DEG = -0.833
#: Twilight limits (deg, geometric altitude of the Sun's centre): civil, nautical, astronomical
#: (the standard almanac definitions, from memory).
CIVIL_TWILIGHT_ALT_DEG = -6.0
NAUTICAL_TWILIGHT_ALT_DEG = -12.0
ASTRONOMICAL_TWILIGHT_ALT_DEG = -18.0
#: Moonrise/moonset reference altitude of the Moon's centre, geometric (deg): about -0.8 deg for
#: refraction and semi-diameter (almanac convention, from memory); the topocentric parallax is
#: already in our altitudes.
MOON_HORIZON_ALT_DEG = -0.833
#: Default "observable" thresholds: radiant at least this high (deg; below it the rate is at
#: most sin 20 deg = 34 % of the zenith rate: common practice, no source) ...
DEFAULT_MIN_RADIANT_ALT_DEG = 20.0
#: ... and the Sun at most this high (deg; the end of nautical twilight: common practice, no
#: source).
DEFAULT_MAX_SUN_ALT_DEG = -12.0
#: Site view: the timeline spans the peak +- this many hours (a night around the peak).
SITE_SPAN_HOURS = 9.0
#: Site view: timeline step (minutes) between the profile's own times.
SITE_STEP_MINUTES = 10.0
#: World view: default grid step in latitude and longitude (deg).
DEFAULT_GRID_STEP_DEG = 2.0
#: World view: a region is "well placed" when its rate is at least this fraction of the best
#: cell's (no source; a readable cut).
REGION_FRACTION_OF_BEST = 0.5
#: World view: latitude band width (deg) of the regions in words.
REGION_BAND_DEG = 10.0
#: World view: at most this many regions listed.
MAX_REGIONS = 6
#: Rise/set search: sampling step (days) before root refinement (30 minutes; no body of ours
#: rises and sets within that).
CROSSING_STEP_DAYS = 30.0 / 1440.0
#: Rise/set root tolerance (days): 0.1 s.
CROSSING_XTOL_DAYS = 0.1 / DAY_S

SKY_CLASSES = ("day", "civil twilight", "nautical twilight", "astronomical twilight", "night")

OBSERVING_CAUTIONS = (
    "Expected rates are model estimates: the predicted ZHR may be wrong by a factor of several "
    "and the peak time by tens of minutes; the formula assumes a clear sky and a standard observer.",
    "The Moon is not in the rate: a bright Moon near the radiant lowers the limiting magnitude, so "
    "set the limiting magnitude to what you expect to see.",
    "Observing at night: dress for the cold (it is colder than it feels after an hour lying still), "
    "mind traffic and terrain in the dark, pick a safe legal site, tell someone where you are, and "
    "observe with company.",
)

METHOD = {
    "hourly_rate": "HR = ZHR * sin(h_radiant) / r^(6.5 - lm) (Koschack & Rendtel 1990, WGN 18, 44; "
    "Rendtel, Arlt & McBeath 1995, Handbook for Visual Meteor Observers); 0 below the horizon; "
    "the Moon is reported, not folded into the rate",
    "positions": "ERFA (IAU SOFA) Earth orientation IAU 2006/2000A and observed place; Sun and Moon "
    "from DE423 (Folkner 2010), topocentric, light time and aberration; radiant rotated without "
    "aberration; no refraction (geometric altitudes)",
    "time": "UT1 = UTC (|UT1 - UTC| < 0.9 s); before 1960 Universal Time with Delta T of Espenak & "
    "Meeus (2006); polar motion neglected",
    "sky": f"day above {SUN_DAY_ALT_DEG} deg; civil, nautical, astronomical twilight down to "
    f"{CIVIL_TWILIGHT_ALT_DEG:g}, {NAUTICAL_TWILIGHT_ALT_DEG:g}, {ASTRONOMICAL_TWILIGHT_ALT_DEG:g} "
    "deg of the Sun's centre; night below",
}


# --- sites --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Site:
    """An observing site: geodetic latitude and east longitude (deg, WGS84), elevation (m).

    Longitudes are normalised to [-180, 180).
    """

    lat_deg: float
    lon_deg: float
    elevation_m: float = 0.0
    name: str | None = None

    def __post_init__(self):
        for field, value in (("lat", self.lat_deg), ("lon", self.lon_deg)):
            if not isinstance(value, int | float) or not math.isfinite(value):
                raise InvalidSite(field, f"must be a finite number of degrees, got {value!r}")
        if not -90.0 <= self.lat_deg <= 90.0:
            raise InvalidSite("lat", f"latitude must be in [-90, 90] deg, got {self.lat_deg}")
        if not -180.0 <= self.lon_deg <= 360.0:
            raise InvalidSite("lon", f"longitude must be in [-180, 360] deg, got {self.lon_deg}")
        if not isinstance(self.elevation_m, int | float) or not (
            -500.0 <= self.elevation_m <= 9000.0
        ):
            raise InvalidSite(
                "elevation", f"elevation must be in [-500, 9000] m, got {self.elevation_m}"
            )
        lon = float(self.lon_deg)
        object.__setattr__(self, "lon_deg", lon - 360.0 if lon >= 180.0 else lon)
        object.__setattr__(self, "lat_deg", float(self.lat_deg))
        object.__setattr__(self, "elevation_m", float(self.elevation_m))

    def to_json(self) -> dict:
        out = {"lat_deg": self.lat_deg, "lon_deg": self.lon_deg, "elevation_m": self.elevation_m}
        if self.name:
            out["name"] = self.name
        return out


def parse_site(text: str) -> Site:
    """Read ``LAT,LON[,ELEV_M]`` (deg, deg east, m), e.g. ``"48.5,-123.4,230"``.

    Raises
    ------
    InvalidSite
        Not two or three numbers, or a value out of range.

    Examples
    --------
    >>> parse_site("-33.9, 18.4")
    Site(lat_deg=-33.9, lon_deg=18.4, elevation_m=0.0, name=None)
    """
    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) not in (2, 3):
        raise InvalidSite("site", f"write a site as LAT,LON[,ELEV_M] in degrees, got {text!r}")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise InvalidSite("site", f"LAT,LON[,ELEV_M] must be numbers, got {text!r}") from None
    return Site(*values)


# --- time and observer --------------------------------------------------------------------------


def _times(t_utc_jd):
    """UTC (UT before 1960) JD -> (ut1 JD, TT JD, TDB JD) arrays. UT1 = UTC (see module notes)."""
    ut1 = np.asarray(t_utc_jd, dtype=float)
    tdb = np.asarray(utc_to_tdb_jd(ut1), dtype=float)
    tt1, tt2 = from_tdb_jd(tdb, "TT")
    return ut1, np.asarray(tt1 + tt2, dtype=float), tdb


def _earth_equatorial(t_tdb_jd):
    """Earth's barycentric (position au, velocity au/day) and heliocentric position, ICRF axes."""
    states = barycentric_states(["earth", "sun"], t_tdb_jd)
    (r_e, v_e), (r_s, _) = states["earth"], states["sun"]
    return (
        ecliptic_to_equatorial(r_e),
        ecliptic_to_equatorial(v_e),
        ecliptic_to_equatorial(r_e - r_s),
    )


def observer_astrometry(t_utc_jd, lat_deg, lon_deg, elevation_m=0.0):
    """ERFA star-independent astrometry parameters (``eraASTROM``) of sites at instants.

    Parameters broadcast against each other. Earth's state is DE423's; no refraction (refa =
    refb = 0), no polar motion, UT1 = UTC.

    Returns
    -------
    astrom : numpy structured array of ``erfa.dt_eraASTROM``, broadcast shape
    tdb_jd : ndarray, TDB Julian dates of the same shape
    """
    ut1, tt, tdb = _times(t_utc_jd)
    eb, ev, eh = _earth_equatorial(tdb)
    ebpv = np.empty(eb.shape[:-1], dtype=erfa.dt_pv)
    ebpv["p"], ebpv["v"] = eb, ev
    rnpb = erfa.pnm06a(tt, 0.0)
    x, y = erfa.bpn2xy(rnpb)
    s = erfa.s06(tt, 0.0, x, y)
    theta = erfa.era00(ut1, 0.0)
    sp = erfa.sp00(tt, 0.0)
    elong = np.radians(np.asarray(lon_deg, dtype=float))
    phi = np.radians(np.asarray(lat_deg, dtype=float))
    hm = np.asarray(elevation_m, dtype=float)
    astrom = erfa.apco(tdb, 0.0, ebpv, eh, x, y, s, theta, elong, phi, hm, 0.0, 0.0, sp, 0.0, 0.0)
    tdb_b = np.broadcast_to(tdb, astrom.shape)
    return astrom, tdb_b


def _observed(p_cirs, astrom):
    """CIRS direction vectors (..., 3) -> (altitude deg, azimuth deg from north through east)."""
    ri, di = erfa.c2s(p_cirs)
    aob, zob, _hob, _dob, _rob = erfa.atioq(ri, di, astrom)
    return 90.0 - np.degrees(zob), np.mod(np.degrees(aob), 360.0)


def _bpn(astrom, p):
    return np.einsum("...ij,...j->...i", astrom["bpn"], p)


def radiant_altaz(ra_deg, dec_deg, t_utc_jd, lat_deg, lon_deg, elevation_m=0.0):
    """Altitude and azimuth (deg) of a radiant given as RA/Dec, equinox J2000 (ICRF axes).

    Parameters broadcast. Azimuth is measured from north through east. The radiant is rotated by
    precession-nutation and Earth rotation (see the module notes: no aberration, no refraction).

    Examples
    --------
    The north celestial pole stands at the site's latitude:

    >>> import numpy as np
    >>> alt, az = radiant_altaz(0.0, 90.0, 2462603.5, 45.0, 10.0)
    >>> bool(abs(alt - 45.0) < 0.5)
    True
    """
    astrom, _ = observer_astrometry(t_utc_jd, lat_deg, lon_deg, elevation_m)
    p = spherical_to_cartesian(ra_deg, dec_deg)
    return _observed(_bpn(astrom, np.broadcast_to(p, astrom.shape + (3,))), astrom)


def _body_topocentric(body: str, astrom, tdb):
    """Vector observer -> body (au, ICRF axes) at the light-time-corrected instant."""
    eb = astrom["eb"]
    t = tdb
    for _ in range(2):
        r = ecliptic_to_equatorial(barycentric_states([body], t)[body][0])
        lt_days = np.linalg.norm(r - eb, axis=-1) / C_AU_D
        t = tdb - lt_days
    r = ecliptic_to_equatorial(barycentric_states([body], t)[body][0])
    return r - eb


def body_altaz(body: str, t_utc_jd, lat_deg, lon_deg, elevation_m=0.0):
    """Topocentric altitude, azimuth (deg) and distance (au) of ``"sun"`` or ``"moon"`` (or any
    DE423 body of :data:`dynamics.ephemeris.BODIES` but Earth), with light time and aberration,
    without refraction. Parameters broadcast.
    """
    if body == "earth":
        raise ValueError("body_altaz: Earth is where the observer stands")
    astrom, tdb = observer_astrometry(t_utc_jd, lat_deg, lon_deg, elevation_m)
    topo = _body_topocentric(body, astrom, tdb)
    dist = np.linalg.norm(topo, axis=-1)
    pnat = topo / dist[..., None]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        ppr = erfa.ab(pnat, astrom["v"], astrom["em"], astrom["bm1"])
    alt, az = _observed(_bpn(astrom, ppr), astrom)
    return alt, az, dist


def sky_class(sun_alt_deg):
    """Sky class for Sun altitudes (deg): day, civil/nautical/astronomical twilight or night.

    >>> sky_class([10.0, -3.0, -9.0, -15.0, -30.0]).tolist()
    ['day', 'civil twilight', 'nautical twilight', 'astronomical twilight', 'night']
    """
    h = np.asarray(sun_alt_deg, dtype=float)
    idx = np.select(
        [
            h > SUN_DAY_ALT_DEG,
            h > CIVIL_TWILIGHT_ALT_DEG,
            h > NAUTICAL_TWILIGHT_ALT_DEG,
            h > ASTRONOMICAL_TWILIGHT_ALT_DEG,
        ],
        [0, 1, 2, 3],
        4,
    )
    return np.asarray(SKY_CLASSES, dtype=object)[idx]


@dataclass(frozen=True)
class SkyState:
    """Radiant, Sun and Moon seen from sites at instants (arrays of the broadcast shape, deg)."""

    radiant_alt_deg: np.ndarray
    radiant_az_deg: np.ndarray
    sun_alt_deg: np.ndarray
    sun_az_deg: np.ndarray
    moon_alt_deg: np.ndarray
    moon_az_deg: np.ndarray
    moon_illuminated_fraction: np.ndarray
    moon_radiant_separation_deg: np.ndarray


def sky_state(ra_deg, dec_deg, t_utc_jd, lat_deg, lon_deg, elevation_m=0.0) -> SkyState:
    """Everything an observer needs about the sky at once (one Earth-orientation computation).

    The Moon's illuminated fraction is k = (1 + cos i) / 2 with i the phase angle (Sun-Moon-
    observer), the exact geometric definition (Meeus 1998, Astronomical Algorithms, eq. 48.1).
    """
    astrom, tdb = observer_astrometry(t_utc_jd, lat_deg, lon_deg, elevation_m)
    p = spherical_to_cartesian(ra_deg, dec_deg)
    r_alt, r_az = _observed(_bpn(astrom, np.broadcast_to(p, astrom.shape + (3,))), astrom)
    out = {}
    vectors = {}
    for body in ("sun", "moon"):
        topo = _body_topocentric(body, astrom, tdb)
        vectors[body] = topo
        pnat = topo / np.linalg.norm(topo, axis=-1)[..., None]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", erfa.ErfaWarning)
            ppr = erfa.ab(pnat, astrom["v"], astrom["em"], astrom["bm1"])
        out[body] = _observed(_bpn(astrom, ppr), astrom)
    moon_to_obs = -vectors["moon"]
    moon_to_sun = vectors["sun"] - vectors["moon"]
    cos_i = np.sum(moon_to_obs * moon_to_sun, axis=-1) / (
        np.linalg.norm(moon_to_obs, axis=-1) * np.linalg.norm(moon_to_sun, axis=-1)
    )
    k = (1.0 + cos_i) / 2.0
    sep = angular_separation_deg(out["moon"][1], out["moon"][0], r_az, r_alt)
    return SkyState(
        np.asarray(r_alt),
        np.asarray(r_az),
        np.asarray(out["sun"][0]),
        np.asarray(out["sun"][1]),
        np.asarray(out["moon"][0]),
        np.asarray(out["moon"][1]),
        np.asarray(k),
        np.asarray(sep),
    )


# --- rates --------------------------------------------------------------------------------------


def expected_hourly_rate(
    zhr, radiant_alt_deg, population_index, limiting_magnitude=DEFAULT_LIMITING_MAGNITUDE
):
    """Meteors per hour a visual observer should count: ZHR sin(h_R) / r^(6.5 - lm).

    Parameters
    ----------
    zhr : float or array_like
        Zenithal hourly rate (meteors per hour, standard observer: lm 6.5, radiant at the zenith).
    radiant_alt_deg : float or array_like
        Radiant altitude, deg. Below the horizon the rate is 0.
    population_index : float
        r, the ratio of meteor numbers between successive magnitude classes (> 1).
    limiting_magnitude : float
        The observer's naked-eye limiting magnitude (default 6.5, the standard observer's).

    Returns
    -------
    ndarray or float
        Expected hourly rate (meteors per hour), >= 0.

    References
    ----------
    Inverse of the ZHR definition ZHR = HR r^(6.5 - lm) / sin(h_R) (Koschack & Rendtel 1990,
    WGN 18, 44; Rendtel, Arlt & McBeath 1995, Handbook for Visual Meteor Observers), with the
    field-obstruction and perception factors at 1 and the zenith exponent 1.

    Examples
    --------
    >>> round(float(expected_hourly_rate(100.0, 30.0, 2.5, 5.5)), 6)
    20.0
    """
    r = float(population_index)
    if not r > 1.0:
        raise ValueError(f"population index must be > 1, got {population_index}")
    h = np.radians(np.asarray(radiant_alt_deg, dtype=float))
    rate = np.asarray(zhr, dtype=float) * np.maximum(np.sin(h), 0.0)
    rate = rate / r ** (STANDARD_LIMITING_MAGNITUDE - float(limiting_magnitude))
    return rate if rate.ndim else float(rate)


# --- crossings (rise, set, twilight) ------------------------------------------------------------


def find_crossings(altitude_of, t0_utc_jd: float, t1_utc_jd: float, level_deg: float):
    """Instants in [t0, t1] (UTC JD) where ``altitude_of(t) - level_deg`` changes sign.

    Sampled every :data:`CROSSING_STEP_DAYS`, each bracket refined with Brent's method to
    :data:`CROSSING_XTOL_DAYS`. Returns a list of ``(t_utc_jd, "rise" | "set")``.
    """
    n = max(int(math.ceil((t1_utc_jd - t0_utc_jd) / CROSSING_STEP_DAYS)), 1)
    t = np.linspace(t0_utc_jd, t1_utc_jd, n + 1)
    f = np.asarray(altitude_of(t), dtype=float) - level_deg
    out = []
    for k in np.nonzero(np.sign(f[:-1]) * np.sign(f[1:]) < 0)[0]:
        root = brentq(
            lambda x: float(np.asarray(altitude_of(np.array([x])))[0]) - level_deg,
            t[k],
            t[k + 1],
            xtol=CROSSING_XTOL_DAYS,
        )
        out.append((float(root), "rise" if f[k] < 0 else "set"))
    return out


# --- forecast results -> site view ---------------------------------------------------------------


def utc_jd(text: str) -> float:
    """ISO 8601 UTC text (``...Z``) -> UTC Julian date (one float)."""
    p = parse_iso(text, "UTC")
    if p.scale not in ("UTC", "UT"):
        return float(np.sum(from_tdb_jd(to_tdb_jd(p.jd1, p.jd2, p.scale), "UTC")))
    return p.jd1 + p.jd2


def _utc_text(t_utc_jd) -> str | list[str]:
    return format_utc(utc_to_tdb_jd(np.asarray(t_utc_jd, dtype=float)))


def _zhr_at(encounter: dict, t_utc_jd: np.ndarray) -> np.ndarray | None:
    """ZHR at the instants, linear in the forecast's profile; 0 outside it; None without one."""
    profile = encounter.get("profile") or []
    if len(profile) < 2:
        return None
    tp = np.array([utc_jd(p["time_utc"]) for p in profile])
    zp = np.array([float(p["zhr"]) for p in profile])
    return np.interp(t_utc_jd, tp, zp, left=0.0, right=0.0)


def _population_index(encounter: dict) -> float:
    r = encounter.get("population_index")
    if r is None:
        raise InvalidSite(
            "forecast", "the encounter has no population_index: rerun the forecast with activity"
        )
    return float(r)


def _local_offset_hours(site: Site, utc_offset_hours: float | None) -> tuple[float, str]:
    if utc_offset_hours is None:
        return site.lon_deg / 15.0, "mean solar time at the site, UTC + longitude / 15 h"
    return float(utc_offset_hours), f"UTC{float(utc_offset_hours):+g} h (as given)"


def _local_text(t_utc_jd: float, offset_h: float) -> str:
    frac = (t_utc_jd + 0.5 + offset_h / 24.0) % 1.0
    minutes = int(round(frac * 1440.0)) % 1440
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def rate_text(x: float) -> str:
    """A rate as people read it: whole numbers from 10 up, one decimal below.

    >>> rate_text(1952.6), rate_text(57.8), rate_text(4.85)
    ('1953', '58', '4.8')
    """
    return f"{x:.0f}" if x >= 10 else f"{x:.1f}"


def _r(x, nd=2):
    return None if x is None else round(float(x), nd)


def site_encounter_view(
    encounter: dict,
    site: Site,
    *,
    limiting_magnitude: float = DEFAULT_LIMITING_MAGNITUDE,
    min_radiant_alt_deg: float = DEFAULT_MIN_RADIANT_ALT_DEG,
    max_sun_alt_deg: float = DEFAULT_MAX_SUN_ALT_DEG,
    utc_offset_hours: float | None = None,
    timeline: bool = True,
) -> dict:
    """The site view of one encounter (a dict of the forecast JSON): at the peak, across the
    activity window, the rise/set of radiant, Sun and Moon around it, and a timeline of the
    expected hourly rate over the peak +- :data:`SITE_SPAN_HOURS`.

    "Observable" means the radiant at least ``min_radiant_alt_deg`` high with the Sun at most
    ``max_sun_alt_deg`` high; the rate itself is the handbook formula whatever the sky.
    """
    # Without an activity model (older results) the geometry still holds; rates are None.
    r_pop = encounter.get("population_index")
    ra, dec = encounter["radiant"]["ra_deg"], encounter["radiant"]["dec_deg"]
    t_peak = utc_jd(encounter["peak_utc"])
    zhr = encounter.get("zhr") or {}
    offset_h, offset_kind = _local_offset_hours(site, utc_offset_hours)
    span = SITE_SPAN_HOURS / 24.0
    step = SITE_STEP_MINUTES / 1440.0
    grid = np.arange(t_peak - span, t_peak + span + step / 2, step)
    profile_t = [utc_jd(p["time_utc"]) for p in encounter.get("profile") or []]
    window = encounter.get("window")
    extra = [t_peak] + profile_t
    if window:
        extra += [utc_jd(window["start_utc"]), utc_jd(window["end_utc"])]
    # Profile and window times join the grid unless within a minute of a grid time.
    extra = np.unique(np.array(extra))
    extra = extra[(extra > grid[0]) & (extra < grid[-1])]
    extra = extra[np.min(np.abs(extra[:, None] - grid[None, :]), axis=1) > 1.0 / 1440.0]
    t = np.unique(np.concatenate([grid, extra]))
    sky = sky_state(ra, dec, t, site.lat_deg, site.lon_deg, site.elevation_m)
    z_t = _zhr_at(encounter, t) if r_pop is not None else None
    hr_t = (
        None
        if z_t is None
        else expected_hourly_rate(z_t, sky.radiant_alt_deg, r_pop, limiting_magnitude)
    )
    observable_t = (sky.radiant_alt_deg >= min_radiant_alt_deg) & (
        sky.sun_alt_deg <= max_sun_alt_deg
    )
    classes = sky_class(sky.sun_alt_deg)
    k_peak = int(np.argmin(np.abs(t - t_peak)))

    def hr_of(value):
        if value is None or r_pop is None:
            return None
        return _r(
            expected_hourly_rate(value, sky.radiant_alt_deg[k_peak], r_pop, limiting_magnitude), 1
        )

    at_peak = {
        "time_utc": encounter["peak_utc"],
        "local_time": _local_text(t_peak, offset_h),
        "radiant_alt_deg": _r(sky.radiant_alt_deg[k_peak]),
        "radiant_az_deg": _r(sky.radiant_az_deg[k_peak]),
        "sun_alt_deg": _r(sky.sun_alt_deg[k_peak]),
        "sky": str(classes[k_peak]),
        "moon_alt_deg": _r(sky.moon_alt_deg[k_peak]),
        "moon_az_deg": _r(sky.moon_az_deg[k_peak]),
        "moon_illuminated_fraction": _r(sky.moon_illuminated_fraction[k_peak], 3),
        "moon_radiant_separation_deg": _r(sky.moon_radiant_separation_deg[k_peak], 1),
        "zhr": zhr.get("estimate"),
        "hourly_rate": hr_of(zhr.get("estimate")),
        "hourly_rate_low": hr_of(zhr.get("low")),
        "hourly_rate_high": hr_of(zhr.get("high")),
        "observable": bool(observable_t[k_peak]),
    }
    out_window = None
    w_inside = None
    if window:
        w0, w1 = utc_jd(window["start_utc"]), utc_jd(window["end_utc"])
        w_inside = (t >= w0) & (t <= w1)
    if window and w_inside.any():
        inside = w_inside
        obs_in = inside & observable_t
        best = None
        if hr_t is not None and np.any(obs_in):
            kb = int(np.nonzero(obs_in)[0][np.argmax(hr_t[obs_in])])
            best = {
                "time_utc": _utc_text(t[kb]),
                "local_time": _local_text(t[kb], offset_h),
                "hourly_rate": _r(hr_t[kb], 1),
                "radiant_alt_deg": _r(sky.radiant_alt_deg[kb]),
            }
        out_window = {
            "start_utc": window["start_utc"],
            "end_utc": window["end_utc"],
            "radiant_alt_deg_min": _r(np.min(sky.radiant_alt_deg[inside])),
            "radiant_alt_deg_max": _r(np.max(sky.radiant_alt_deg[inside])),
            "sun_alt_deg_max": _r(np.max(sky.sun_alt_deg[inside])),
            "observable_fraction": _r(np.mean(observable_t[inside]), 3),
            "best": best,
        }

    t0, t1 = float(t[0]), float(t[-1])

    def events(fn, level, names):
        return [
            {"event": names[kind], "time_utc": _utc_text(x), "local_time": _local_text(x, offset_h)}
            for x, kind in find_crossings(fn, t0, t1, level)
        ]

    def radiant_alt(x):
        return radiant_altaz(ra, dec, x, site.lat_deg, site.lon_deg, site.elevation_m)[0]

    def sun_alt(x):
        return body_altaz("sun", x, site.lat_deg, site.lon_deg, site.elevation_m)[0]

    def moon_alt(x):
        return body_altaz("moon", x, site.lat_deg, site.lon_deg, site.elevation_m)[0]

    ev = events(radiant_alt, 0.0, {"rise": "radiant rises", "set": "radiant sets"})
    ev += events(
        radiant_alt,
        min_radiant_alt_deg,
        {
            "rise": f"radiant reaches {min_radiant_alt_deg:g} deg",
            "set": f"radiant drops below {min_radiant_alt_deg:g} deg",
        },
    )
    ev += events(sun_alt, SUN_DAY_ALT_DEG, {"rise": "sunrise", "set": "sunset"})
    for level, name in (
        (CIVIL_TWILIGHT_ALT_DEG, "civil"),
        (NAUTICAL_TWILIGHT_ALT_DEG, "nautical"),
        (ASTRONOMICAL_TWILIGHT_ALT_DEG, "astronomical"),
    ):
        ev += events(sun_alt, level, {"rise": f"{name} dawn", "set": f"{name} dusk"})
    ev += events(moon_alt, MOON_HORIZON_ALT_DEG, {"rise": "moonrise", "set": "moonset"})
    ev.sort(key=lambda e: e["time_utc"])

    circumpolar = None
    if not any(e["event"] in ("radiant rises", "radiant sets") for e in ev):
        circumpolar = "always up" if sky.radiant_alt_deg[0] > 0 else "never rises"

    view = {
        "index": encounter.get("_index"),
        "year": encounter.get("year"),
        "trail": encounter.get("trail"),
        "solution": encounter.get("solution"),
        "peak_utc": encounter["peak_utc"],
        "radiant": {"ra_deg": ra, "dec_deg": dec},
        "population_index": None if r_pop is None else float(r_pop),
        "zhr": zhr or None,
        "at_peak": at_peak,
        "window": out_window,
        "events": ev,
        "radiant_in_span": circumpolar,
        "verdict": _verdict(at_peak, out_window, min_radiant_alt_deg, max_sun_alt_deg),
    }
    if view["solution"] is None:
        del view["solution"]
    if timeline:
        view["timeline"] = [
            {
                "time_utc": ts,
                "local_time": _local_text(t[k], offset_h),
                "radiant_alt_deg": _r(sky.radiant_alt_deg[k]),
                "radiant_az_deg": _r(sky.radiant_az_deg[k]),
                "sun_alt_deg": _r(sky.sun_alt_deg[k]),
                "sky": str(classes[k]),
                "moon_alt_deg": _r(sky.moon_alt_deg[k]),
                "zhr": None if z_t is None else _r(z_t[k], 3),
                "hourly_rate": None if hr_t is None else _r(hr_t[k], 3),
                "observable": bool(observable_t[k]),
            }
            for k, ts in enumerate(_utc_text(t))
        ]
    view["local_time"] = {"utc_offset_hours": round(offset_h, 4), "kind": offset_kind}
    return view


def _verdict(at_peak: dict, window: dict | None, min_alt: float, max_sun: float) -> str:
    if at_peak["observable"]:
        rate = at_peak["hourly_rate"]
        if rate is None:
            return "observable at the peak (no rate: the forecast has no ZHR)"
        return (
            f"observable at the peak: radiant {at_peak['radiant_alt_deg']:.0f} deg high, "
            f"{at_peak['sky']}; expect about {rate_text(rate)} meteors per hour "
            f"(range {rate_text(at_peak['hourly_rate_low'])}-"
            f"{rate_text(at_peak['hourly_rate_high'])})"
        )
    reasons = []
    if at_peak["radiant_alt_deg"] < min_alt:
        reasons.append(
            "radiant below the horizon"
            if at_peak["radiant_alt_deg"] < 0
            else f"radiant only {at_peak['radiant_alt_deg']:.0f} deg high (< {min_alt:g})"
        )
    if at_peak["sun_alt_deg"] > max_sun:
        reasons.append(
            f"sky too bright ({at_peak['sky']}, Sun at {at_peak['sun_alt_deg']:.0f} deg)"
        )
    text = "not observable at the peak: " + "; ".join(reasons)
    if window and window.get("best"):
        b = window["best"]
        text += f"; best in the window at {b['time_utc']} ({rate_text(b['hourly_rate'])} per hour)"
    return text


def encounters_of(result: dict) -> list[dict]:
    """The encounters of a forecast result JSON, each with its index as ``_index``."""
    out = []
    for k, e in enumerate(result.get("encounters") or []):
        out.append({**e, "_index": k})
    return out


def site_view(result: dict, sites, **options) -> dict:
    """The site view of every encounter of a forecast result for one or more sites.

    ``options`` are those of :func:`site_encounter_view`. Returns a JSON-ready dict with the
    parent, the sites (each with its encounters), the thresholds, the method and the cautions.
    """
    if isinstance(sites, Site):
        sites = [sites]
    lm = options.get("limiting_magnitude", DEFAULT_LIMITING_MAGNITUDE)
    return {
        "parent": (result.get("parent") or {}).get("name"),
        "thresholds": {
            "limiting_magnitude": lm,
            "min_radiant_alt_deg": options.get("min_radiant_alt_deg", DEFAULT_MIN_RADIANT_ALT_DEG),
            "max_sun_alt_deg": options.get("max_sun_alt_deg", DEFAULT_MAX_SUN_ALT_DEG),
        },
        "sites": [
            {
                "site": s.to_json(),
                "encounters": [site_encounter_view(e, s, **options) for e in encounters_of(result)],
            }
            for s in sites
        ],
        "method": METHOD,
        "cautions": list(OBSERVING_CAUTIONS),
    }


# --- world view ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class WorldGrid:
    """Where on Earth an instant's radiant is up in a dark sky, on a latitude-longitude grid.

    Arrays have shape (len(lat_deg), len(lon_deg)); ``hourly_rate`` is NaN where not observable.
    """

    t_utc_jd: float
    lat_deg: np.ndarray
    lon_deg: np.ndarray
    radiant_alt_deg: np.ndarray
    sun_alt_deg: np.ndarray
    observable: np.ndarray
    hourly_rate: np.ndarray
    moon_alt_deg: np.ndarray
    moon_illuminated_fraction: float
    moon_radiant_separation_deg: float


def world_grid(
    ra_deg,
    dec_deg,
    t_utc_jd: float,
    zhr: float,
    population_index: float,
    *,
    limiting_magnitude: float = DEFAULT_LIMITING_MAGNITUDE,
    min_radiant_alt_deg: float = DEFAULT_MIN_RADIANT_ALT_DEG,
    max_sun_alt_deg: float = DEFAULT_MAX_SUN_ALT_DEG,
    step_deg: float = DEFAULT_GRID_STEP_DEG,
) -> WorldGrid:
    """Radiant and Sun altitude, observability and expected hourly rate at sea level over the
    globe at one instant, on cell centres every ``step_deg`` deg.

    The Moon's phase and distance from the radiant are given for the geocentre (they vary by
    under 1 deg over the globe); its altitude per cell.
    """
    if not 0.25 <= step_deg <= 15.0:
        raise InvalidSite("step", f"grid step must be in [0.25, 15] deg, got {step_deg}")
    lat = np.arange(-90.0 + step_deg / 2, 90.0, step_deg)
    lon = np.arange(-180.0 + step_deg / 2, 180.0, step_deg)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    sky = sky_state(ra_deg, dec_deg, float(t_utc_jd), la, lo, 0.0)
    observable = (sky.radiant_alt_deg >= min_radiant_alt_deg) & (sky.sun_alt_deg <= max_sun_alt_deg)
    hr = expected_hourly_rate(zhr, sky.radiant_alt_deg, population_index, limiting_magnitude)
    hr = np.where(observable, hr, np.nan)
    # Geocentric Moon phase and distance from the radiant (degrees on the sky).
    tdb = utc_to_tdb_jd(float(t_utc_jd))
    st = barycentric_states(["earth", "moon", "sun"], tdb)
    moon = st["moon"][0] - st["earth"][0]
    sun = st["sun"][0] - st["earth"][0]
    m_to_e, m_to_s = -moon, sun - moon
    cos_i = float(m_to_e @ m_to_s / (np.linalg.norm(m_to_e) * np.linalg.norm(m_to_s)))
    m_ra, m_dec = ecliptic_to_radec(moon)
    sep = float(angular_separation_deg(m_ra, m_dec, ra_deg, dec_deg))
    return WorldGrid(
        float(t_utc_jd),
        lat,
        lon,
        sky.radiant_alt_deg,
        sky.sun_alt_deg,
        observable,
        hr,
        sky.moon_alt_deg,
        (1.0 + cos_i) / 2.0,
        sep,
    )


def _lat_text(a: float) -> str:
    return f"{abs(a):.0f}°{'N' if a > 0 else 'S' if a < 0 else ''}"


def _lon_text(a: float) -> str:
    a = (a + 180.0) % 360.0 - 180.0
    return f"{abs(a):.0f}°{'E' if a > 0 else 'W' if a < 0 else ''}"


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Contiguous runs of True in a cyclic 1-D mask as (first, last) index pairs."""
    n = len(mask)
    if not mask.any():
        return []
    if mask.all():
        return [(0, n - 1)]
    start = int(np.nonzero(~mask)[0][0]) + 1  # begin just after a False: no run is split
    runs, cur = [], None
    for j in range(n):
        i = (start + j) % n
        if mask[i] and cur is None:
            cur = i
        elif not mask[i] and cur is not None:
            runs.append((cur, (i - 1) % n))
            cur = None
    if cur is not None:
        runs.append((cur, (start - 1) % n))
    return runs


def best_regions(grid: WorldGrid, land=None) -> list[dict]:
    """The best-placed regions in words: latitude bands of :data:`REGION_BAND_DEG` with the
    longitude ranges where the rate is at least :data:`REGION_FRACTION_OF_BEST` of the best
    cell's. ``land`` (array of the grid's shape: a land name per cell, "" at sea; or booleans)
    adds the share of land cells and the names of the land masses they lie on.
    """
    hr = np.nan_to_num(grid.hourly_rate, nan=0.0)
    best = float(hr.max()) if hr.size else 0.0
    if best <= 0.0:
        return []
    good = hr >= REGION_FRACTION_OF_BEST * best
    step = float(grid.lon_deg[1] - grid.lon_deg[0])
    regions = []
    edges = np.arange(-90.0, 90.0 + 1e-9, REGION_BAND_DEG)
    for b0, b1 in zip(edges[:-1], edges[1:], strict=True):
        rows = (grid.lat_deg >= b0) & (grid.lat_deg < b1)
        if not rows.any():
            continue
        band = good[rows].any(axis=0)
        for i0, i1 in _runs(band):
            cols = np.arange(i0, i1 + 1) if i1 >= i0 else np.r_[i0 : len(band), 0 : i1 + 1]
            cells = good[np.ix_(rows, cols)]
            sub_hr = np.where(cells, hr[np.ix_(rows, cols)], 0.0)
            lon0 = float(grid.lon_deg[i0] - step / 2)
            lon1 = float(grid.lon_deg[i1] + step / 2)
            item = {
                "lat_from_deg": float(b0),
                "lat_to_deg": float(b1),
                "lon_from_deg": round(lon0, 1),
                "lon_to_deg": round(lon1, 1),
                "hourly_rate_max": round(float(sub_hr.max()), 1),
                "radiant_alt_deg_max": round(
                    float(np.max(np.where(cells, grid.radiant_alt_deg[np.ix_(rows, cols)], -90))), 1
                ),
            }
            where = (
                "all longitudes"
                if len(cols) == len(band)
                else (f"{_lon_text(lon0)} to {_lon_text(lon1)}")
            )
            text = (
                f"{_lat_text(b0)} to {_lat_text(b1)}, {where}: up to "
                f"{rate_text(item['hourly_rate_max'])} per hour"
            )
            if land is not None:
                here = np.asarray(land[np.ix_(rows, cols)])[cells]
                on_land = here.astype(bool) if here.dtype == bool else here != ""
                frac = float(on_land.mean())
                item["land_fraction"] = round(frac, 2)
                words = "mostly land" if frac >= 0.5 else "some land" if frac > 0.1 else "sea"
                if here.dtype != bool and on_land.any():
                    names, counts = np.unique(here[on_land].astype(str), return_counts=True)
                    order = np.argsort(-counts, kind="stable")
                    top = [str(names[i]) for i in order[:3] if counts[i] >= 0.1 * on_land.sum()]
                    item["land"] = top
                    if top and frac > 0.1:
                        words += ": " + ", ".join(top)
                text += f" ({words})"
            item["text"] = text
            regions.append(item)
    regions.sort(key=lambda r: -r["hourly_rate_max"])
    return regions[:MAX_REGIONS]


def world_view(
    result: dict,
    k: int,
    *,
    limiting_magnitude: float = DEFAULT_LIMITING_MAGNITUDE,
    min_radiant_alt_deg: float = DEFAULT_MIN_RADIANT_ALT_DEG,
    max_sun_alt_deg: float = DEFAULT_MAX_SUN_ALT_DEG,
    step_deg: float = DEFAULT_GRID_STEP_DEG,
    land_mask=None,
) -> tuple[dict, WorldGrid]:
    """The world view of encounter ``k`` at its peak: (JSON-ready summary, the grid).

    ``land_mask(lat_deg, lon_deg)`` (optional) returns per point a land name ("" at sea) or a
    boolean; it adds land shares (and names) to the regions.

    Raises
    ------
    IndexError
        No encounter ``k``.
    """
    encs = result.get("encounters") or []
    if not 0 <= k < len(encs):
        raise IndexError(f"encounter {k} does not exist (the forecast has {len(encs)})")
    e = encs[k]
    r_pop = _population_index(e)
    zhr = (e.get("zhr") or {}).get("estimate") or 0.0
    grid = world_grid(
        e["radiant"]["ra_deg"],
        e["radiant"]["dec_deg"],
        utc_jd(e["peak_utc"]),
        zhr,
        r_pop,
        limiting_magnitude=limiting_magnitude,
        min_radiant_alt_deg=min_radiant_alt_deg,
        max_sun_alt_deg=max_sun_alt_deg,
        step_deg=step_deg,
    )
    land = None
    if land_mask is not None:
        la, lo = np.meshgrid(grid.lat_deg, grid.lon_deg, indexing="ij")
        land = np.asarray(land_mask(la, lo))
    area_w = np.cos(np.radians(grid.lat_deg))[:, None] * np.ones_like(grid.observable, float)
    summary = {
        "index": k,
        "year": e.get("year"),
        "trail": e.get("trail"),
        "peak_utc": e["peak_utc"],
        "radiant": e["radiant"],
        "zhr": e.get("zhr"),
        "population_index": r_pop,
        "thresholds": {
            "limiting_magnitude": limiting_magnitude,
            "min_radiant_alt_deg": min_radiant_alt_deg,
            "max_sun_alt_deg": max_sun_alt_deg,
        },
        "grid_step_deg": step_deg,
        "observable_fraction_of_earth": round(
            float((area_w * grid.observable).sum() / area_w.sum()), 4
        ),
        "hourly_rate_max": round(float(np.nan_to_num(grid.hourly_rate).max()), 1),
        "moon": {
            "illuminated_fraction": round(grid.moon_illuminated_fraction, 3),
            "radiant_separation_deg": round(grid.moon_radiant_separation_deg, 1),
        },
        "regions": best_regions(grid, land),
        "method": METHOD,
        "cautions": list(OBSERVING_CAUTIONS),
    }
    return summary, grid
