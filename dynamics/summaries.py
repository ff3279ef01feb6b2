"""Trail-level numbers from the meteoroids that met Earth's passage: peak, miss, width, radiant.

The headline peak of an encounter is the time of the maximum of its modelled ZHR profile
(:func:`dynamics.activity.trail_activity`), which counts only the meteoroids that make *visual*
meteors: those above the mass that gives a +6.5 mag meteor at their speed (the definition of
the ZHR; :func:`dynamics.activity.limiting_mass_g`). The profile takes each decade of mass at
zero arrival lag (the trail as Earth meets it, where its crossings drift with arrival time) and
weights it by its density at Earth's path, so the sizes that pass closest to Earth set the
peak, not the middle of all crossings. The middle is
reported too (``trail_centre_utc``): the median of each decade of mass, combined with the
number of real meteoroids in each decade as weights (:func:`_stratified_centre`); it is the
headline when the modelled ZHR is 0. Small, high-beta grains reach their node later (radiation
pressure changes their orbits) and far outnumber the visual ones in a log-uniform draw; an
unweighted median over all sizes is dragged by them. Per mass class (decades of mass) the peak,
miss distance and width are reported too, with the sensitivity of the peak time to beta (a
weighted least-squares slope).
"""

from dataclasses import dataclass, field

import numpy as np

from .activity import (
    MODEL_UNCERTAINTY_FACTOR,
    Classification,
    Profile,
    limiting_mass_g,
    meteoroids_per_particle,
    trail_activity,
)
from .crossings import Crossings, circular_median_radec
from .ejection import population_index_from_mass_index
from .ephemeris import heliocentric_state
from .release import Candidates
from .solar_longitude import solar_longitude_deg
from .timescales import format_iso, format_utc

#: ZHR values below this are reported as 0 (far below anything an observer could notice).
ZHR_REPORT_FLOOR = 0.01
#: Fewest meteoroids behind a trail-level estimate (fewer: the trail is "not reached").
MIN_PARTICLES = 3
#: Earth's closest-point times within this many days of the target's passage belong to it
#: (Earth passes a node once a year; no source).
SAME_PASSAGE_DAYS = 30.0
#: Limiting magnitude of the meteoroids that set the headline peak (the ZHR's definition).
VISUAL_LIMITING_MAGNITUDE = 6.5
PEAK_BASIS_PROFILE = "maximum of the modelled ZHR profile (visual-size meteoroids)"
PEAK_BASIS_CENTRE = "centre of the visual-size meteoroids (their modelled ZHR is 0)"
PEAK_BASIS_ALL = "centre of all sizes (too few visual-size meteoroids)"
#: The mass of a +6.5 mag meteor is uncertain by a factor of a few (limiting_mass_g); the
#: reported ZHR range also spans the peak with the visual limit this factor heavier and
#: lighter. Most encounters barely move; one made of meteoroids at the threshold (small,
#: high-beta grains that alone reach a trail's far portions) can fall to nothing, and its
#: range says so. No source for the factor: the lower end of "a few".
LIMITING_MASS_RANGE_FACTOR = 2.0
VISUAL_SIZE_SOURCE = (
    "meteoroids above the mass of a +6.5 mag meteor at their speed (ZHR definition; "
    "mass-magnitude-speed relation of Jenniskens 1994 after Verniani 1973)"
)


def round_sig(x: float, digits: int = 3) -> float:
    if not np.isfinite(x) or x == 0:
        return 0.0 if x == 0 else float(x)
    return float(f"{x:.{digits}g}")


def zhr_value(x: float) -> float:
    return 0.0 if x < ZHR_REPORT_FLOOR else round_sig(x)


def year_of(t_tdb_jd: float) -> int:
    """Calendar year (TDB, astronomical numbering) of a TDB Julian date."""
    text = format_iso(t_tdb_jd, "TDB")
    return int(text[: text.index("-", 1)])


def weighted_median(x, w) -> float:
    x, w = np.asarray(x, dtype=float), np.asarray(w, dtype=float)
    if len(x) == 0:
        return float("nan")
    if not np.any(w > 0):
        return float(np.median(x))
    order = np.argsort(x)
    c = np.cumsum(w[order])
    return float(x[order][np.searchsorted(c, 0.5 * c[-1])])


@dataclass(frozen=True)
class TrailEncounter:
    """One trail's crossing of Earth's path at one Earth passage."""

    year: int
    trail_perihelion_tdb_jd: float
    revolutions: int
    node: str
    peak_tdb_jd: float
    solar_longitude_deg: float
    miss_distance_au: float
    miss_distance_spread_au: float
    fwhm_hours: float
    ra_deg: float
    dec_deg: float
    vg_km_s: float
    vinf_km_s: float
    particles: int
    dilution: float
    earth_passage_tdb_jd: float
    crossings: Crossings = field(repr=False)
    weights: np.ndarray = field(repr=False)
    meteoroids: Candidates = field(repr=False)  # release time, mass, size, beta of each one
    profile: Profile | None = field(default=None, repr=False)
    population_index: float = float("nan")
    zhr_estimate: float = 0.0
    zhr_low: float = 0.0
    zhr_high: float = 0.0
    zhr_mode: str = "absolute"
    peak_basis: str = PEAK_BASIS_PROFILE
    #: Centre of the visual-size meteoroids' crossings (stratified median over mass decades):
    #: the trail's middle, which the peak leaves when sizes pass at different distances or the
    #: crossings drift with arrival time.
    centre_tdb_jd: float = float("nan")
    mass_classes: tuple = ()
    beta_sensitivity_min_per_milli: float = float("nan")
    event: str | None = None
    #: What the crossing is called by its predicted activity (set by the forecast's conductor
    #: with :func:`dynamics.activity.classify_crossing`; None before that).
    classification: Classification | None = None

    def to_json(self) -> dict:
        return {
            "year": self.year,
            "trail": {
                "perihelion_tdb": format_iso(self.trail_perihelion_tdb_jd, "TDB"),
                "perihelion_year": year_of(self.trail_perihelion_tdb_jd),
                "revolutions": self.revolutions,
                "event": self.event,
            },
            "node": self.node,
            "peak_utc": format_utc(self.peak_tdb_jd),
            "peak_basis": self.peak_basis,
            "trail_centre_utc": format_utc(self.centre_tdb_jd)
            if np.isfinite(self.centre_tdb_jd)
            else None,
            "solar_longitude_deg": round(self.solar_longitude_deg, 4),
            "miss_distance_au": round(self.miss_distance_au, 6),
            "miss_distance_spread_au": round(self.miss_distance_spread_au, 6),
            "fwhm_hours": round(self.fwhm_hours, 2),
            "radiant": {"ra_deg": round(self.ra_deg, 2), "dec_deg": round(self.dec_deg, 2)},
            "vg_km_s": round(self.vg_km_s, 2),
            "vinf_km_s": round(self.vinf_km_s, 2),
            "particles": self.particles,
            "dilution": round(self.dilution, 4),
            "population_index": round(self.population_index, 3),
            "beta_sensitivity_min_per_0.001": None
            if not np.isfinite(self.beta_sensitivity_min_per_milli)
            else round(self.beta_sensitivity_min_per_milli, 2),
            "mass_classes": list(self.mass_classes),
            "zhr": {
                "estimate": zhr_value(self.zhr_estimate),
                "low": zhr_value(self.zhr_low),
                "high": zhr_value(self.zhr_high),
                "mode": self.zhr_mode,
                "box_count_estimate": None
                if self.profile is None
                else zhr_value(self.profile.box_zhr),
                "estimators_disagree": None
                if self.profile is None
                else self.profile.estimators_disagree,
                "direct_hit": None
                if self.profile is None
                else {
                    "zhr": zhr_value(self.profile.direct_hit_zhr),
                    "miss_au": round(self.profile.direct_hit_miss_au, 6),
                },
            },
            "classification": None
            if self.classification is None
            else self.classification.to_json(),
            "window": None
            if self.profile is None or self.profile.window_tdb_jd is None
            else {
                "start_utc": format_utc(self.profile.window_tdb_jd[0]),
                "end_utc": format_utc(self.profile.window_tdb_jd[1]),
            },
            "profile": [] if self.profile is None else profile_json(self.profile),
        }


def profile_json(p: Profile, n: int = 61) -> list:
    idx = np.unique(np.linspace(0, len(p.t_tdb_jd) - 1, n).round().astype(int))
    times = format_utc(p.t_tdb_jd[idx])
    return [
        {"time_utc": t, "zhr": round_sig(float(z))} for t, z in zip(times, p.zhr[idx], strict=True)
    ]


def _mass_classes(te, miss, mass, w, visual) -> list[dict]:
    """Per decade of mass: meteoroids, peak (weighted median time), miss and its spread."""
    out = []
    lm = np.floor(np.log10(mass)).astype(int)
    for dec in np.unique(lm):
        sel = lm == dec
        if sel.sum() < MIN_PARTICLES:
            continue
        q16, q84 = np.percentile(miss[sel], [16, 84])
        t = te[sel]
        sigma_t = 1.4826 * float(np.median(np.abs(t - np.median(t))))
        out.append(
            {
                "mass_g": [float(10.0**dec), float(10.0 ** (dec + 1))],
                "particles": int(sel.sum()),
                "visual_fraction": round(float(visual[sel].mean()), 3),
                "peak_utc": format_utc(weighted_median(t, w[sel])),
                "miss_distance_au": round(float(np.median(miss[sel])), 6),
                "miss_distance_spread_au": round(float(0.5 * (q84 - q16)), 6),
                "fwhm_hours": round(2.3548 * sigma_t * 24.0, 2),
            }
        )
    return out


def _stratified_centre(te, miss, mass, counts) -> tuple[float, float]:
    """Peak time and miss distance of the visual meteoroids: the median of each decade of
    mass, combined by a median weighted with the number of real meteoroids in each decade.

    Stratified so that a few heavily weighted small grains (weights go as m^(1 - s)) cannot
    set the answer alone: within a decade the weights differ by at most 10^(s - 1), across
    decades they say how many meteors each size gives."""
    lm = np.floor(np.log10(mass)).astype(int)
    t_c, m_c, w_c = [], [], []
    for dec in np.unique(lm):
        sel = lm == dec
        t_c.append(float(np.median(te[sel])))
        m_c.append(float(np.median(miss[sel])))
        w_c.append(float(counts[sel].sum()))
    return weighted_median(t_c, w_c), weighted_median(m_c, w_c)


def _beta_slope_min_per_milli(te, beta, w) -> float:
    """Weighted least-squares slope of Earth-passage time against beta (min per 0.001)."""
    if len(te) < 5 or np.ptp(beta) <= 0:
        return float("nan")
    ww = np.where(w > 0, w, 0.0) + 1e-300
    b, _ = np.polyfit(beta, te, 1, w=np.sqrt(ww))
    return float(b * 1440.0 * 1e-3)


def summarise(
    tg,
    trail_tp_tdb_jd: float,
    cr: Crossings,
    selection: Candidates,
    inclusion: np.ndarray,
    options,
    model,
    n_drawn: int,
    slope: float,
    event: str | None = None,
) -> TrailEncounter | None:
    """Trail-level numbers from the meteoroids that meet Earth's passage window.

    ``inclusion`` is each integrated meteoroid's probability of having been chosen (the
    targeting's Horvitz-Thompson weights); ``model`` the ejection model of this trail (an
    ejection event changes the size range); ``slope`` the local slope of real vs predicted
    arrival at Earth's passage (for the dilution).
    """
    lag = cr.t_cross_tdb_jd - cr.t_earth_tdb_jd
    same_passage = np.abs(cr.t_earth_tdb_jd - tg.t_earth) <= SAME_PASSAGE_DAYS
    keep = np.isfinite(lag) & (np.abs(lag) <= options.window_days) & same_passage
    n = int(keep.sum())
    if n < MIN_PARTICLES:
        return None
    sub = Crossings(*(getattr(cr, f)[keep] for f in Crossings.__dataclass_fields__))
    met = selection.take(np.flatnonzero(keep))
    r_pop = float(population_index_from_mass_index(model.mass_index))
    counts = (
        meteoroids_per_particle(
            met.mass_g,
            model.mass_index,
            model.mass_min_g,
            model.mass_max_g,
            n_drawn,
            options.dust_mass(),
        )
        * met.sample_weight
        / inclusion[keep]
        * options.zhr_scale
    )
    m_lim = limiting_mass_g(sub.vinf_km_s, VISUAL_LIMITING_MAGNITUDE)
    visual = met.mass_g >= m_lim
    te, miss = sub.t_earth_tdb_jd, sub.miss_distance_au
    if visual.sum() >= MIN_PARTICLES:
        basis = PEAK_BASIS_CENTRE
        centre, miss_c = _stratified_centre(
            te[visual], miss[visual], met.mass_g[visual], counts[visual]
        )
        pick = visual
    else:  # too few visual-size meteoroids behind the estimate: every size, said so
        basis = PEAK_BASIS_ALL
        centre = float(np.median(te))
        miss_c = float(np.median(miss))
        pick = np.ones(n, dtype=bool)
    q16, q84 = np.percentile(miss[pick], [16, 84])
    sigma_t = 1.4826 * float(np.median(np.abs(te[pick] - centre)))
    ra, dec = circular_median_radec(sub.ra_deg[pick], sub.dec_deg[pick])
    dilution = 1.0 / max(1.0, abs(slope) * tg.revolutions) if np.isfinite(slope) else float("nan")
    _, v_e = heliocentric_state("earth", centre)

    def activity(weights, **kw) -> Profile:
        return trail_activity(
            te,
            miss,
            (sub.t_cross_tdb_jd - sub.t_earth_tdb_jd),
            met.mass_g,
            weights,
            sub.vg_km_s,
            sub.vz_au_d,  # speed through the plane of Earth's path (crossings.py)
            earth_speed_au_d=float(np.linalg.norm(v_e)),
            population_index=r_pop,
            window_days=options.window_days,
            **kw,
        )

    prof = activity(np.where(visual, counts, 0.0), rng=options.seed)
    # the visual limit's own uncertainty: the peak with it heavier and lighter
    limit_peaks = [
        activity(
            np.where(met.mass_g >= m_lim * f, counts, 0.0), n_boot=0, direct_hit=False
        ).peak_zhr
        for f in (LIMITING_MASS_RANGE_FACTOR, 1.0 / LIMITING_MASS_RANGE_FACTOR)
    ]
    peak = centre
    if basis == PEAK_BASIS_CENTRE and prof.peak_zhr > 0:
        # the peak observers see: where the modelled rate is highest. Each mass class is taken
        # at zero arrival lag and weighted by its density at Earth, so the sizes that pass
        # closest set the peak, not the middle of all crossings
        basis, peak = PEAK_BASIS_PROFILE, prof.peak_tdb_jd
    mode = "calibrated" if options.calibration is not None else "absolute"
    factor = MODEL_UNCERTAINTY_FACTOR[mode]
    b16, b84 = np.percentile(prof.boot_peak_zhr, [16, 84])
    return TrailEncounter(
        year=tg.year,
        trail_perihelion_tdb_jd=trail_tp_tdb_jd,
        revolutions=tg.revolutions,
        node=tg.node,
        peak_tdb_jd=peak,
        solar_longitude_deg=float(solar_longitude_deg(peak)),
        miss_distance_au=float(miss_c),
        miss_distance_spread_au=float(0.5 * (q84 - q16)),
        fwhm_hours=prof.fwhm_hours if prof.peak_zhr > 0 else 2.3548 * sigma_t * 24.0,
        ra_deg=ra,
        dec_deg=dec,
        vg_km_s=float(np.median(sub.vg_km_s[pick])),
        vinf_km_s=float(np.median(sub.vinf_km_s[pick])),
        particles=n,
        dilution=dilution,
        earth_passage_tdb_jd=tg.t_earth,
        crossings=sub,
        weights=counts,
        meteoroids=met,
        profile=prof,
        population_index=r_pop,
        zhr_estimate=prof.peak_zhr,
        zhr_low=min(b16, prof.peak_zhr, limit_peaks[0]) / factor,
        zhr_high=max(b84, prof.peak_zhr, limit_peaks[1]) * factor,
        zhr_mode=mode,
        peak_basis=basis,
        centre_tdb_jd=centre,
        mass_classes=tuple(_mass_classes(te, miss, met.mass_g, counts, visual)),
        beta_sensitivity_min_per_milli=_beta_slope_min_per_milli(te, met.beta, counts),
        event=event,
    )
