"""From simulated meteoroids at Earth's path to flux, ZHR, activity profile and window.

Chain of reasoning (every step a named function with its source):

1. Each simulated meteoroid stands for a number of real ones: the dust mass released per return
   spread over a power-law mass distribution of index s (:func:`meteoroids_per_particle`).
2. Only meteoroids bright enough to count for a ZHR matter: mass above the limit that gives a
   +6.5 mag meteor at their speed (:func:`limiting_mass_g`).
3. The simulated meteoroids pierce the ecliptic near Earth's path during a window of 2W days.
   Their piercing rate per unit area, divided by each one's speed across the plane, is the
   spatial density n at Earth's position, estimated with a Gaussian kernel along Earth's path
   (in time) and across it (in miss distance) (:func:`activity_profile`).
4. The flux onto a surface facing the radiant is Q = n Vg, and the zenithal hourly rate follows
   from Koschack & Rendtel (1990) (:func:`zhr_from_flux`).

Absolute levels rest on the dust production per return, which is poorly known for any comet:
trailcast offers a documented default (:func:`default_dust_mass_per_return_g`), a user-stated
production, or calibration on a past observed outburst of the same parent, and always says which
(``zhr.mode``), with an uncertainty that includes the model's (a factor of several in absolute
mode).
"""

import math
from dataclasses import dataclass, field

import numpy as np

from .constants import AU_KM

#: Koschack & Rendtel (1990, WGN 18, 44 and 119): effective collecting area of a standard
#: observer (km^2) in Q = ZHR (13.1 r - 16.5)(r - 1.3)^0.748 / 37200 km^2 per hour (from memory).
KR_AREA_KM2 = 37_200.0
#: Limiting magnitude that defines the ZHR (a meteor counts down to +6.5 mag).
ZHR_LIMITING_MAGNITUDE = 6.5

#: Default erosion of the nucleus surface per return (m). Common practice, no source: active
#: comets lose of order a metre of surface per perihelion passage.
DEFAULT_EROSION_M_PER_RETURN = 1.0
#: Default dust-to-gas mass ratio of the eroded material (common practice, no source).
DEFAULT_DUST_TO_GAS = 1.0
#: Mass range over which the released dust is spread by the power law (g): micrometre dust to
#: decimetre boulders (common practice, no source).
DEFAULT_DUST_MASS_RANGE_G = (1e-12, 1e3)
#: Multiplicative model uncertainty of the ZHR in each mode (common practice, no source: dust
#: production is uncertain by an order of magnitude; a calibration on a past outburst of the
#: same parent leaves about a factor of two).
MODEL_UNCERTAINTY_FACTOR = {"absolute": 5.0, "calibrated": 2.0}
#: Activity window: where the profile exceeds this fraction of its peak ...
WINDOW_FRACTION_OF_PEAK = 0.1
#: ... and this absolute ZHR (below it, no window is reported).
WINDOW_FLOOR_ZHR = 5.0


def kr_factor(population_index):
    """Koschack & Rendtel (1990) factor c(r) = (13.1 r - 16.5)(r - 1.3)^0.748 (from memory).

    Valid for population indices of about 1.5 to 4 (the range of their observations); c(r) is
    undefined for r <= 1.3.
    """
    r = np.asarray(population_index, dtype=float)
    if np.any(r <= 1.3):
        raise ValueError("Koschack & Rendtel (1990) needs a population index above 1.3")
    return (13.1 * r - 16.5) * (r - 1.3) ** 0.748


def zhr_from_flux(flux_km2_h, population_index):
    """ZHR from the flux of meteoroids giving meteors of +6.5 mag or brighter.

    Parameters
    ----------
    flux_km2_h : float or array
        Number of such meteoroids per km^2 (perpendicular to the radiant direction) per hour.
    population_index : float
        r, the ratio of meteor numbers between successive magnitudes.

    Returns
    -------
    ZHR = Q x 37200 km^2 / c(r) (Koschack & Rendtel 1990).
    """
    return np.asarray(flux_km2_h, dtype=float) * KR_AREA_KM2 / kr_factor(population_index)


def flux_from_zhr(zhr, population_index):
    """Inverse of :func:`zhr_from_flux` (meteoroids per km^2 per hour)."""
    return np.asarray(zhr, dtype=float) * kr_factor(population_index) / KR_AREA_KM2


def limiting_mass_g(vinf_km_s, magnitude=ZHR_LIMITING_MAGNITUDE):
    """Mass (g) of a meteoroid that gives a meteor of the given absolute visual magnitude.

    log10 m = 5.07 - 3.68 log10 V_inf - 0.4 M, V_inf in km/s (the mass-magnitude-speed relation
    used for visual meteors by Jenniskens (1994, A&A 287, 990) after Verniani (1973); coefficients
    from memory). About 5e-5 g for +6.5 mag at 71 km/s and 5e-3 g at 21 km/s. Uncertain by a
    factor of a few, which enters the absolute ZHR through the mass index.
    """
    v = np.asarray(vinf_km_s, dtype=float)
    return 10.0 ** (5.07 - 3.68 * np.log10(v) - 0.4 * np.asarray(magnitude, dtype=float))


def default_dust_mass_per_return_g(
    nucleus_radius_km: float,
    nucleus_density_g_cm3: float,
    *,
    erosion_m: float = DEFAULT_EROSION_M_PER_RETURN,
    dust_to_gas: float = DEFAULT_DUST_TO_GAS,
) -> float:
    """Dust mass (g, over :data:`DEFAULT_DUST_MASS_RANGE_G`) one return releases, by default.

    Eroding ``erosion_m`` of the whole surface of a spherical nucleus: mass
    4 pi R^2 h rho, of which the fraction dust_to_gas / (1 + dust_to_gas) is dust. A rule of
    thumb (common practice, no source), to be replaced by a stated production or a calibration
    whenever one is available.
    """
    r_cm = nucleus_radius_km * 1e5
    total = 4.0 * math.pi * r_cm**2 * (erosion_m * 100.0) * nucleus_density_g_cm3
    return total * dust_to_gas / (1.0 + dust_to_gas)


def power_law_normalisation(dust_mass_g, mass_index, m_lo_g, m_hi_g):
    """A in dN/dm = A m^-s such that the mass between m_lo and m_hi is ``dust_mass_g``."""
    s = float(mass_index)
    if abs(s - 2.0) < 1e-9:
        return dust_mass_g / math.log(m_hi_g / m_lo_g)
    return dust_mass_g * (2.0 - s) / (m_hi_g ** (2.0 - s) - m_lo_g ** (2.0 - s))


def meteoroids_per_particle(
    mass_g,
    mass_index,
    sim_m_min_g,
    sim_m_max_g,
    n_drawn,
    dust_mass_g,
    dust_range_g=DEFAULT_DUST_MASS_RANGE_G,
):
    """Real meteoroids each simulated particle stands for (before targeting selection).

    Particles were drawn log-uniformly in [sim_m_min, sim_m_max] (density
    p(m) = 1 / (m ln(m_max/m_min))), ``n_drawn`` of them for the whole return. With the real
    population dN/dm = A m^-s, the importance weight is A m^-s / (n_drawn p(m)) =
    A m^(1-s) ln(m_max/m_min) / n_drawn.
    """
    a = power_law_normalisation(dust_mass_g, mass_index, *dust_range_g)
    m = np.asarray(mass_g, dtype=float)
    return a * m ** (1.0 - mass_index) * math.log(sim_m_max_g / sim_m_min_g) / n_drawn


@dataclass(frozen=True)
class Profile:
    """ZHR against time along Earth's path for one trail encounter."""

    t_tdb_jd: np.ndarray
    zhr: np.ndarray
    peak_tdb_jd: float
    peak_zhr: float
    fwhm_hours: float
    window_tdb_jd: tuple[float, float] | None
    boot_peak_zhr: np.ndarray = field(repr=False)


def _contiguous(mask, k):
    """First and last index of the run of True in ``mask`` that contains index ``k``."""
    lo = k
    while lo > 0 and mask[lo - 1]:
        lo -= 1
    hi = k
    while hi < len(mask) - 1 and mask[hi + 1]:
        hi += 1
    return lo, hi


def _silverman(x, n):
    sd = np.std(x)
    iqr = np.subtract(*np.percentile(x, [75, 25])) / 1.349
    spread = min(sd, iqr) if iqr > 0 else sd
    return 1.06 * max(spread, 1e-12) * n ** (-0.2)


def activity_profile(
    t_earth_tdb_jd,
    miss_distance_au,
    vz_au_d,
    vg_km_s,
    counts,
    window_days: float,
    earth_speed_au_d: float,
    population_index: float,
    *,
    n_grid: int = 241,
    n_boot: int = 100,
    rng=None,
) -> Profile:
    """Kernel estimate of the ZHR along Earth's path from simulated meteoroid crossings.

    Parameters
    ----------
    t_earth_tdb_jd : array (n,)
        When Earth passes each meteoroid's node longitude (TDB JD).
    miss_distance_au : array (n,)
        Each meteoroid's node distance minus Earth's (au).
    vz_au_d : array (n,)
        Heliocentric speed across the ecliptic plane at the node (au/day).
    vg_km_s : array (n,)
        Geocentric speed (km/s).
    counts : array (n,)
        Real meteoroids above the ZHR mass limit each simulated one stands for.
    window_days : float
        The meteoroids pierced the plane within +-window_days of Earth's passage.
    earth_speed_au_d : float
        Earth's heliocentric speed (au/day) at the encounter.
    population_index : float

    Returns
    -------
    Profile
        ZHR(t) on a grid spanning +-5 kernel-broadened standard deviations of the crossings; FWHM
        and the window (ZHR above both :data:`WINDOW_FRACTION_OF_PEAK` of the peak and
        :data:`WINDOW_FLOOR_ZHR`); bootstrap replicas of the peak ZHR for its statistical spread.
    """
    te = np.asarray(t_earth_tdb_jd, dtype=float)
    dr = np.asarray(miss_distance_au, dtype=float)
    c = np.asarray(counts, dtype=float)
    inv_vz = 1.0 / np.abs(np.asarray(vz_au_d, dtype=float))
    vg = np.asarray(vg_km_s, dtype=float)
    n = len(te)
    h_t = _silverman(te, n)
    h_r = _silverman(dr, n)
    centre = float(np.median(te))
    half = 5.0 * math.hypot(np.std(te), h_t) + 1.0 / 24.0
    grid = np.linspace(centre - half, centre + half, n_grid)

    def density_zhr(idx):
        # Separable estimate: the trail's structure along Earth's path (time) and across it
        # (miss distance) are taken as independent, and the mass-selected meteoroids as spread
        # like all simulated ones. Over a thin trail the two coordinates are uncorrelated, and a
        # joint estimate would chase the few heavily weighted small grains near Earth's path.
        f_t = np.exp(-0.5 * ((grid[:, None] - te[idx][None, :]) / h_t) ** 2).sum(axis=1) / (
            len(idx) * h_t * math.sqrt(2 * math.pi)
        )
        g_r = np.exp(-0.5 * (dr[idx] / h_r) ** 2).sum() / (len(idx) * h_r * math.sqrt(2 * math.pi))
        total = c[idx].sum() * len(te) / len(idx)  # bootstrap replicas keep the total's scale
        nv = (
            total
            * f_t
            * g_r
            * np.mean(inv_vz[idx])
            * np.mean(vg[idx])
            / (2.0 * window_days * earth_speed_au_d)
        )
        flux_km2_h = nv / AU_KM**3 * 3600.0  # (1/au^3)(km/s) -> (1/km^3)(km/s)(s/h)
        return zhr_from_flux(flux_km2_h, population_index)

    zhr = density_zhr(np.arange(n))
    k = int(np.argmax(zhr))
    peak = float(zhr[k])
    fwhm_h = 0.0
    if peak > 0:
        lo, hi = _contiguous(zhr >= 0.5 * peak, k)
        fwhm_h = float((grid[hi] - grid[lo]) * 24.0)
    window = None
    if peak >= WINDOW_FLOOR_ZHR:
        lo, hi = _contiguous(zhr >= max(WINDOW_FRACTION_OF_PEAK * peak, WINDOW_FLOOR_ZHR), k)
        window = (float(grid[lo]), float(grid[hi]))
    gen = np.random.default_rng(rng if rng is not None else 0)
    boots = (
        np.array([density_zhr(gen.integers(0, n, n)).max() for _ in range(n_boot)])
        if n > 1
        else np.array([peak])
    )
    return Profile(grid, zhr, float(grid[k]), peak, fwhm_h, window, boots)
