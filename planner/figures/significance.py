"""Detection significance across the campaign: one row per setup, one column per night.

Each cell is the significance (sigma) of that setup's best-measured diagnostic trough in that night's
usable time, coloured on a logarithmic scale (cividis: ordered in lightness and legible with colour-vision
deficiency, Nunez, Anderton & Renslow 2018, PLoS ONE 13, e0199239).  Cells at or above the target are
framed, the setup chosen that night carries a dot, grey cells have no measured trough (the site cannot
observe, or the trough falls outside the setup).  One mesh and two collections on a fixed layout: the
chart reads the same and draws as fast with 3 or 30 setups.
"""
from __future__ import annotations

import numpy as np

FONT_PT = 9.0
ROW_IN = 0.26          # height of one setup row (inches)
MISSING_COLOR = "0.9"


def significance_figure(setups, nights, significance, chosen, target: float):
    """A matplotlib Figure of ``significance`` (sigma, shape (len(setups), len(nights)), NaN where nothing
    is measured); ``chosen`` (same shape, bool) marks the setup chosen each night; ``nights`` are dates."""
    import matplotlib
    from matplotlib.collections import PolyCollection
    from matplotlib.colors import LogNorm
    from matplotlib.figure import Figure
    from matplotlib.ticker import FixedLocator, NullLocator

    from kncast.planner.figures.palette import TARGET_COLOR
    from kncast.planner.figures.text import plain

    sig = np.asarray(significance, dtype=float)
    n_set, n_night = sig.shape
    height = 1.9 + ROW_IN * n_set
    fig = Figure(figsize=(11.0, height))
    longest = max((len(s) for s in setups), default=0)
    left = min(0.4, (0.6 * FONT_PT / 72.0 * longest + 0.3) / 11.0)
    ax = fig.add_axes((left, 1.0 / height, 0.86 - left, 1 - 1.55 / height))
    cax = fig.add_axes((0.875, 1.0 / height, 0.018, 1 - 1.55 / height))
    finite = sig[np.isfinite(sig)]
    lo = max(1e-2, min(float(finite.min()) if finite.size else target, target) / 1.5)
    hi = max(float(finite.max()) if finite.size else target, target) * 1.5
    cmap = matplotlib.colormaps["cividis"].with_extremes(bad=MISSING_COLOR)
    mesh = ax.pcolormesh(np.arange(n_night + 1), np.arange(n_set + 1), np.ma.masked_invalid(sig), cmap=cmap,
                         norm=LogNorm(lo, hi), shading="flat")
    rows, cols = np.nonzero(np.isfinite(sig) & (sig >= target))
    if rows.size:
        frames = [[(c + 0.06, r + 0.1), (c + 0.94, r + 0.1), (c + 0.94, r + 0.9), (c + 0.06, r + 0.9)]
                  for r, c in zip(rows, cols)]
        ax.add_collection(PolyCollection(frames, facecolors="none", edgecolors="black", linewidths=0.9))
    rows, cols = np.nonzero(np.asarray(chosen, dtype=bool))
    ax.scatter(cols + 0.5, rows + 0.5, s=30, c="white", edgecolors="black", linewidths=0.8, zorder=3)
    ax.set_xlim(0, n_night)
    ax.set_ylim(n_set, 0)
    ax.xaxis.set_major_locator(FixedLocator(np.arange(n_night) + 0.5))
    ax.set_xticklabels([f"{d:%m-%d}\nnight {k + 1}" for k, d in enumerate(nights)], fontsize=FONT_PT)
    ax.yaxis.set_major_locator(FixedLocator(np.arange(n_set) + 0.5))
    ax.set_yticklabels([plain(s) for s in setups], fontsize=FONT_PT)
    ax.tick_params(length=0)
    ax.set_xlabel("local night (date of the evening, UTC calendar)", fontsize=FONT_PT + 1)
    bar = fig.colorbar(mesh, cax=cax)
    decades = 10.0 ** np.arange(np.ceil(np.log10(lo)), np.floor(np.log10(hi)) + 1)
    ticks = np.unique(np.append(decades[np.abs(np.log10(decades / target)) > 0.15], target))
    bar.ax.yaxis.set_major_locator(FixedLocator(ticks))
    bar.ax.yaxis.set_minor_locator(NullLocator())
    bar.ax.set_yticklabels([f"{v:g} target" if v == target else f"{v:g}" for v in ticks], fontsize=FONT_PT)
    bar.ax.axhline(target, color=TARGET_COLOR, lw=1.6)
    bar.set_label("significance of the best trough (sigma)", fontsize=FONT_PT, labelpad=4)
    fig.text(0.01, 1 - 0.35 / height, f"Detection significance per setup and night in the usable time.\nFramed: at "
             f"or above the target {target:g} sigma; dot: the setup chosen that night; grey: no measured trough.",
             fontsize=FONT_PT + 1, va="center")
    fig.text(0.01, 0.12 / height, "Model estimates; the observatory's own tools and rules take precedence.",
             fontsize=FONT_PT, color="0.35")
    return fig
