"""The files of a plan folder: ECSV tables, figures and the plan document.

Tables are written with astropy's ECSV writer (units in the column
metadata) so ``astropy.table.Table.read(path)`` gives them back; figures
are PNG files under ``figures/`` drawn by the plot functions of the
visibility, photosphere, line and exposure modules.  Column lists are in
docs/commands/plan.md, section "ECSV columns".
"""
from __future__ import annotations

import functools
import os
from pathlib import Path

import numpy as np

from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S
from kncast.planner.observation import forecast_airmass
from kncast.planner.plan.tables import (  # noqa: F401  (the ECSV tables: their own module)
    EXPOSURE_COLUMNS, FEATURE_COLUMNS, WINDOW_COLUMNS, exposure_rows, window_rows, write_tables,
)
from kncast.planner.plan.tables import write_table as _write_table  # noqa: F401  (used by kncast semester)

FIGURE_DPI = 90


# ---------------------------------------------------------------------------- figures
def _save(fig, folder: Path, kind: str, arg=None) -> str:
    """Save ``fig`` as :func:`figure_path` at its own fixed layout (no tight bounding box: one draw)."""
    from kncast.planner.output import save_figure

    rel = figure_path(kind, arg)
    save_figure(fig, folder / rel, dpi=FIGURE_DPI, bbox_inches=None)
    return rel


# "chosen": the campaign's feature map (a row per day) and S/N spectra of the most often chosen setups;
# "all": also one feature map per day (a row per chosen epoch) and S/N spectra of every setup
FIGURE_SETS = ("chosen", "all")
# Seconds to draw and save each kind of figure (bench/plan.py on the 2-core machine, demo plan; a feature
# map, of the campaign or of one day, as "spectrum"): they decide whether the worker processes pay for
# themselves and which figure starts first.
FIGURE_COST_S = {"campaign": 0.15, "lightcurve": 0.14, "spectrum": 0.25, "snr": 0.09, "snr-campaign": 0.16}
POOL_OVERHEAD_S = 0.05  # forking two workers, handing out the jobs, collecting the results (measured: 0.02-0.04)


def write_figures(plan, folder: Path, figures: str = "chosen") -> list[dict]:
    """Campaign chart, light curve, one spectral panel per chosen epoch, S/N curves (PNG under figures/).

    ``figures`` (one of FIGURE_SETS): ``"chosen"`` draws the campaign's feature map and S/N spectra for
    the most often chosen setups (at most MAX_SNR_FIGURES), ``"all"`` adds a feature map per day and S/N
    spectra for every setup with a measured epoch.  The same as
    ``start_figures(...).finish()``.
    """
    return start_figures(plan, folder, figures).finish()


class FigureRun:
    """Figures being drawn: by two forked worker processes (started at once, so the caller can write the
    tables meanwhile) where the platform can fork and the estimated time saved (:func:`use_pool`) exceeds
    the cost of the workers; otherwise in turn, in this process, when :meth:`finish` is called.

    ``paths``: the figure files (relative to the folder) in report order, known before any is drawn.
    ``drawn``: {(kind, argument): result} of figures already drawn into ``folder``, not drawn again.
    """

    def __init__(self, plan, folder: Path, figures: str = "chosen", drawn: dict | None = None):
        import multiprocessing

        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot  # noqa: F401  (loaded once, before any fork)

        (folder / "figures").mkdir(exist_ok=True)
        self.jobs = figure_jobs(plan, figures)
        self.paths = [figure_path(kind, arg) for kind, arg, _ in self.jobs]
        self._drawn = dict(drawn or {})
        self._todo = [k for k, job in enumerate(self.jobs) if job[:2] not in self._drawn]
        self._state = (plan, folder)
        self._pool = self._pending = None
        workers = min(2, os.cpu_count() or 1, len(self._todo))
        costs = [self.jobs[k][2] for k in self._todo]
        if use_pool(costs, workers) and "fork" in multiprocessing.get_all_start_methods():
            global _JOB_STATE
            _line_inputs()  # read the line list once, before the fork
            _JOB_STATE = self._state
            try:
                self._todo.sort(key=lambda k: -self.jobs[k][2])  # heavy first
                self._pool = multiprocessing.get_context("fork").Pool(workers)
                self._pending = self._pool.map_async(_run_job, [self.jobs[k][:2] for k in self._todo], chunksize=1)
            finally:
                _JOB_STATE = None  # the workers hold their copy

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self) -> None:
        """Stop the workers (figures not yet drawn are abandoned)."""
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None

    def finish(self) -> list[dict]:
        """Wait for (or draw) every figure; their {"title", "path", "caption"} in report order."""
        global _JOB_STATE
        if self._pool is not None:
            try:
                done = self._pending.get()
            finally:
                self.close()
        else:
            _JOB_STATE = self._state
            try:
                done = [_run_job(self.jobs[k][:2]) for k in self._todo]
            finally:
                _JOB_STATE = None
        results = [self._drawn.get(job[:2]) for job in self.jobs]
        for k, r in zip(self._todo, done):
            results[k] = r
        failed = [r for r in results if "error" in r]
        if failed:
            raise FigureError(failed[0]["error"], failed[0]["trace"])
        return check_announced(results, self.paths)


def start_figures(plan, folder: Path, figures: str = "chosen", drawn: dict | None = None) -> FigureRun:
    """Start drawing the figures of ``plan`` into ``folder/figures`` (see :class:`FigureRun`)."""
    return FigureRun(plan, folder, figures, drawn)


def figure_path(kind: str, arg) -> str:
    """The file of one figure job, relative to the plan folder."""
    if kind == "spectrum":
        return f"figures/spectrum-day{arg:02d}.png"
    if kind == "snr":
        return f"figures/snr-{_file_part(arg)}.png"
    return f"figures/{kind}.png"


def check_announced(results: list[dict], paths: list[str]) -> list[dict]:
    """``results`` if their files are ``paths`` (those announced before drawing), else FigureError."""
    drawn = [r["path"] for r in results]
    if drawn != paths:
        raise FigureError(f"figure files {drawn} differ from those announced {paths}")
    return results


def use_pool(costs_s: list[float], workers: int) -> bool:
    """True when ``workers`` processes finish the jobs sooner than one, by more than POOL_OVERHEAD_S.

    The parallel time is that of longest-job-first scheduling (the order the pool is fed)."""
    if workers < 2:
        return False
    loads = [0.0] * workers
    for c in sorted(costs_s, reverse=True):
        loads[loads.index(min(loads))] += c
    return sum(costs_s) - max(loads) > POOL_OVERHEAD_S


class FigureError(RuntimeError):
    """A figure could not be drawn (an internal error: the message names the figure)."""

    def __init__(self, message: str, trace: str = ""):
        super().__init__(message)
        self.trace = trace
        if trace:
            self.add_note("in the figure worker:\n" + trace)  # shown with --debug


_JOB_STATE = None  # (plan, folder) for the figure workers (inherited through fork)


def _run_job(job):
    """Draw one figure; a failure comes back as text (exception objects may not survive pickling)."""
    name, arg = job
    plan, folder = _JOB_STATE
    from kncast.planner.errors import InputError

    try:
        return FIGURES[name](plan, folder, arg)
    except InputError as err:  # e.g. the disk is full (OutputError): the user's to fix, one line, exit 2
        raise InputError(str(err)) from None  # a plain InputError pickles back to the parent
    except Exception as err:  # noqa: BLE001 - re-raised in the parent by write_figures
        import traceback

        return {"error": f"figure {name!r} ({arg}): {type(err).__name__}: {err}", "trace": traceback.format_exc()}


def figure_view(plan):
    """``plan`` as its figures need it: without the feature forecast and the feature rows, which only the
    tables and the ensemble read (three quarters of a pickled plan)."""
    import dataclasses

    return dataclasses.replace(plan, forecast=None, features=[])


def figure_jobs(plan, figures: str = "chosen") -> list[tuple]:
    """(figure kind, argument, estimated seconds) in report order."""
    cost = FIGURE_COST_S
    jobs = [("campaign", None, cost["campaign"]), ("lightcurve", None, cost["lightcurve"])]
    days = sorted({int(p.phase_d) for p in plan.useful()})
    if days:
        jobs.append(("spectrum-campaign", None, cost["spectrum"]))
    if figures == "all":
        jobs += [("spectrum", day, cost["spectrum"]) for day in days]
    jobs += [("snr", sid, cost["snr"]) for sid in snr_figure_setups(plan, figures)]
    if any(o.significance is not None for p in plan.nights for o in p.outcomes):
        jobs.append(("snr-campaign", None, cost["snr-campaign"]))
    return jobs


def campaign_chart(plan, folder, _arg):
    return campaign_chart_of(plan.visibility, folder)


def campaign_chart_of(visibility, folder):
    """The campaign chart from the visibility alone (it can be drawn before the rest of the plan is known)."""
    from kncast.planner.figures.campaign import campaign_figure

    return {"title": "Campaign", "path": _save(campaign_figure(visibility), folder, "campaign"),
            "caption": "Observing windows per site across the campaign, shaded by airmass, with moonlight."}


def light_curve(plan, folder, _arg):
    from kncast.forecast.defaults import DEFAULT_BANDS
    from kncast.planner.figures.lightcurve import distance_range_mpc, lightcurve_figure

    useful = plan.useful() or [p for p in plan.nights if p.phase_d is not None]
    phases = np.unique(np.round([p.phase_d for p in useful], 4)) if useful else np.array([1.0])
    state = plan.transient.state(phases)
    fig = lightcurve_figure(plan.transient, state, DEFAULT_BANDS,
                            f"{plan.event.id}: {plan.model.get('name', '')} photosphere",
                            distance_range=distance_range_mpc(plan.event, plan.transient))
    return {"title": "Light curve", "path": _save(fig, folder, "lightcurve"),
            "caption": "Model AB magnitudes and photospheric temperature; markers at the "
                       + ("epochs with a useful spectrum." if plan.useful() else "planned epochs.")}


SAME_EPOCH_D = 0.05  # chosen epochs closer than this (1.2 h) share one spectral panel


@functools.lru_cache(maxsize=1)
def _line_inputs():
    """The bundled line list and composition (the plan's own defaults), read once for every spectral figure."""
    from kncast.forecast.linelist import LineList
    from kncast.forecast.lte import Composition

    return LineList.load(), Composition.load()


def epoch_groups(nights: list) -> list[list]:
    """Chosen nights in phase order, grouped where consecutive epochs lie within SAME_EPOCH_D."""
    groups = []
    for p in sorted(nights, key=lambda n: n.phase_d):
        if groups and p.phase_d - groups[-1][-1].phase_d < SAME_EPOCH_D:
            groups[-1].append(p)
        else:
            groups.append([p])
    return groups


def _feature_chart(plan, rows: list[list], title: str):
    """The lines chart of chosen epochs: one row per list of chosen nights in ``rows`` (the row's epoch is its
    first night's; its reference features, outlined, those of every choice in the row), the setups chosen
    in any row below, the atmosphere at the median airmass and water vapour of all of them."""
    from kncast.forecast.features import forecast_features
    from kncast.planner.figures.lines import lines_figure

    refs = {r.id: r for r in plan.setup_refs}
    members = [p for row in rows for p in row]
    chart_refs = list({p.choice.setup: refs[p.choice.setup] for p in members}.values())
    airmass = float(np.median([forecast_airmass(p.window) for p in members]))
    pwv = float(np.median([plan.atmospheres[p.site.id].pwv_mm for p in members]))
    linelist, composition = _line_inputs()
    fc = forecast_features(plan.transient, np.array([row[0].phase_d for row in rows]), linelist,
                           setups=[r.setup for r in chart_refs], tellurics=plan.tellurics, airmass=airmass,
                           pwv_mm=pwv, composition=composition, setup_ids=[r.id for r in chart_refs])
    fig = lines_figure(plan.transient, fc, chart_refs, plan.tellurics, airmass, pwv, title,
                       telluric_threshold=plan.settings.get("telluric_threshold"),
                       references=[tuple(dict.fromkeys(p.choice.feature for p in row)) for row in rows])
    return fig, airmass, pwv


def _chart_key(airmass: float, pwv: float) -> str:
    return (f"Each feature keeps its lane and colour (key at the right); top: the sky transmission at airmass "
            f"{airmass:.2f}, PWV {pwv:g} mm (hatched columns: correctable bands, cross-hatched: lost); bottom: "
            f"the chosen setups' coverage and how many features are clear in each, per row.")


def campaign_spectra(plan, folder, _arg):
    """The lines chart of the whole campaign: one row per day with a chosen spectrum, at its first chosen epoch."""
    days = sorted({int(p.phase_d) for p in plan.useful()})
    rows = [sorted((p for p in plan.useful() if int(p.phase_d) == d), key=lambda n: n.phase_d) for d in days]
    fig, airmass, pwv = _feature_chart(plan, rows, "Campaign")
    words = "; ".join(f"day {row[0].phase_d:.2f}: {row[0].site.id} ({row[0].choice.setup})"
                      + (f" and {len(row) - 1} more that day" if len(row) > 1 else "") for row in rows)
    return {"title": "Spectral forecast across the campaign", "path": _save(fig, folder, "spectrum-campaign"),
            "caption": f"Feature map: one row per day with a planned spectrum, at that day's first chosen epoch "
                       f"({words}); outlined: the reference features of that day's choices. "
                       + _chart_key(airmass, pwv) + " The 'all' figure set adds one map per day with a row per chosen epoch."}


def spectral_figure(plan, folder, day):
    """One spectral forecast panel per chosen epoch of days [day, day + 1) since t0 (the lines chart);
    epochs within SAME_EPOCH_D of each other share a panel."""
    groups = epoch_groups([p for p in plan.useful() if int(p.phase_d) == day])
    fig, airmass, pwv = _feature_chart(plan, groups, f"Days {day}-{day + 1}")
    words = " | ".join(f"day {g[0].phase_d:.2f}: " + ", ".join(f"{p.site.id} ({p.choice.setup}, day {p.phase_d:.2f})"
                                                              for p in g) for g in groups)
    return {"title": f"Spectral forecast, days {day}-{day + 1} since t0",
            "path": _save(fig, folder, "spectrum", day),
            "caption": f"Feature map: one row per chosen epoch, top to bottom (epochs within {SAME_EPOCH_D * 24:.1f} h "
                       f"share a row): {words}. " + _chart_key(airmass, pwv)}


MAX_SNR_FIGURES = 4


def snr_figure_setups(plan, figures: str = "chosen") -> list[str]:
    """The setups that get an S/N spectrum: the chosen ones (most often chosen first, at most
    MAX_SNR_FIGURES), or with ``figures="all"`` every planned setup that has an epoch to show."""
    if figures not in FIGURE_SETS:
        raise ValueError(f"figures = {figures!r}: one of {', '.join(FIGURE_SETS)}")
    if figures == "all":
        return [sid for sid in plan.settings["setups"] if snr_epoch(plan, sid) is not None]
    counts = {}
    for p in plan.useful():
        counts[p.choice.setup] = counts.get(p.choice.setup, 0) + 1
    return sorted(counts, key=lambda s: (-counts[s], s))[:MAX_SNR_FIGURES]


def snr_epoch(plan, setup_id: str):
    """(night, outcome, why) the S/N spectrum of a setup shows: the last night it is chosen, else the
    night its best-measured trough is most significant; None when it never measures one."""
    chosen = [n for n in plan.useful() if n.choice.setup == setup_id]
    if chosen:
        p = max(chosen, key=lambda n: n.phase_d)
        return p, p.choice, "the last night this setup is chosen"
    measured = [(n, o) for n in plan.nights for o in n.outcomes if o.setup == setup_id and o.significance is not None]
    if not measured:
        return None
    p, o = max(measured, key=lambda no: no[1].significance)
    return p, o, "never chosen: its most significant night"


def snr_spectrum(plan, folder, setup_id):
    """S/N against wavelength (the exposure chart) for a setup at the night :func:`snr_epoch` picks."""
    from kncast.planner.figures.exposure import exposure_figure
    from kncast.planner.observation import Request, observe, window_conditions

    p, c, why = snr_epoch(plan, setup_id)
    ref = next(r for r in plan.setup_refs if r.id == setup_id)
    w = p.window
    cond = window_conditions(w, plan.atmospheres[p.site.id], f"night of {p.record.night.isoformat()} at {p.site.id}")
    sigma = plan.settings["sigma"]
    seconds = c.time_to_sigma_s if c.time_to_sigma_s else p.hours_available * 3600.0
    request = Request(phase_d=p.phase_d, time_s=seconds, max_exposure_s=DEFAULT_MAX_EXPOSURE_S)
    res = observe(plan.event, ref, plan.transient, cond, request, tellurics=plan.tellurics)
    fig = exposure_figure(res, reference_feature=c.feature)
    what = (f"the time for {sigma:g} sigma on the {c.words} trough" if c.time_to_sigma_s else "the usable time")
    return {"title": f"S/N spectrum, {setup_id}",
            "path": _save(fig, folder, "snr", setup_id),
            "caption": f"Continuum S/N per resolution element for {res['nexp']} x {res['time_s'] / res['nexp']:.0f} s "
                       f"({what}) on day {p.phase_d:.2f}, night of {p.record.night.isoformat()} at airmass "
                       f"{forecast_airmass(w):.2f}: {why}."}


def _file_part(text: str) -> str:
    import re

    return re.sub(r"[^A-Za-z0-9.-]+", "_", text)


def snr_campaign(plan, folder, _arg):
    from kncast.planner.figures.significance import significance_figure

    setups, nights, sig, chosen = significance_matrix(plan)
    fig = significance_figure(setups, nights, sig, chosen, plan.settings["sigma"])
    return {"title": "S/N across the campaign", "path": _save(fig, folder, "snr-campaign"),
            "caption": "Detection significance of each setup's best-measured diagnostic trough in each night's "
                       "usable time: one row per setup, one column per night, colour on a log scale; framed: at "
                       "or above the target significance; dot: the setup chosen that night; grey: no measured "
                       "trough."}


FIGURES = {"campaign": campaign_chart, "lightcurve": light_curve, "spectrum-campaign": campaign_spectra,
           "spectrum": spectral_figure,
           "snr": snr_spectrum, "snr-campaign": snr_campaign}


def significance_matrix(plan):
    """(setup ids, night dates, significance (setups x nights, NaN where none is measured), chosen (bool))
    of every setup with a measured trough on some night."""
    measured = [(p, o) for p in plan.nights for o in p.outcomes if o.significance is not None]
    setups = sorted({o.setup for _, o in measured})
    nights = sorted({p.record.night for p in plan.nights})
    row, col = {s: k for k, s in enumerate(setups)}, {d: k for k, d in enumerate(nights)}
    sig = np.full((len(setups), len(nights)), np.nan)
    chosen = np.zeros(sig.shape, dtype=bool)
    for p, o in measured:
        sig[row[o.setup], col[p.record.night]] = o.significance
        chosen[row[o.setup], col[p.record.night]] = o is p.choice
    return setups, nights, sig, chosen


# ---------------------------------------------------------------------------- document
def assumptions(plan) -> list[str]:
    """The assumptions behind the numbers, in words."""
    st = plan.settings
    model = plan.model or {}
    raw = model.get("parameters") or {}
    params = ", ".join(f"{k} = {v}" for k, v in raw.items() if not isinstance(v, (list, dict)))
    comps = [c for c in raw.get("component", []) if isinstance(c, dict)]
    if comps:
        params = "; ".join(f"{c.get('name', '?')}: {c.get('mass_msun')} Msun at {c.get('velocity_c')} c, "
                           f"opacity {c.get('opacity_cm2_g')} cm^2/g, floor {c.get('temperature_floor_K')} K"
                           for c in comps) + (f"; {params}" if params else "")
    return [
        f"Photosphere model '{model.get('name', '?')}'" + (f" ({params})" if params else "") + ".",
        f"Nights are local nights from t0; darkness ends at {st['twilight']} twilight; each night is planned on "
        "its longest window; the epoch is the middle of the observing block (centred on the best-airmass time, "
        "kept inside the window); airmass and Moon geometry are taken at the best-airmass time.",
        f"Usable time per night = min(window, {st['max_hours']:g} h) minus {st['overhead_s'] / 60:.0f} min of "
        "acquisition and readout overhead.",
        f"Each feature is judged where it is measured: its absorption trough from v_phot to v_max. Expected depth "
        f"(1 - W)(1 - exp(-tau)) of a scattering line against the photosphere (Sobolev, LTE estimate; dilution "
        f"W = 1/2); continuum S/N per {st['bin_kms']:g} km/s bin at the trough; "
        f"significance = depth x S/N per bin x sqrt(usable bins across the trough); target {st['sigma']:g} sigma.",
        "Exposures are split into single exposures of at most 30 min; seeing, water vapour and extinction "
        "come from each site's [atmosphere] table (or the defaults).",
        f"Diagnostic features: " + (", ".join(st["features"]) if st.get("features") else
                                    f"every feature with an LTE estimate whose expected depth is >= {st['min_depth']:g}")
        + f". Trough bins on the detector count unless a telluric band transmits less than "
        f"{st['telluric_threshold']:g} there (bands above that are divided out with a telluric standard); troughs "
        "where the atmosphere extinguishes more than 1 mag per airmass do not count.",
        "Choice: the setup detecting the most diagnostic features at the target significance in the usable time; "
        "ties go to the one whose best feature reaches it soonest.",
        "Telescope Sun-avoidance limits, weather, seeing variations and scheduling constraints are not modelled.",
    ]


def document(plan, files: dict) -> dict:
    """The plan.json document with the references of the models this plan used."""
    from kncast.planner.plan.citations import plan_references
    from kncast.planner.plan.core import plan_document

    return plan_document(plan, files=files, references=plan_references(plan), assumptions=assumptions(plan))
