"""Charts of a stored forecast, drawn on the server with matplotlib: SVG for pages, PNG for reports.

Three charts per forecast year, each a pure function of the stored result (the JSON of
:meth:`dynamics.forecast.ForecastResult.to_json` plus the runner's ``particle_crossings``):

``crossings``
    every simulated meteoroid of every trail crossing Earth's path that year, at the time Earth
    passes its node (x, UTC; solar longitude on the top axis) against its signed miss distance
    (y, au, trail minus Earth); Earth's path is the line y = 0.
``profile``
    the predicted ZHR against time for each trail with activity, the low-high range as a band
    (the profile scaled by low/estimate and high/estimate of the peak) and the activity window
    shaded.
``radiants``
    the radiant of each simulated meteoroid and each trail's median radiant, RA (increasing to
    the left, as on the sky) against Dec, J2000.

Every trail keeps one style (colour, marker, line dash) in every chart of a forecast, chosen so
that trails stay apart in greyscale too. SVG groups carry stable ids (``trail-<year>``,
``radiants-<year>``, ``radiant-<year>``, ``profile-<year>``, ``band-<year>``, ``window-<year>``,
``peak-<year>``, ``peak-line-<year>``, ``earth-path``) so that pages and tests can find the
plotted elements; one ``<use>`` element per plotted point. Legends name each crossing by its
classification by predicted activity (encounter, negligible, near miss), as the numbers table
does; only encounters are drawn with filled markers.

Time axes name the date (:class:`UtcDayFormatter`: the month and day under the first tick and
at every change of UTC day) and mark each encounter's peak with a dotted line labelled to the
minute. Each chart comes in two layouts (:data:`SIZES`): ``wide`` for laptops and reports,
``narrow`` for phones, where its text stays at 11 px or more on screen.

Rendering uses :class:`matplotlib.figure.Figure` directly (no pyplot, no global figure state)
under one lock, since matplotlib's text and font caches are not documented as thread-safe.
"""

import io
import textwrap
import threading
from collections import OrderedDict
from datetime import UTC, datetime

import matplotlib
import numpy as np
from matplotlib import dates as mdates
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator, ScalarFormatter

CHARTS = ("crossings", "profile", "radiants")
#: Media type of each downloadable format.
FORMATS = {"svg": "image/svg+xml", "png": "image/png"}
#: Figure size (inches) and PNG resolution (dots per inch): 1000 x 560 px, readable on a laptop.
FIGSIZE_IN = (10.0, 5.6)
PNG_DPI = 100
#: The two layouts a page can ask for. ``wide``: :data:`FIGSIZE_IN`, legend beside the axes, for
#: boxes of about 600 px and more (an SVG of 720 pt shown 600-1000 px wide keeps 11 pt text at
#: 9-15 px). ``narrow``: for phones, 4.6 in = 331 pt wide, so that shown in a 340-380 px box
#: (a 390 px phone less the page's margins) 1 pt is 1.0-1.15 px and no text is under 11 px;
#: the legend goes under the axes and the title wraps.
SIZES = {
    "wide": {"figsize_in": FIGSIZE_IN, "legend_pt": 10, "title_chars": 120, "ticks": (3, 8)},
    "narrow": {"figsize_in": (4.6, 6.4), "legend_pt": 11, "title_chars": 44, "ticks": (2, 5)},
}
#: Most peaks named on a time axis (the encounters of the year, else the nearest near misses):
#: more labels would cover the points they describe (no source).
MAX_PEAK_LABELS = 3

#: A widely used colour-blind-safe palette, ordered so that neighbours differ in lightness;
#: markers and dashes repeat the distinction for greyscale prints.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#D55E00", "#56B4E9", "#000000", "#999933")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
DASHES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (8, 2)), (0, (1, 1)), (0, (3, 3)))
EARTH_COLOUR = "#444444"

_RC = {
    "svg.fonttype": "none",  # text stays text: selectable, searchable, small
    "font.size": 11,
    "axes.titlesize": 12,
    "axes.labelsize": 11,
}
_LOCK = threading.Lock()
_CACHE: OrderedDict = OrderedDict()
#: Rendered charts kept in memory (a done forecast never changes, so they never go stale).
CACHE_SIZE = 64


class NoSuchYear(ValueError):
    """The forecast does not cover the year asked for."""


def forecast_years(result: dict) -> list[int]:
    """The years a stored forecast covers (from its options), else those of its crossings."""
    span = result.get("model", {}).get("options", {}).get("years")
    if isinstance(span, list) and len(span) == 2 and all(isinstance(y, int) for y in span):
        return list(range(span[0], span[1] + 1))
    years = {e["year"] for key in ("encounters", "near_misses") for e in result.get(key, [])}
    return sorted(years)


def default_year(result: dict) -> int | None:
    """The first year with an encounter, else with a near miss, else the first year covered."""
    for key in ("encounters", "near_misses"):
        years = sorted(e["year"] for e in result.get(key, []))
        if years:
            return years[0]
    years = forecast_years(result)
    return years[0] if years else None


def trail_styles(result: dict) -> dict[int, dict]:
    """One style per trail (by perihelion year), the same in every chart of the forecast."""
    trails = sorted(
        {e["trail"]["perihelion_year"] for k in ("encounters", "near_misses") for e in result[k]}
    )
    return {
        t: {
            "color": PALETTE[n % len(PALETTE)],
            "marker": MARKERS[n % len(MARKERS)],
            "linestyle": DASHES[n % len(DASHES)],
        }
        for n, t in enumerate(trails)
    }


def _items(result: dict, year: int) -> list[tuple[str, dict, dict | None]]:
    """(kind, encounter, its particle crossings or None) for the year, encounters first."""
    crossings = {(c["kind"], c["index"]): c for c in result.get("particle_crossings", [])}
    out = []
    for kind, key in (("encounter", "encounters"), ("near_miss", "near_misses")):
        for k, e in enumerate(result.get(key, [])):
            if e["year"] == year:
                out.append((kind, e, crossings.get((kind, k))))
    return out


def _what(kind: str, e: dict) -> str:
    """The crossing's classification by predicted activity (``encounter``, ``negligible``,
    ``near miss``); without one (hand-made results), the list it is in."""
    c = e.get("classification")
    if isinstance(c, dict) and c.get("label"):
        return c["label"]
    return "encounter" if kind == "encounter" else "near miss"


def _label(kind: str, e: dict) -> str:
    t = e["trail"]
    return f"{t['perihelion_year']} trail ({t['revolutions']} rev), {_what(kind, e)}"


def _utc(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(UTC)


class UtcDayFormatter(mdates.DateFormatter):
    """Time ticks (UTC) that carry the date where it changes: ``23:00`` over ``Apr 11``.

    The first tick and every tick on a new day (UTC) get the month and day under the time, so
    that a peak at 23:20 on 11 April reads as April 11, not as the day after; ticks that all
    fall on midnight (an axis of several days) show the date alone.
    """

    def __init__(self):
        super().__init__("%H:%M", tz=UTC)

    def format_ticks(self, values):
        times = [mdates.num2date(v, tz=UTC) for v in values]
        if times and all((t.hour, t.minute) == (0, 0) for t in times):
            return [t.strftime("%b %d") for t in times]
        labels, day = [], None
        for t in times:
            text = t.strftime("%H:%M")
            if t.date() != day:
                text += "\n" + t.strftime("%b %d")
                day = t.date()
            labels.append(text)
        return labels

    def __call__(self, x, pos=0):
        return mdates.num2date(x, tz=UTC).strftime("%Y-%m-%d %H:%M")


def _date_axis(ax, size: str) -> None:
    low, high = SIZES[size]["ticks"]
    locator = mdates.AutoDateLocator(minticks=low, maxticks=high, tz=UTC)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(UtcDayFormatter())


def peak_label(peak_utc: str) -> str:
    """``peak 2039-04-11 23:20 UTC`` (the peak to the minute)."""
    return "peak " + _utc(peak_utc).strftime("%Y-%m-%d %H:%M UTC")


def _mark_peaks(ax, items, styles) -> None:
    """A dotted line at each named peak, labelled upright along it with the peak's date and time.

    The label runs up the line (rotated 90 degrees) so that it needs no width: it fits the
    narrow layout and never pushes the axes aside (it takes no part in the layout).
    """
    encounters = [(k, e) for k, e, _c in items if _what(k, e) == "encounter"]
    chosen = encounters or sorted(
        ((k, e) for k, e, _c in items), key=lambda ke: abs(ke[1]["miss_distance_au"])
    )
    chosen = sorted(chosen[:MAX_PEAK_LABELS], key=lambda ke: ke[1]["peak_utc"])
    for _kind, e in chosen:
        ty = e["trail"]["perihelion_year"]
        x = mdates.date2num(_utc(e["peak_utc"]))
        line = ax.axvline(x, color=styles[ty]["color"], linestyle=":", linewidth=1.2)
        line.set_gid(f"peak-line-{ty}")
        label = ax.text(
            x,
            0.98,
            (f"{ty} " if len(chosen) > 1 else "") + peak_label(e["peak_utc"]),
            transform=ax.get_xaxis_transform(),
            rotation=90,
            ha="right",
            va="top",
            color=EARTH_COLOUR,
            clip_on=True,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.75, "pad": 1.0},
        )
        label.set_in_layout(False)
        label.set_gid(f"peak-{ty}")


def _note(ax, text: str) -> None:
    ax.text(
        0.5,
        0.5,
        text,
        transform=ax.transAxes,
        ha="center",
        va="center",
        color=EARTH_COLOUR,
        wrap=True,
    )


def _figure(title: str, size: str):
    fig = Figure(figsize=SIZES[size]["figsize_in"], layout="constrained")
    fig.suptitle(textwrap.fill(title, SIZES[size]["title_chars"]))
    ax = fig.add_subplot()
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    return fig, ax


def _legend(fig, ax, size: str) -> None:
    if not ax.get_legend_handles_labels()[0]:
        return
    fontsize = SIZES[size]["legend_pt"]
    if size == "narrow":
        fig.legend(loc="outside lower center", fontsize=fontsize, frameon=False)
    else:
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=fontsize, frameon=False)


def crossings_figure(result: dict, year: int, size: str = "wide") -> Figure:
    """Meteoroid crossings of Earth's path: time (UTC) against signed miss distance (au)."""
    parent = result["parent"].get("name", "")
    fig, ax = _figure(f"Trail crossings of Earth's path, {year}: {parent}", size)
    styles = trail_styles(result)
    t_all, lam_all = [], []
    for kind, e, c in _items(result, year):
        if not c or not c["t_earth_utc"]:
            continue
        t = mdates.date2num([_utc(s) for s in c["t_earth_utc"]])
        style = styles[e["trail"]["perihelion_year"]]
        (line,) = ax.plot(
            t,
            c["miss_distance_au"],
            linestyle="none",
            marker=style["marker"],
            markersize=5,
            markerfacecolor=style["color"] if _what(kind, e) == "encounter" else "none",
            markeredgecolor=style["color"],
            markeredgewidth=1.0,
            alpha=0.85,
            label=f"{_label(kind, e)}: {len(t)} meteoroids",
        )
        line.set_gid(f"trail-{e['trail']['perihelion_year']}")
        t_all.extend(t)
        lam_all.extend(c["solar_longitude_deg"])
    earth = ax.axhline(0.0, color=EARTH_COLOUR, linewidth=2.0, label="Earth's path (miss 0 au)")
    earth.set_gid("earth-path")
    ax.set_ylabel("miss distance, trail minus Earth (au)")
    ax.set_xlabel("time Earth passes the meteoroid's node (UTC)")
    if t_all:
        _date_axis(ax, size)
        _mark_peaks(ax, _items(result, year), styles)
        lam = np.unwrap(np.radians(lam_all))
        if np.ptp(t_all) > 0:
            slope, offset = np.polyfit(t_all, np.degrees(lam), 1)
            top = ax.secondary_xaxis(
                "top",
                functions=(lambda x: slope * x + offset, lambda y: (y - offset) / slope),
            )
            top.set_xlabel("solar longitude λ☉ (deg, geometric J2000)")
        plain = ScalarFormatter(useOffset=False)
        plain.set_powerlimits((-8, 8))  # 0.001 au, not 1 x 10^-3: the unit stays on the label
        ax.yaxis.set_major_formatter(plain)
    else:
        ax.set_xticks([])
        _note(ax, f"no trail crosses Earth's path within the near-miss distance in {year}")
    _legend(fig, ax, size)
    return fig


def profile_figure(result: dict, year: int, size: str = "wide") -> Figure:
    """Predicted ZHR against time (UTC) per trail, with the low-high band and activity window."""
    parent = result["parent"].get("name", "")
    fig, ax = _figure(f"Predicted activity profile, {year}: {parent}", size)
    styles = trail_styles(result)
    drawn = 0
    profiled: list[dict] = []
    for kind, e, _c in _items(result, year):
        profile = e.get("profile") or []
        zhr = e.get("zhr") or {}
        peak = np.array([p["zhr"] for p in profile], dtype=float)
        if not profile or not np.any(peak > 0):
            continue
        ty = e["trail"]["perihelion_year"]
        style = styles[ty]
        t = mdates.date2num([_utc(p["time_utc"]) for p in profile])
        est = zhr.get("estimate") or 0.0
        if est > 0:
            band = ax.fill_between(
                t,
                peak * (zhr.get("low", 0.0) / est),
                peak * (zhr.get("high", est) / est),
                color=style["color"],
                alpha=0.18,
                linewidth=0,
                label=f"{ty} trail: low-high range",
            )
            band.set_gid(f"band-{ty}")
        (line,) = ax.plot(
            t,
            peak,
            color=style["color"],
            linestyle=style["linestyle"],
            linewidth=2.0,
            label=f"{_label(kind, e)}: peak ZHR {est:g}",
        )
        line.set_gid(f"profile-{ty}")
        window = e.get("window")
        if window:
            span = ax.axvspan(
                mdates.date2num(_utc(window["start_utc"])),
                mdates.date2num(_utc(window["end_utc"])),
                facecolor="none",
                edgecolor=style["color"],
                hatch="//",
                linewidth=0.8,
                alpha=0.5,
                label=f"{ty} trail: activity window",
            )
            span.set_gid(f"window-{ty}")
        drawn += 1
        profiled.append(e)
    ax.set_ylabel("ZHR (meteors per hour, zenithal)")
    ax.set_xlabel("time (UTC)")
    if drawn:
        _date_axis(ax, size)
        ax.set_ylim(bottom=0)
        _mark_peaks(ax, [i for i in _items(result, year) if i[1] in profiled], styles)
    else:
        ax.set_xticks([])
        _note(ax, f"no activity predicted from the simulated trails in {year}")
    _legend(fig, ax, size)
    return fig


def radiants_figure(result: dict, year: int, size: str = "wide") -> Figure:
    """Radiants of the simulated meteoroids and each trail's median: RA/Dec (deg, J2000)."""
    parent = result["parent"].get("name", "")
    fig, ax = _figure(f"Radiants, {year}: {parent}", size)
    styles = trail_styles(result)
    drawn = 0
    for kind, e, c in _items(result, year):
        ty = e["trail"]["perihelion_year"]
        style = styles[ty]
        if c and c["ra_deg"]:
            (pts,) = ax.plot(
                c["ra_deg"],
                c["dec_deg"],
                linestyle="none",
                marker=style["marker"],
                markersize=3.5,
                markerfacecolor="none",
                markeredgecolor=style["color"],
                alpha=0.6,
                label=f"{_label(kind, e)}: meteoroids",
            )
            pts.set_gid(f"radiants-{ty}")
        (centre,) = ax.plot(
            [e["radiant"]["ra_deg"]],
            [e["radiant"]["dec_deg"]],
            linestyle="none",
            marker=style["marker"],
            markersize=12,
            markerfacecolor=style["color"],
            markeredgecolor="black",
            label=f"{ty} trail: median radiant",
        )
        centre.set_gid(f"radiant-{ty}")
        drawn += 1
    ax.set_xlabel("right ascension α (deg, J2000; increasing to the left)")
    ax.set_ylabel("declination δ (deg, J2000)")
    if drawn:
        ax.xaxis.set_major_locator(MaxNLocator(SIZES[size]["ticks"][1]))
        ax.invert_xaxis()
        ax.set_aspect("equal", adjustable="datalim")
    else:
        ax.set_xticks([])
        _note(ax, f"no trail crosses Earth's path within the near-miss distance in {year}")
    _legend(fig, ax, size)
    return fig


_FIGURES = {"crossings": crossings_figure, "profile": profile_figure, "radiants": radiants_figure}


def render(result: dict, chart: str, year: int, fmt: str, size: str = "wide") -> bytes:
    """The chart as SVG or PNG bytes, in the layout ``size`` (:data:`SIZES`).

    Raises
    ------
    NoSuchYear
        ``year`` lies outside the forecast's years.
    KeyError
        Unknown chart or format (the router only passes known ones).
    """
    if year not in forecast_years(result):
        years = forecast_years(result)
        span = f"{years[0]}-{years[-1]}" if years else "none"
        raise NoSuchYear(f"year {year} is not in this forecast (years {span})")
    make = _FIGURES[chart]
    if fmt not in FORMATS:
        raise KeyError(fmt)
    if size not in SIZES:
        raise KeyError(size)
    # One id salt per chart: the three SVGs inlined in one page never share an element id.
    with _LOCK, matplotlib.rc_context({**_RC, "svg.hashsalt": f"trailcast-{chart}"}):
        fig = make(result, year, size)
        buf = io.BytesIO()
        if fmt == "svg":
            fig.savefig(buf, format="svg", metadata={"Date": None})
        else:
            fig.savefig(buf, format="png", dpi=PNG_DPI, metadata={"Software": None})
    return buf.getvalue()


def render_cached(
    key: str, result: dict, chart: str, year: int, fmt: str, size: str = "wide"
) -> bytes:
    """:func:`render`, remembered under ``(key, chart, year, fmt, size)`` (key: the job id)."""
    k = (key, chart, year, fmt, size)
    with _LOCK:
        if k in _CACHE:
            _CACHE.move_to_end(k)
            return _CACHE[k]
    body = render(result, chart, year, fmt, size)
    with _LOCK:
        _CACHE[k] = body
        while len(_CACHE) > CACHE_SIZE:
            _CACHE.popitem(last=False)
    return body
