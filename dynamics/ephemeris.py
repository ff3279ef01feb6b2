"""Positions, velocities and masses of the Sun, Moon and planets from the DE423 ephemeris.

This is the only module of trailcast that reads the planetary ephemeris. It wraps the
Development Ephemeris DE423 (Folkner 2010), distributed as the ``de423`` Python package and read by
``jplephem``'s package reader (``jplephem.ephem.Ephemeris``, which jplephem marks as deprecated:
keeping it behind this one door means a switch to another reader touches only this file).

Conventions of everything returned here:

- **Time**: Julian dates in TDB (the time argument of the DE ephemerides, strictly T_eph, which
  differs from TDB by a constant offset far below a microsecond).
- **Frame**: ecliptic and mean equinox of J2000.0. DE423 is given in the ICRF (equatorial); its
  vectors are rotated about the x axis by the IAU 1976 obliquity of J2000 (84381.448 arcsec, see
  :mod:`dynamics.frames`). The ICRF is treated as the mean equator and equinox of J2000: the frame
  bias (about 0.02 arcsec, i.e. 1.5e-8 au at 1 au) is neglected.
- **Origin**: the solar-system barycentre, except in :func:`heliocentric_state`.
- **Units**: au, au/day, au^3/day^2. Kilometres are converted to au with DE423's own value of the
  au (``AU`` in its header, 149597870.6996262 km), the scale with which DE423 was fitted and in which
  its GM values are expressed. The IAU 2012 value (149597870.700 km, :data:`dynamics.constants.AU_KM`)
  is 3.7e-4 km larger: a relative difference of 2.5e-12, i.e. 1e-10 au at Neptune, far below
  anything trailcast resolves.
- **Earth and Moon**: DE423 tabulates the Earth-Moon barycentre (EMB) and the geocentric Moon.
  Earth = EMB - Moon / (1 + EMRAT), Moon = EMB + Moon * EMRAT / (1 + EMRAT), EMRAT being the
  Earth/Moon mass ratio of DE423. Earth and EMB differ by up to about 4,700 km.

The ephemeris covers 1799-12-16 to 2200-02-01 (TDB). Times outside that span raise
:class:`~dynamics.errors.OutsideTimeSpan`; nothing is ever extrapolated. To follow the planets
beyond the span, integrate them from a state inside it.

References
----------
Folkner, W. M. (2010), "Planetary ephemeris DE423 fit to Messenger encounters with Mercury",
Interoffice Memorandum 343R-10-001.
"""

from __future__ import annotations

import threading
import warnings
from importlib import metadata

import numpy as np

from .errors import OutsideTimeSpan
from .frames import equatorial_to_ecliptic

#: Bodies whose states this module returns ("earthmoon" is the Earth-Moon barycentre).
BODIES = (
    "sun",
    "mercury",
    "venus",
    "earth",
    "moon",
    "earthmoon",
    "mars",
    "jupiter",
    "saturn",
    "uranus",
    "neptune",
)

#: First and last TDB Julian dates covered by DE423 (its header values ``jalpha`` and ``jomega``;
#: checked against the installed package when it is first loaded).
EPHEMERIS_SPAN_TDB_JD = (2_378_480.5, 2_524_624.5)
#: The same span as calendar dates (TDB), from ``erfa.jd2cal`` of the values above.
EPHEMERIS_SPAN_TDB_ISO = ("1799-12-16", "2200-02-01")

_EPHEMERIS_NAME = "DE423"
_CITATION = (
    "Folkner, W. M. (2010), Planetary ephemeris DE423 fit to Messenger encounters with Mercury, "
    "Interoffice Memorandum 343R-10-001"
)

# Series in DE423 whose barycentric state is the body's own state (everything but Earth, Moon).
_DIRECT_SERIES = {
    "sun": "sun",
    "mercury": "mercury",
    "venus": "venus",
    "earthmoon": "earthmoon",
    "mars": "mars",
    "jupiter": "jupiter",
    "saturn": "saturn",
    "uranus": "uranus",
    "neptune": "neptune",
}
# Header constant holding each directly tabulated body's GM (au^3/day^2).
_GM_KEYS = {
    "sun": "GMS",
    "mercury": "GM1",
    "venus": "GM2",
    "earthmoon": "GMB",
    "mars": "GM4",
    "jupiter": "GM5",
    "saturn": "GM6",
    "uranus": "GM7",
    "neptune": "GM8",
}

_lock = threading.Lock()
_ephemeris = None  # the jplephem reader, created on first use
_loaded_series: set[str] = set()


def _reader():
    """Return the process-wide DE423 reader, creating it on first use (thread-safe)."""
    global _ephemeris
    eph = _ephemeris
    if eph is not None:
        return eph
    with _lock:
        if _ephemeris is None:
            with warnings.catch_warnings():
                # jplephem flags its package reader as deprecated; we use it on purpose, here only.
                warnings.simplefilter("ignore", DeprecationWarning)
                import de423
                from jplephem.ephem import Ephemeris

                eph = Ephemeris(de423)
            span = (float(eph.jalpha), float(eph.jomega))
            if span != EPHEMERIS_SPAN_TDB_JD:  # pragma: no cover - only with another package
                raise RuntimeError(
                    f"the installed de423 package covers JD {span}, not {EPHEMERIS_SPAN_TDB_JD}"
                )
            _ephemeris = eph
    return _ephemeris


def _series_km(name: str, t_flat: np.ndarray) -> np.ndarray:
    """Raw DE423 series ``name`` at TDB JDs ``t_flat`` (1-D): (n, 6) in km and km/day, ICRF."""
    eph = _reader()
    if name not in _loaded_series:
        with _lock:  # jplephem caches series in a plain dict: fill it under the lock
            eph.load(name)
            _loaded_series.add(name)
    return np.asarray(eph.compute(name, t_flat)).T


def _check_times(t_tdb_jd) -> np.ndarray:
    """Return the times as a float array, raising if any lies outside DE423's span."""
    t = np.asarray(t_tdb_jd, dtype=float)
    if not np.all(np.isfinite(t)):
        raise ValueError("t_tdb_jd must be finite")
    first, last = EPHEMERIS_SPAN_TDB_JD
    outside = (t < first) | (t > last)
    if np.any(outside):
        bad = float(t[outside].flat[0])
        raise OutsideTimeSpan(
            f"{_EPHEMERIS_NAME} covers {EPHEMERIS_SPAN_TDB_ISO[0]} to {EPHEMERIS_SPAN_TDB_ISO[1]} "
            f"TDB (JD {first} to {last}); got JD {bad:.6f} (TDB). trailcast never extrapolates "
            "the ephemeris: ask for times between 1800 and 2199, and give orbits with an "
            "epoch in that span (propagate them there with your orbit software).",
            span=EPHEMERIS_SPAN_TDB_JD,
        )
    return t


def _check_body(body: str) -> str:
    if body not in BODIES:
        raise ValueError(f"unknown body {body!r}; valid names are: {', '.join(BODIES)}")
    return body


def _to_au_ecliptic(pv_km: np.ndarray, shape: tuple[int, ...]):
    """(n, 6) km, km/day equatorial -> (r_au, v_au_d) ecliptic J2000, each shape + (3,)."""
    au_km = float(_reader().AU)
    r_au = equatorial_to_ecliptic(pv_km[:, :3] / au_km).reshape(shape + (3,))
    v_au_d = equatorial_to_ecliptic(pv_km[:, 3:] / au_km).reshape(shape + (3,))
    return r_au, v_au_d


def _barycentric_pv_km(bodies, t_flat: np.ndarray) -> dict[str, np.ndarray]:
    """Barycentric (n, 6) km, km/day ICRF states of ``bodies``; Earth/Moon series read once."""
    eph = _reader()
    out: dict[str, np.ndarray] = {}
    need_moon = any(b in ("earth", "moon") for b in bodies)
    if need_moon:
        emb = _series_km("earthmoon", t_flat)
        moon_geo = _series_km("moon", t_flat)  # Moon relative to Earth
        emrat = float(eph.EMRAT)
    for body in bodies:
        if body in out:
            continue
        if body == "earth":
            out[body] = emb - moon_geo / (1.0 + emrat)
        elif body == "moon":
            out[body] = emb + moon_geo * (emrat / (1.0 + emrat))
        elif body == "earthmoon" and need_moon:
            out[body] = emb
        else:
            out[body] = _series_km(_DIRECT_SERIES[body], t_flat)
    return out


def barycentric_states(bodies, t_tdb_jd, *, stacked: bool = False):
    """Barycentric states of several bodies at the same times, reading each series once.

    Parameters
    ----------
    bodies : sequence of str
        Names from :data:`BODIES`.
    t_tdb_jd : float or array_like
        Julian dates, TDB, inside :data:`EPHEMERIS_SPAN_TDB_JD`.
    stacked : bool, optional
        If False (default) return a dict; if True return two arrays stacked in the order of
        ``bodies``.

    Returns
    -------
    dict of str to (r_au, v_au_d), or (r_au, v_au_d)
        Positions (au) and velocities (au/day) relative to the solar-system barycentre in the
        ecliptic J2000 frame, each of shape ``np.shape(t_tdb_jd) + (3,)``; stacked, shape
        ``(len(bodies),) + np.shape(t_tdb_jd) + (3,)``.

    Raises
    ------
    ValueError
        For a name not in :data:`BODIES`.
    OutsideTimeSpan
        If any time lies outside DE423's span.

    Notes
    -----
    Earth and Moon come from DE423's Earth-Moon barycentre and geocentric Moon (see the module
    docstring); asking for both costs the same as asking for one. Setting up an N-body
    integration (Sun and eight planets at one epoch) is one call.
    """
    bodies = [_check_body(b) for b in bodies]
    t = _check_times(t_tdb_jd)
    shape = t.shape
    pv = _barycentric_pv_km(bodies, t.ravel())
    states = {b: _to_au_ecliptic(pv[b], shape) for b in bodies}
    if not stacked:
        return states
    r_au = np.stack([states[b][0] for b in bodies])
    v_au_d = np.stack([states[b][1] for b in bodies])
    return r_au, v_au_d


def barycentric_state(body: str, t_tdb_jd):
    """Position and velocity of a body relative to the solar-system barycentre.

    Parameters
    ----------
    body : str
        One of :data:`BODIES`.
    t_tdb_jd : float or array_like
        Julian dates, TDB, inside :data:`EPHEMERIS_SPAN_TDB_JD` (1799-12-16 to 2200-02-01).

    Returns
    -------
    r_au : ndarray, shape (3,) for a scalar time, ``np.shape(t_tdb_jd) + (3,)`` otherwise
        Barycentric position, au, ecliptic and mean equinox J2000.
    v_au_d : ndarray, same shape
        Barycentric velocity, au/day, same frame.

    Raises
    ------
    ValueError
        For a name not in :data:`BODIES` (the message lists them).
    OutsideTimeSpan
        If any time lies outside DE423's span; nothing is extrapolated.

    References
    ----------
    Folkner (2010), IOM 343R-10-001 (DE423).

    Examples
    --------
    >>> r_au, v_au_d = barycentric_state("jupiter", [2451545.0, 2451910.0])
    >>> r_au.shape
    (2, 3)
    """
    _check_body(body)
    return barycentric_states([body], t_tdb_jd)[body]


def heliocentric_state(body: str, t_tdb_jd):
    """Position and velocity of a body relative to the Sun's centre.

    Same parameters, units (au, au/day), frame (ecliptic J2000), shapes and exceptions as
    :func:`barycentric_state`; the result is the body's barycentric state minus the Sun's.

    Examples
    --------
    Earth's distance from the Sun at J2000.0 (2000 Jan 1.5 TDB), a few days before perihelion:

    >>> import numpy as np
    >>> r_au, v_au_d = heliocentric_state("earth", 2451545.0)
    >>> round(float(np.linalg.norm(r_au)), 4)
    0.9833
    """
    _check_body(body)
    states = barycentric_states([body, "sun"], t_tdb_jd)
    (r_au, v_au_d), (r_sun_au, v_sun_au_d) = states[body], states["sun"]
    return r_au - r_sun_au, v_au_d - v_sun_au_d


def gm_au3_d2(body: str) -> float:
    """Gravitational parameter GM of a body as adopted by DE423, in au^3/day^2.

    Earth and Moon are split from DE423's Earth-Moon GM (``GMB``) with its mass ratio EMRAT:
    GM_earth = GMB * EMRAT / (1 + EMRAT), GM_moon = GMB / (1 + EMRAT); "earthmoon" is GMB itself.
    Planets are whole systems (planet plus satellites), as in DE423.

    Parameters
    ----------
    body : str
        One of :data:`BODIES`.

    Returns
    -------
    float
        GM in au^3/day^2 (au being DE423's au).

    Raises
    ------
    ValueError
        For a name not in :data:`BODIES`.

    Examples
    --------
    >>> round(gm_au3_d2("sun") / gm_au3_d2("jupiter"))
    1047
    """
    _check_body(body)
    eph = _reader()
    if body in ("earth", "moon"):
        gmb, emrat = float(eph.GMB), float(eph.EMRAT)
        return gmb * emrat / (1.0 + emrat) if body == "earth" else gmb / (1.0 + emrat)
    return float(getattr(eph, _GM_KEYS[body]))


def _package_version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:  # pragma: no cover
        return "unknown"


def ephemeris_info() -> dict:
    """Provenance of the planetary ephemeris, for output metadata.

    Returns
    -------
    dict
        ``name``, ``span_tdb_jd`` and ``span_tdb_iso`` (first, last), ``source`` (citation),
        ``units``, ``frame``, ``origin``, ``earth`` (how Earth is derived), ``au_km`` and ``emrat``
        (DE423 header values) and ``reader`` (package versions).
    """
    eph = _reader()
    return {
        "name": _EPHEMERIS_NAME,
        "span_tdb_jd": list(EPHEMERIS_SPAN_TDB_JD),
        "span_tdb_iso": list(EPHEMERIS_SPAN_TDB_ISO),
        "source": _CITATION,
        "units": {"length": "au", "time": "day (TDB)", "velocity": "au/day", "gm": "au^3/day^2"},
        "frame": (
            "ecliptic and mean equinox J2000 (ICRF rotated by the IAU 1976 obliquity "
            "84381.448 arcsec; frame bias of about 0.02 arcsec neglected)"
        ),
        "origin": "solar-system barycentre",
        "earth": "Earth = EMB - Moon(geocentric) / (1 + EMRAT)",
        "au_km": float(eph.AU),
        "emrat": float(eph.EMRAT),
        "reader": {
            "jplephem": _package_version("jplephem"),
            "de423": _package_version("de423"),
        },
    }
