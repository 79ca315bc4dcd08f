"""Figure for ``kncast lightcurve``: band light curves above, photospheric temperature below."""
from __future__ import annotations

import numpy as np

from kncast.planner.figures.palette import SERIES
from kncast.planner.figures.text import band_name, plain

FONT_PT = 9.0  # smallest text at the saved size
LINESTYLES = ("-", "--", "-.", ":")


DAY_TICKS = (0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100)


def _day_ticks(ax, lo: float, hi: float) -> None:
    """Plain-number ticks (1-2-5 steps) on the logarithmic day axis (no mathtext exponents)."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    ticks = [t for t in DAY_TICKS if lo <= t <= hi] or [lo, hi]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:.3g}"))
    ax.xaxis.set_minor_locator(NullLocator())  # the 1-2-5 ticks suffice; no minor tick artists


def distance_range_mpc(event, transient, n_draws: int | None = None, seed=None):
    """(16th, 84th percentile) luminosity distance in Mpc of the source draws, None without a distance error."""
    from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED, draw_distances, percentiles

    sigma = getattr(event, "distance_err_mpc", None)
    if not sigma:
        return None
    rng = np.random.default_rng(DEFAULT_SEED if seed is None else seed)
    q = percentiles(draw_distances(transient.distance_mpc, sigma, n_draws or DEFAULT_DRAWS, rng))
    return q["p16"], q["p84"]


def lightcurve_figure(transient, state, bands, title: str, distance_range=None):
    """A two-panel matplotlib Figure (Agg backend): AB magnitude and temperature vs days since t0.

    ``distance_range``: (near, far) luminosity distances in Mpc (the 16-84% range of the distance error,
    :func:`distance_range_mpc`); each band is then drawn with its shaded range of magnitudes."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    lo, hi = float(state.phase_d.min()), float(state.phase_d.max())
    lo, hi = (lo / 1.5, hi * 1.2) if hi > lo else (lo / 2, lo * 2)
    grid = np.geomspace(lo, hi, 160)
    smooth = transient.state(grid)
    mags = transient.mag_ab(grid, bands)
    at_epochs = transient.mag_ab(state.phase_d, bands)

    fig, (top, bottom) = plt.subplots(2, 1, figsize=(9.0, 7.0), sharex=True,
                                      gridspec_kw={"height_ratios": [2.2, 1.0], "hspace": 0.06})
    fig.subplots_adjust(left=0.1, right=0.78, top=0.93, bottom=0.085)  # fixed layout; keys right of the data
    shift = None
    if distance_range is not None:
        shift = 5.0 * np.log10(np.asarray(distance_range, float) / transient.distance_mpc)
    for k, band in enumerate(bands):
        colour, ls = SERIES[k % len(SERIES)], LINESTYLES[(k // len(SERIES)) % len(LINESTYLES)]
        top.plot(grid, mags[band], color=colour, lw=1.6, ls=ls, label=band_name(band))
        top.plot(state.phase_d, at_epochs[band], "o", color=colour, ms=3.5)
        if shift is not None:
            top.fill_between(grid, mags[band] + shift[0], mags[band] + shift[1], color=colour, alpha=0.15, lw=0)
    finite = np.concatenate([m[np.isfinite(m)] for m in mags.values()])
    if finite.size:
        top.set_ylim(min(finite.max(), finite.min() + 12) + 0.3, finite.min() - 0.3)
    top.set_ylabel("AB magnitude", fontsize=FONT_PT + 1)
    top.set_title(f"{plain(title)}: {plain(transient.photosphere.name)} model, {transient.distance_mpc:.0f} Mpc",
                  fontsize=FONT_PT + 1, y=1.01, loc="left")  # a set position: matplotlib skips its overlap search
    handles = top.get_legend_handles_labels()[0]
    if shift is not None:
        from matplotlib.patches import Patch

        lo_d, hi_d = distance_range
        handles.append(Patch(color="0.5", alpha=0.3, lw=0, label=f"shaded: distance\n{lo_d:.0f}-{hi_d:.0f} Mpc (16-84%)"))
    top.legend(handles=handles, fontsize=FONT_PT, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    top.grid(alpha=0.25)

    bottom.plot(grid, smooth.temperature_K, color="black", lw=1.8, label="luminosity-weighted")
    if len(smooth.component_names) > 1:
        for k, name in enumerate(smooth.component_names):
            bottom.plot(grid, smooth.comp_temperature_K[k], lw=1.0, ls="--", color=SERIES[(k + 1) % len(SERIES)],
                        label=plain(name))
    bottom.set_ylabel("T_phot (K)", fontsize=FONT_PT + 1)
    bottom.set_xlabel("days since t0 (observer frame)", fontsize=FONT_PT + 1)
    bottom.set_xscale("log")
    _day_ticks(bottom, lo, hi)
    bottom.legend(fontsize=FONT_PT, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    bottom.grid(alpha=0.25)
    for a in (top, bottom):
        a.tick_params(labelsize=FONT_PT)
    fig.text(0.01, 0.005, "Model estimates; the observatory's own tools take precedence.", fontsize=FONT_PT, color="0.35")
    return fig
