"""Reference-frame rotations and coordinate conversions.

Frames used by trailcast:

- *ecliptic J2000*: the mean ecliptic and equinox of J2000.0. Comet elements, all internal
  states and solar longitudes are referred to it.
- *equatorial J2000*: the mean equator and equinox of J2000.0. Radiants (RA, Dec) are given in
  it. trailcast treats it as identical to the ICRF; the frame bias (about 0.02 arcsec) is far
  below anything a meteor forecast resolves.

The two are related by a rotation about the x axis (the equinox direction) by the mean obliquity
of J2000, 84381.448 arcsec (IAU 1976; see :mod:`dynamics.constants`).
"""

import numpy as np

from .constants import OBLIQUITY_J2000_DEG

_EPS = np.deg2rad(OBLIQUITY_J2000_DEG)
_C, _S = np.cos(_EPS), np.sin(_EPS)

#: Rotation matrix taking ecliptic-J2000 Cartesian vectors to equatorial J2000.
ECLIPTIC_TO_EQUATORIAL = np.array([[1.0, 0.0, 0.0], [0.0, _C, -_S], [0.0, _S, _C]])
#: Rotation matrix taking equatorial-J2000 Cartesian vectors to ecliptic J2000.
EQUATORIAL_TO_ECLIPTIC = ECLIPTIC_TO_EQUATORIAL.T


def ecliptic_to_equatorial(xyz):
    """Rotate Cartesian vectors from ecliptic J2000 to equatorial J2000.

    Parameters
    ----------
    xyz : array_like, shape (..., 3)
        Vectors in the ecliptic J2000 frame (any length unit).

    Returns
    -------
    ndarray, shape (..., 3)
        The same vectors in the equatorial J2000 frame, same unit.

    Examples
    --------
    The ecliptic pole lies at declination 90 deg minus the obliquity:

    >>> import numpy as np
    >>> pole = ecliptic_to_equatorial([0.0, 0.0, 1.0])
    >>> round(float(np.degrees(np.arcsin(pole[2]))), 6)
    66.560709
    """
    return np.asarray(xyz, dtype=float) @ ECLIPTIC_TO_EQUATORIAL.T


def equatorial_to_ecliptic(xyz):
    """Rotate Cartesian vectors from equatorial J2000 to ecliptic J2000 (inverse of
    :func:`ecliptic_to_equatorial`)."""
    return np.asarray(xyz, dtype=float) @ EQUATORIAL_TO_ECLIPTIC.T


def spherical_to_cartesian(lon_deg, lat_deg, r=1.0):
    """Convert longitude, latitude (deg) and distance to Cartesian (..., 3).

    Works for any spherical pair of a right-handed frame: (RA, Dec) in equatorial, (lambda,
    beta) in ecliptic coordinates. ``r`` keeps its unit.
    """
    lon = np.deg2rad(np.asarray(lon_deg, dtype=float))
    lat = np.deg2rad(np.asarray(lat_deg, dtype=float))
    r = np.asarray(r, dtype=float)
    cl = np.cos(lat)
    return np.stack(
        np.broadcast_arrays(r * cl * np.cos(lon), r * cl * np.sin(lon), r * np.sin(lat)), axis=-1
    )


def cartesian_to_spherical(xyz):
    """Convert Cartesian vectors (..., 3) to (lon_deg in [0, 360), lat_deg, r).

    Returns
    -------
    lon_deg, lat_deg : ndarray
        Longitude in [0, 360) and latitude in [-90, 90], degrees.
    r : ndarray
        Length of the vectors, in their unit.
    """
    xyz = np.asarray(xyz, dtype=float)
    x, y, z = xyz[..., 0], xyz[..., 1], xyz[..., 2]
    rho = np.hypot(x, y)
    lon = np.mod(np.rad2deg(np.arctan2(y, x)), 360.0)
    lat = np.rad2deg(np.arctan2(z, rho))
    return lon, lat, np.hypot(rho, z)


def ecliptic_to_radec(xyz_ecl):
    """Direction of ecliptic-J2000 vectors as (RA, Dec) J2000 in degrees."""
    ra, dec, _ = cartesian_to_spherical(ecliptic_to_equatorial(xyz_ecl))
    return ra, dec


def angular_separation_deg(lon1_deg, lat1_deg, lon2_deg, lat2_deg):
    """Great-circle separation of two directions (deg), by the Vincenty formula (stable at all
    separations)."""
    l1, b1, l2, b2 = (
        np.deg2rad(np.asarray(a, dtype=float)) for a in (lon1_deg, lat1_deg, lon2_deg, lat2_deg)
    )
    dl = l2 - l1
    num = np.hypot(
        np.cos(b2) * np.sin(dl), np.cos(b1) * np.sin(b2) - np.sin(b1) * np.cos(b2) * np.cos(dl)
    )
    den = np.sin(b1) * np.sin(b2) + np.cos(b1) * np.cos(b2) * np.cos(dl)
    return np.rad2deg(np.arctan2(num, den))
