"""Figure for ``kncast lightcurve``: band light curves above, photospheric temperature below."""
from __future__ import annotations

import numpy as np

from kncast.planner.figures.text import plain


DAY_TICKS = (0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100)


def _day_ticks(ax, lo: float, hi: float) -> None:
    """Plain-number ticks (1-2-5 steps) on the logarithmic day axis (no mathtext exponents)."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    ticks = [t for t in DAY_TICKS if lo <= t <= hi] or [lo, hi]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:.3g}"))
    ax.xaxis.set_minor_locator(NullLocator())  # the 1-2-5 ticks suffice; no minor tick artists


def lightcurve_figure(transient, state, bands, title: str):
    """A two-panel matplotlib Figure (Agg backend): AB magnitude and temperature vs days since t0."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    lo, hi = float(state.phase_d.min()), float(state.phase_d.max())
    lo, hi = (lo / 1.5, hi * 1.2) if hi > lo else (lo / 2, lo * 2)
    grid = np.geomspace(lo, hi, 160)
    smooth = transient.state(grid)
    mags = transient.mag_ab(grid, bands)
    at_epochs = transient.mag_ab(state.phase_d, bands)

    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7.5, 7.0), sharex=True,
                                      gridspec_kw={"height_ratios": [2.2, 1.0], "hspace": 0.06})
    fig.subplots_adjust(left=0.11, right=0.97, top=0.95, bottom=0.085)  # fixed layout: one draw when saved
    colours = plt.cm.plasma(np.linspace(0.05, 0.85, len(bands)))
    for band, colour in zip(bands, colours):
        top.plot(grid, mags[band], color=colour, lw=1.6, label=band)
        top.plot(state.phase_d, at_epochs[band], "o", color=colour, ms=3.5)
    finite = np.concatenate([m[np.isfinite(m)] for m in mags.values()])
    if finite.size:
        top.set_ylim(min(finite.max(), finite.min() + 12) + 0.3, finite.min() - 0.3)
    top.set_ylabel("AB magnitude")
    top.set_title(f"{plain(title)}: {transient.photosphere.name} model, {transient.distance_mpc:.0f} Mpc", fontsize=10,
                  y=1.01)  # a set position: matplotlib skips its title-overlap search
    top.legend(fontsize=7, ncol=2, frameon=False)
    top.grid(alpha=0.25)

    bottom.plot(grid, smooth.temperature_K, color="black", lw=1.8, label="luminosity-weighted")
    if len(smooth.component_names) > 1:
        for k, name in enumerate(smooth.component_names):
            bottom.plot(grid, smooth.comp_temperature_K[k], lw=1.0, ls="--", label=plain(name))
    bottom.set_ylabel("T_phot [K]")
    bottom.set_xlabel("days since t0 (observer frame)")
    bottom.set_xscale("log")
    _day_ticks(bottom, lo, hi)
    bottom.legend(fontsize=7, frameon=False)
    bottom.grid(alpha=0.25)
    fig.text(0.01, 0.005, "Model estimates; the observatory's own tools take precedence.", fontsize=6, alpha=0.7)
    return fig
