"""Figure for ``kncast exposure``: S/N per resolution element against wavelength for one setup.

One line per arm on an axis of observed vacuum wavelength in Angstrom; the strong features'
absorption windows as bars along the top with their troughs marked, each named by species and
rest wavelength (``kncast.planner.measure.feature_words``); telluric bands as hatched columns in
the style of the feature map (``kncast.planner.figures.lines``): cross-hatched where the sky
transmits less than the telluric threshold (lost), single hatching where the band is correctable;
the target S/N as a dashed line when one was asked for.  Drawn with collections and a fixed layout
(no tight layout per call); all text at least ``FONT_PT``.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from kncast.planner.figures.lines import CORRECTABLE_COLOR, FONT_PT, LOST_COLOR, _hatched_columns, _telluric_regions
from kncast.planner.figures.palette import SERIES
from kncast.planner.figures.text import angstrom, plain

FEATURE_COLOR = SERIES[1]
REFERENCE_COLOR = "#000000"
SHOWN_FEATURES = 8


@lru_cache(maxsize=1)
def _bundled_words() -> dict:
    """Feature id -> reader's name ('Sr II 10039 A') for the bundled line list."""
    from kncast.forecast.linelist import LineList
    from kncast.planner.measure import feature_words

    return {f.id: feature_words(f) for f in LineList.load().features()}


def _feature_name(f: dict) -> str:
    return angstrom(_bundled_words().get(f["feature"], f"{f.get('species', '')} feature".strip()))


def _tellurics(ax, res, lo, hi, top):
    """Hatched lost / correctable columns; returns legend proxies."""
    from matplotlib.patches import Patch

    from kncast.forecast.defaults import CORRECTABLE_TRANSMISSION

    tell = res.get("tellurics")
    if tell is None:
        return []
    threshold = float(res.get("telluric_threshold") or CORRECTABLE_TRANSMISSION)
    lam = np.linspace(lo, hi, 2000)
    cond = res["conditions"]
    _, lost, correctable = _telluric_regions(tell, lam, cond["airmass"] or 1.0, cond["pwv_mm"], threshold)
    _hatched_columns(ax, lost, 0.0, top, LOST_COLOR, "xx")
    _hatched_columns(ax, correctable, 0.0, top, CORRECTABLE_COLOR, "//")
    return [Patch(facecolor="none", edgecolor=LOST_COLOR, hatch="xx", lw=0,
                  label=f"telluric, lost\n(transmission < {threshold:g})"),
            Patch(facecolor="none", edgecolor=CORRECTABLE_COLOR, hatch="//", lw=0, label="telluric, correctable")]


def _reference(ax, res, feature_id, lo, hi, top):
    """The reference feature (the one the exposure is judged on): a solid black trough line and a legend entry."""
    from matplotlib.lines import Line2D

    f = next((f for f in res["features"] if f["feature"] == feature_id), None)
    if f is None or not lo <= f["trough_obs_A"] <= hi:
        return []
    a, b = f["absorption_obs_A"]
    ax.axvspan(a, b, color=REFERENCE_COLOR, alpha=0.08, lw=0, zorder=1)
    ax.plot([f["trough_obs_A"]] * 2, [0.0, top], color=REFERENCE_COLOR, lw=1.6, zorder=5)
    return [Line2D([], [], color=REFERENCE_COLOR, lw=1.6,
                   label=f"reference feature: {_feature_name(f)}\n(trough; shaded: its absorption)")]


def _features(ax, res, lo, hi, top):
    """Absorption bars along the top, trough lines and names; returns legend proxies."""
    from matplotlib.collections import LineCollection, PolyCollection
    from matplotlib.patches import Patch

    shown = sorted((f for f in res["features"][:SHOWN_FEATURES] if lo <= f["trough_obs_A"] <= hi),
                   key=lambda f: f["trough_obs_A"])
    if not shown:
        return []
    a0, a1 = (np.array([f["absorption_obs_A"][i] for f in shown]) for i in (0, 1))
    y0, y1 = 0.95 * top, top
    ax.add_collection(PolyCollection([[(a, y0), (b, y0), (b, y1), (a, y1)] for a, b in zip(a0, a1)],
                                     facecolors=FEATURE_COLOR, alpha=0.4, edgecolors="none", zorder=3))
    trough = np.array([f["trough_obs_A"] for f in shown])
    ax.add_collection(LineCollection([[(x, 0.0), (x, y1)] for x in trough], colors=FEATURE_COLOR,
                                     linewidths=0.8, linestyles=":", zorder=3))
    for i, f in enumerate(shown):
        ax.text(f["trough_obs_A"], top * (0.93 - 0.2 * (i % 4)), _feature_name(f), rotation=90,
                fontsize=FONT_PT, ha="right", va="top", color=FEATURE_COLOR, zorder=6,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.7, "pad": 0.5})
    return [Patch(facecolor=FEATURE_COLOR, alpha=0.4, lw=0, label="feature absorption windows\n(dotted: trough)")]


def exposure_figure(res: dict, reference_feature: str | None = None):
    """A matplotlib Figure from the dict returned by ``kncast.planner.commands.exposure.compute``.

    ``reference_feature``: id of the feature the exposure is judged on, marked with its own line."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter

    e, grid = res["result"], res["grid"]
    fig = Figure(figsize=(11, 5.2))
    ax = fig.add_axes((0.07, 0.12, 0.6, 0.72))   # fixed layout; the key on the right
    lam = np.asarray(e.wavelength_A, dtype=float)
    arm_colours = [c for c in SERIES if c != FEATURE_COLOR and c != REFERENCE_COLOR]
    for k, name in enumerate(grid.arm_names):
        sel = grid.arm_index == k
        y = np.where(e.on_detector[sel], e.snr_per_resel[sel], np.nan)
        ax.plot(lam[sel], y, color=arm_colours[k % len(arm_colours)], lw=1.4, label=f"arm {plain(name)}", zorder=4)
    top = np.nanmax(np.where(e.on_detector, e.snr_per_resel, np.nan)) if np.any(e.on_detector) else 1.0
    top = max(top, res["target"]["snr_per_resel"] if res["target"] else 0.0, 1.0) * 1.15
    lo, hi = float(lam.min()), float(lam.max())
    proxies = _tellurics(ax, res, lo, hi, top) + _features(ax, res, lo, hi, top)
    if reference_feature:
        proxies += _reference(ax, res, reference_feature, lo, hi, top)
    if res["target"]:
        ax.axhline(res["target"]["snr_per_resel"], color="k", ls="--", lw=0.9,
                   label=f"target S/N at {plain(str(res['target']['at']))}")
    ax.set_xlim(lo, hi)
    ax.set_ylim(0, top)
    ax.tick_params(labelsize=FONT_PT)
    ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: f"{x:,.0f}"))
    ax.set_xlabel("observed vacuum wavelength (\u00c5)", fontsize=FONT_PT + 1)
    ax.set_ylabel("S/N per resolution element", fontsize=FONT_PT + 1)
    single = res["time_s"] / res["nexp"]
    mode = "ideal (photon noise only)" if res["ideal"] else f"airmass {res['conditions']['airmass']:.2f}"
    ax.set_title(f"{plain(res['event'].id)}  {plain(res['ref'].id)}  day {res['phase_d']:.2f}  "
                 f"{res['nexp']} x {single:.0f} s  {mode}\nS/N per resolution element (model estimate; "
                 "the observatory's own tools take precedence)", fontsize=FONT_PT + 1)
    handles = ax.get_legend_handles_labels()[0] + proxies
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=FONT_PT, framealpha=0.85)
    ax.grid(alpha=0.25)
    return fig
