"""Campaign chart: every site's observing windows over the whole campaign at a glance.

One horizontal lane per site, x = days since t0.  Each lane has a thin
upper strip for the dark time, tinted by moonlight (Moon above the horizon,
shaded by its illuminated fraction; pale when the Moon is down), and a
lower band where the observing windows are drawn as bars coloured by
airmass (sampled every 5 minutes) with their exact edges outlined.
"""
from __future__ import annotations

import numpy as np

from kncast.forecast.airmass import airmass_from_altitude
from kncast.planner.visibility import sky
from kncast.planner.figures.palette import SERIES
from kncast.planner.figures.text import plain

SAMPLE_MIN = 5.0
AIRMASS_RANGE = (1.0, 3.0)


def _lanes(result):
    """Sample times (days since t0) and per-site masks/values for drawing."""
    r = result.rules
    bounds = result.night_bounds_mjd
    start, end = max(bounds.min(), r.t0_mjd - 0.5), bounds.max()
    mjd = start + np.arange(int((end - start) * 1440 / SAMPLE_MIN) + 2) * SAMPLE_MIN / 1440.0
    sites = sky.SiteArrays.of(result.sites)
    eph = result.ephemeris
    alt = sky.target_altaz_deg(eph, sites, mjd, result.target_index)[0]
    dark = sky.sun_altitude_deg(eph, sites, mjd) < r.twilight_deg
    _, moon_alt = sky.moon_topocentric(eph, sites, mjd)
    illum = sky.moon_illumination(eph, mjd)[0]
    mid = 0.5 * (mjd[:-1] + mjd[1:])  # cell centres for pcolormesh
    inside = np.zeros((len(result.sites), mid.size), dtype=bool)
    for i, site in enumerate(result.sites):  # per site: mark cells inside its windows
        for rec in result.for_site(site.id):
            for w in rec.windows:
                inside[i] |= (mid >= w.start.mjd) & (mid <= w.end.mjd)
    cell = lambda a: 0.5 * (a[..., :-1] + a[..., 1:])  # noqa: E731
    moonlight = np.where(cell(moon_alt) > 0, cell(np.broadcast_to(illum, moon_alt.shape)), 0.0)
    return (mjd - r.t0_mjd, np.where(inside, airmass_from_altitude(cell(alt)), np.nan),
            np.where(cell(dark.astype(float)) > 0.5, moonlight, np.nan))


def _lane_edges(n: int, low: float, high: float) -> np.ndarray:
    """Mesh row edges of a layer: [low, high] inside every lane y = 0 .. n - 1, bottom lane first."""
    return (np.arange(n)[:, None] + np.array([low, high])).ravel()


def _lane_rows(values: np.ndarray) -> np.ma.MaskedArray:
    """Per-site rows (first site on top) as mesh rows bottom-up, with a masked row between lanes."""
    n, m = values.shape
    rows = np.full((2 * n - 1, m), np.nan)
    rows[::2] = values[::-1]
    return np.ma.masked_invalid(rows)


def _window_boxes(result, x, n: int):
    """Outlines of every window (rectangles in data units) and the marks of dark nights without one."""
    boxes, marks = [], []
    for i, site in enumerate(result.sites):
        y = n - 1 - i
        for rec in result.for_site(site.id):
            for w in rec.windows:
                x0, x1 = w.phase_start_d, w.phase_end_d
                boxes.append([(x0, y + 0.12), (x1, y + 0.12), (x1, y + 0.54), (x0, y + 0.54)])
            if not rec.windows and (rec.dusk is not None or rec.dark_hours > 0):  # dark night, no window
                mid = (rec.dusk.mjd if rec.dusk is not None else rec.dawn.mjd) - result.t0_mjd
                if rec.dawn is not None and rec.dusk is not None:
                    mid = 0.5 * (rec.dusk.mjd + rec.dawn.mjd) - result.t0_mjd
                if x[0] <= mid <= x[-1]:
                    marks.append((mid, y + 0.33))
    return boxes, marks


def _fit_left_margin(fig, ax, aligned) -> None:
    """Move the left edge of ``ax`` (and of the ``aligned`` axes) just right of its longest tick label.

    A fixed layout measured once from the label text, instead of a tight bounding box (which draws
    the whole figure twice)."""
    renderer = fig.canvas.get_renderer()
    width = max((t.get_window_extent(renderer).width for t in ax.get_yticklabels()), default=0.0)
    left = min(0.4, (width + 0.15 * fig.dpi) / (fig.get_figwidth() * fig.dpi))
    for a in [ax, *aligned]:
        box = a.get_position()
        a.set_position([left, box.y0, box.x1 - left, box.height])


def campaign_figure(result):
    """A matplotlib Figure of the campaign (see module docstring)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.collections import PolyCollection
    from matplotlib.colors import LinearSegmentedColormap

    x, airmass, moon = _lanes(result)
    n = len(result.sites)
    height_in = 2.0 + 0.62 * n
    fig = plt.figure(figsize=(11, height_in))
    inch = 1.0 / height_in  # figure fraction per inch of height
    ax = fig.add_axes([0.1, 1.3 * inch, 0.88, 1 - 1.65 * inch])
    cax_am = fig.add_axes([0.1, 0.45 * inch, 0.4, 0.12 * inch])
    cax_moon = fig.add_axes([0.58, 0.45 * inch, 0.4, 0.12 * inch])
    moon_cmap = LinearSegmentedColormap.from_list("moonlight", ["#1b2440", "#5d6a8f", "#f3e7a1"])
    am_cmap = plt.get_cmap("viridis_r").copy()
    # one image per layer for all lanes (site i in lane y = n - 1 - i; masked rows between lanes)
    ax.pcolorfast(x, _lane_edges(n, 0.58, 0.82), _lane_rows(moon), cmap=moon_cmap, vmin=0, vmax=1)
    mesh = ax.pcolorfast(x, _lane_edges(n, 0.12, 0.54), _lane_rows(airmass), cmap=am_cmap,
                         vmin=AIRMASS_RANGE[0], vmax=AIRMASS_RANGE[1])
    boxes, marks = _window_boxes(result, x, n)
    ax.add_collection(PolyCollection(boxes, facecolors="none", edgecolors="black", linewidths=0.6))
    if marks:
        ax.plot(*np.array(marks).T, marker="x", color="0.55", markersize=5, linestyle="none")
    ax.set_yticks([n - 1 - i + 0.47 for i in range(n)], [s.id for s in result.sites])
    _fit_left_margin(fig, ax, [cax_am])
    ax.set_ylim(0, n)
    ax.set_xlim(x[0], x[-1])
    ax.axvspan(x[0], 0.0, color="0.9", zorder=-1)
    ax.axvline(0.0, color=SERIES[1], linewidth=1.0)
    ax.text(0.0, n, " t0", color=SERIES[1], va="bottom", fontsize=9)
    ax.set_xlabel("days since t0 (observer frame)")
    ax.grid(axis="x", color="0.85", linewidth=0.5)
    ax.set_axisbelow(True)
    ev = result.event
    ax.set_title(f"{plain(ev.id)}: observing windows ({result.twilight} darkness); "
                 f"upper strip = dark time tinted by moonlight; x = dark night without a window", fontsize=9, loc="left")
    cb = fig.colorbar(mesh, cax=cax_am, orientation="horizontal")
    cb.set_label("window bars: airmass (Kasten & Young 1989)", fontsize=9)
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize

    cb2 = fig.colorbar(ScalarMappable(Normalize(0, 1), moon_cmap), cax=cax_moon, orientation="horizontal")
    cb2.set_label("dark-time strip: illuminated fraction of the Moon when up (0 = Moon down)", fontsize=9)
    return fig
