"""Feature map: where each feature falls at each epoch, what the atmosphere does there, which setups record it.

One chart read from top to bottom for the nightly setup choice, on a shared logarithmic axis of
observed vacuum wavelength (Angstrom):

* **atmosphere strip** (top): the telluric transmission at the chosen airmass and water vapour,
  with the level below which a band is lost rather than divided out (``telluric_threshold``);
* **feature map** (middle): one row per epoch, labelled with its day, photospheric temperature
  and line-forming velocity.  In every row each feature has its own lane (the same lane and
  colour in every row, named in the key on the right, e.g. "Sr II 10330 A"): a solid bar is the
  absorption window with a black tick at the expected trough, the pale bar beside it the
  emission window; pale solid bars mark an optically thin or unknown strength.  A grey curve in
  each row is that epoch's continuum (F_lambda, normalized to its peak in the plotted range).
  Telluric bands cross the map as hatched columns: cross-hatched where they are lost, single
  hatching where they are correctable;
* **setups** (bottom): each setup's recorded ranges (arms as bars, gaps blank) and, at the right,
  how many features are clear in it at each epoch, in the order of the rows above.

Drawn with a few collections (no artist per bar) and a fixed layout, so a chart draws in well
under 0.25 s.
"""
from __future__ import annotations

import numpy as np

MAX_FEATURES_DRAWN = 16
FONT_PT = 9.0                  # smallest text in the chart
CONTINUUM_COLOR = "0.72"
LOST_COLOR, CORRECTABLE_COLOR = "#6a3d9a", "#b39ddb"
SETUP_COLOR = "#3b7d4f"
TICKS_A = (3000, 4000, 5000, 6000, 7000, 8000, 10000, 12000, 15000, 20000, 25000, 30000, 40000)


def feature_label(species: str, rest_A: float) -> str:
    """A reader's name for a feature: its species and a rest wavelength in A, e.g. 'Sr II 10330 A'."""
    return f"{species} {rest_A:.0f} \u00c5"


def _labels(result) -> list[str]:
    """Names of the features: species and the rest wavelength of the member that sets the first epoch's
    trough (the strongest by tau, else by g f; ``kncast.forecast.features``), with their caveats."""
    from kncast.forecast.features import NON_LTE_NOTE

    out = []
    for k, f in enumerate(result.features):
        member = list(f.members).index(int(result.trough_member[0, k]))
        text = feature_label(f.species, f.rest_vac_A[member])
        text += "" if f.lte else f" ({NON_LTE_NOTE})"
        out.append(text + (" (uncertain)" if f.uncertain else ""))
    return out


def _xlimits(result, refs):
    w = result.windows
    lo = [np.nanmin(w.absorption_lo_A)] + [r.setup.min_A for r in refs]
    hi = [np.nanmax(w.emission_hi_A)] + [r.setup.max_A for r in refs]
    return max(2500.0, 0.97 * min(lo)), min(60000.0, 1.03 * max(hi))


def _telluric_regions(tellurics, lam, airmass, pwv_mm, threshold):
    """(transmission on ``lam``, lost intervals, correctable intervals) from the band model."""
    trans = np.asarray(tellurics.transmission(lam, airmass, pwv_mm), dtype=float)
    lost = trans < threshold
    correctable = (~lost) & (trans < 0.97)

    def runs(mask):
        edges = np.flatnonzero(np.diff(np.concatenate([[0], mask.astype(int), [0]])))
        return [(lam[a], lam[min(b, lam.size - 1)]) for a, b in zip(edges[::2], edges[1::2])]

    return trans, runs(lost), runs(correctable)


def _hatched_columns(ax, intervals, y0, y1, color, hatch):
    from matplotlib.collections import PolyCollection

    if not intervals:
        return
    polys = [[(a, y0), (b, y0), (b, y1), (a, y1)] for a, b in intervals]
    ax.add_collection(PolyCollection(polys, facecolors="none", edgecolors=color, hatch=hatch, linewidths=0.0,
                                     zorder=0))


def _rects(x0, x1, y0, y1):
    """Rectangles as (n, 4, 2) vertices from equal-length arrays."""
    return np.stack([np.stack([x0, y0], -1), np.stack([x1, y0], -1), np.stack([x1, y1], -1),
                     np.stack([x0, y1], -1)], axis=1)


def _feature_map(ax, result, flux, lam, colors, regions, n_feat):
    from matplotlib.collections import LineCollection, PolyCollection

    ep, w = result.epochs, result.windows
    n_ep = ep.phase_d.size
    lane = 0.84 / n_feat
    f_idx = np.arange(n_feat)
    rows = np.arange(n_ep)[:, None]
    y_mid = rows + 0.08 + lane * (f_idx[None, :] + 0.5)             # (n_ep, F), row 0 at the top
    half = 0.36 * lane
    strong = np.isfinite(result.tau[:, :n_feat]) & (result.tau[:, :n_feat] >= 1.0)
    absorb = _rects(w.absorption_lo_A[:, :n_feat].ravel(), w.absorption_hi_A[:, :n_feat].ravel(),
                    (y_mid - half).ravel(), (y_mid + half).ravel())
    emit = _rects(w.emission_lo_A[:, :n_feat].ravel(), w.emission_hi_A[:, :n_feat].ravel(),
                  (y_mid - 0.5 * half).ravel(), (y_mid + 0.5 * half).ravel())
    rgba = np.tile(colors, (n_ep, 1))
    solid = rgba.copy()
    solid[:, 3] = np.where(strong.ravel(), 0.95, 0.35)
    pale = rgba.copy()
    pale[:, 3] = 0.3
    ax.add_collection(PolyCollection(emit, facecolors=pale, edgecolors="none", zorder=3))
    ax.add_collection(PolyCollection(absorb, facecolors=solid, edgecolors="none", zorder=4))
    trough = w.trough_A[:, :n_feat].ravel()
    ticks = np.stack([np.stack([trough, (y_mid - 1.25 * half).ravel()], -1),
                      np.stack([trough, (y_mid + 1.25 * half).ravel()], -1)], axis=1)
    ax.add_collection(LineCollection(ticks, colors="k", linewidths=1.1, zorder=5))
    # continuum per row, 0 at the row's bottom edge, peak near its top (rows grow downwards)
    curves = np.stack([np.broadcast_to(lam, flux.shape), rows + 0.98 - 0.92 * flux], axis=-1)
    ax.add_collection(LineCollection(curves, colors=CONTINUUM_COLOR, linewidths=1.0, zorder=1))
    _, lost, correctable = regions
    _hatched_columns(ax, lost, -0.02, n_ep + 0.02, LOST_COLOR, "xx")
    _hatched_columns(ax, correctable, -0.02, n_ep + 0.02, CORRECTABLE_COLOR, "//")
    ax.hlines(np.arange(1, n_ep), *ax.get_xlim(), colors="0.55", linewidths=0.8, zorder=2)
    ax.set_ylim(n_ep, 0)
    ax.set_yticks(np.arange(n_ep) + 0.5)
    ax.set_yticklabels([f"day {p:.2f}\n{t:.0f} K, {v:.2f} c" for p, t, v in
                        zip(ep.phase_d, ep.temperature_K, ep.v_phot_c)], fontsize=FONT_PT)
    ax.tick_params(axis="y", length=0)


def _atmosphere_strip(ax, lam, regions, threshold, airmass, pwv_mm):
    trans = regions[0]
    ax.fill_between(lam, trans, 1.0, color=LOST_COLOR, alpha=0.55, lw=0, step="mid")
    ax.plot(lam, trans, color=LOST_COLOR, lw=0.8, drawstyle="steps-mid")
    ax.axhline(threshold, color="0.25", lw=0.8, ls="--")
    ax.set_ylim(0, 1.05)
    ax.set_yticks([0, threshold, 1])
    ax.set_yticklabels(["0", f"{threshold:g}", "1"], fontsize=FONT_PT)
    ax.set_ylabel("sky\ntransmission", fontsize=FONT_PT)
    ax.set_title(f"atmosphere at airmass {airmass:.2f}, PWV {pwv_mm:g} mm: below the dashed line a band is "
                 "lost (cross-hatched below), above it correctable (hatched)", fontsize=FONT_PT, loc="left")


def _setup_panel(ax, refs, result, regions, n_feat):
    from matplotlib.collections import PolyCollection

    n = len(refs)
    spans = [(k, lo, hi) for k, r in enumerate(refs)
             for lo, hi in np.asarray(r.setup.covered_intervals_A(), dtype=float).reshape(-1, 2)]
    if spans:
        k, lo, hi = (np.array(v) for v in zip(*spans))
        ax.add_collection(PolyCollection(_rects(lo, hi, k - 0.3, k + 0.3), facecolors=SETUP_COLOR,
                                         edgecolors="none", zorder=3))
    _, lost, correctable = regions
    _hatched_columns(ax, lost, -0.6, n - 0.4, LOST_COLOR, "xx")
    _hatched_columns(ax, correctable, -0.6, n - 0.4, CORRECTABLE_COLOR, "//")
    clear = (result.verdict[:, :n_feat, :] == "clear").sum(axis=1)          # (n_ep, S)
    for k in range(n):
        counts = " ".join(f"{c:d}" for c in clear[:, k])
        ax.text(1.005, k, f"{counts} of {n_feat}", transform=ax.get_yaxis_transform(), ha="left",
                va="center", fontsize=FONT_PT)
    ax.text(1.005, 1.0, "clear per epoch", transform=ax.transAxes, ha="left", va="bottom", fontsize=FONT_PT)
    ax.set_ylim(n - 0.4, -0.6)
    ax.set_yticks(range(n))
    ax.set_yticklabels([r.id for r in refs], fontsize=FONT_PT)
    ax.tick_params(axis="y", length=0)
    ax.set_title("setups: recorded ranges (bars; gaps blank)", fontsize=FONT_PT, loc="left")


def _key(ax, labels, colors):
    from matplotlib.collections import PolyCollection

    n = len(labels)
    y = np.arange(n)
    ax.add_collection(PolyCollection(_rects(np.zeros(n), np.full(n, 0.12), y - 0.3, y + 0.3),
                                     facecolors=colors, edgecolors="none"))
    for k, text in enumerate(labels):
        ax.text(0.17, k, text, va="center", ha="left", fontsize=FONT_PT)
    ax.set_xlim(0, 1)
    ax.set_ylim(n - 0.5, -1.6)
    ax.text(0.0, -1.2, "features, lane order", fontsize=FONT_PT, va="center", fontweight="bold")
    ax.axis("off")


def _reference_marks(ax, result, n_feat, references) -> bool:
    """Outline, in each row, the absorption bars of that row's reference features (an id, a tuple of ids, or
    None); True if any."""
    from matplotlib.collections import PolyCollection

    ids = [getattr(f, "id", None) for f in result.features[:n_feat]]
    lane = 0.84 / n_feat
    w = result.windows
    boxes = []
    for row, marks in enumerate(references or []):
        for fid in marks if isinstance(marks, (tuple, list)) else (marks,):
            if fid in ids:
                k = ids.index(fid)
                y = row + 0.08 + lane * (k + 0.5)
                boxes.append(_rects(w.absorption_lo_A[row:row + 1, k], w.absorption_hi_A[row:row + 1, k],
                                    np.array([y - 0.6 * lane]), np.array([y + 0.6 * lane]))[0])
    if boxes:
        ax.add_collection(PolyCollection(boxes, facecolors="none", edgecolors="black", linewidths=1.6, zorder=6))
    return bool(boxes)


def _left_margin(refs, width_in: float) -> float:
    """Figure fraction left of the panels: room for the longest setup id at FONT_PT (about 0.6 em a character)."""
    longest = max((len(r.id) for r in refs), default=0)
    return min(0.32, max(0.15, (0.6 * FONT_PT / 72.0 * longest + 0.2) / width_in))


def lines_figure(transient, result, refs, tellurics=None, airmass=1.2, pwv_mm=2.5, title: str = "",
                 telluric_threshold=None, references=None):
    """A matplotlib Figure of the line forecast (see the module docstring).

    ``references``: per row (epoch), the id of the feature the chosen setup is judged on (or a tuple of
    ids, or None), outlined in black.

    ``telluric_threshold``: transmission below which a band is lost (default
    ``kncast.forecast.tellurics.CORRECTABLE_TRANSMISSION``).
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from matplotlib.ticker import FixedLocator, NullFormatter, NullLocator

    from kncast.forecast.tellurics import CORRECTABLE_TRANSMISSION, TelluricModel

    tellurics = tellurics if tellurics is not None else TelluricModel.load()
    threshold = CORRECTABLE_TRANSMISSION if telluric_threshold is None else float(telluric_threshold)
    lo, hi = _xlimits(result, refs)
    lam = np.geomspace(lo, hi, 1200)
    flux = transient.flux_flam(result.epochs.phase_d, lam)
    flux = flux / flux.max(axis=1, keepdims=True)
    n_ep = result.epochs.phase_d.size
    n_feat = min(MAX_FEATURES_DRAWN, len(result.features))
    row_h = max(1.0, 0.115 * n_feat + 0.2)
    heights = [0.7, row_h * n_ep] + ([0.3 + 0.22 * len(refs)] if refs else [])
    total_h = sum(heights) + 0.5 * len(heights) + 1.0
    fig = Figure(figsize=(11.5, total_h))
    grid = fig.add_gridspec(len(heights), 2, height_ratios=heights, width_ratios=[4.6, 1.0],
                            left=_left_margin(refs, 11.5), right=0.985, top=1 - 0.55 / total_h, bottom=0.75 / total_h,
                            hspace=0.55 * len(heights) / sum(heights), wspace=0.13)
    axes = [fig.add_subplot(grid[i, 0]) for i in range(len(heights))]
    for a in axes[1:]:
        a.sharex(axes[0])
    axes[0].set_xscale("log")
    axes[0].set_xlim(lo, hi)
    colors = matplotlib.colormaps["tab20" if n_feat > 10 else "tab10"](np.arange(n_feat) % 20)
    regions = _telluric_regions(tellurics, lam, airmass, pwv_mm, threshold)
    _atmosphere_strip(axes[0], lam, regions, threshold, airmass, pwv_mm)
    _feature_map(axes[1], result, flux, lam, colors, regions, n_feat)
    marked = _reference_marks(axes[1], result, n_feat, references)
    if refs:
        _setup_panel(axes[2], refs, result, regions, n_feat)
    _key(fig.add_subplot(grid[1, 1]), _labels(result)[:n_feat], colors)
    ticks = [t for t in TICKS_A if lo <= t <= hi]
    for a in axes:
        a.xaxis.set_major_locator(FixedLocator(ticks))
        a.xaxis.set_minor_locator(NullLocator())
        a.xaxis.set_minor_formatter(NullFormatter())
        a.tick_params(labelsize=FONT_PT, labelbottom=a is axes[-1])
    axes[-1].set_xticklabels([f"{t:,}" for t in ticks])
    axes[-1].set_xlabel("observed vacuum wavelength (\u00c5)", fontsize=FONT_PT + 1)
    head = f"{title}: " if title else ""
    fig.suptitle(f"{head}where each feature falls per epoch (solid: absorption, tick = expected trough; "
                 "pale: emission) and which setups record it", fontsize=FONT_PT + 2, x=0.01, ha="left",
                 y=1 - 0.12 / total_h)
    fig.text(0.01, 0.06 / total_h, ("Outlined in black: the reference feature of the setups chosen in that row. "
                                     if marked else "") + "Model estimates; the observatory's own tools and rules take precedence.",
             fontsize=FONT_PT, color="0.35")
    return fig
