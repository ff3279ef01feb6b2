"""Orbit uncertainty: alternative orbit solutions and covariance clones, run side by side.

Every solution is forecast with the same seed, so that differences between their encounters
come from the orbits, not from sampling noise.
"""

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from .constants import DAYS_PER_JULIAN_YEAR
from .forecast import ForecastOptions, ForecastResult, forecast
from .orbit_input import OrbitInput
from .summaries import year_of as _year_of
from .summaries import zhr_value as _zhr
from .timescales import format_iso

#: Clones drawn from a covariance when the caller does not say how many.
DEFAULT_CLONES = 5
_ELEMENT_FIELDS = ("q_au", "e", "incl_deg", "node_deg", "peri_deg", "tp_tdb_jd")


@dataclass(frozen=True)
class SolutionsResult:
    """Forecasts of the same parent under several orbit solutions, with shared random draws."""

    labels: tuple[str, ...]
    orbits: tuple[OrbitInput, ...]
    results: tuple[ForecastResult, ...]

    def summary(self) -> list[dict]:
        """Per trail and year: how peak time, miss distance and ZHR vary across solutions."""
        rows: dict[tuple, dict] = {}
        for label, res in zip(self.labels, self.results, strict=True):
            for e in res.encounters + res.near_misses:
                key = (e.year, _year_of(e.trail_perihelion_tdb_jd), e.revolutions)
                rows.setdefault(key, {})[label] = e
        out = []
        for (year, trail_year, revs), by in sorted(rows.items()):
            peaks = np.array([e.peak_tdb_jd for e in by.values()])
            miss = np.array([e.miss_distance_au for e in by.values()])
            zhr = np.array([e.zhr_estimate for e in by.values()])
            missing = [lab for lab in self.labels if lab not in by]
            if len(by) > 1:
                text = (
                    f"{trail_year} trail in {year}: peak times span {np.ptp(peaks) * 1440:.1f} "
                    f"min, miss distances {miss.min():+.5f} to {miss.max():+.5f} au, ZHR "
                    f"{_zhr(zhr.min()):.3g} to {_zhr(zhr.max()):.3g} across {len(by)} solutions"
                )
            elif len(self.labels) == 1:
                text = f"{trail_year} trail in {year}: one orbit solution, nothing to compare"
            else:
                text = (
                    f"{trail_year} trail in {year}: crosses near Earth only under {next(iter(by))}"
                )
            if missing:
                text += f"; no crossing near Earth under {', '.join(missing)}"
            out.append(
                {
                    "year": year,
                    "trail_year": trail_year,
                    "revolutions": revs,
                    "solutions": sorted(by),
                    "peak_spread_min": round(float(np.ptp(peaks) * 1440), 2),
                    "miss_distance_range_au": [
                        round(float(miss.min()), 6),
                        round(float(miss.max()), 6),
                    ],
                    "zhr_range": [_zhr(float(zhr.min())), _zhr(float(zhr.max()))],
                    "explanation": text,
                }
            )
        return out

    def parents(self) -> list[dict]:
        """What each solution implies for the parent itself: period, previous return."""
        out = []
        for label, orbit, res in zip(self.labels, self.orbits, self.results, strict=True):
            past = [r for r in res.history.returns if r.tp_tdb_jd < orbit.tp_tdb_jd - 1.0]
            prev = past[-1] if past else None
            out.append(
                {
                    "solution": label,
                    "q_au": orbit.q_au,
                    "e": orbit.e,
                    "period_years": round(orbit.period_days / DAYS_PER_JULIAN_YEAR, 2)
                    if np.isfinite(orbit.period_days)
                    else None,
                    "previous_perihelion_tdb": format_iso(prev.tp_tdb_jd, "TDB") if prev else None,
                    "previous_period_years": round(
                        (orbit.tp_tdb_jd - prev.tp_tdb_jd) / DAYS_PER_JULIAN_YEAR, 1
                    )
                    if prev
                    else None,
                    "encounters": len(res.encounters),
                    "near_misses": len(res.near_misses),
                    "notes": list(res.notes),
                }
            )
        return out

    def merged_rows(self, kind: str) -> list[tuple[int, int, dict]]:
        """Every solution's encounters (``kind="encounters"``) or near misses, in the order
        :meth:`to_json` lists them: (solution index, index within that solution, row JSON)."""
        rows = []
        for si, (label, res) in enumerate(zip(self.labels, self.results, strict=True)):
            for k, row in enumerate(res.to_json()[kind]):
                rows.append((si, k, dict(row, solution=label)))
        return sorted(rows, key=lambda r: (r[2]["peak_utc"], r[2]["solution"]))

    def to_json(self) -> dict:
        base = self.results[0].to_json()
        base["encounters"] = [row for _, _, row in self.merged_rows("encounters")]
        base["near_misses"] = [row for _, _, row in self.merged_rows("near_misses")]
        base["solutions"] = self.parents()
        base["solution_summary"] = self.summary()
        base["notes"] = self.merged_notes()
        base["trails"] = [  # every solution's stated outcome per trail passage, labelled
            dict(t, solution=label)
            for label, res in zip(self.labels, self.results, strict=True)
            for t in res.trails
        ]
        return base

    def merged_notes(self) -> list[str]:
        """Notes of every solution: those all solutions share once, the others prefixed with
        the solution they belong to (in the order of the solutions)."""
        shared = set.intersection(*(set(r.notes) for r in self.results))
        out = [n for n in self.results[0].notes if n in shared]
        for label, res in zip(self.labels, self.results, strict=True):
            out += [f"{label}: {n}" for n in res.notes if n not in shared]
        return list(dict.fromkeys(out))


def orbit_solutions(orbit: OrbitInput, clones: int = DEFAULT_CLONES, seed: int = 1):
    """The nominal orbit, its alternative solutions, and clones drawn from its covariance.

    Clones are drawn from a multivariate normal over (q, e, i, node, peri, tp) with a seeded
    generator; draws with q <= 0 or e < 0 are redrawn, angles are wrapped.
    """
    labels, orbits = ["nominal"], [replace(orbit, solutions=(), covariance=None)]
    for k, sol in enumerate(orbit.solutions, start=1):
        labels.append(f"solution-{k}")
        orbits.append(sol)
    if orbit.covariance is not None and clones > 0:
        rng = np.random.default_rng(np.random.SeedSequence([seed, 777]))
        mean = np.array([getattr(orbit, f) for f in _ELEMENT_FIELDS])
        k = 0
        while k < clones:
            x = rng.multivariate_normal(mean, orbit.covariance)
            if x[0] <= 0 or x[1] < 0:
                continue
            k += 1
            x[2] = abs(x[2]) % 360.0
            x[2] = 360.0 - x[2] if x[2] > 180.0 else x[2]
            x[3] %= 360.0
            x[4] %= 360.0
            labels.append(f"clone-{k}")
            orbits.append(
                replace(orbits[0], **dict(zip(_ELEMENT_FIELDS, map(float, x), strict=True)))
            )
    return tuple(labels), tuple(orbits)


def forecast_solutions(
    orbit: OrbitInput,
    options: ForecastOptions,
    *,
    clones: int = DEFAULT_CLONES,
    progress: Callable[[float, str], None] | None = None,
    executor=None,
    should_stop: Callable[[], bool] | None = None,
) -> SolutionsResult:
    """Run :func:`forecast` for every solution of ``orbit`` with the same seed, so that the
    differences between their encounters come from the orbits, not from sampling noise."""
    labels, orbits = orbit_solutions(orbit, clones, options.seed)
    say = progress or (lambda f, s: None)
    results = []
    for k, (label, o) in enumerate(zip(labels, orbits, strict=True)):
        results.append(
            forecast(
                o,
                options,
                executor=executor,
                progress=lambda f, s, k=k, label=label: say((k + f) / len(orbits), f"{label}: {s}"),
                should_stop=should_stop,
            )
        )
    return SolutionsResult(labels, orbits, tuple(results))
