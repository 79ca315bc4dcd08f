"""Figure for ``kncast exposure``: S/N per resolution element against wavelength for one setup.

One line per arm; strong features' absorption windows as light bands with their
troughs marked; telluric bands as grey bands with opacity following their depth;
the target S/N as a dashed line when one was asked for.
"""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from kncast.planner.figures.text import plain  # noqa: E402


def exposure_figure(res: dict):
    """A matplotlib Figure from the dict returned by ``kncast.planner.commands.exposure.compute``."""
    e, grid = res["result"], res["grid"]
    fig, ax = plt.subplots(figsize=(10, 4.8))
    lam_um = e.wavelength_A / 1e4
    colours = plt.get_cmap("viridis")(np.linspace(0.1, 0.85, max(1, len(grid.arm_names))))
    for k, name in enumerate(grid.arm_names):
        sel = grid.arm_index == k
        y = np.where(e.on_detector[sel], e.snr_per_resel[sel], np.nan)
        ax.plot(lam_um[sel], y, color=colours[k], lw=1.4, label=f"arm {name}")
    top = np.nanmax(np.where(e.on_detector, e.snr_per_resel, np.nan)) if np.any(e.on_detector) else 1.0
    top = max(top, res["target"]["snr_per_resel"] if res["target"] else 0.0, 1.0) * 1.15
    lo, hi = lam_um.min(), lam_um.max()
    tell = res.get("tellurics")
    if tell is not None:
        b = tell.bands
        for lo_A, hi_A, depth in zip(np.asarray(b["min_A"], float), np.asarray(b["max_A"], float),
                                     np.asarray(b["depth"], float)):
            if hi_A / 1e4 > lo and lo_A / 1e4 < hi:
                ax.axvspan(lo_A / 1e4, hi_A / 1e4, color="0.5", alpha=0.1 + 0.35 * float(depth), lw=0)
        ax.axvspan(np.nan, np.nan, color="0.5", alpha=0.3, label="telluric bands")
    shown = sorted((f for f in res["features"][:8] if lo <= f["trough_obs_A"] / 1e4 <= hi),
                   key=lambda f: f["trough_obs_A"])
    for i, f in enumerate(shown):
        a0, a1 = f["absorption_obs_A"]
        ax.axvspan(a0 / 1e4, a1 / 1e4, ymin=0.93, ymax=1.0, color="tab:red", alpha=0.35, lw=0)
        ax.axvline(f["trough_obs_A"] / 1e4, color="tab:red", lw=0.8, ls=":")
        ax.text(f["trough_obs_A"] / 1e4, top * (0.9 - 0.2 * (i % 4)), f" {f['feature']}", rotation=90,
                fontsize=7, ha="right", va="top", color="tab:red",
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.6, "pad": 0.5})
    if res["features"]:
        ax.axvspan(np.nan, np.nan, color="tab:red", alpha=0.35, label="feature absorption windows")
    if res["target"]:
        ax.axhline(res["target"]["snr_per_resel"], color="k", ls="--", lw=0.9,
                   label=f"target S/N at {res['target']['at']}")
    ax.set_xlim(lo, hi)
    ax.set_ylim(0, top)
    ax.set_xlabel("observed vacuum wavelength (micron)")
    ax.set_ylabel("S/N per resolution element")
    single = res["time_s"] / res["nexp"]
    mode = "ideal (photon noise only)" if res["ideal"] else f"airmass {res['conditions']['airmass']:.2f}"
    ax.set_title(f"{plain(res['event'].id)}  {plain(res['ref'].id)}  phase {res['phase_d']:g} d  "
                 f"{res['nexp']} x {single:.0f} s  {mode}\nS/N per resolution element (model estimate; "
                 "the observatory's own tools take precedence)", fontsize=9)
    ax.legend(loc="upper right", fontsize=7, framealpha=0.8)
    ax.grid(alpha=0.25)
    return fig
