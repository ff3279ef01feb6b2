"""What a forecast covers: the parent returns whose trails are followed, named trail years
matched to the parent's returns, and the dust production per return the activity uses.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from .activity import (
    DEFAULT_DUST_MASS_RANGE_G,
    DEFAULT_DUST_TO_GAS,
    dust_mass_from_magnitude_g,
)
from .constants import DAYS_PER_JULIAN_YEAR
from .orbit_input import OrbitInput
from .summaries import year_of
from .targeting import (
    NODE_MAX_DISTANCE_AU,
    parent_nodes,
)
from .timescales import calendar_year_tdb_jd, format_iso

if TYPE_CHECKING:
    from .forecast import ForecastOptions


#: With no trails named, a forecast follows trails at most this many revolutions old, besides
#: its age limit in years: for parents of a few years' period (a near-Sun asteroid, an
#: Encke-type comet) the 500-year default would mean hundreds of trails, each paired with every
#: revolution count, for hours of computing. The outbursts on record come from trails up to
#: about 45 revolutions old (the 2000 Ursids from 8P's return of 1405, Jenniskens & Lyytinen
#: 2002; the 2006 Orionids, resonant, Sato & Watanabe 2007; both from memory); older trails
#: have spread along their orbit unless a resonance holds them. A compute bound, not physics:
#: named trails (``trails``) are followed however old.
MAX_DEFAULT_TRAIL_REVOLUTIONS = 50


def default_trail_start(orbit: OrbitInput, options, y_start: float) -> tuple[float, str | None]:
    """Oldest perihelion time (TDB JD) whose trail a forecast follows when it names no trails,
    and the limit that set it, in words, when it is the revolution limit (else None).

    >>> from types import SimpleNamespace
    >>> o = SimpleNamespace(period_days=365.25 * 1.5)
    >>> start, why = default_trail_start(o, SimpleNamespace(max_trail_age_years=500.0), 0.0)
    >>> round(start / 365.25, 1), why
    (-75.0, 'the limit of 50 revolutions (75 years of its 1.5-year period)')
    """
    t_age = y_start - options.max_trail_age_years * DAYS_PER_JULIAN_YEAR
    period = float(orbit.period_days)
    if not np.isfinite(period) or period <= 0.0:
        return t_age, None
    t_rev = y_start - MAX_DEFAULT_TRAIL_REVOLUTIONS * period
    if t_rev <= t_age:
        return t_age, None
    years = MAX_DEFAULT_TRAIL_REVOLUTIONS * period / DAYS_PER_JULIAN_YEAR
    return t_rev, (
        f"the limit of {MAX_DEFAULT_TRAIL_REVOLUTIONS} revolutions ({years:.0f} years of its "
        f"{period / DAYS_PER_JULIAN_YEAR:.1f}-year period)"
    )


def trails_in_scope(returns, options, t_min, y_start, y_end, limit_words=None):
    """Indices of the returns whose trails are followed, and notes on what was left out.

    ``limit_words``: what set ``t_min`` when it is not the age limit in years (the revolution
    limit of :func:`default_trail_start`), for the note on the returns left out.
    """
    notes = []
    active = [k for k, r in enumerate(returns) if r.tp_tdb_jd < y_end and len(r.arc_t_tdb_jd)]
    inactive = [
        year_of(r.tp_tdb_jd) for r in returns if r.tp_tdb_jd < y_end and len(r.arc_t_tdb_jd) == 0
    ]
    if inactive:
        notes.append(
            f"returns of {', '.join(map(str, inactive))} came no closer to the Sun than "
            f"{options.ejection.active_r_max_au} au: no active arc, no trail"
        )
    if options.trails is not None:
        matched, missing, match_notes = match_trail_years(returns, active, options.trails)
        ids = sorted(set(matched.values()))
        notes += match_notes
        if missing:
            have = ", ".join(str(year_of(returns[k].tp_tdb_jd)) for k in active) or "none"
            notes.append(
                f"no active parent return in {', '.join(map(str, missing))} (returns found: {have})"
            )
    else:
        recent = [k for k in active if returns[k].tp_tdb_jd < y_start][-2:]
        ids = [k for k in active if returns[k].tp_tdb_jd >= t_min or k in recent]
        left = [k for k in active if k not in ids]
        if left and limit_words is None:
            notes.append(
                f"{len(left)} older returns ({year_of(returns[left[0]].tp_tdb_jd)} to "
                f"{year_of(returns[left[-1]].tp_tdb_jd)}) lie beyond the trail-age limit of "
                f"{options.max_trail_age_years:g} years and were not followed"
            )
        elif left:
            notes.append(
                f"{len(left)} older returns ({year_of(returns[left[0]].tp_tdb_jd)} to "
                f"{year_of(returns[left[-1]].tp_tdb_jd)}, and any before them) lie beyond "
                f"{limit_words}, inside the trail-age limit of "
                f"{options.max_trail_age_years:g} years, and were not followed: name them "
                "(trails) to follow them"
            )
    if not ids:
        notes.append("no parent return in scope has an active arc: no trails")
    return ids, notes


#: A named trail year without a return of its own stands for the nearest return when it lies
#: within this fraction of the spacing of returns (its period) from it: clearly nearer to one
#: return than to its neighbours (3:1 or better). Published trail years come from other
#: integrations of the parent and can differ by one year (decades, thousands of years back).
#: No source.
TRAIL_YEAR_MATCH_FRACTION = 0.25


def with_dust_production(orbit: OrbitInput, options: ForecastOptions) -> ForecastOptions:
    """The options with the parent's dust production per return, when its brightness gives it.

    A stated production wins; else a parent with a total absolute magnitude M1 releases the dust
    that goes with its water production (Jorda et al. 2008, :func:`dust_mass_from_magnitude_g`)
    over its active arc on the input orbit; else the nucleus rule of
    :func:`~dynamics.activity.default_dust_mass_per_return_g` stays.
    """
    if options.dust_mass_per_return_g is not None or orbit.m1 is None:
        return options
    mass = dust_mass_from_magnitude_g(
        orbit.m1, orbit.k1, orbit.q_au, orbit.e, options.ejection.active_r_max_au
    )
    basis = (
        f"from the parent's total absolute magnitude M1 = {orbit.m1:g} (K1 = {orbit.k1:g}): "
        "water production log10 Q = 30.675 - 0.2453 m_h (Jorda, Crovisier & Green 2008) "
        f"integrated over the input orbit inside {options.ejection.active_r_max_au:g} au, "
        f"dust/gas {DEFAULT_DUST_TO_GAS}, spread over {DEFAULT_DUST_MASS_RANGE_G[0]:g}-"
        f"{DEFAULT_DUST_MASS_RANGE_G[1]:g} g"
    )
    return replace(options, dust_mass_per_return_g=mass, dust_mass_basis=basis)


def match_trail_years(returns, candidates, years):
    """Which return each named perihelion year stands for.

    Parameters
    ----------
    returns : sequence of ParentReturn
        The parent's returns in time order.
    candidates : sequence of int
        Indices of the returns that may be matched (those with an active arc).
    years : iterable of int
        Perihelion years as named by the user or a source.

    Returns
    -------
    (matched, missing, notes): ``matched`` maps each matched year to a return index (a return
    in that calendar year, else the nearest one within :data:`TRAIL_YEAR_MATCH_FRACTION` of the
    spacing of returns around it); ``missing`` lists the years matched to none; ``notes`` says
    which years were taken as a return of another year.
    """
    matched: dict[int, int] = {}
    missing: list[int] = []
    notes: list[str] = []
    cands = list(candidates)
    tps = np.array([r.tp_tdb_jd for r in returns])
    for y in sorted(set(int(v) for v in years)):
        exact = [k for k in cands if year_of(returns[k].tp_tdb_jd) == y]
        if exact:
            matched[y] = exact[0]
            continue
        if not cands:
            missing.append(y)
            continue
        a, b = calendar_year_tdb_jd(y)
        mid = 0.5 * (a + b)
        k = min(cands, key=lambda j: abs(returns[j].tp_tdb_jd - mid))
        gaps = np.abs(np.diff(tps))[max(k - 1, 0) : k + 1]
        spacing = float(gaps.min()) if len(gaps) else float(returns[k].period_days)
        if not np.isfinite(spacing):
            missing.append(y)
            continue
        off = abs(returns[k].tp_tdb_jd - mid)
        if off <= TRAIL_YEAR_MATCH_FRACTION * spacing:
            matched[y] = k
            notes.append(
                f"the {y} trail was taken as the return of "
                f"{format_iso(returns[k].tp_tdb_jd, 'TDB')[:10]} (TDB), the nearest in this "
                f"integration of the parent ({off / DAYS_PER_JULIAN_YEAR:.1f} years from mid-{y}; "
                "trail years from other integrations can differ)"
            )
        else:
            missing.append(y)
    return matched, missing, notes


def no_target_note(returns, trail_ids) -> str:
    parts = [
        f"{which} node at {r:.3f} au" if np.isfinite(r) else f"no {which} node"
        for which, r, _ in parent_nodes(returns[trail_ids[-1]])
    ]
    return (
        f"no trail can meet Earth in the requested years: the parent's {' and '.join(parts)} "
        f"from the Sun, none within {NODE_MAX_DISTANCE_AU} au of Earth's orbit"
    )
