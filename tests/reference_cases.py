"""Real parent orbits used as reference cases by several test modules (never in demos).

Each carries its source; values copied from ../shared/data/reference-orbits.json.
"""

# 55P/Tempel-Tuttle, orbit solution J985/69 (orbit-solution header of the public small-body
# ephemeris service; data arc 1865-12-22 to 1998-07-05), with its non-gravitational terms
# (au/day^2). Epoch JD 2451040.5 TDB.
PARENT_55P = {
    "name": "55P/Tempel-Tuttle (reference case)",
    "epoch": 2451040.5,
    "q": 0.9764279154675056,
    "e": 0.9055527209724122,
    "i": 162.4865753794343,
    "node": 235.270989149082,
    "peri": 172.5002736828059,
    "tp": 2450872.5977341123,
    "nongrav": {"a1": 1.580981463194e-9, "a2": 9.186415933073e-11, "a3": 0.0},
}
