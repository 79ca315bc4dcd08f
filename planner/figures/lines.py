"""Line-window chart: per epoch, the continuum, the feature windows and the atmosphere; below, every setup.

One panel per epoch on a shared logarithmic wavelength axis (observed vacuum
A).  The top of each panel is the model continuum (F_lambda normalized to its
peak in the plotted range) over grey telluric bands whose darkness is their
absorbed fraction at the chosen airmass and water vapour.  Under it, one lane
per feature (strongest first): a blue bar for the absorption window with a
tick at the expected trough, an orange bar for the emission window with a
tick at the rest-frame peak, and the Sobolev tau at the left (or the non-LTE
note for lines where LTE does not apply).  A last panel
draws each setup's detector coverage (arms as bars, gaps left blank), so a
window can be followed straight down to the setups that record it.
"""
from __future__ import annotations

import numpy as np

MAX_FEATURES_DRAWN = 16
LANE = 0.16          # height of a feature lane in continuum units
ABS_COLOR, EMI_COLOR = "#2f6db3", "#e08a2c"


def _xlimits(result, refs):
    w = result.windows
    lo = [np.nanmin(w.absorption_lo_A)] + [r.setup.min_A for r in refs]
    hi = [np.nanmax(w.emission_hi_A)] + [r.setup.max_A for r in refs]
    return max(2500.0, 0.97 * min(lo)), min(60000.0, 1.03 * max(hi))


def _telluric_spans(ax, tellurics, airmass, pwv_mm, ymin, ymax):
    if tellurics is None:
        return
    lost = -np.expm1(-tellurics.band_tau(airmass, pwv_mm))
    for lo, hi, d in zip(tellurics._lo, tellurics._hi, lost):
        ax.fill_between([lo, hi], ymin, ymax, color="0.35", alpha=float(0.08 + 0.5 * d), lw=0, zorder=0)


def _epoch_panel(ax, result, i, lam, flux, tellurics, airmass, pwv_mm):
    from kncast.forecast.features import NON_LTE_NOTE

    order = result.rank[i][:MAX_FEATURES_DRAWN]
    n_lanes = len(order)
    bottom = -LANE * (n_lanes + 0.6)
    _telluric_spans(ax, tellurics, airmass, pwv_mm, bottom, 1.12)
    ax.plot(lam, flux, color="k", lw=1.3, zorder=3)
    w = result.windows
    x_lo, x_hi = ax.get_xlim()
    right_limit = np.exp(np.log(x_lo) + 0.8 * (np.log(x_hi) - np.log(x_lo)))
    for lane, f in enumerate(order):
        y = -LANE * (lane + 1)
        a0, a1 = w.absorption_lo_A[i, f], w.absorption_hi_A[i, f]
        e0, e1 = w.emission_lo_A[i, f], w.emission_hi_A[i, f]
        tau = result.tau[i, f]
        alpha = 1.0 if np.isfinite(tau) and tau >= 1.0 else 0.35  # optically thin or unknown: pale
        ax.plot([a0, a1], [y, y], color=ABS_COLOR, lw=5, solid_capstyle="butt", zorder=4, alpha=alpha)
        ax.plot([e0, e1], [y - 0.035, y - 0.035], color=EMI_COLOR, lw=3, solid_capstyle="butt", zorder=4,
                alpha=alpha)
        ax.plot([w.trough_A[i, f]] * 2, [y - 0.06, y + 0.06], color="k", lw=1.2, zorder=5)
        ax.plot([w.emission_peak_A[i, f]] * 2, [y - 0.08, y + 0.01], color="#7a3d00", lw=1.0, zorder=5)
        label = f"{result.features[f].id}  " + (f"τ = {tau:.2g}" if np.isfinite(tau) else
                                                 "τ n/a" if result.features[f].lte else NON_LTE_NOTE)
        if e1 < right_limit:
            ax.text(e1 * 1.01, y - 0.015, label, ha="left", va="center", fontsize=7, zorder=6)
        else:
            ax.text(a0 / 1.01, y - 0.015, label, ha="right", va="center", fontsize=7, zorder=6)
    ep = result.epochs
    ax.set_ylim(bottom, 1.12)
    ax.set_yticks([0, 0.5, 1.0])
    ax.set_ylabel("F$_\\lambda$ / max", fontsize=8)
    ax.text(0.995, 0.97, f"day {ep.phase_d[i]:.2f}   T = {ep.temperature_K[i]:.0f} K   "
            f"v$_{{ph}}$ = {ep.v_phot_c[i]:.2f} c   v$_{{max}}$ = {ep.v_max_c[i]:.2f} c",
            transform=ax.transAxes, ha="right", va="top", fontsize=9,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8})
    ax.axhline(0, color="0.6", lw=0.6, zorder=1)


def _setup_panel(ax, refs, tellurics, airmass, pwv_mm):
    n = len(refs)
    _telluric_spans(ax, tellurics, airmass, pwv_mm, -0.5, n - 0.5)
    for k, ref in enumerate(refs):
        y = n - 1 - k
        for lo, hi in np.asarray(ref.setup.covered_intervals_A(), dtype=float).reshape(-1, 2):
            ax.plot([lo, hi], [y, y], color="#3b7d4f", lw=4, solid_capstyle="butt")
    ax.set_yticks(range(n))
    ax.set_yticklabels([r.id for r in reversed(refs)], fontsize=7)
    ax.set_ylim(-0.7, n - 0.3)
    ax.set_xlabel("observed vacuum wavelength (Å)")
    ax.set_title("setup coverage (bars: recorded ranges; blanks: gaps)", fontsize=9, loc="left")


def lines_figure(transient, result, refs, tellurics=None, airmass=1.2, pwv_mm=2.5, title: str = ""):
    """A matplotlib Figure of the line forecast (see the module docstring)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FixedLocator, NullFormatter

    if tellurics is None:
        from kncast.forecast.tellurics import TelluricModel

        tellurics = TelluricModel.load()
    lo, hi = _xlimits(result, refs)
    lam = np.geomspace(lo, hi, 800)
    flux = transient.flux_flam(result.epochs.phase_d, lam)
    flux = flux / flux.max(axis=1, keepdims=True)
    n_ep = result.epochs.phase_d.size
    n_feat = min(MAX_FEATURES_DRAWN, len(result.features))
    ep_h = 1.3 + 0.2 * n_feat
    setup_h = 0.6 + 0.15 * len(refs)
    heights = [ep_h] * n_ep + ([setup_h] if refs else [])
    total_h = sum(heights) + 0.25 * len(heights) + 1.0
    fig, axes = plt.subplots(len(heights), 1, figsize=(12, total_h), sharex=True,
                             gridspec_kw={"height_ratios": heights, "hspace": 0.25 * len(heights) / sum(heights)})
    fig.subplots_adjust(top=1 - 0.45 / total_h, bottom=0.55 / total_h, left=0.2, right=0.98)
    axes = np.atleast_1d(axes)
    axes[0].set_xscale("log")
    axes[0].set_xlim(lo, hi)
    for i in range(n_ep):
        _epoch_panel(axes[i], result, i, lam, flux[i], tellurics, airmass, pwv_mm)
    if refs:
        _setup_panel(axes[-1], refs, tellurics, airmass, pwv_mm)
    else:
        axes[-1].set_xlabel("observed vacuum wavelength (Å)")
    ticks = [t for t in (3000, 4000, 5000, 6000, 7000, 8000, 10000, 12000, 15000, 20000, 25000, 30000, 40000)
             if lo <= t <= hi]
    for a in axes:
        a.xaxis.set_major_locator(FixedLocator(ticks))
        a.xaxis.set_minor_formatter(NullFormatter())
    axes[-1].set_xticklabels([f"{t:,}" for t in ticks])
    fig.suptitle(f"{title}: feature windows per epoch (blue: absorption, tick = expected trough; orange: "
                 f"emission), grey: telluric bands at airmass {airmass:.2f}, PWV {pwv_mm:g} mm",
                 fontsize=10, x=0.01, ha="left", y=1 - 0.12 / total_h)
    fig.text(0.01, 0.002, "Model estimates; the observatory's own tools and rules take precedence.",
             fontsize=7, color="0.4")
    return fig
