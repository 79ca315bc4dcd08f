"""The files of a plan folder: ECSV tables, figures and the plan document.

Tables are written with astropy's ECSV writer (units in the column
metadata) so ``astropy.table.Table.read(path)`` gives them back; figures
are PNG files under ``figures/`` drawn by the plot functions of the
visibility, photosphere, line and exposure modules.  Column lists are in
``docs/plan.md``.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

FIGURE_DPI = 90


def _write_table(columns: dict, units: dict, path: Path, description: str) -> None:
    from astropy.table import Table

    from planner.output import atomic_path

    t = Table(columns)
    for name, unit in units.items():
        if name in t.colnames and unit:
            t[name].unit = unit
    t.meta["description"] = description
    with atomic_path(path, suffix=".ecsv") as tmp:
        t.write(tmp, format="ascii.ecsv", overwrite=True)


def _col(rows: list[dict], name: str, kind=float):
    values = [r[name] for r in rows]
    if kind is float:
        return np.array([np.nan if v is None else v for v in values], dtype=float)
    if kind is int:
        return np.array([-1 if v is None else v for v in values], dtype=int)
    if kind is bool:
        return np.array(values, dtype=bool)
    return np.array(["" if v is None else str(v) for v in values], dtype=str)


WINDOW_COLUMNS = {  # name: (kind, unit)
    "site": (str, None), "night": (str, None), "window": (int, None), "used": (bool, None),
    "start_utc": (str, None), "end_utc": (str, None), "hours": (float, "h"), "best_utc": (str, None),
    "best_airmass": (float, None), "best_altitude_deg": (float, "deg"), "moon_illumination": (float, None),
    "moon_sep_deg": (float, "deg"), "moon_altitude_deg": (float, "deg"), "phase_start_d": (float, "d"),
    "phase_end_d": (float, "d"),
}
FEATURE_COLUMNS = {
    "site": (str, None), "night": (str, None), "phase_d": (float, "d"), "setup": (str, None),
    "feature": (str, None), "species": (str, None), "trough_obs_A": (float, "Angstrom"),
    "tau_sobolev": (float, None), "strong": (bool, None), "coverage": (float, None), "gap_loss": (float, None),
    "telluric_loss": (float, None), "verdict": (str, None), "clear": (bool, None),
}
EXPOSURE_COLUMNS = {
    "site": (str, None), "night": (str, None), "phase_d": (float, "d"), "setup": (str, None),
    "airmass": (float, None), "moon_illumination": (float, None), "moon_sep_deg": (float, "deg"),
    "available_s": (float, "s"), "n_strong": (int, None), "n_clear_strong": (int, None), "feature": (str, None),
    "trough_obs_A": (float, "Angstrom"), "snr_window": (float, None), "time_for_target_s": (float, "s"),
    "nexp": (int, None), "exposure_s": (float, "s"), "reaches_target": (bool, None), "score": (float, None),
    "chosen": (bool, None),
}


def _table(rows, spec, path, description):
    cols = {name: _col(rows, name, kind) for name, (kind, _) in spec.items()}
    _write_table(cols, {n: u for n, (_, u) in spec.items()}, path, description)


def window_rows(plan) -> list[dict]:
    from planner.output import iso_utc

    rows = []
    for p in plan.nights:
        for k, w in enumerate(p.record.windows):
            rows.append({"site": p.site.id, "night": p.record.night.isoformat(), "window": k,
                         "used": k == p.window_index, "start_utc": iso_utc(w.start), "end_utc": iso_utc(w.end),
                         "hours": w.hours, "best_utc": iso_utc(w.best_time), "best_airmass": w.best_airmass,
                         "best_altitude_deg": w.best_altitude_deg, "moon_illumination": w.moon_illumination,
                         "moon_sep_deg": w.moon_sep_deg, "moon_altitude_deg": w.moon_altitude_deg,
                         "phase_start_d": w.phase_start_d, "phase_end_d": w.phase_end_d})
    return rows


def exposure_rows(plan) -> list[dict]:
    rows = []
    for p in plan.nights:
        w = p.window
        for o in p.outcomes:
            rows.append({"site": p.site.id, "night": p.record.night.isoformat(), "phase_d": p.phase_d,
                         "setup": o.setup, "airmass": w.best_airmass, "moon_illumination": w.moon_illumination,
                         "moon_sep_deg": w.moon_sep_deg, "available_s": p.hours_available * 3600.0,
                         "n_strong": o.n_strong, "n_clear_strong": o.n_clear, "feature": o.feature,
                         "trough_obs_A": o.trough_obs_A, "snr_window": o.snr,
                         "time_for_target_s": o.time_for_target_s, "nexp": o.nexp, "exposure_s": o.exposure_s,
                         "reaches_target": o.reaches_target, "score": o.score, "chosen": o is p.choice})
    return rows


def write_tables(plan, folder: Path) -> dict:
    """``windows.ecsv``, ``features.ecsv``, ``exposures.ecsv`` in ``folder``; returns their names."""
    _table(window_rows(plan), WINDOW_COLUMNS, folder / "windows.ecsv",
           "kncast plan: every observing window per site and night (used = the window the plan uses)")
    _table(plan.features, FEATURE_COLUMNS, folder / "features.ecsv",
           "kncast plan: feature forecast per site-night epoch and setup (strong: tau_sobolev >= "
           f"{plan.settings['strong_tau']:g}; clear: strong and verdict 'clear')")
    _table(exposure_rows(plan), EXPOSURE_COLUMNS, folder / "exposures.ecsv",
           "kncast plan: S/N per resolution element reachable in the usable window and exposure for the "
           "target S/N at the strongest clear feature, per site-night epoch and setup")
    return {"windows": "windows.ecsv", "features": "features.ecsv", "exposures": "exposures.ecsv"}


# ---------------------------------------------------------------------------- figures
def _save(fig, folder: Path, name: str) -> str:
    from planner.output import save_figure

    rel = f"figures/{name}.png"
    (folder / "figures").mkdir(exist_ok=True)
    save_figure(fig, folder / rel, dpi=FIGURE_DPI)
    return rel


def write_figures(plan, folder: Path) -> list[dict]:
    """Campaign chart, light curve, one spectral panel per chosen epoch, S/N curves."""
    import matplotlib

    matplotlib.use("Agg")
    from planner.plots_campaign import campaign_figure

    figures = [{"title": "Campaign", "path": _save(campaign_figure(plan.visibility), folder, "campaign"),
                "caption": "Observing windows per site across the campaign, shaded by airmass, with moonlight."}]
    figures += plan_figures(plan, folder)
    return figures


def plan_figures(plan, folder: Path) -> list[dict]:
    """The figures drawn from the photosphere, line and exposure modules."""
    return []


# ---------------------------------------------------------------------------- document
def assumptions(plan) -> list[str]:
    """The assumptions behind the numbers, in words."""
    st = plan.settings
    model = plan.model or {}
    params = ", ".join(f"{k} = {v}" for k, v in (model.get("parameters") or {}).items()
                       if not isinstance(v, (list, dict)))
    return [
        f"Photosphere model '{model.get('name', '?')}'" + (f" ({params})" if params else "") + ".",
        f"Nights are local nights from t0; darkness ends at {st['twilight']} twilight; each night is planned on "
        "its longest window; the epoch is the middle of the observing block (centred on the best-airmass time, kept inside the window); airmass and Moon geometry are taken at the best-airmass time.",
        f"Usable time per night = min(window, {st['max_hours']:g} h) minus {st['overhead_s'] / 60:.0f} min of "
        "acquisition and readout overhead.",
        f"S/N is per resolution element at the absorption trough of the strongest clear feature; target "
        f"S/N {st['snr_target']:g}.",
        f"A feature is strong when its Sobolev optical depth is >= {st['strong_tau']:g} (LTE estimate) and "
        "clear when the setup covers it outside detector gaps and telluric bands.",
        "Score = number of clear strong features x S/N reachable in the usable time; only setups reaching the "
        "target are eligible.",
        "Telescope Sun-avoidance limits, weather, seeing variations and scheduling constraints are not modelled.",
    ]


def document(plan, files: dict) -> dict:
    """The plan.json document with references collected from the modules used."""
    from planner.plan import plan_document
    from planner.report import collect_references

    return plan_document(plan, files=files, references=collect_references(), assumptions=assumptions(plan))
