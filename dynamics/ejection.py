"""Release of meteoroids from a comet: sizes, radiation pressure, ejection speeds and directions.

Pure functions, numpy in and numpy out, broadcasting over arrays of particles. Units are in the
names: grain radius in cm, density in g/cm^3, mass in g, heliocentric distance in au, speeds in
m/s or au/day; ``mu`` in au^3/day^2 (``GM_SUN_AU3_D2`` by default).

Contents
--------
- Radiation pressure: :func:`beta_burns` (Burns, Lamy & Soter 1979).
- Spheres: :func:`radius_cm_from_mass`, :func:`mass_g_from_radius`.
- Ejection speed laws in one table, :data:`EJECTION_SPEED_LAWS`, all called as
  ``law(mass_g, r_au, *, nucleus_radius_km, nucleus_density_g_cm3, meteoroid_density_g_cm3)``;
  the default is :data:`DEFAULT_EJECTION_SPEED_LAW` (Whipple 1951).
- Mass sampling and weights: :func:`sample_log_uniform_masses_g`,
  :func:`mass_distribution_weights`, :func:`population_index_from_mass_index` and inverse.
- Directions: :func:`sunward_directions` (laws in :data:`DIRECTION_LAWS`).
- Activity along the orbit: :func:`activity_weights`.
- Orbits under reduced solar gravity mu (1 - beta): :func:`inverse_semimajor_axis_per_au`,
  :func:`period_days_under_radiation`, :func:`is_unbound`, :func:`critical_beta`.
- Units: :func:`ejection_velocities_au_d`.

A note on the radiation-pressure constant
-----------------------------------------
Burns, Lamy & Soter (1979) write beta = 5.7e-5 Q_pr / (rho s) with rho in g/cm^3 and s in cm,
i.e. 5.7e-4 Q_pr / (rho s) with rho in kg/m^3 and s in m (the same number, 3 L_sun /
(16 pi G M_sun c) = 5.74e-4 kg/m^2, in SI). The coefficient 5.7e-4 with cgs units, which also
circulates, is ten times too large: it would put beta = 1 at s = 5.7 um instead of the 0.57 um
the paper finds for rho = 1 g/cm^3. This module uses the cgs coefficient 5.7e-5 g/cm^2.

References
----------
Burns, J. A., Lamy, P. L., Soter, S. (1979), Radiation forces on small particles in the solar
system, Icarus 40, 1-48.
Whipple, F. L. (1951), A comet model. II. Physical relations for comets and meteors, ApJ 113,
464-474.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from .constants import AU_M, DAY_S, GM_SUN_AU3_D2

__all__ = [
    "DEFAULT_EJECTION_SPEED_LAW",
    "DIRECTION_LAWS",
    "EJECTION_SPEED_LAWS",
    "activity_weights",
    "beta_burns",
    "critical_beta",
    "ejection_speed_law",
    "ejection_velocities_au_d",
    "escape_speed_m_s",
    "inverse_semimajor_axis_per_au",
    "is_unbound",
    "mass_distribution_weights",
    "mass_g_from_radius",
    "mass_index_from_population_index",
    "period_days_under_radiation",
    "population_index_from_mass_index",
    "radius_cm_from_mass",
    "sample_log_uniform_masses_g",
    "sunward_directions",
    "whipple_speed_m_s",
]

# Burns, Lamy & Soter (1979), Icarus 40, 1, eq. (19), from memory: beta = 5.7e-5 Q_pr/(rho s),
# rho in g/cm^3, s in cm. It equals 3 L_sun/(16 pi G M_sun c) = 5.74e-5 g/cm^2 with the IAU 2015
# B3 nominal L_sun and GM_sun (hand calculation; checked in tests/test_ejection.py).
BETA_COEFFICIENT_BLS1979_G_CM2 = 5.7e-5

# Whipple (1951) speed law in the mass form used in meteoroid-stream modelling (from memory):
# V = 8.03 r^-1.125 rho^-1/3 R_c^1/2 m^-1/6 m/s, r in au, rho in g/cm^3, R_c in km, m in g.
WHIPPLE_COEFFICIENT_M_S = 8.03
WHIPPLE_DISTANCE_EXPONENT = -1.125  # r^-9/8

# Newtonian constant of gravitation, CODATA 2018 recommended value (m^3 kg^-1 s^-2); only the
# escape speed from the nucleus uses it.
_G_SI = 6.67430e-11

# Default densities (g/cm^3) when a caller gives none: common practice, no source (cometary
# meteoroids are often modelled with 0.3-1 g/cm^3, nuclei with 0.5-1 g/cm^3).
DEFAULT_METEOROID_DENSITY_G_CM3 = 1.0
DEFAULT_NUCLEUS_DENSITY_G_CM3 = 1.0

# Default exponent k of the activity law r^-k: common practice, no single source (k = 2-4 used).
DEFAULT_ACTIVITY_EXPONENT = 2.0

DIRECTION_LAWS = ("cosine", "uniform", "isotropic")

_M_S_TO_AU_D = DAY_S / AU_M  # 1 m/s in au/day


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------
def _arr(x) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _out(x):
    """Return 0-d arrays as numpy scalars, larger arrays unchanged."""
    x = np.asarray(x)
    return x[()] if x.ndim == 0 else x


def _require_positive(name: str, x: np.ndarray) -> None:
    if not np.all(np.isfinite(x) & (x > 0.0)):
        raise ValueError(f"{name} must be positive and finite")


def _rng(rng) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


# --------------------------------------------------------------------------------------------
# Radiation pressure and spheres
# --------------------------------------------------------------------------------------------
def beta_burns(radius_cm, density_g_cm3, q_pr=1.0):
    """Ratio beta of solar radiation pressure to solar gravity for a sphere.

    beta = 5.7e-5 Q_pr / (rho s), rho in g/cm^3 and s in cm (Burns, Lamy & Soter 1979, eq. 19;
    equivalently 3 L_sun Q_pr / (16 pi G M_sun c rho s)). Independent of heliocentric distance,
    since both forces fall as r^-2.

    Parameters
    ----------
    radius_cm : array_like
        Grain radius s (cm), > 0.
    density_g_cm3 : array_like
        Bulk density rho of the grain (g/cm^3), > 0.
    q_pr : array_like, optional
        Radiation-pressure efficiency averaged over the solar spectrum; 1 for a perfectly
        absorbing grain in the geometric-optics limit.

    Returns
    -------
    ndarray or float
        beta (dimensionless).

    Raises
    ------
    ValueError
        If a radius or density is not positive and finite.

    Notes
    -----
    Valid in the geometric-optics limit, s much larger than the wavelengths carrying the solar
    flux (about 0.5 um), in practice s >~ 1 um. For smaller grains Q_pr falls (Mie theory) and
    beta peaks near 0.1-0.5 um instead of growing as 1/s. Meteoroids that make visual meteors
    (s >~ 0.1 mm) are far inside the range of validity. Burns et al. (1979) note that beta = 1
    near s = 0.57 um for rho = 1 g/cm^3 with Q_pr = 1 (from memory).

    Examples
    --------
    >>> round(float(beta_burns(0.1, 1.0)), 8)  # 1 mm radius, 1 g/cm^3
    0.00057
    """
    s, rho = _arr(radius_cm), _arr(density_g_cm3)
    _require_positive("radius_cm", s)
    _require_positive("density_g_cm3", rho)
    return _out(BETA_COEFFICIENT_BLS1979_G_CM2 * _arr(q_pr) / (rho * s))


def mass_g_from_radius(radius_cm, density_g_cm3):
    """Mass of a homogeneous sphere, m = (4/3) pi rho s^3.

    Parameters
    ----------
    radius_cm : array_like
        Radius (cm), > 0.
    density_g_cm3 : array_like
        Bulk density (g/cm^3), > 0.

    Returns
    -------
    ndarray or float
        Mass (g).

    Examples
    --------
    >>> round(float(mass_g_from_radius(0.1, 1.0)), 8)  # 4 pi / 3 * 1e-3
    0.00418879
    """
    s, rho = _arr(radius_cm), _arr(density_g_cm3)
    _require_positive("radius_cm", s)
    _require_positive("density_g_cm3", rho)
    return _out(4.0 / 3.0 * np.pi * rho * s**3)


def radius_cm_from_mass(mass_g, density_g_cm3):
    """Radius of a homogeneous sphere, s = (3 m / (4 pi rho))^(1/3).

    Parameters
    ----------
    mass_g : array_like
        Mass (g), > 0.
    density_g_cm3 : array_like
        Bulk density (g/cm^3), > 0.

    Returns
    -------
    ndarray or float
        Radius (cm).
    """
    m, rho = _arr(mass_g), _arr(density_g_cm3)
    _require_positive("mass_g", m)
    _require_positive("density_g_cm3", rho)
    return _out(np.cbrt(3.0 * m / (4.0 * np.pi * rho)))


# --------------------------------------------------------------------------------------------
# Ejection speed
# --------------------------------------------------------------------------------------------
def escape_speed_m_s(nucleus_radius_km, nucleus_density_g_cm3=DEFAULT_NUCLEUS_DENSITY_G_CM3):
    """Escape speed from the surface of a homogeneous spherical nucleus.

    v_esc = sqrt(2 G M / R) = R sqrt(8 pi G rho_c / 3), with G from CODATA 2018.

    Parameters
    ----------
    nucleus_radius_km : array_like
        Nucleus radius R_c (km), > 0.
    nucleus_density_g_cm3 : array_like, optional
        Nucleus bulk density rho_c (g/cm^3), > 0.

    Returns
    -------
    ndarray or float
        Escape speed (m/s); about 0.75 m/s per km of radius for rho_c = 1 g/cm^3.
    """
    r_km, rho = _arr(nucleus_radius_km), _arr(nucleus_density_g_cm3)
    _require_positive("nucleus_radius_km", r_km)
    _require_positive("nucleus_density_g_cm3", rho)
    rho_kg_m3 = 1000.0 * rho
    return _out(1000.0 * r_km * np.sqrt(8.0 * np.pi * _G_SI * rho_kg_m3 / 3.0))


def whipple_speed_m_s(
    mass_g,
    r_au,
    nucleus_radius_km,
    nucleus_density_g_cm3=DEFAULT_NUCLEUS_DENSITY_G_CM3,
    meteoroid_density_g_cm3=DEFAULT_METEOROID_DENSITY_G_CM3,
    *,
    subtract_escape_speed=False,
):
    """Ejection speed of a meteoroid dragged off the nucleus by sublimating gas (Whipple 1951).

    Implemented form (the mass form used in meteoroid-stream modelling, coefficient *from
    memory*, not checked against Whipple's paper)::

        V = 8.03 r^-1.125 rho_m^-1/3 R_c^1/2 m^-1/6   (m/s)

    with r the heliocentric distance (au), rho_m the **meteoroid** bulk density (g/cm^3), R_c the
    nucleus radius (km) and m the meteoroid mass (g).

    The density in this form is the meteoroid's, not the nucleus's: the gas-drag acceleration of
    a grain of radius b is proportional to 1/(rho_m b), Whipple's speed to (rho_m b)^-1/2, and
    with b = (3 m / (4 pi rho_m))^(1/3) that becomes (4 pi / 3)^(1/6) rho_m^-1/3 m^-1/6. The
    nucleus density enters only through the escape speed.

    Whipple's own form, in grain radius b (cm), also recalled *from memory*, is
    V^2 = 43.7 R_c (1 / (b rho_m r^(9/4)) - 0.013 R_c) (m^2/s^2). Its last term is the square of
    the escape speed from a nucleus of density about 1 g/cm^3 (0.568 R_c^2 against
    8 pi G rho_c R_c^2 / 3 = 0.559 R_c^2 m^2/s^2 for rho_c = 1). Its drag term gives a
    coefficient 8.39 in the mass form, 4.5 % above the 8.03 implemented here (8.03 corresponds to
    40.0 in place of 43.7); we have not resolved which of the two recollections is exact.

    With ``subtract_escape_speed=True`` the speed is sqrt(max(V^2 - v_esc^2, 0)) with v_esc from
    :func:`escape_speed_m_s` for the given nucleus radius and density (Whipple's correction,
    generalised to any nucleus density); grains too heavy to be lifted get speed 0.

    Parameters
    ----------
    mass_g : array_like
        Meteoroid mass m (g), > 0.
    r_au : array_like
        Heliocentric distance at ejection (au), > 0.
    nucleus_radius_km : array_like
        Nucleus radius R_c (km), > 0.
    nucleus_density_g_cm3 : array_like, optional
        Nucleus bulk density (g/cm^3); used only with ``subtract_escape_speed``.
    meteoroid_density_g_cm3 : array_like, optional
        Meteoroid bulk density rho_m (g/cm^3).
    subtract_escape_speed : bool, optional
        Subtract the nucleus escape speed in quadrature (default False, the plain form).

    Returns
    -------
    ndarray or float
        Ejection speed relative to the nucleus (m/s).

    Notes
    -----
    Limits of validity: an order-of-magnitude model of a water-ice sublimation driven gas flow
    (Whipple 1951); meaningful roughly within r <~ 3 au, where water ice sublimates (the r^-9/8
    law comes from the model's assumed gas production), and for grains light enough to be
    lifted (see ``subtract_escape_speed``). Speeds are typically uncertain by a factor of about 2;
    for mm grains at 1 au from a km-sized nucleus it gives tens of m/s. Speeds fall as m^-1/6,
    as r^-9/8 and rise as R_c^1/2.

    References
    ----------
    Whipple, F. L. (1951), ApJ 113, 464 (speed of meteoroids ejected by gas drag).

    Examples
    --------
    >>> round(float(whipple_speed_m_s(1e-3, 1.0, 1.0)), 3)  # 8.03 * 10**0.5
    25.393
    """
    m, r = _arr(mass_g), _arr(r_au)
    rc, rho_m = _arr(nucleus_radius_km), _arr(meteoroid_density_g_cm3)
    _require_positive("mass_g", m)
    _require_positive("r_au", r)
    _require_positive("nucleus_radius_km", rc)
    _require_positive("meteoroid_density_g_cm3", rho_m)
    v = (
        WHIPPLE_COEFFICIENT_M_S
        * r**WHIPPLE_DISTANCE_EXPONENT
        * np.cbrt(rho_m) ** -1.0
        * np.sqrt(rc)
        * m ** (-1.0 / 6.0)
    )
    if subtract_escape_speed:
        v_esc = _arr(escape_speed_m_s(rc, nucleus_density_g_cm3))
        v = np.sqrt(np.maximum(v * v - v_esc * v_esc, 0.0))
    return _out(v)


def _whipple1951(
    mass_g, r_au, *, nucleus_radius_km, nucleus_density_g_cm3, meteoroid_density_g_cm3
):
    """Whipple (1951), plain mass form; see :func:`whipple_speed_m_s`."""
    return whipple_speed_m_s(
        mass_g, r_au, nucleus_radius_km, nucleus_density_g_cm3, meteoroid_density_g_cm3
    )


def _whipple1951_escape(
    mass_g, r_au, *, nucleus_radius_km, nucleus_density_g_cm3, meteoroid_density_g_cm3
):
    """Whipple (1951) with the nucleus escape speed subtracted; see :func:`whipple_speed_m_s`."""
    return whipple_speed_m_s(
        mass_g,
        r_au,
        nucleus_radius_km,
        nucleus_density_g_cm3,
        meteoroid_density_g_cm3,
        subtract_escape_speed=True,
    )


#: Ejection-speed laws by lowercase name. Every entry is called as
#: ``law(mass_g, r_au, *, nucleus_radius_km, nucleus_density_g_cm3, meteoroid_density_g_cm3)``
#: and returns speeds in m/s. Crifo & Rodionov (1997) is not included: its formula has not been
#: checked against the paper.
EJECTION_SPEED_LAWS: dict[str, Callable[..., np.ndarray]] = {
    "whipple1951": _whipple1951,
    "whipple1951_escape": _whipple1951_escape,
}
DEFAULT_EJECTION_SPEED_LAW = "whipple1951"


def ejection_speed_law(name: str = DEFAULT_EJECTION_SPEED_LAW) -> Callable[..., np.ndarray]:
    """The ejection-speed law registered under ``name`` in :data:`EJECTION_SPEED_LAWS`.

    Raises
    ------
    ValueError
        If ``name`` is not registered; the message lists the known names.
    """
    try:
        return EJECTION_SPEED_LAWS[name]
    except KeyError:
        known = ", ".join(sorted(EJECTION_SPEED_LAWS))
        raise ValueError(f"unknown ejection speed law {name!r}; known: {known}") from None


# --------------------------------------------------------------------------------------------
# Masses
# --------------------------------------------------------------------------------------------
def sample_log_uniform_masses_g(n, m_min_g, m_max_g, rng=None):
    """Draw ``n`` masses uniformly in log m between ``m_min_g`` and ``m_max_g``.

    Parameters
    ----------
    n : int
        Number of masses.
    m_min_g, m_max_g : float
        Mass range (g), 0 < m_min_g <= m_max_g.
    rng : numpy.random.Generator or int or None
        Random generator, or a seed for ``numpy.random.default_rng``.

    Returns
    -------
    ndarray, shape (n,)
        Masses (g), probability density 1 / (m ln(m_max/m_min)).

    Notes
    -----
    Weight each sample with :func:`mass_distribution_weights` to represent a power-law
    population.
    """
    lo, hi = float(m_min_g), float(m_max_g)
    if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 < lo <= hi):
        raise ValueError("need 0 < m_min_g <= m_max_g, both finite")
    u = _rng(rng).random(int(n))
    return np.exp(math.log(lo) + u * (math.log(hi) - math.log(lo)))


def mass_distribution_weights(mass_g, mass_index, m_ref_g=1.0):
    """Relative number of real meteoroids each log-uniformly sampled particle represents.

    For a differential mass distribution dN/dm = A m^-s and masses drawn with probability density
    p(m) = 1 / (m ln(m_max/m_min)), the importance weight is dN/dm / p(m) ∝ m^-s * m = m^(1-s).
    This returns (m / m_ref)^(1 - s), i.e. weight 1 at ``m_ref_g``. With ``n`` samples,
    ln(m_max/m_min) / n * sum(w_i [m_i in M]) estimates the number of meteoroids with mass in M
    for the normalisation dN/dm = m_ref^-1 (m / m_ref)^-s.

    Parameters
    ----------
    mass_g : array_like
        Sampled masses (g), > 0.
    mass_index : float or array_like
        Differential mass index s (typically 1.7-2.2 for cometary streams).
    m_ref_g : float, optional
        Reference mass (g) where the weight is 1.

    Returns
    -------
    ndarray or float
        Weights (dimensionless, relative).
    """
    m = _arr(mass_g)
    _require_positive("mass_g", m)
    _require_positive("m_ref_g", _arr(m_ref_g))
    return _out((m / _arr(m_ref_g)) ** (1.0 - _arr(mass_index)))


def population_index_from_mass_index(mass_index):
    """Population index r = 10^((s - 1)/2.5) from the differential mass index s.

    Inverse of s = 1 + 2.5 log10 r (common practice, no source; it assumes meteor brightness
    proportional to mass at a fixed speed).

    Examples
    --------
    >>> round(float(population_index_from_mass_index(2.0)), 4)
    2.5119
    """
    return _out(10.0 ** ((_arr(mass_index) - 1.0) / 2.5))


def mass_index_from_population_index(population_index):
    """Differential mass index s = 1 + 2.5 log10 r from the population index r (> 0).

    Common practice, no source; inverse of :func:`population_index_from_mass_index`.
    """
    r = _arr(population_index)
    _require_positive("population_index", r)
    return _out(1.0 + 2.5 * np.log10(r))


# --------------------------------------------------------------------------------------------
# Directions and activity
# --------------------------------------------------------------------------------------------
def sunward_directions(sun_unit_vectors, rng=None, law="cosine"):
    """Random unit ejection directions about the direction to the Sun.

    Parameters
    ----------
    sun_unit_vectors : array_like, shape (..., 3)
        Direction from the nucleus towards the Sun (e.g. ``-r / |r|`` for heliocentric position
        ``r``), one per particle; normalised here.
    rng : numpy.random.Generator or int or None
        Random generator, or a seed for ``numpy.random.default_rng``.
    law : {"cosine", "uniform", "isotropic"}
        ``"cosine"``: sunward hemisphere with density ∝ cos(theta) (Lambertian;
        cos(theta) = sqrt(U)), mean cos(theta) = 2/3. ``"uniform"``: uniform over the sunward
        hemisphere (cos(theta) = U), mean 1/2. ``"isotropic"``: uniform over the sphere
        (cos(theta) = 2U - 1), mean 0. theta is the angle from the Sun direction, U uniform
        on [0, 1). A sunward hemisphere with a cosine law is common practice, no source.

    Returns
    -------
    ndarray, shape (..., 3)
        Unit vectors, same frame as the input.

    Raises
    ------
    ValueError
        If ``law`` is not one of :data:`DIRECTION_LAWS` or a Sun vector is zero or not finite.
    """
    if law not in DIRECTION_LAWS:
        raise ValueError(f"unknown direction law {law!r}; known: {', '.join(DIRECTION_LAWS)}")
    u = _arr(sun_unit_vectors)
    if u.shape[-1:] != (3,):
        raise ValueError("sun_unit_vectors must have shape (..., 3)")
    norm = np.linalg.norm(u, axis=-1, keepdims=True)
    if not np.all(np.isfinite(norm) & (norm > 0.0)):
        raise ValueError("sun_unit_vectors must be finite and non-zero")
    u = u / norm
    # Orthonormal basis (e1, e2) perpendicular to u: cross u with the coordinate axis least
    # aligned with it (x unless |u_x| > 0.9, then y), so the cross product is never small.
    helper = np.zeros_like(u)
    use_y = np.abs(u[..., 0]) > 0.9
    helper[..., 0] = np.where(use_y, 0.0, 1.0)
    helper[..., 1] = np.where(use_y, 1.0, 0.0)
    e1 = np.cross(helper, u)
    e1 /= np.linalg.norm(e1, axis=-1, keepdims=True)
    e2 = np.cross(u, e1)

    gen = _rng(rng)
    shape = u.shape[:-1]
    uu = gen.random(shape)
    phi = 2.0 * np.pi * gen.random(shape)
    if law == "cosine":
        cos_t = np.sqrt(uu)
    elif law == "uniform":
        cos_t = uu
    else:
        cos_t = 2.0 * uu - 1.0
    sin_t = np.sqrt(np.maximum(1.0 - cos_t * cos_t, 0.0))
    c, sc, ss = cos_t[..., None], (sin_t * np.cos(phi))[..., None], (sin_t * np.sin(phi))[..., None]
    return c * u + sc * e1 + ss * e2


def activity_weights(r_au, exponent=DEFAULT_ACTIVITY_EXPONENT):
    """Relative dust production ∝ r^-k at heliocentric distance r, 1 at r = 1 au.

    Parameters
    ----------
    r_au : array_like
        Heliocentric distance (au), > 0.
    exponent : float, optional
        k (default 2, the inverse-square insolation; k = 2-4 is used in practice: common
        practice, no single source).

    Returns
    -------
    ndarray or float
        Weights (dimensionless, relative).
    """
    r = _arr(r_au)
    _require_positive("r_au", r)
    return _out(r ** (-_arr(exponent)))


# --------------------------------------------------------------------------------------------
# Orbits under reduced solar gravity mu (1 - beta)
# --------------------------------------------------------------------------------------------
def inverse_semimajor_axis_per_au(r_au, v_au_d, beta, mu=GM_SUN_AU3_D2):
    """Reciprocal semi-major axis of a particle moving under the reduced gravity mu (1 - beta).

    1/a = 2/r - v^2 / (mu (1 - beta)) (vis-viva with the effective solar GM; radiation pressure
    as a reduction of solar gravity, Burns et al. 1979). Positive for bound (elliptic) orbits.

    Parameters
    ----------
    r_au : array_like
        Heliocentric distance at release (au), > 0.
    v_au_d : array_like
        Heliocentric speed at release (au/day), a magnitude (not a vector).
    beta : array_like
        Radiation-pressure parameter.
    mu : float, optional
        Solar GM (au^3/day^2).

    Returns
    -------
    ndarray or float
        1/a (1/au); ``-inf`` where beta >= 1 (no attracting centre: never bound).

    Notes
    -----
    Poynting-Robertson drag and planetary perturbations are ignored: this is the osculating
    heliocentric two-body value right after release.
    """
    r, v, b = np.broadcast_arrays(_arr(r_au), _arr(v_au_d), _arr(beta))
    mu_eff = mu * (1.0 - b)
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = 2.0 / r - v * v / np.where(mu_eff > 0.0, mu_eff, 1.0)
    return _out(np.where(mu_eff > 0.0, alpha, -np.inf))


def period_days_under_radiation(r_au, v_au_d, beta, mu=GM_SUN_AU3_D2):
    """Orbital period P = 2 pi sqrt(a^3 / (mu (1 - beta))) of a particle after release.

    Parameters
    ----------
    r_au, v_au_d, beta, mu
        As for :func:`inverse_semimajor_axis_per_au`.

    Returns
    -------
    ndarray or float
        Period (days); ``inf`` for unbound particles (1/a <= 0, including beta >= 1), ``nan``
        only where an input is nan. Reduces to Kepler's third law for beta = 0.
    """
    alpha = _arr(inverse_semimajor_axis_per_au(r_au, v_au_d, beta, mu))
    mu_eff = mu * (1.0 - _arr(beta))
    mu_eff = np.broadcast_to(mu_eff, alpha.shape)
    bound = alpha > 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        p = (
            2.0
            * np.pi
            / (np.sqrt(np.where(bound, mu_eff, 1.0)) * np.where(bound, alpha, 1.0) ** 1.5)
        )
    return _out(np.where(bound, p, np.where(np.isnan(alpha), np.nan, np.inf)))


def is_unbound(r_au, v_au_d, beta, mu=GM_SUN_AU3_D2):
    """True where a released particle escapes the Sun: v^2 >= 2 mu (1 - beta) / r.

    Parameters
    ----------
    r_au, v_au_d, beta, mu
        As for :func:`inverse_semimajor_axis_per_au`.

    Returns
    -------
    ndarray of bool or bool
        Always True where beta >= 1.
    """
    r, v, b = _arr(r_au), _arr(v_au_d), _arr(beta)
    return _out(v * v * r >= 2.0 * mu * (1.0 - b))


def critical_beta(r_au, v_au_d, mu=GM_SUN_AU3_D2):
    """The beta above which a particle released with speed v at distance r is unbound.

    beta_crit = 1 - v^2 r / (2 mu), from v^2 = 2 mu (1 - beta) / r. For a parent on an orbit of
    semi-major axis a, vis-viva gives beta_crit = r / (2a); at perihelion of an orbit with
    eccentricity e this is (1 - e) / 2, so near-parabolic parents lose all but the largest grains
    released with their own velocity.

    Parameters
    ----------
    r_au : array_like
        Heliocentric distance (au).
    v_au_d : array_like
        Heliocentric speed at release (au/day).
    mu : float, optional
        Solar GM (au^3/day^2).

    Returns
    -------
    ndarray or float
        beta_crit (dimensionless); <= 0 if the release velocity is already unbound at beta = 0.
    """
    r, v = _arr(r_au), _arr(v_au_d)
    return _out(1.0 - v * v * r / (2.0 * mu))


# --------------------------------------------------------------------------------------------
# Units
# --------------------------------------------------------------------------------------------
def ejection_velocities_au_d(speed_m_s, directions):
    """Ejection velocity vectors in au/day from speeds (m/s) and unit directions.

    Parameters
    ----------
    speed_m_s : array_like, shape (...)
        Speeds (m/s).
    directions : array_like, shape (..., 3)
        Unit vectors (e.g. from :func:`sunward_directions`).

    Returns
    -------
    ndarray, shape (..., 3)
        Velocities (au/day), using AU_M (IAU 2012 B2) and an 86400 s day.

    Examples
    --------
    >>> float(ejection_velocities_au_d(1.0, [1.0, 0.0, 0.0])[0])  # 86400 / 149597870700
    5.775483273639937e-07
    """
    s = _arr(speed_m_s)
    d = _arr(directions)
    return s[..., None] * d * _M_S_TO_AU_D
