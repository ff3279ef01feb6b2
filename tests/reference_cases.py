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

# 21P/Giacobini-Zinner, orbit solution K123/6 of the 2012 apparition with its non-gravitational
# terms A1, A2, A3 (au/day^2) and DT (days) of the asymmetric model: the public near-Earth-comet
# orbital-elements open dataset of the small-body service (epoch MJD 56498 TDB, Tp JD
# 2455969.126 TDB), as stored in a public repository (user HARSHCRR, file
# app/api/comets/route.ts, commit bf4bbadf5fd70647ad802bc74f16f4658e64d2e8). The same elements
# without those terms appear in the public comet elements file (another stored copy).
PARENT_21P_2012 = {
    "name": "21P/Giacobini-Zinner K123/6 (reference case)",
    "epoch": 2456498.5,
    "q": 1.030696274,
    "e": 0.7068178874,
    "i": 31.90810099,
    "node": 195.3970145,
    "peri": 172.5844249,
    "tp": 2455969.126,
    "nongrav": {"a1": 3.35e-9, "a2": -4.29e-10, "a3": -9.57e-10, "dt": -32.8},
}
