"""Sky chart of a probability map and the part each site can observe.

Top: an all-sky Mollweide view (RA increasing to the left, as on the sky)
of the probability density (square-root stretch, the faintest 1 % left
clear), the 50 % and 90 % credible contours and, per site, the sky it can
observe in its first night with dark time after t0 (shaded and outlined in
the site's colour; overlaps look darker).  Bottom: a grid of sites
x nights with the observable probability and probability-weighted hours.
"""
from __future__ import annotations

import textwrap

import numpy as np

from kncast.planner.figures.palette import SERIES
from kncast.planner.figures.text import plain

PLOT_LEVEL_MAX = 7  # resample to at most nside 128 for drawing
RA_STEP_DEG, DEC_STEP_DEG = 1.0, 1.0
ROW_IN = 0.5  # height of one site's row in the table panel (two lines of 9 pt text)


def coverage_figure(result):
    """A matplotlib Figure for a :class:`kncast.planner.visibility.skycoverage.CoverageResult`."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    skymap = result.skymap
    level = min(skymap.max_level, PLOT_LEVEL_MAX)
    sites = result.sites
    n_nights = int(result.settings["nights"])
    fig = plt.figure(figsize=(11.0, 6.2 + ROW_IN * len(sites)))
    grid = fig.add_gridspec(2, 1, height_ratios=[3.2, 0.6 + ROW_IN * len(sites)], hspace=0.12)
    ax = fig.add_subplot(grid[0], projection="mollweide")
    _sky_panel(ax, result, level)
    _table_panel(fig.add_subplot(grid[1]), result, sites, n_nights)
    fig.suptitle(f"Sky map coverage: {plain(skymap.path)}", fontsize=10, x=0.02, ha="left")
    return fig


def _raster(skymap, values, level):
    """(x, y, image) of an intensive per-pixel quantity on an RA/Dec grid for pcolormesh/contour."""
    return _raster_at(skymap.resample_nested(values, level), level)


def _raster_at(flat, level):
    """(x, y, image) of values on the flat NESTED grid of HEALPix order ``level``."""
    from astropy_healpix import lonlat_to_healpix
    import astropy.units as u

    ra = np.arange(0.0, 360.0, RA_STEP_DEG) + RA_STEP_DEG / 2  # cell centres: no duplicate at the seam
    dec = np.arange(-90.0, 90.0 + DEC_STEP_DEG / 2, DEC_STEP_DEG)
    rr, dd = np.meshgrid(ra, np.clip(dec, -89.999, 89.999))
    idx = lonlat_to_healpix(rr.ravel() * u.deg, dd.ravel() * u.deg, 2 ** level, order="nested")
    image = flat[np.asarray(idx)].reshape(rr.shape)
    # Mollweide axes take longitude in radians in [-pi, pi]; put RA 180 deg at the left edge, 0 in the middle
    x = np.radians(-((ra + 180.0) % 360.0 - 180.0))
    order = np.argsort(x)
    x = x[order]
    return x, np.radians(dec), image[:, order]


def _credible_levels(skymap, level: int) -> np.ndarray:
    """For each pixel of the drawing grid (HEALPix order ``level``, NESTED), the probability of all pixels
    at least as dense (0 at the peak, 1 at the floor): the credible regions as drawn, without sorting the
    whole map (12.6 M pixels at nside 1024)."""
    density = skymap.density_at(level)
    prob = density * (4.0 * np.pi / density.size)  # equal-area pixels
    order = np.argsort(-density, kind="stable")
    cum = np.empty(density.size)
    cum[order] = np.cumsum(prob[order])
    return cum


def _sky_panel(ax, result, level):
    import matplotlib.pyplot as plt
    from matplotlib.colors import PowerNorm

    from kncast.planner.visibility.skycoverage import first_nights

    skymap = result.skymap
    x, y, density = _raster_at(skymap.density_at(level), level)
    first = first_nights(result.nights)  # per site, its first night record with dark time
    colours = lambda k: SERIES[k % len(SERIES)]  # noqa: E731
    masks = []
    for k, rec_index in enumerate(first.values()):  # underneath everything: each site's observable sky, shaded
        _, _, img = _raster(skymap, result.flags_of(rec_index), level)
        masks.append(img)
        if np.nanmax(img) >= 0.5:
            ax.contourf(x, y, img, levels=[0.5, 1.01], colors=[colours(k)], alpha=max(0.05, 0.3 / len(first)))
    masked = np.ma.masked_less_equal(density, 0.01 * float(density.max()))  # faint tail left transparent
    ax.pcolormesh(x, y, masked, cmap="Purples", norm=PowerNorm(0.5, vmin=0.0), shading="nearest", rasterized=True)
    _, _, cred = _raster_at(_credible_levels(skymap, level), level)
    cs = ax.contour(x, y, cred, levels=[0.5, 0.9], colors=["#111111", "#555555"], linewidths=[1.2, 0.9],
                    linestyles=["solid", "dashed"])
    ax.clabel(cs, fmt={0.5: "50%", 0.9: "90%"}, fontsize=9)
    handles = []
    for k, (site_id, rec_index) in enumerate(first.items()):
        rec, img = result.nights[rec_index], masks[k]
        colour = colours(k)
        if np.nanmax(img) >= 0.5:
            ax.contour(x, y, img, levels=[0.5], colors=[colour], linewidths=1.0)
        handles.append(plt.Line2D([], [], color=colour, lw=1.5,
                                  label=f"{site_id} {rec.night:%m-%d}: P {rec.observable_probability:.2f}"))
    ticks = np.arange(-150, 181, 30)
    ax.set_xticks(np.radians(ticks))
    ax.set_xticklabels([f"{(-t) % 360:d}" for t in ticks], fontsize=9)
    ax.tick_params(axis="y", labelsize=9)
    ax.grid(True, color="#999999", lw=0.4, alpha=0.6)
    ax.set_xlabel("RA (deg, ICRS)", fontsize=9)
    ax.set_ylabel("Dec (deg)", fontsize=9)
    if handles:
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=9, frameon=False,
                  title="observable (first dark night)", title_fontsize=9)


def _table_panel(ax, result, sites, n_nights):
    """Sites x nights grid coloured by observable probability, annotated with P and P x hours."""
    ids = [s.id for s in sites]
    prob = np.full((len(ids), n_nights), np.nan)
    text = [["" for _ in range(n_nights)] for _ in ids]
    seen: dict[str, int] = {}
    for rec in result.nights:
        i = ids.index(rec.site.id)
        j = seen[rec.site.id] = seen.get(rec.site.id, -1) + 1
        if rec.samples:
            prob[i, j] = rec.observable_probability
            text[i][j] = f"{rec.night:%m-%d}\nP {rec.observable_probability:.2f}, {rec.weighted_hours:.1f} h"
        else:
            text[i][j] = f"{rec.night:%m-%d}\n" + textwrap.fill(rec.note or "no dark time", 18)
    ax.imshow(np.nan_to_num(prob, nan=0.0), aspect="auto", cmap="YlGn", vmin=0.0, vmax=1.0)
    for i in range(len(ids)):
        for j in range(n_nights):
            ax.text(j, i, text[i][j], ha="center", va="center", fontsize=9,
                    color="black" if not np.isfinite(prob[i, j]) or prob[i, j] < 0.6 else "white")
    ax.set_yticks(range(len(ids)))
    ax.set_yticklabels(ids, fontsize=9)
    ax.set_xticks(range(n_nights))
    ax.set_xticklabels([f"night {j + 1}" for j in range(n_nights)], fontsize=9)
    ax.tick_params(length=0)
    ax.set_title("probability observable and probability x hours, per site and local night", fontsize=9, loc="left")
