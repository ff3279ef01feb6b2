"""Targeting: which trails can meet Earth in a year, and which meteoroids of a trail to integrate.

A meteoroid released at the parent's return k reaches its node N revolutions later at a time set
mostly by its orbital period, i.e. by the offset of its inverse semi-major axis from the
parent's at release (McNaught & Asher 1999, WGN 27, 85: the trail's position after N
revolutions follows from the ejection's semi-major-axis offset and the parent's perturbed
history). trailcast uses that offset, through a predicted arrival time, as a smooth *shooting
variable*:

1. :func:`predicted_offset` - each candidate's arrival minus Earth's passage (days), from its
   analytic period under mu (1 - beta) *and the parent's realised periods over those
   revolutions* (the planets' perturbations of the parent carry over to the dust: Lyytinen &
   Jenniskens 2003, Icarus 162, 443, in spirit). For long-period parents this matters most: the
   osculating period at perihelion can differ from the realised one by centuries.
2. A *pilot* set spread over predicted offsets is integrated; each meteoroid's real arrival
   (from the integration) is paired with its prediction, per class of beta (radiation pressure
   changes how planets perturb the orbit). The pilot span is widened until the integrated
   arrivals bracket Earth's passage (:class:`ArrivalMap.brackets`).
3. :class:`ArrivalMap` maps predictions to real arrivals by a running median through the
   integrated pairs, piecewise linear, every branch kept (old trails fold). Candidates whose
   mapped arrival lies within the window are eligible; a random subset is integrated, and each
   keeps its inclusion probability so that activity can weight the hits without bias
   (Horvitz-Thompson): mis-targeted meteoroids of earlier rounds cost time, never weight.
"""

from dataclasses import dataclass, field

import numpy as np

from .constants import GM_SUN_AU3_D2
from .crossings import _time_from_perihelion, earth_passage_tdb, node_of_orbit
from .history import ParentReturn
from .release import Candidates
from .solar_longitude import times_of_solar_longitude_tdb
from .timescales import calendar_year_tdb_jd

#: A parent node farther than this from Earth's orbit is not followed (au). Generous on
#: purpose: trails drift from the parent's node by ~0.1 au over centuries (no source).
NODE_MAX_DISTANCE_AU = 0.25
#: Revolution counts are tried while the parent's node passage is no later than Earth's by
#: this fraction of its period (dust can arrive earlier than the parent), and node passages
#: more than this many days before the trail's own perihelion are not its revolutions (no
#: source).
LATEST_NODE_FRACTION_OF_PERIOD = 0.75
NODE_BEFORE_PERIHELION_DAYS = 200.0
#: Classes of beta (equal-count bins of log beta) with their own arrival maps.
BETA_CLASSES = 3
#: Points of the running median that smooths each class's arrival map (no source: enough to
#: average the scatter from release time and direction, few enough to follow folds).
SMOOTHING_POINTS = 5
#: Widening factor of the pilot span per expansion round, and the number of rounds (a span of
#: 150 d grows to 150 * 3**5 = 36,450 d, a century: enough for one-revolution dust of
#: long-period parents). No source.
PILOT_EXPANSION_FACTOR = 3.0
PILOT_EXPANSIONS = 5
#: Meteoroids added on the open side in each expansion round.
PILOT_EXPANSION_PARTICLES = 24


@dataclass
class Target:
    """One trail, one Earth passage of one node, one number of revolutions."""

    trail: int  # index of the parent return that released the trail
    year: int
    node: str
    t_earth: float  # Earth's passage of the parent's node longitude (TDB JD)
    revolutions: int
    t_parent_node: float  # the parent's own node passage on return trail + revolutions
    p_real_days: float  # the parent's mean realised period over those revolutions (NaN if 0)
    p_osc_days: float  # the parent's osculating period at the trail's perihelion
    span_days: float = 0.0  # half-width of predicted offsets the pilot covered
    pilot_rounds: int = 0
    x_seen: np.ndarray = field(default_factory=lambda: np.zeros(0))  # predicted offsets (days)
    y_seen: np.ndarray = field(default_factory=lambda: np.zeros(0))  # integrated offsets (days)
    c_seen: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))  # beta class
    idx_seen: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))  # pool index
    miss_seen: np.ndarray = field(default_factory=lambda: np.zeros(0))  # miss distances (au)
    x_pool: np.ndarray = field(default_factory=lambda: np.zeros(0))  # predictions, whole pool
    keep_prob: np.ndarray | None = None  # per pool candidate: 1 - P(integrated), main rounds
    rounds: int = 0
    selection_mode: str = "shooting"
    pool: Candidates | None = None  # the trail's pool, or this target's own targeted pool
    cls: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))  # beta class
    n_drawn: int = 0  # draws behind ``pool`` (the activity's weights)
    targeted_pool: bool = False
    stopped: str | None = None  # why no more meteoroids were integrated for it, if it was cut short


def parent_node_time(ret: ParentReturn, node: str) -> float:
    """Time (TDB JD) the parent passes ``node`` on the revolution of return ``ret`` (two-body
    from its perihelion elements; the node nearest perihelion in time)."""
    el = ret.elements
    nu = -float(el.peri_deg) if node == "ascending" else 180.0 - float(el.peri_deg)
    dt, _, _ = _time_from_perihelion(
        np.array([float(el.q_au)]),
        np.array([float(el.e)]),
        np.array([float(el.incl_deg)]),
        np.array([float(el.node_deg)]),
        np.array([float(el.peri_deg)]),
        np.array([nu]),
        np.array([1.0]),
    )
    return ret.tp_tdb_jd + float(dt[0])


def parent_nodes(ret: ParentReturn):
    """[(node, heliocentric distance au (NaN: none), longitude deg)] for both nodes of the
    parent's orbit at return ``ret``."""
    el = ret.elements
    out = []
    for which in ("ascending", "descending"):
        r, lon = node_of_orbit(
            float(el.q_au),
            float(el.e),
            float(el.incl_deg),
            float(el.node_deg),
            float(el.peri_deg),
            which,
        )
        out.append((which, float(r), float(lon)))
    return out


def nodes_near_earth(ret: ParentReturn, max_distance_au: float):
    """The parent's nodes (on return ``ret``) within ``max_distance_au`` of Earth's orbit.

    Earth's distance is DE423's at the time Earth passes the node's longitude nearest the
    return (clipped into DE423's span). Returns a list of (node, r_node_au, node_longitude_deg).
    """
    from .ephemeris import EPHEMERIS_SPAN_TDB_JD, heliocentric_state

    out = []
    for which, r, lon in parent_nodes(ret):
        if not np.isfinite(r):
            continue
        t = float(
            np.clip(ret.tp_tdb_jd, EPHEMERIS_SPAN_TDB_JD[0] + 400, EPHEMERIS_SPAN_TDB_JD[1] - 400)
        )
        te = earth_passage_tdb(lon, t)
        r_e = float(np.linalg.norm(heliocentric_state("earth", te)[0]))
        if abs(float(r) - r_e) <= max_distance_au:
            out.append((which, float(r), float(lon)))
    return out


def find_targets(returns, trail_ids, first_year: int, last_year: int) -> list[Target]:
    """Every (trail, Earth passage, node, revolutions) combination that could meet Earth.

    For each requested year, the parent's nodes near Earth's orbit (from the return nearest
    that year) give Earth's passage times; each trail is then paired with every later return of
    the parent whose node passage falls before Earth's (the trail's revolutions).
    """
    if not trail_ids:
        return []
    out = []
    for year in range(first_year, last_year + 1):
        y0, y1 = calendar_year_tdb_jd(year)
        ref = min(returns, key=lambda r: abs(r.tp_tdb_jd - 0.5 * (y0 + y1)))
        for node, _r_node, lon in nodes_near_earth(ref, NODE_MAX_DISTANCE_AU):
            for t_e in np.atleast_1d(times_of_solar_longitude_tdb((lon - 180.0) % 360.0, y0, y1)):
                for k in trail_ids:
                    for j in range(k, len(returns)):
                        t_node = parent_node_time(returns[j], node)
                        if t_node > t_e + LATEST_NODE_FRACTION_OF_PERIOD * returns[j].period_days:
                            break
                        if t_node < returns[k].tp_tdb_jd - NODE_BEFORE_PERIHELION_DAYS:
                            continue
                        n_rev = j - k
                        p_real = (
                            (returns[j].tp_tdb_jd - returns[k].tp_tdb_jd) / n_rev
                            if n_rev
                            else float("nan")
                        )
                        out.append(
                            Target(
                                k,
                                year,
                                node,
                                float(t_e),
                                n_rev,
                                t_node,
                                p_real,
                                returns[k].period_days,
                            )
                        )
    return out


def predicted_offset(pool: Candidates, tg: Target) -> np.ndarray:
    """Predicted node arrival minus Earth's passage (days) of each candidate.

    A candidate's inverse semi-major axis (under mu (1 - beta), as an equivalent period)
    differs from the parent's osculating one *at the same release point* by its ejection;
    the planets then shift both alike. Its period over the trail's revolutions is the
    parent's realised mean period with that same offset in 1/a (exact in the offset, not
    linearised: one-revolution dust of long-period parents has offsets of decades).
    Candidates unbound after that shift get +inf.
    """
    base = tg.t_parent_node + pool.dtp_days - tg.t_earth
    if tg.revolutions == 0:
        return base
    k = 2.0 * np.pi / np.sqrt(GM_SUN_AU3_D2)  # P = k a^1.5 (days, au)
    p_parent = np.where(
        np.isfinite(pool.parent_period_days), pool.parent_period_days, tg.p_osc_days
    )
    p_dust = p_parent + pool.dperiod_days
    inv_a_parent = np.abs(p_parent / k) ** (-2.0 / 3.0)
    inv_a_dust = np.where(p_dust > 0, (np.abs(p_dust) / k) ** (-2.0 / 3.0), np.nan)
    inv_a_dust_real = (tg.p_real_days / k) ** (-2.0 / 3.0) + (inv_a_dust - inv_a_parent)
    p_dust_real = np.where(inv_a_dust_real > 0, k * np.abs(inv_a_dust_real) ** -1.5, np.inf)
    return base + tg.revolutions * (p_dust_real - tg.p_real_days)


def beta_classes(beta: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Class index (0 .. len(edges)) of each beta."""
    return np.searchsorted(edges, np.log10(np.maximum(beta, 1e-12)))


def beta_class_edges(pool_beta: np.ndarray, n_classes: int = BETA_CLASSES) -> np.ndarray:
    """Equal-count edges in log10(beta) over a trail's candidate pool."""
    lb = np.log10(np.maximum(pool_beta, 1e-12))
    if len(lb) == 0:
        return np.zeros(0)
    return np.quantile(lb, np.linspace(0, 1, n_classes + 1)[1:-1])


class ArrivalMap:
    """Integrated arrival offset as a function of the predicted one, per beta class.

    Built from every meteoroid integrated so far for one target: a running median of
    :data:`SMOOTHING_POINTS` through the pairs sorted by prediction, then linear interpolation.
    Outside the range of a class's integrated predictions the map is undefined (NaN): the pilot
    widens its span instead of extrapolating.
    """

    def __init__(self, x, y, cls, n_classes: int):
        self.curves = []
        for c in range(n_classes):
            sel = (cls == c) & np.isfinite(x) & np.isfinite(y)
            self.curves.append(_smooth_curve(x[sel], y[sel]))
        pooled = np.isfinite(x) & np.isfinite(y)
        self.pooled = _smooth_curve(x[pooled], y[pooled])

    def __call__(self, x, cls) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        out = np.full(len(x), np.nan)
        for c, curve in enumerate(self.curves):
            sel = cls == c
            if np.any(sel):
                out[sel] = _interp(curve, x[sel])
        missing = np.isnan(out)
        if np.any(missing):  # a class with too few pairs: the pooled map
            out[missing] = _interp(self.pooled, x[missing])
        return out

    def brackets(self) -> tuple[bool, float]:
        """(True, 0) when some class's integrated arrivals fall on both sides of Earth's passage
        (or at it); else (False, s): s = -1 when all arrive late (look at earlier predictions),
        +1 when all arrive early."""
        ys = [c[1] for c in self.curves if len(c[1])] + [self.pooled[1]]
        for y in ys:
            if len(y) and np.nanmin(y) <= 0.0 <= np.nanmax(y):
                return True, 0.0
        y = self.pooled[1]
        if len(y) == 0:
            return False, 0.0
        return False, -1.0 if np.nanmin(y) > 0 else 1.0

    def local_slope(self, x, cls) -> np.ndarray:
        """d(arrival)/d(prediction) of the map at ``x`` (finite difference over 1 day)."""
        return self(np.asarray(x) + 0.5, cls) - self(np.asarray(x) - 0.5, cls)


def _smooth_curve(x, y):
    if len(x) == 0:
        return (np.zeros(0), np.zeros(0))
    order = np.argsort(x, kind="stable")
    x, y = x[order], y[order]
    k = min(SMOOTHING_POINTS, len(x))
    if k >= 3:
        pad = k // 2
        yp = np.concatenate([np.full(pad, y[0]), y, np.full(pad, y[-1])])
        windows = np.lib.stride_tricks.sliding_window_view(yp, k)
        y = np.median(windows, axis=1)
    xs, first = np.unique(x, return_index=True)
    return (xs, y[first])


def _interp(curve, x):
    xs, ys = curve
    out = np.full(len(x), np.nan)
    if len(xs) == 0:
        return out
    if len(xs) == 1:
        out[np.abs(x - xs[0]) <= 0.5] = ys[0]
        return out
    inside = (x >= xs[0]) & (x <= xs[-1])
    out[inside] = np.interp(x[inside], xs, ys)
    return out


def pilot_pick(x: np.ndarray, cls: np.ndarray, lo: float, hi: float, per_class: int, exclude):
    """Pool indices spread evenly in predicted offset over [lo, hi], ``per_class`` per class."""
    picks = []
    for c in np.unique(cls):
        inside = np.flatnonzero((cls == c) & (x >= lo) & (x <= hi) & np.isfinite(x) & ~exclude)
        if len(inside) == 0:
            continue
        order = inside[np.argsort(x[inside], kind="stable")]
        pos = np.unique(np.linspace(0, len(order) - 1, per_class).round().astype(int))
        picks.append(order[pos])
    return np.concatenate(picks) if picks else np.zeros(0, dtype=int)


def select_for_window(
    amap: ArrivalMap, x, cls, window_days: float, taken: np.ndarray, n_max: int
) -> tuple[np.ndarray, np.ndarray, float]:
    """Candidates to integrate next for one target.

    Eligible: mapped arrival within +-``window_days`` of Earth's passage and not integrated yet.
    Returns (picked, eligible, fraction): the first ``n_max`` eligible ones in pool order (the
    pool is in random order, so this is a random subset) and the fraction of the eligible they
    are - each eligible candidate's probability of being picked in this round.
    """
    y = amap(x, cls)
    eligible = np.flatnonzero(np.isfinite(y) & (np.abs(y) <= window_days) & ~taken)
    if len(eligible) == 0:
        return eligible, eligible, 0.0
    pick = eligible[:n_max]
    return pick, eligible, len(pick) / len(eligible)
