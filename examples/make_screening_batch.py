"""Write ``examples/screening-batch.jsonl``: 200 invented orbits for ``trailcast screen``.

Every orbit is invented (random elements from a fixed seed); none is a real comet. The batch
holds, in shuffled order:

- 183 harmless orbits (perihelion beyond 1.25 au, or far from Earth's orbit),
- 6 near misses whose nearer node lies 0.08-0.2 au from 1 au (they should fail the rule),
- 2 low-inclination orbits that come close to Earth's orbit far from their nodes,
- 4 short-period orbits whose descending node lies within 0.01 au of 1 au (candidates),
- 1 hyperbolic orbit with a node near 1 au (a candidate with no dust trails: first passage),
- 1 candidate-like orbit whose epoch (2250) lies outside the planetary ephemeris,
- 3 bad rows: an impossible eccentricity, a missing perihelion time, broken JSON.

Run from the repository root: ``.venv/bin/python examples/make_screening_batch.py``. The same
seed writes the same file.
"""

import json
import math
from pathlib import Path

import numpy as np

SEED = 20261
OUT = Path(__file__).resolve().parent / "screening-batch.jsonl"
#: Osculation epochs (JD TDB) shared by groups of orbits, as survey batches usually are.
EPOCHS_TDB_JD = (2461000.5, 2461200.5, 2461400.5)
#: 2250-01-01 TDB, outside DE423 (1799-12-16 to 2200-02-01).
EPOCH_OUTSIDE_DE423_TDB_JD = 2542855.5


def _angles(rng):
    return {
        "i": round(float(np.degrees(np.arccos(rng.uniform(-1.0, 1.0)))), 4),
        "node": round(float(rng.uniform(0.0, 360.0)), 4),
        "peri": round(float(rng.uniform(0.0, 360.0)), 4),
    }


def _orbit(name, epoch, q, e, angles, tp_offset_days):
    return {
        "name": name,
        "epoch": epoch,
        "q": round(float(q), 6),
        "e": round(float(e), 6),
        **angles,
        "tp": round(epoch + float(tp_offset_days), 4),
    }


def _node_at(a_au, r_node_au, nu_node_deg):
    """Eccentricity that puts the orbit's point at true anomaly nu at distance r (a fixed):
    a (1 - e^2) = r (1 + e cos nu)."""
    c = math.cos(math.radians(nu_node_deg))
    disc = (r_node_au * c) ** 2 - 4.0 * a_au * (r_node_au - a_au)
    return (-r_node_au * c + math.sqrt(disc)) / (2.0 * a_au)


def _periodic_near_node(rng, name, epoch, delta_au):
    """Short-period orbit whose descending node lies at 1 au + delta."""
    period_yr = rng.uniform(5.0, 9.0)
    a = period_yr ** (2.0 / 3.0)
    while True:
        ang = _angles(rng)
        ang["i"] = round(float(rng.uniform(8.0, 60.0)), 4)
        e = _node_at(a, 1.0 + delta_au, 180.0 - ang["peri"])
        if 0.3 < e < 0.85 and a * (1.0 - e) < 1.0 + delta_au:
            return _orbit(name, epoch, a * (1.0 - e), e, ang, rng.uniform(-60.0, 60.0))


def make_batch(seed: int = SEED) -> list[str]:
    rng = np.random.default_rng(seed)
    rows: list[str] = []
    for k in range(183):
        epoch = float(rng.choice(EPOCHS_TDB_JD))
        q = rng.uniform(1.25, 5.0)
        e = rng.uniform(0.0, 0.98) if k % 20 else rng.uniform(1.0, 1.01)
        rows.append(
            json.dumps(
                _orbit(
                    f"P/2027 H{k + 1} (harmless) [invented]",
                    epoch,
                    q,
                    e,
                    _angles(rng),
                    rng.uniform(-200.0, 200.0),
                )
            )
        )
    for k in range(6):
        delta = rng.choice([-1.0, 1.0]) * rng.uniform(0.08, 0.2)
        o = _periodic_near_node(
            rng, f"P/2027 M{k + 1} (near miss) [invented]", EPOCHS_TDB_JD[1], 0.0
        )
        # move the node outwards/inwards by delta: rescale q with the same e
        o["q"] = round(o["q"] * (1.0 + delta), 6)
        rows.append(json.dumps(o))
    for k in range(2):  # perihelion just inside Earth's orbit, nodes at the latus rectum
        ang = {
            "i": round(float(rng.uniform(0.3, 0.8)), 4),
            "node": round(float(rng.uniform(0, 360)), 4),
            "peri": 90.0,
        }
        rows.append(
            json.dumps(
                _orbit(
                    f"P/2027 L{k + 1} (low inclination) [invented]",
                    EPOCHS_TDB_JD[0],
                    0.99,
                    0.5,
                    ang,
                    10.0,
                )
            )
        )
    for k in range(4):
        delta = rng.uniform(-0.01, 0.01)
        rows.append(
            json.dumps(
                _periodic_near_node(
                    rng, f"P/2027 C{k + 1} (candidate) [invented]", EPOCHS_TDB_JD[2], delta
                )
            )
        )
    hyp = _periodic_near_node(rng, "C/2027 C5 (hyperbolic) [invented]", EPOCHS_TDB_JD[0], 0.0)
    # same perihelion direction and node distance: p = r (1 + e cos nu) with e = 1.05
    nu = math.radians(180.0 - hyp["peri"])
    hyp["e"] = 1.05
    hyp["q"] = round(1.0 * (1.0 + 1.05 * math.cos(nu)) / 2.05, 6)
    if hyp["q"] <= 0.05:
        hyp["peri"] = round((hyp["peri"] + 60.0) % 360.0, 4)
        nu = math.radians(180.0 - hyp["peri"])
        hyp["q"] = round((1.0 + 1.05 * math.cos(nu)) / 2.05, 6)
    rows.append(json.dumps(hyp))
    late = _periodic_near_node(
        rng, "P/2250 C6 (late epoch) [invented]", EPOCH_OUTSIDE_DE423_TDB_JD, 0.0
    )
    rows.append(json.dumps(late))
    bad_e = _orbit(
        "P/2027 B1 (impossible) [invented]", EPOCHS_TDB_JD[0], 1.5, -0.3, _angles(rng), 0.0
    )
    no_tp = _orbit("P/2027 B2 (no tp) [invented]", EPOCHS_TDB_JD[0], 2.0, 0.4, _angles(rng), 0.0)
    del no_tp["tp"]
    rows += [
        json.dumps(bad_e),
        json.dumps(no_tp),
        '{"name": "P/2027 B3 (broken) [invented]", "q": 1.2,',
    ]
    order = rng.permutation(len(rows))
    return [rows[k] for k in order]


def main() -> None:
    rows = make_batch()
    assert len(rows) == 200, len(rows)
    OUT.write_text("\n".join(rows) + "\n", encoding="utf-8")
    print(f"wrote {len(rows)} rows to {OUT}")


if __name__ == "__main__":
    main()
