"""The semester folder: ``semester.json``, ECSV tables, figures, ``report.md`` and ``report.html``.

The document's keys are listed in docs/json.md, section "semester"; the report's paste-ready
technical-justification paragraph takes every number from the run.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

FIGURE_DPI = 100
FONT_PT = 10  # every text of the figures at least 9 pt

CAUTIONS = (
    "The horizon is a hard luminosity-distance limit (the sensitive volume of the network's range); the "
    "antenna pattern, the inclination and the sky localisation are not modelled: every merger inside it "
    "is taken as detected (times the duty cycle) and its counterpart as found and identified at t0.",
    "The rate interval is quoted from memory of the GWTC-3 population analysis (Phys. Rev. X 13, 011048); "
    "check it against the paper before a proposal quotes it.",
    "No weather, no Moon (dark sky), no telescope time-allocation or trigger delays: the counts are upper "
    "bounds for the nights a proposal can actually use.",
    "The (1 + z) dilation of the source-frame rate and the shift of the features and of the age with redshift "
    "are neglected (below 7 % inside 300 Mpc, 12 % at the 600 Mpc limit); the flux carries its 1 / (D_L^2 (1 + z)).",
    "Forecasts are model estimates: the photosphere and line strengths come from simplified models; the "
    "observatory's own exposure-time tools and rules take precedence.",
)


def _r(v, nd=3):
    v = float(v)
    return round(v, nd) if np.isfinite(v) else None


def document(res: dict, files: dict) -> dict:
    """The semester.json document of a run (``simulate_semester``'s result)."""
    from kncast.planner.output import document as head
    from kncast.planner.semester import run, sources

    st, refs, n = res["settings"], res["refs"], res["n"]
    epochs = res["epochs_per_event"]
    g = res["grid"]
    total = max(int(res["by_setup"].sum()), 1)
    settings = {"start": st.start.isoformat(), "end": st.end.isoformat(), "duration_d": res["duration_d"],
                "sites": [s.id for s in st.sites], "setups": [r.id for r in refs], "horizon_mpc": st.horizon_mpc,
                "duty": st.duty, "rate_gpc3_yr": list(st.rate), "events": n, "seed": st.seed, "nights": st.nights,
                "sigma": st.sigma, "max_hours": st.max_hours, "overhead_s": st.overhead_s, "twilight": st.twilight,
                "max_airmass": st.max_airmass, "cosmology": "Planck18",
                "priors": {"model": "powerlaw", "mass_msun": list(st.mass_msun), "mass_prior": "log-uniform",
                           "velocity_ref_c": list(st.velocity_c), "velocity_prior": "uniform"},
                "model_realisations": res["models"], "table_distance_mpc": _r(res["table_ref_distance_mpc"], 2)}
    expected = {k: {q: _r(v, 3) for q, v in s.items()} for k, s in res["expected"].items()}
    expected["mergers_per_unit_rate"] = _r(res["mean_per_rate"], 6)
    per_event = {"simulated": n, "with_useful_epoch": int((epochs > 0).sum()),
                 "fraction_with_useful_epoch": _r((epochs > 0).mean(), 4),
                 "useful_epochs_mean": _r(epochs.mean(), 3), "useful_epochs_median": _r(np.median(epochs), 1),
                 "useful_epochs_histogram": res["epoch_histogram"].tolist(),
                 "first_useful_night_histogram": np.bincount(res["first_useful_night"],
                                                             minlength=st.nights + 1).tolist()}
    sites = [{"site": s.id, "useful_epochs_per_event": _r(res["by_site"][i] / n, 4),
              "share": _r(res["by_site"][i] / total, 4)} for i, s in enumerate(st.sites)]
    setups = [{"setup": r.id, "useful_epochs_per_event": _r(res["by_setup"][j] / n, 4),
               "share": _r(res["by_setup"][j] / total, 4)} for j, r in enumerate(refs)]
    grid = {"phase_d": g["phase_d"].tolist(), "distance_mpc": g["distance_mpc"].tolist(), "setup": g["setup"],
            "snr_bin": _nested(g["snr_bin"]), "significance": _nested(g["significance"]),
            "feature": np.moveaxis(g["feature"], -1, 0).tolist(), "hours": g["hours"], "airmass": g["airmass"],
            "bin_kms": 1500.0, "model": run.canonical_model()}
    return head("semester", settings=settings, expected=expected, per_event=per_event, sites=sites, setups=setups,
                grid=grid, files=files, assumptions=assumptions(res),
                references=[c.text + (f" ({c.note})" if c.note else "") for c in sources.REFERENCES],
                cautions=list(CAUTIONS), justification=justification(res))


def _nested(a: np.ndarray) -> list:
    """(phase, distance, setup) -> [setup][phase][distance], 4 significant figures."""
    return [[[float(f"{v:.4g}") for v in row] for row in m] for m in np.moveaxis(a, -1, 0)]


def assumptions(res: dict) -> list[str]:
    from kncast.planner.semester import network, run

    st = res["settings"]
    return [
        f"Mergers: {res['n']} simulated, isotropic, uniform in comoving volume (astropy Planck18) out to "
        f"{st.horizon_mpc:g} Mpc luminosity distance, uniform in time from {st.start} to {st.end}.",
        f"Expected detected mergers = rate x V_c({st.horizon_mpc:g} Mpc) x {res['duration_d']} d x duty "
        f"{st.duty:g} = rate x {res['mean_per_rate']:.4g} Gpc^3 yr.",
        f"Rate log-uniform in {st.rate[0]:g}-{st.rate[1]:g} Gpc^-3 yr^-1, Poisson scatter; "
        f"{run.SEMESTER_DRAWS} Monte Carlo semesters give the median and the 5-95 % interval.",
        f"Ejecta: {run.MODEL_REALISATIONS} realisations of the powerlaw photosphere, mass log-uniform in "
        f"{st.mass_msun[0]:g}-{st.mass_msun[1]:g} Msun, velocity at 1 d uniform in {st.velocity_c[0]:g}-"
        f"{st.velocity_c[1]:g} c; each merger takes one at random.",
        f"Nights: {st.nights} local nights from t0, {st.twilight} twilight, each site's altitude limit and "
        f"horizon, sampled every {network.STEP_MIN:g} min; usable time min(dark and up, {st.max_hours:g} h) minus "
        f"{st.overhead_s / 60:g} min; the epoch is the mean time of the usable samples, the airmass the "
        "night's best, rounded up to the table's airmass nodes.",
        f"Useful epoch: a site-night where a diagnostic feature (expected depth >= 0.1) reaches {st.sigma:g} "
        "sigma in one of the site's setups (significance = depth x S/N per 1500 km/s bin x sqrt(bins), as "
        "kncast plan); the setup detecting most features is credited.",
        f"Proposal grid: canonical source (powerlaw defaults), {run.GRID_HOURS:g} h on source at airmass "
        f"{run.GRID_AIRMASS:g}, dark sky; the best diagnostic feature of each setup.",
    ]


def justification(res: dict) -> str:
    """The paste-ready technical-justification paragraph, numbers from the run."""
    st, e = res["settings"], res["expected"]
    g = res["grid"]
    j = int(np.argmax(res["by_setup"])) if res["by_setup"].sum() else 0
    k100 = int(np.argmin(np.abs(g["distance_mpc"] - 100.0)))
    k3 = int(np.argmin(np.abs(g["phase_d"] - 3.0)))
    best = g["setup"][j] if g["setup"] else "-"
    sig3 = float(g["significance"][k3, k100, j]) if g["setup"] else 0.0
    snr3 = float(g["snr_bin"][k3, k100, j]) if g["setup"] else 0.0
    frac = float((res["epochs_per_event"] > 0).mean())
    from kncast.planner.semester.run import DEFAULT_RATE

    rate = f"{st.rate[0]:g}" if st.rate[0] == st.rate[1] else f"{st.rate[0]:g}-{st.rate[1]:g}"
    source = (" (GWTC-3 population analysis, Phys. Rev. X 13, 011048, 2023)" if tuple(st.rate) == DEFAULT_RATE
              else "")
    return (f"For a binary-neutron-star merger rate of {rate} Gpc^-3 yr^-1{source}, a network horizon of "
            f"{st.horizon_mpc:g} Mpc "
            f"and a duty cycle of {st.duty:.0%}, we expect {_q(e['gw_events'])} mergers between "
            f"{st.start} and {st.end}. Simulating {res['n']} mergers against our {len(st.sites)} "
            f"site{'s' if len(st.sites) != 1 else ''}, {frac:.0%} give at least one spectrum detecting a diagnostic "
            f"absorption feature at {st.sigma:g} sigma within {st.nights} night{'s' if st.nights != 1 else ''}, "
            f"so we expect {_q(e['events'])} such events and {_q(e['useful_epochs'])} useful spectroscopic "
            f"epochs in this period, "
            f"{res['epochs_per_event'][res['epochs_per_event'] > 0].mean() if frac else 0:.1f} per followed "
            f"event on average (upper bounds: weather, moonlight and the time to identify the counterpart are not "
            f"included). At 100 Mpc and 3 days, {run_hours()} h with {best} reaches a continuum S/N of "
            f"{snr3:.0f} per 1500 km/s bin and a {sig3:.0f} sigma detection of the strongest trough.")


def _q(s: dict) -> str:
    """'4 (mean 25.5, 90 % interval 0-111)' from a summary of the semester Monte Carlo."""
    return f"{s['median']:.0f} (mean {s['mean']:.2g}, 90 % interval {s['p05']:.0f}-{s['p95']:.0f})"


def run_hours() -> str:
    from kncast.planner.semester.run import GRID_HOURS

    return f"{GRID_HOURS:g}"


def write_tables(res: dict, folder: Path) -> dict:
    """grid.ecsv, setups.ecsv, epochs.ecsv; returns their names."""
    from kncast.planner.plan.tables import write_table as _write_table

    g = res["grid"]
    n_p, n_d, n_c = g["significance"].shape
    p, d, c = np.meshgrid(np.arange(n_p), np.arange(n_d), np.arange(n_c), indexing="ij")
    cols = {"setup": np.array(g["setup"], dtype=str)[c.ravel()] if n_c else np.array([], str),
            "phase_d": g["phase_d"][p.ravel()], "distance_mpc": g["distance_mpc"][d.ravel()],
            "snr_bin": g["snr_bin"].ravel(), "significance": g["significance"].ravel(),
            "feature": np.array([f or "" for f in g["feature"].ravel()], dtype=str)}
    _write_table(cols, {"phase_d": "d", "distance_mpc": "Mpc"}, folder / "grid.ecsv",
                 f"canonical source, {g['hours']:g} h on source at airmass {g['airmass']:g}, dark sky: continuum "
                 "S/N per 1500 km/s bin and significance of the best diagnostic feature")
    n = res["n"]
    _write_table({"setup": np.array([r.id for r in res["refs"]], dtype=str),
                  "useful_epochs_per_event": res["by_setup"] / n},
                 {}, folder / "setups.ecsv", "useful epochs credited to each setup, per simulated merger")
    hist = res["epoch_histogram"]
    _write_table({"useful_epochs": np.arange(hist.size), "mergers": hist}, {}, folder / "epochs.ecsv",
                 "simulated mergers by number of useful spectroscopic epochs")
    return {"grid": "grid.ecsv", "setups": "setups.ecsv", "epochs": "epochs.ecsv"}


def write_figures(res: dict, folder: Path) -> list[dict]:
    """The figures (PNG, text >= 9 pt); returns [{title, path, caption}]."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from kncast.planner.output import save_figure

    (folder / "figures").mkdir(exist_ok=True)
    out = []
    with plt.rc_context({"font.size": FONT_PT, "axes.titlesize": FONT_PT + 1, "axes.labelsize": FONT_PT,
                         "xtick.labelsize": FONT_PT - 1, "ytick.labelsize": FONT_PT - 1,
                         "legend.fontsize": FONT_PT - 1}):
        for name, title, caption, draw in _FIGURES:
            fig = draw(res, plt)
            save_figure(fig, folder / "figures" / f"{name}.png", dpi=FIGURE_DPI)
            out.append({"title": title, "path": f"figures/{name}.png", "caption": caption})
    return out


def _epochs_figure(res, plt):
    hist = res["epoch_histogram"]
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    ax.bar(np.arange(hist.size), hist / max(res["n"], 1), color="#2f5d8a", width=0.85)
    ax.set_xlabel("useful spectroscopic epochs per merger (site-nights)")
    ax.set_ylabel("fraction of simulated mergers")
    ax.set_title("How many useful spectra one merger gives")
    ax.grid(axis="y", alpha=0.3)
    return fig


def _semester_figure(res, plt):
    mc = res["mc"]["useful_epochs"]
    s = res["expected"]["useful_epochs"]
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    top = max(float(np.percentile(mc, 99.5)), 1.0)
    ax.hist(mc, bins=np.linspace(0, top, 40), color="#7a9cc0", density=True)
    for q, style in (("p05", ":"), ("median", "-"), ("p95", ":")):
        ax.axvline(s[q], color="#1d2433", ls=style, lw=1.5)
    ax.set_xlabel("useful spectroscopic epochs in the semester")
    ax.set_ylabel("probability density")
    ax.set_title(f"Semester outcome: median {s['median']:.0f}, 90 % interval {s['p05']:.0f}-{s['p95']:.0f}")
    return fig


def _sites_figure(res, plt):
    from kncast.planner.figures.text import plain

    st = res["settings"]
    per = res["by_site"] / max(res["n"], 1)
    order = np.argsort(per)
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(st.sites) + 1.2))
    ax.barh([plain(st.sites[i].id) for i in order], per[order], color="#3b7d4f")
    ax.set_xlabel("useful epochs per merger")
    ax.set_title("Which sites deliver the useful epochs")
    ax.grid(axis="x", alpha=0.3)
    return fig


def _grid_figure(res, plt):
    from kncast.planner.figures.text import plain

    g = res["grid"]
    order = np.argsort(-res["by_setup"])[:4] if len(g["setup"]) else []
    fig, axes = plt.subplots(1, max(len(order), 1), figsize=(3.4 * max(len(order), 1), 3.6), squeeze=False,
                             sharey=True)
    for ax, j in zip(axes[0], order):
        sig = g["significance"][:, :, j]
        im = ax.pcolormesh(g["distance_mpc"], g["phase_d"], np.log10(np.maximum(sig, 0.1)), shading="nearest",
                           cmap="viridis", vmin=-1, vmax=3)
        cs = ax.contour(g["distance_mpc"], g["phase_d"], sig, levels=[res["settings"].sigma], colors="white")
        ax.clabel(cs, fmt=lambda v: f"{v:g} sigma")
        ax.set_title(plain(g["setup"][j].replace("/", " ")), fontsize=FONT_PT - 1)
        ax.set_xlabel("luminosity distance (Mpc)")
    axes[0][0].set_ylabel("days since merger")
    fig.colorbar(im, ax=axes[0].tolist(), label="log10 significance") if len(order) else None
    fig.suptitle(f"Strongest-trough significance, {g['hours']:g} h at airmass {g['airmass']:g}")
    return fig


_FIGURES = (
    ("epochs-per-merger", "Useful epochs per merger", "Fraction of simulated mergers by their number of useful "
     "site-nights.", _epochs_figure),
    ("semester", "Useful epochs in the semester", "Monte Carlo over the rate interval and Poisson scatter; "
     "lines at the 5th, 50th and 95th percentiles.", _semester_figure),
    ("sites", "Useful epochs by site", "Mean useful site-nights per simulated merger at each site.", _sites_figure),
    ("grid", "Significance versus phase and distance", "Canonical source, the four setups credited most; the "
     "white line marks the target significance.", _grid_figure),
)


def build_blocks(doc: dict, figures: list) -> list:
    from kncast.planner.plan.report import Block

    st, e = doc["settings"], doc["expected"]
    b = [Block("h1", f"kncast semester forecast: {st['start']} to {st['end']}"),
         Block("h2", "Technical justification"), Block("p", doc["justification"]),
         Block("h2", "Expected numbers"),
         Block("table", header=["quantity", "median", "5 %", "95 %", "mean"],
               items=[[name, f"{e[k]['median']:.0f}", f"{e[k]['p05']:.0f}", f"{e[k]['p95']:.0f}", f"{e[k]['mean']:.2f}"]
                      for k, name in (("gw_events", "mergers detected"), ("events", "mergers with a useful spectrum"),
                                      ("useful_epochs", "useful spectroscopic epochs"))])]
    b += [Block("h2", "Sites and setups"),
          Block("table", header=["site", "useful epochs per merger", "share"],
                items=[[s["site"], f"{s['useful_epochs_per_event']:.2f}", f"{s['share']:.0%}"] for s in doc["sites"]]),
          Block("table", header=["setup", "useful epochs per merger", "share"],
                items=[[s["setup"], f"{s['useful_epochs_per_event']:.2f}", f"{s['share']:.0%}"]
                       for s in sorted(doc["setups"], key=lambda s: -s["share"]) if s["share"]])]
    g = doc["grid"]
    b.append(Block("h2", "Significance versus phase and distance"))
    b.append(Block("p", f"Canonical source, {g['hours']:g} h on source at airmass {g['airmass']:g}, dark sky: "
                        "significance of the best diagnostic trough (continuum S/N per 1500 km/s bin in brackets); "
                        "every setup in grid.ecsv."))
    for j in sorted(range(len(g["setup"])), key=lambda j: -doc["setups"][j]["share"])[:3]:
        b.append(Block("h3", g["setup"][j]))
        b.append(Block("table", header=["day"] + [f"{d:g} Mpc" for d in g["distance_mpc"]],
                       items=[[f"{p:g}"] + [f"{g['significance'][j][i][k]:.0f} ({g['snr_bin'][j][i][k]:.0f})"
                                            for k in range(len(g["distance_mpc"]))]
                              for i, p in enumerate(g["phase_d"])]))
    b.append(Block("h2", "Figures"))
    b += [Block("img", f["title"], [f["caption"]], path=f["path"]) for f in figures]
    b += [Block("h2", "Assumptions"), Block("ul", items=doc["assumptions"]),
          Block("h2", "References"), Block("ul", items=doc["references"]),
          Block("h2", "Cautions"), Block("ul", items=doc["cautions"])]
    return b


def write_folder(res: dict, out: Path) -> dict:
    """Write the whole folder atomically; returns the document."""
    from kncast.planner.output import atomic_dir, atomic_path, write_json
    from kncast.planner.plan.report import render_html, render_markdown

    with atomic_dir(out) as tmp:
        files = write_tables(res, tmp)
        figures = write_figures(res, tmp)
        files.update(figures=[f["path"] for f in figures], semester="semester.json", report_md="report.md",
                     report_html="report.html")
        doc = document(res, files)
        write_json(tmp / "semester.json", doc)
        blocks = build_blocks(doc, figures)
        with atomic_path(tmp / "report.md") as t:
            t.write_text(render_markdown(blocks), encoding="utf-8")
        with atomic_path(tmp / "report.html") as t:
            t.write_text(render_html(blocks, tmp, "kncast semester forecast"), encoding="utf-8")
    return doc
