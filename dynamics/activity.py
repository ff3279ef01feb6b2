"""From simulated meteoroids at Earth's path to flux, ZHR, activity profile and window.

Chain of reasoning (every step a named function with its source):

1. Each simulated meteoroid stands for a number of real ones: the dust mass released per return
   spread over a power-law mass distribution of index s (:func:`meteoroids_per_particle`).
2. Only meteoroids bright enough to count for a ZHR matter: mass above the limit that gives a
   +6.5 mag meteor at their speed (:func:`limiting_mass_g`).
3. The simulated meteoroids reach Earth's path during a window of 2W days. Per mass class
   (decades), after removing their drift with arrival time, they are fitted as a Gaussian tube
   along Earth's path (in time) and across it (in miss distance); the classes' densities n at
   Earth's position add up with the size distribution's weights (:func:`trail_activity`).
4. The flux onto a surface facing the radiant is Q = n Vg (1 + v_esc^2 / Vg^2) (gravitational
   focusing, :func:`gravitational_focusing_factor`), and the zenithal hourly rate follows from
   Koschack & Rendtel (1990) (:func:`zhr_from_flux`). A second estimator, the weighted count of
   meteoroids in a space-time box around Earth (after Vaubaillon et al. 2005), checks it.
5. A crossing is called an encounter by its predicted activity (:func:`classify_crossing`).

Absolute levels rest on the dust production per return, which is poorly known for any comet:
trailcast offers a documented default (:func:`default_dust_mass_per_return_g`), a user-stated
production, or calibration on a past observed outburst of the same parent, and always says which
(``zhr.mode``), with an uncertainty that includes the model's (a factor of several in absolute
mode).
"""

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import trapezoid
from scipy.optimize import minimize_scalar

from .constants import AU_KM, EARTH_ESCAPE_KM_S, GM_SUN_AU3_D2

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
#: The time of the profile's maximum is refined between its grid points to this tolerance
#: (days; 1 s, far finer than any observed peak time; a grid step can be several minutes).
PEAK_TIME_TOLERANCE_DAYS = 1.0 / 86400.0
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


#: Jorda, Crovisier & Green (2008, Asteroids, Comets, Meteors 2008, abstract 8046): water
#: production and visual heliocentric magnitude of comets, log10 Q(H2O) [molecules/s] =
#: JORDA_LOGQ_ZERO - JORDA_LOGQ_SLOPE m_h (from memory), m_h the total visual magnitude
#: reduced to 1 au from Earth. Scatter about the relation: a factor of about 2-3.
JORDA_LOGQ_ZERO = 30.675
JORDA_LOGQ_SLOPE = 0.2453
#: Mass of a water molecule (g): 18.015 u (IUPAC) x 1.66053906660e-24 g (CODATA 2018).
WATER_MOLECULE_G = 18.015 * 1.66053906660e-24


def water_production_per_s(m1, k1, r_au):
    """Water production (molecules/s) at ``r_au`` of a comet of total absolute magnitude M1.

    m_h = M1 + K1 log10 r, then Jorda et al. (2008). For M1 = 9 at 1 au: 10^28.47 s^-1.

    >>> f"{float(water_production_per_s(9.0, 10.0, 1.0)):.3e}"
    '2.933e+28'
    """
    m_h = np.asarray(m1, dtype=float) + np.asarray(k1, dtype=float) * np.log10(r_au)
    return 10.0 ** (JORDA_LOGQ_ZERO - JORDA_LOGQ_SLOPE * m_h)


def dust_mass_from_magnitude_g(
    m1: float,
    k1: float,
    q_au: float,
    e: float,
    active_r_max_au: float,
    *,
    dust_to_gas: float = DEFAULT_DUST_TO_GAS,
    mu: float = GM_SUN_AU3_D2,
) -> float:
    """Dust mass (g) released over one perihelion passage by a comet of total magnitude M1.

    The water production of :func:`water_production_per_s` integrated over the arc of the
    orbit (q, e; any conic) inside ``active_r_max_au``, times the mass of a water molecule
    and the dust-to-gas ratio. Time along the orbit: dt = r^2 / h dnu with h = sqrt(mu p),
    p = q (1 + e). The comet's brightness is a measured property of every comet, known as soon
    as it is found, and spans orders of magnitude between comets (a weakly active nucleus
    and a fully active one of the same size differ by 100x and more); its conversion to dust
    is uncertain by a factor of several (the relation's scatter, the dust-to-gas ratio).
    """
    p = q_au * (1.0 + e)
    h = math.sqrt(mu * p)
    if q_au > active_r_max_au:
        return 0.0
    c = (p / active_r_max_au - 1.0) / e if e > 0 else -2.0
    nu_max = math.pi if c <= -1.0 else math.acos(min(1.0, c))
    if e >= 1.0:  # the asymptote bounds the true anomaly of an open orbit
        nu_max = min(nu_max, math.acos(-1.0 / e) - 1e-9)
    nu = np.linspace(-nu_max, nu_max, 4001)
    r = p / (1.0 + e * np.cos(nu))
    rate = water_production_per_s(m1, k1, r) * r**2 / h * 86400.0  # molecules per radian
    molecules = float(trapezoid(rate, nu))
    return molecules * WATER_MOLECULE_G * dust_to_gas


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


#: Width of a mass class (dex): one class per decade of mass (common practice, no source). The
#: cross-section of a trail is stratified by size (small grains were ejected faster and feel more
#: radiation pressure), so each class gets its own centre and width.
MASS_CLASS_DEX = 1.0
#: A class with fewer meteoroids than this is merged into its neighbour (the heavier one, or the
#: lighter one for the heaviest class): a robust width from fewer points is mostly noise
#: (no source; the 16-84 % half-range of 8 Gaussian draws scatters by about 30 %).
MIN_CLASS_METEOROIDS = 8
#: Half-range between these percentiles is the robust Gaussian sigma (exact for a Gaussian).
SIGMA_PERCENTILES = (15.865525393145708, 84.13447460685429)
#: Smallest width across Earth's path (au): Earth's radius (mean, IUGG); a trail cannot be
#: resolved more finely than the body that meets it.
MIN_CROSS_WIDTH_AU = 6371.0 / AU_KM
#: Smallest width along Earth's path (days): the time Earth takes to move by its own radius at
#: 30 km/s (about 3.5 min; no source, same reasoning as above).
MIN_ALONG_WIDTH_DAYS = 6371.0 / 30.0 / 86400.0
#: Outlier clip (robust sigmas) in the straight-line fit of a class's drift against arrival lag
#: (no source: planetary close encounters throw a few meteoroids far off).
DRIFT_CLIP_SIGMAS = 3.0
#: The drift with arrival lag is evaluated at lag 0 only when the class's lags surround it;
#: otherwise at the nearest of these percentiles of its lags: the estimator interpolates along
#: the trail, never extrapolates (a fit over lopsided arrivals, e.g. all 8-20 days before
#: Earth, moved one trail's centre by 0.01 au). No source.
REFERENCE_LAG_PERCENTILES = (10.0, 90.0)
#: Half-size of the space-time box of the cross-check, in the pooled robust widths of the trail
#: along and across Earth's path (no source: small enough to measure the local density, large
#: enough to hold meteoroids; a centred Gaussian tube's box mean is 0.96 of its peak per axis).
BOX_HALF_SIGMAS = 0.5
#: ... and over this fraction of the arrival window (a box in space as well as time: a short
#: stretch of arrival lags, so that the trail's drift with arrival time does not widen it; no
#: source).
BOX_LAG_FRACTION = 0.25
#: The two estimators are said to disagree when their peak ZHRs differ by more than this factor
#: (the issue's threshold; no source) ...
DISAGREEMENT_FACTOR = 3.0
#: ... counting a ZHR below this as this (an hourly rate below one meteor is not seen either way;
#: common practice, no source).
CROSS_CHECK_FLOOR_ZHR = 1.0
#: Lowest predicted peak ZHR for a trail crossing to be called an encounter when the annual
#: shower's ZHR is not known (common practice, no source: a rate of ten meteors an hour under
#: ideal skies is what observers notice above the sporadic background).
ENCOUNTER_MIN_ZHR = 10.0

#: Offsets of Earth's path tried when looking for the trail's densest line (the direct hit):
#: evenly spaced over the classes' centres +- this many widths, plus each class's own centre,
#: then refined. A search resolution, not physics (no source).
DIRECT_HIT_SEARCH_SIGMAS = 4.0
DIRECT_HIT_SEARCH_POINTS = 201


def gravitational_focusing_factor(vg_km_s, v_esc_km_s: float = EARTH_ESCAPE_KM_S):
    """Flux enhancement by Earth's gravity, 1 + v_esc^2 / Vg^2 (orientation-averaged).

    Conservation of energy and angular momentum of a meteoroid approaching Earth at geocentric
    speed Vg from far away (Opik 1951; Jones & Poole 2007, MNRAS 375, 925; from memory). The
    factor is anisotropic in reality (largest opposite the radiant); this is its global value.

    >>> round(float(gravitational_focusing_factor(71.0)), 4)
    1.0249
    """
    vg = np.asarray(vg_km_s, dtype=float)
    return 1.0 + (v_esc_km_s / vg) ** 2


@dataclass(frozen=True)
class MassClass:
    """One decade of meteoroid mass: its share of a trail crossing and its fitted shape.

    Times TDB JD, distances au. The across-path centre and width are those at zero arrival lag
    (after removing the class's linear drift of miss distance against lag); likewise in time.
    """

    log10_mass_lo_g: float
    log10_mass_hi_g: float
    meteoroids: int
    counts: float
    t_centre_tdb_jd: float
    t_sigma_days: float
    t_drift_days_per_day: float
    miss_centre_au: float
    miss_sigma_au: float
    miss_drift_au_per_day: float
    flux_factor: float  # mean of Vg x focusing / crossing speed (km/s per au/day)
    peak_zhr: float
    reference_lag_days: float = 0.0  # where the drift was evaluated (0 unless lopsided)

    def to_json(self) -> dict:
        return {
            "mass_g": [10.0**self.log10_mass_lo_g, 10.0**self.log10_mass_hi_g],
            "meteoroids": self.meteoroids,
            "real_meteoroids": float(f"{self.counts:.4g}"),
            "miss_centre_au": round(self.miss_centre_au, 6),
            "miss_sigma_au": round(self.miss_sigma_au, 6),
            "miss_drift_au_per_day": float(f"{self.miss_drift_au_per_day:.3g}"),
            "t_sigma_hours": round(self.t_sigma_days * 24.0, 3),
            "earth_offset_sigmas": round(abs(self.miss_centre_au) / self.miss_sigma_au, 2),
            "peak_zhr": float(f"{self.peak_zhr:.3g}"),
            "reference_lag_days": round(self.reference_lag_days, 2),
        }


@dataclass(frozen=True)
class Profile:
    """ZHR against time along Earth's path for one trail encounter.

    Besides the profile: the mass classes behind it, the cross-check by a box count
    (``box_zhr``, from ``box_meteoroids`` simulated meteoroids) and whether the two estimators
    disagree by more than :data:`DISAGREEMENT_FACTOR`.
    """

    t_tdb_jd: np.ndarray
    zhr: np.ndarray
    peak_tdb_jd: float
    peak_zhr: float
    fwhm_hours: float
    window_tdb_jd: tuple[float, float] | None
    boot_peak_zhr: np.ndarray = field(repr=False)
    classes: tuple[MassClass, ...] = ()
    box_zhr: float = 0.0
    box_meteoroids: int = 0
    estimators_disagree: bool = False
    #: Peak ZHR if Earth's path ran along the densest line of the visual sizes' cross-section,
    #: and where that line lies (au, signed like miss distances: trail minus Earth). It
    #: separates the trail's dust from its position: a trail the model places a few widths
    #: from Earth can still be dense enough for a storm if its position is off by that much.
    direct_hit_zhr: float = 0.0
    direct_hit_miss_au: float = 0.0


def _contiguous(mask, k):
    """First and last index of the run of True in ``mask`` that contains index ``k``."""
    lo = k
    while lo > 0 and mask[lo - 1]:
        lo -= 1
    hi = k
    while hi < len(mask) - 1 and mask[hi + 1]:
        hi += 1
    return lo, hi


def _robust_sigma(x) -> float:
    lo, hi = np.percentile(x, SIGMA_PERCENTILES)
    return 0.5 * float(hi - lo)


def _drift(lag, y) -> float:
    """Slope of y against arrival lag (per day), least squares with one robust clipping pass."""
    if len(lag) < 3 or np.ptp(lag) <= 0:
        return 0.0
    b, a = np.polyfit(lag, y, 1)
    res = y - (a + b * lag)
    mad = 1.4826 * np.median(np.abs(res - np.median(res)))
    keep = (
        np.abs(res - np.median(res)) <= DRIFT_CLIP_SIGMAS * mad
        if mad > 0
        else np.ones_like(res, bool)
    )
    if keep.sum() >= 3 and np.ptp(lag[keep]) > 0 and not keep.all():
        b, a = np.polyfit(lag[keep], y[keep], 1)
    return float(b)


def mass_classes(mass_g, min_meteoroids: int = MIN_CLASS_METEOROIDS) -> list[np.ndarray]:
    """Indices of the meteoroids in each mass class (decades of mass, small classes merged).

    >>> [len(c) for c in mass_classes([1e-5] * 3 + [2e-4] * 10 + [3e-3] * 9, 8)]
    [13, 9]
    """
    m = np.asarray(mass_g, dtype=float)
    if len(m) == 0:
        return []
    dec = np.floor(np.log10(m) / MASS_CLASS_DEX).astype(int)
    groups = [np.flatnonzero(dec == d) for d in np.unique(dec)]
    merged: list[np.ndarray] = []
    carry = np.zeros(0, dtype=int)
    for g in groups:  # lightest first: a small class joins the next heavier one
        carry = np.concatenate([carry, g])
        if len(carry) >= min_meteoroids:
            merged.append(carry)
            carry = np.zeros(0, dtype=int)
    if len(carry):  # the heaviest leftovers join the lighter neighbour (or stand alone)
        if merged:
            merged[-1] = np.concatenate([merged[-1], carry])
        else:
            merged.append(carry)
    return [np.sort(g) for g in merged]


def trail_activity(
    t_earth_tdb_jd,
    miss_distance_au,
    lag_days,
    mass_g,
    counts,
    vg_km_s,
    crossing_speed_au_d,
    *,
    earth_speed_au_d: float,
    population_index: float,
    window_days: float,
    n_grid: int = 801,
    n_boot: int = 100,
    rng=None,
    direct_hit: bool = True,
) -> Profile:
    """ZHR along Earth's path from simulated meteoroids, per mass class, with a box cross-check.

    The meteoroids arrived at their closest point to Earth's path within +-``window_days`` of
    Earth passing that point. If the trail is steady over the window, meteoroids crossing the
    surface spanned by Earth's path and the miss direction at speed v_perp through an area A in
    2W days had the spatial density n = N / (A 2W v_perp). Per mass class (decades,
    :func:`mass_classes`):

    - the drift of miss distance and of Earth's passage time with arrival lag is fitted as a
      straight line and removed: values at zero lag when the class's arrivals surround it,
      else at the nearest decile of its lags (:data:`REFERENCE_LAG_PERCENTILES`; never an
      extrapolation along the trail);
    - the class is taken as a Gaussian tube: centre = median, width = 16-84 % half-range (robust
      sigma), along Earth's path (time) and across it (miss distance); the density at Earth's
      path (miss 0) is then analytic and is not broadened by any kernel, so the wings of the
      cross-section are not inflated (they follow the fitted Gaussian);
    - its weight is the sum of ``counts`` over the class (the size distribution's weights).

    Flux Q = sum over classes of n_k Vg F, with F the gravitational focusing factor
    (:func:`gravitational_focusing_factor`), and ZHR from Koschack & Rendtel (1990)
    (:func:`zhr_from_flux`).

    Cross-check (after Vaubaillon, Colas & Jorda 2005, A&A 439, 751: the weighted count of
    simulated meteoroids in a space-time box around Earth; the box shape here is ours): the
    weighted meteoroids whose crossing lies within +-:data:`BOX_HALF_SIGMAS` pooled widths of
    Earth at the profile's peak, in time and in raw miss distance, and whose arrival lag lies
    within the central :data:`BOX_LAG_FRACTION` of the window.

    Parameters
    ----------
    t_earth_tdb_jd : array (n,)
        When Earth passes closest to each meteoroid's path (TDB JD).
    miss_distance_au : array (n,)
        Signed distance of each meteoroid's path from Earth's path (au).
    lag_days : array (n,)
        Meteoroid arrival minus Earth's passage (days), within +-``window_days``.
    mass_g : array (n,)
    counts : array (n,)
        Real meteoroids above the ZHR mass limit each simulated one stands for (0 below it).
    vg_km_s : array (n,)
        Geocentric speed (km/s), before Earth's attraction.
    crossing_speed_au_d : array (n,)
        Heliocentric speed across the surface spanned by Earth's path and the miss direction
        (au/day); for crossings of the ecliptic, the speed across the ecliptic.
    earth_speed_au_d : float
        Earth's heliocentric speed (au/day).
    population_index : float
    window_days : float
    direct_hit : bool
        Search the densest line (:attr:`Profile.direct_hit_zhr`); False leaves it 0 (replicas
        that only need the peak).

    Returns
    -------
    Profile
        ZHR(t) on a grid spanning +-6 widths of every class; FWHM; window (ZHR above both
        :data:`WINDOW_FRACTION_OF_PEAK` of the peak and :data:`WINDOW_FLOOR_ZHR`); bootstrap
        replicas of the peak ZHR (meteoroids resampled); the classes; the box cross-check.

    Limits
    ------
    A class is one Gaussian tube: a trail split in two strands is smoothed into one, and a
    cross-section with heavier tails than a Gaussian is underestimated where Earth passes
    several widths from the centre (compare ``classes[k].earth_offset_sigmas``).
    """
    te = np.asarray(t_earth_tdb_jd, dtype=float)
    dr = np.asarray(miss_distance_au, dtype=float)
    lag = np.asarray(lag_days, dtype=float)
    m = np.asarray(mass_g, dtype=float)
    c = np.asarray(counts, dtype=float)
    fx = (
        np.asarray(vg_km_s, dtype=float)
        * gravitational_focusing_factor(vg_km_s)
        / np.abs(np.asarray(crossing_speed_au_d, dtype=float))
    )
    # only meteoroids that count for the ZHR define the classes
    live = np.flatnonzero(c > 0)
    norm = 1.0 / (2.0 * window_days * earth_speed_au_d) / AU_KM**3 * 3600.0  # -> km^-2 h^-1

    def fit(idx) -> list[tuple]:
        out = []
        for g in mass_classes(m[idx]):
            k = idx[g]
            b_t = _drift(lag[k], te[k])
            b_r = _drift(lag[k], dr[k])
            lag_ref = float(np.clip(0.0, *np.percentile(lag[k], REFERENCE_LAG_PERCENTILES)))
            t0 = te[k] - b_t * (lag[k] - lag_ref)
            r0 = dr[k] - b_r * (lag[k] - lag_ref)
            out.append(
                (
                    k,
                    float(np.median(t0)),
                    max(_robust_sigma(t0), MIN_ALONG_WIDTH_DAYS),
                    b_t,
                    float(np.median(r0)),
                    max(_robust_sigma(r0), MIN_CROSS_WIDTH_AU),
                    b_r,
                    float(c[k].sum()),
                    float(np.mean(fx[k])),
                    lag_ref,
                )
            )
        return out

    def zhr_on(grid, fitted, scale=1.0, earth_at_au=0.0):
        total = np.zeros_like(grid)
        per = []
        for _, mt, st, _, mr, sr, _, ck, fk, _ in fitted:
            g_t = np.exp(-0.5 * ((grid - mt) / st) ** 2) / (st * math.sqrt(2 * math.pi))
            g_r = math.exp(-0.5 * ((mr - earth_at_au) / sr) ** 2) / (sr * math.sqrt(2 * math.pi))
            z = zhr_from_flux(scale * ck * g_t * g_r * fk * norm, population_index)
            per.append(z)
            total = total + z
        return total, per

    fitted = fit(live) if len(live) else []
    if fitted:
        lo = min(f[1] - 6.0 * f[2] for f in fitted)
        hi = max(f[1] + 6.0 * f[2] for f in fitted)
    else:
        centre = float(np.median(te)) if len(te) else 0.0
        lo, hi = centre - 1.0, centre + 1.0
    grid = np.linspace(lo, hi, n_grid)
    zhr, per = zhr_on(grid, fitted)
    k = int(np.argmax(zhr))
    peak = float(zhr[k])
    t_peak = float(grid[k])
    if peak > 0 and 0 < k < len(grid) - 1:
        # the grid holds the maximum to a grid step (minutes for wide trails): refine it
        # (in days from the grid point: the optimiser's relative tolerance on a Julian date
        # would be ~0.04 d)
        best = minimize_scalar(
            lambda u: -zhr_on(np.array([t_peak + u]), fitted)[0][0],
            bounds=(float(grid[k - 1] - t_peak), float(grid[k + 1] - t_peak)),
            method="bounded",
            options={"xatol": PEAK_TIME_TOLERANCE_DAYS},
        )
        if -best.fun > peak:
            t_peak, peak = t_peak + float(best.x), float(-best.fun)
    fwhm_h = 0.0
    if peak > 0:
        a, b = _contiguous(zhr >= 0.5 * peak, k)
        fwhm_h = float((grid[b] - grid[a]) * 24.0)
    hit_zhr, hit_miss = _direct_hit(fitted, grid, zhr_on) if direct_hit else (0.0, 0.0)
    window = None
    if peak >= WINDOW_FLOOR_ZHR:
        a, b = _contiguous(zhr >= max(WINDOW_FRACTION_OF_PEAK * peak, WINDOW_FLOOR_ZHR), k)
        window = (float(grid[a]), float(grid[b]))
    classes = tuple(
        MassClass(
            float(np.log10(m[f[0]].min())),
            float(np.log10(m[f[0]].max())),
            len(f[0]),
            f[7],
            f[1],
            f[2],
            f[3],
            f[4],
            f[5],
            f[6],
            f[8],
            float(z.max()),
            f[9],
        )
        for f, z in zip(fitted, per, strict=True)
    )

    # cross-check: weighted count in a space-time box around Earth at the peak
    box_n, box_zhr = 0, 0.0
    if len(live):
        half_t = BOX_HALF_SIGMAS * max(_robust_sigma(te[live]), MIN_ALONG_WIDTH_DAYS)
        half_r = BOX_HALF_SIGMAS * max(_robust_sigma(dr[live]), MIN_CROSS_WIDTH_AU)
        half_lag = BOX_LAG_FRACTION * window_days
        inside = live[
            (np.abs(te[live] - t_peak) <= half_t)
            & (np.abs(dr[live]) <= half_r)
            & (np.abs(lag[live]) <= half_lag)
        ]
        box_n = len(inside)
        area_au2_day = (2.0 * half_t) * (2.0 * half_r)  # along (days, x Earth's speed in norm)
        q = float((c[inside] * fx[inside]).sum()) * norm / area_au2_day / BOX_LAG_FRACTION
        box_zhr = float(zhr_from_flux(q, population_index))
    hi_z = max(peak, box_zhr, CROSS_CHECK_FLOOR_ZHR)
    lo_z = max(min(peak, box_zhr), CROSS_CHECK_FLOOR_ZHR)
    disagree = hi_z / lo_z > DISAGREEMENT_FACTOR

    gen = np.random.default_rng(rng if rng is not None else 0)
    if len(live) > 1:
        boots = []
        for _ in range(n_boot):
            draw = np.sort(live[gen.integers(0, len(live), len(live))])
            boots.append(float(zhr_on(grid, fit(draw))[0].max()))
        boots = np.array(boots)
    else:
        boots = np.array([peak])
    return Profile(
        grid,
        zhr,
        t_peak,
        peak,
        fwhm_h,
        window,
        boots,
        classes,
        box_zhr,
        box_n,
        disagree,
        max(hit_zhr, peak),
        hit_miss if hit_zhr > peak else 0.0,
    )


def _direct_hit(fitted, grid, zhr_on) -> tuple[float, float]:
    """Highest peak ZHR over offsets of Earth's path across the trail, and that offset (au).

    The fitted classes are moved together relative to Earth's path (their along-path shapes
    kept); the offset is searched on a grid over the classes' centres +- their widths and at
    each centre, then refined by a bounded scalar search between the grid neighbours.
    """
    if not fitted:
        return 0.0, 0.0
    centres = np.array([f[4] for f in fitted])
    widths = np.array([f[5] for f in fitted])
    lo = float(np.min(centres - DIRECT_HIT_SEARCH_SIGMAS * widths))
    hi = float(np.max(centres + DIRECT_HIT_SEARCH_SIGMAS * widths))
    offsets = np.union1d(np.linspace(lo, hi, DIRECT_HIT_SEARCH_POINTS), centres)

    def best_at(d: float) -> float:
        return float(zhr_on(grid, fitted, earth_at_au=d)[0].max())

    values = np.array([best_at(d) for d in offsets])
    k = int(np.argmax(values))
    d_best, z_best = float(offsets[k]), float(values[k])
    a, b = offsets[max(k - 1, 0)], offsets[min(k + 1, len(offsets) - 1)]
    if b > a:
        res = minimize_scalar(
            lambda d: -best_at(d),
            bounds=(float(a), float(b)),
            method="bounded",
            options={"xatol": 1e-3 * float(widths.min())},
        )
        if -res.fun > z_best:
            d_best, z_best = float(res.x), float(-res.fun)
    return z_best, d_best


@dataclass(frozen=True)
class Classification:
    """What a trail crossing is called, and why (the rule in words, with the numbers)."""

    label: str  # "encounter", "negligible" or "near miss"
    zhr_level: float
    reason: str

    def to_json(self) -> dict:
        return {"label": self.label, "zhr_level": self.zhr_level, "reason": self.reason}


def classify_crossing(
    peak_zhr: float,
    miss_distance_au: float,
    miss_distance_spread_au: float,
    *,
    encounter_max_miss_au: float,
    encounter_sigmas: float,
    earth_radius_au: float,
    near_miss_max_au: float,
    annual_zhr: float | None = None,
    min_zhr: float = ENCOUNTER_MIN_ZHR,
    zhr_range: tuple[float, float] | None = None,
    zhr_mode: str | None = None,
    direct_hit: tuple[float, float] | None = None,
) -> Classification | None:
    """Name a trail crossing by the activity it gives, not only by its distance.

    Rule (common practice, no source): the level is ``min_zhr`` (:data:`ENCOUNTER_MIN_ZHR`), or
    the annual shower's ZHR when known and higher (an outburst at least doubles the rate).
    ``zhr_range`` (low, high) and ``zhr_mode`` (``absolute`` or ``calibrated``), when given, go
    into the reason: in absolute mode the ZHR is uncertain by a factor of several, so a crossing
    below the level whose high end reaches it is said to be possibly noticeable (and an
    encounter whose low end falls below it, possibly not). ``direct_hit`` (ZHR, offset in au:
    :attr:`Profile.direct_hit_zhr` and :attr:`Profile.direct_hit_miss_au`), when given and at
    or above the level for a crossing below it, is said too: the trail's modelled position, not
    its dust, keeps it below. None of these changes the label.

    - ``encounter``: predicted peak ZHR at or above the level (and the crossing within
      ``near_miss_max_au``);
    - ``negligible``: Earth passes close by distance (within ``encounter_max_miss_au`` and
      within ``encounter_sigmas`` cross-section widths plus Earth's radius, the engine's
      distance test) but the predicted ZHR is below the level;
    - ``near miss``: farther, within ``near_miss_max_au``, and below the level;
    - ``None``: farther than ``near_miss_max_au`` (not reported).

    >>> c = classify_crossing(0.4, 0.0002, 0.0003, encounter_max_miss_au=0.005,
    ...     encounter_sigmas=3.0, earth_radius_au=4.26e-5, near_miss_max_au=0.05)
    >>> c.label, c.reason
    ('negligible', 'passes 0.00020 au from Earth (0.7 widths) but the predicted peak ZHR 0.4 is below 10')
    >>> classify_crossing(0.4, 0.0002, 0.0003, encounter_max_miss_au=0.005,
    ...     encounter_sigmas=3.0, earth_radius_au=4.26e-5, near_miss_max_au=0.05,
    ...     zhr_range=(0.02, 11.0), zhr_mode="absolute").reason.split("; ")[-1]
    'at the high end of its range it reaches 10 and could be noticeable'
    >>> classify_crossing(3e-5, -0.0011, 0.0002, encounter_max_miss_au=0.005,
    ...     encounter_sigmas=3.0, earth_radius_au=4.26e-5, near_miss_max_au=0.05,
    ...     direct_hit=(6600.0, -0.00111)).reason.split("; ")[-1]
    "on its densest line, -0.00111 au from Earth's path, the ZHR would be 6600: its modelled position, not its dust, keeps it below 10"
    """
    level = float(min_zhr) if annual_zhr is None else max(float(min_zhr), float(annual_zhr))
    miss = abs(float(miss_distance_au))
    if miss > near_miss_max_au:
        return None
    spread = float(miss_distance_spread_au)
    widths = miss / spread if spread > 0 else float("inf")
    where = f"{miss:.5f} au from Earth ({widths:.1f} widths)"
    z = zhr_text(peak_zhr)
    if peak_zhr >= level:
        label = "encounter"
        reason = f"predicted peak ZHR {z} at or above {level:g}; passes {where}"
    elif miss <= min(encounter_max_miss_au, encounter_sigmas * spread + earth_radius_au):
        label = "negligible"
        reason = f"passes {where} but the predicted peak ZHR {z} is below {level:g}"
    else:
        label = "near miss"
        reason = f"passes {where}; predicted peak ZHR {z}, below {level:g}"
    reason += _range_words(label, level, zhr_range, zhr_mode)
    if direct_hit is not None and label != "encounter" and float(direct_hit[0]) >= level:
        reason += (
            f"; on its densest line, {float(direct_hit[1]):+.5f} au from Earth's path, the ZHR "
            f"would be {zhr_text(direct_hit[0])}: its modelled position, not its dust, keeps "
            f"it below {level:g}"
        )
    return Classification(label, level, reason)


def zhr_text(x: float) -> str:
    """A ZHR to three significant figures without an exponent (``1290``, ``0.4``)."""
    v = float(f"{float(x):.3g}")
    return f"{v:.0f}" if abs(v) >= 100 else f"{v:g}"


def _range_words(label: str, level: float, zhr_range, zhr_mode) -> str:
    """The stated ZHR range in words, and whether its far end crosses the level."""
    if zhr_range is None:
        return ""
    lo, hi = (float(x) for x in zhr_range)
    how = {
        "absolute": "absolute mode, uncertain by a factor of several",
        "calibrated": "calibrated on a past outburst",
    }.get(zhr_mode or "", zhr_mode or "stated range")
    text = f"; range {zhr_text(lo)}-{zhr_text(hi)} ({how})"
    if label != "encounter" and hi >= level:
        text += f"; at the high end of its range it reaches {level:g} and could be noticeable"
    elif label == "encounter" and lo < level:
        text += f"; at the low end of its range it stays below {level:g}"
    return text
