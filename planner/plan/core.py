"""The campaign plan: for every site and night, the best spectrograph setup and why.

:func:`build_plan` strings the pieces together; it computes no physics of
its own:

1. windows per site and night (:func:`kncast.planner.visibility.core.compute_visibility`);
   each night is planned on its longest window; the epoch is the middle of
   the observing block (min(window, ``max_hours``) long, centred on the
   best-airmass time, kept inside the window; ``phase_d`` = observer-frame
   days since t0);
2. the photosphere at every epoch, in one array call
   (:func:`kncast.planner.source.transient_for_event`, ``Transient.state``);
3. per epoch and setup: which strong features are clear (the feature
   forecast of :mod:`kncast.forecast.features`), all epochs x all setups in one call;
4. per epoch and setup: the S/N reachable at the reference feature in the
   usable time, and the exposure time for the target S/N there
   (:mod:`kncast.forecast.exposure`), one batched call per site for all its epochs
   and setups.

The reference feature of a setup is the clear strong feature whose trough
gets the highest S/N.  Every strong feature (Sobolev tau >= ``STRONG_TAU``)
is optically thick, so ranking them further by tau says little about what
can be measured; what limits the measurement is the signal at the trough.

Usable time = min(window hours, ``max_hours``) minus the acquisition and
readout overhead.

The score (documented in docs/commands/plan.md, section "The score")::

    score = N_clear_strong x S/N_window

where ``N_clear_strong`` is the number of strong features (Sobolev optical
depth >= ``STRONG_TAU``) that the setup sees clear (verdict "clear") and
``S/N_window`` the S/N per resolution element reachable in the usable time at
the reference feature's absorption trough.  Only setups that reach the
target S/N there are eligible; the highest score wins (ties: the shorter
exposure).  A night where no setup is eligible says why in words.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kncast.planner.errors import ParameterError

from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S, SNR_BASIS, STRONG_TAU
from kncast.forecast.features import strong_mask
from kncast.planner.observation import batched_conditions, forecast_airmass

__all__ = ["build_plan", "Plan", "NightPlan", "SetupOutcome", "plan_document", "score", "choose",
           "campaign_summary", "MAG_BANDS"]

DEFAULT_SNR = 10.0
DEFAULT_MAX_HOURS = 4.0
DEFAULT_OVERHEAD_S = 900.0
MAG_BANDS = ("bessell-R", "bessell-I", "twomass-J")  # model AB magnitudes quoted per epoch (speclite names)

STATUS_WORDS = {
    "observe": "observe",
    "no-window": "no window",
    "no-spectrograph": "no spectrograph at this site",
    "too-short": "window too short",
    "hidden": "only hidden features",
    "no-strong": "no strong features",
    "too-faint": "too faint",
}


@dataclass
class SetupOutcome:
    """What one setup can do at one epoch.  S/N per resolution element; times in seconds."""

    setup: str
    aperture_m: float
    n_strong: int = 0
    strong: list = field(default_factory=list)  # strong feature ids, strongest first
    clear: list = field(default_factory=list)   # strong ids the setup sees clear, strongest first
    feature: str | None = None                   # reference feature: the clear strong one with the best S/N
    species: str | None = None
    trough_obs_A: float | None = None
    tau_sobolev: float | None = None
    snr: float | None = None                     # reachable in the usable time
    time_for_target_s: float | None = None
    nexp: int | None = None
    exposure_s: float | None = None              # length of each exposure
    reaches_target: bool = False
    score: float = 0.0
    verdict: str = ""

    @property
    def n_clear(self) -> int:
        return len(self.clear)


@dataclass
class NightPlan:
    """One site and local night: the window used, the epoch, every setup's outcome, the choice."""

    record: object                 # kncast.planner.visibility.core.NightRecord
    window_index: int | None = None
    phase_d: float | None = None
    hours_available: float = 0.0   # min(window, max_hours) - overhead, h
    photosphere: dict = field(default_factory=dict)
    outcomes: list = field(default_factory=list)
    choice: SetupOutcome | None = None
    status: str = "no-window"
    reason: str = ""

    @property
    def site(self):
        return self.record.site

    @property
    def window(self):
        return None if self.window_index is None else self.record.windows[self.window_index]


@dataclass
class Plan:
    """A campaign plan (see :func:`build_plan`)."""

    event: object
    sites: list
    settings: dict
    visibility: object
    transient: object
    nights: list
    features: list = field(default_factory=list)   # rows for features.ecsv
    campaign: dict = field(default_factory=dict)
    model: dict = field(default_factory=dict)
    setup_refs: list = field(default_factory=list)  # kncast.planner.setups.SetupRef of every setup planned
    tellurics: object = None                       # kncast.forecast.tellurics.TelluricModel used
    atmospheres: dict = field(default_factory=dict)  # site id -> kncast.forecast.extinction_atm.Atmosphere
    candidates: list = field(default_factory=list)  # kncast.planner.visibility.candidates.CandidateNight, when the event lists several

    def useful(self) -> list[NightPlan]:
        return [n for n in self.nights if n.choice is not None]


def check_settings(snr_target, max_hours, overhead_s, nights) -> None:
    """Range checks with one-line errors naming the parameter."""
    if not (math.isfinite(snr_target) and 0.0 < snr_target <= 1000.0):
        raise ParameterError("snr_target", snr_target, "a S/N per resolution element in (0, 1000]")
    if not (math.isfinite(max_hours) and 0.0 < max_hours <= 24.0):
        raise ParameterError("max_hours", max_hours, "hours per night in (0, 24]")
    if not (math.isfinite(overhead_s) and 0.0 <= overhead_s <= 4 * 3600.0):
        raise ParameterError("overhead_s", overhead_s, "seconds in [0, 14400]")
    if not 1 <= int(nights) <= 60:
        raise ParameterError("nights", nights, "a whole number from 1 to 60")


def build_plan(event, sites, nights: int = 7, snr_target: float = DEFAULT_SNR,
               max_hours: float = DEFAULT_MAX_HOURS, overhead_s: float = DEFAULT_OVERHEAD_S,
               twilight: str = "nautical", registry=None, model=None, overrides=None,
               progress=None) -> Plan:
    """Plan spectroscopy of ``event`` from ``sites`` over ``nights`` local nights after t0.

    ``snr_target`` is per resolution element; ``max_hours`` caps the time per
    night (h); ``overhead_s`` is the acquisition + readout overhead per night
    (s).  ``registry`` (a SiteRegistry) supplies the setups; by default the
    registry of the given sites.  ``model``/``overrides`` choose the
    photosphere model.  ``progress(step_text)`` is called before each step.
    """
    from kncast.planner.setups import all_setups
    from kncast.planner.source import transient_for_event
    from kncast.planner.visibility.core import compute_visibility

    check_settings(snr_target, max_hours, overhead_s, nights)
    say = progress or (lambda text: None)
    sites = list({s.id: s for s in sites}.values())  # each site once, in the order given
    say("visibility windows")
    vis = compute_visibility(event, sites, nights=nights, twilight=twilight)
    say("photosphere")
    transient = transient_for_event(event, model=model, overrides=overrides)
    site_ids = {s.id for s in sites}
    refs = [r for r in all_setups(registry if registry is not None else sites_registry(sites))
            if r.site.id in site_ids]
    settings = {"nights": int(nights), "twilight": twilight, "snr_target": float(snr_target),
                "snr_per": SNR_BASIS.removeprefix("per "), "max_hours": float(max_hours), "overhead_s": float(overhead_s),
                "strong_tau": STRONG_TAU, "sites": [s.id for s in sites], "setups": [r.id for r in refs],
                "target": event.targets()[0].id, "mag_bands": list(MAG_BANDS)}
    t0_mjd = float(event.t0.utc.mjd)
    plans = [_night_plan(rec, t0_mjd, max_hours, overhead_s) for rec in vis.nights]
    epochs = [p for p in plans if p.window is not None]
    if epochs:
        phases = np.array([p.phase_d for p in epochs])
        state = transient.state(phases)
        mags = transient.mag_ab(phases, MAG_BANDS)
        for k, p in enumerate(epochs):
            p.photosphere = _state_row(state, k)
            p.photosphere["mag_ab"] = {b: round(float(mags[b][k]), 3) for b in MAG_BANDS}
    plan = Plan(event=event, sites=sites, settings=settings, visibility=vis, transient=transient, nights=plans,
                model=_model_summary(transient), setup_refs=refs)
    say("line features")
    by_site = {}
    for r in refs:
        by_site.setdefault(r.site.id, []).append(r)
    evaluate_setups(plan, epochs, by_site, snr_target, say)
    for p in plans:
        choose(p, snr_target, overhead_s)
    plan.campaign = campaign_summary(plan)
    if event.candidates:
        from kncast.planner.visibility.candidates import rank_candidates

        say("ranking candidates")
        plan.candidates = rank_candidates(event, sites, nights=nights, twilight=twilight, ephemeris=vis.ephemeris)
    return plan


def sites_registry(sites):
    """A registry holding exactly ``sites`` (for :func:`kncast.planner.setups.all_setups`)."""
    from kncast.planner.sites import SiteRegistry

    return SiteRegistry({s.id.lower(): s for s in sites})


def _night_plan(rec, t0_mjd: float, max_hours: float, overhead_s: float) -> NightPlan:
    """The night's longest window (ties: lower best airmass) and its epoch."""
    p = NightPlan(record=rec)
    if not rec.windows:
        p.status, p.reason = "no-window", f"no window: {rec.note or 'target not observable'}"
        return p
    k = max(range(len(rec.windows)), key=lambda i: (rec.windows[i].hours, -rec.windows[i].best_airmass))
    w = rec.windows[k]
    p.window_index = k
    p.phase_d = block_centre_mjd(w, max_hours) - t0_mjd
    p.hours_available = max(0.0, min(w.hours, max_hours) - overhead_s / 3600.0)
    return p


def block_centre_mjd(w, max_hours: float) -> float:
    """Middle (MJD) of the observing block: min(window, max_hours) long, centred on the best-airmass
    time and shifted to stay inside the window."""
    start, end, best = w.start.utc.mjd, w.end.utc.mjd, w.best_time.utc.mjd
    half = 0.5 * min(end - start, max_hours / 24.0)
    return float(np.clip(best, start + half, end - half))


def _state_row(state, k: int) -> dict:
    """Photosphere values of epoch ``k`` as plain floats."""
    out = {}
    for name in ("phase_d", "age_d", "temperature_K", "radius_cm", "luminosity_erg_s", "v_phot_c", "v_max_c"):
        value = getattr(state, name, None)
        if value is not None:
            out[name] = float(np.asarray(value)[k])
    return out


def _model_summary(transient) -> dict:
    ph = transient.photosphere
    return {"name": ph.name, "parameters": ph.parameters(), "redshift": transient.redshift,
            "luminosity_distance_cm": transient.luminosity_distance_cm}


# ---------------------------------------------------------------------------- per setup
def evaluate_setups(plan: Plan, epochs: list, by_site: dict, snr_target: float, say) -> None:
    """Fill ``NightPlan.outcomes`` for every epoch and every setup at its site.

    Features: one :func:`kncast.forecast.features.forecast_features` call for all
    epochs x all setups (airmass and water vapour per epoch).  Exposures: per
    site, one batched :mod:`kncast.forecast.exposure` evaluation for all its epochs and
    setups at once (:func:`site_exposures`), sampled at the troughs of each
    epoch's strong features.
    """
    refs = [r for site_refs in by_site.values() for r in site_refs]
    if not epochs or not refs:
        return
    fc = feature_forecast(plan, epochs, refs)
    say("exposure times")
    # observed continuum at every feature trough of every epoch, in one call: (n_epochs, n_features)
    n, nf = fc.windows.trough_A.shape
    every = plan.transient.flux_flam(fc.epochs.phase_d, fc.windows.trough_A.ravel()).reshape(n, n, nf)
    fc.trough_flux_flam = every[np.arange(n), np.arange(n)]
    column = {r.id: k for k, r in enumerate(refs)}
    site_of = np.array([p.site.id for p in epochs])
    batches = {}
    for site_id, site_refs in by_site.items():  # one batched exposure evaluation per site (a handful of sites)
        rows = np.flatnonzero(site_of == site_id)
        if site_refs and rows.size:
            cols = [column[r.id] for r in site_refs]
            batches[site_id] = (cols, site_exposures(plan, epochs, rows, fc, site_refs, cols, snr_target))
    for i, p in enumerate(epochs):  # bookkeeping only: SetupOutcome objects from the batched arrays
        if p.site.id in batches:
            cols, (needed, snr, t_need, n_need) = batches[p.site.id]
            ex = (snr[:, i], t_need[:, i], n_need[:, i]) if needed[i] else None
            p.outcomes = _outcomes_for_epoch(plan, p, i, fc, by_site[p.site.id], cols, ex, snr_target)


def site_conditions(site):
    """(Atmosphere, TelluricModel) of a site: its ``[atmosphere]`` table or the defaults."""
    from kncast.forecast.extinction_atm import atmosphere_for_site

    return atmosphere_for_site(site)


def feature_forecast(plan: Plan, epochs: list, refs: list):
    """The feature forecast at every epoch for every setup (airmass, PWV of each epoch's night)."""
    from kncast.forecast.features import forecast_features
    from kncast.forecast.tellurics import TelluricModel

    phases = np.array([p.phase_d for p in epochs])
    airmass = np.array([forecast_airmass(p.window) for p in epochs])[:, None, None]
    atm = {s.id: site_conditions(s) for s in plan.sites}
    pwv = np.array([atm[p.site.id].pwv_mm for p in epochs])[:, None, None]
    plan.tellurics = TelluricModel.load()
    plan.atmospheres = atm
    return forecast_features(plan.transient, phases, setups=[r.setup for r in refs], tellurics=plan.tellurics,
                             airmass=airmass, pwv_mm=pwv, setup_ids=[r.id for r in refs])


def _outcomes_for_epoch(plan: Plan, p: NightPlan, i: int, fc, refs: list, cols: list, ex, snr_target: float):
    """SetupOutcome per setup of the site at epoch ``i`` (features from ``fc``).

    ``ex`` is None (no clear strong feature or no usable time) or this epoch's (S/N, time, n_exp) arrays
    (n_setups, n_features) from :func:`site_exposures`.
    """
    tau = fc.tau[i]
    strong = strong_mask(fc.tau)[i]
    strong_idx = [int(f) for f in fc.rank[i] if strong[f]]
    clear = np.array([[fc.verdict[i, f, k] == "clear" for f in strong_idx] for k in cols], dtype=bool)
    clear = clear.reshape(len(cols), len(strong_idx))
    snr = t_need = n_need = None
    if ex is not None:
        snr, t_need, n_need = (np.asarray(a)[:, strong_idx] for a in ex)
    outcomes = []
    for j, (k, ref) in enumerate(zip(cols, refs)):
        o = SetupOutcome(setup=ref.id, aperture_m=ref.telescope.aperture_m, n_strong=len(strong_idx),
                         strong=[fc.features[f].id for f in strong_idx],
                         clear=[fc.features[f].id for f, c in zip(strong_idx, clear[j]) if c])
        if clear[j].any():
            # reference feature: the clear strong feature with the highest S/N (all strong ones are optically
            # thick; without usable time, the first by optical depth)
            m = int(np.argmax(np.where(clear[j], snr[j], -np.inf))) if snr is not None else int(np.argmax(clear[j]))
            f = strong_idx[m]
            o.feature, o.species = fc.features[f].id, fc.features[f].species
            o.trough_obs_A, o.tau_sobolev = float(fc.windows.trough_A[i, f]), float(tau[f])
            if snr is not None:
                o.snr = float(snr[j, m])
                o.reaches_target = bool(o.snr >= snr_target)
                if np.isfinite(t_need[j, m]):
                    o.time_for_target_s, o.nexp = float(t_need[j, m]), int(n_need[j, m])
                    o.exposure_s = o.time_for_target_s / o.nexp
        o.verdict = _verdict(o)
        outcomes.append(o)
        plan.features.extend(_feature_rows(p, fc, i, k, ref.id, strong_idx))
    return outcomes


def _feature_rows(p: NightPlan, fc, i: int, k: int, setup_id: str, strong_idx: list) -> list[dict]:
    strong = set(strong_idx)
    rows = []
    for f in fc.rank[i]:
        feat, t = fc.features[f], fc.tau[i, f]
        rows.append({"site": p.site.id, "night": p.record.night.isoformat(), "phase_d": p.phase_d,
                     "setup": setup_id, "feature": feat.id, "species": feat.species,
                     "trough_obs_A": float(fc.windows.trough_A[i, f]),
                     "tau_sobolev": float(t) if np.isfinite(t) else None, "strong": f in strong,
                     "coverage": float(fc.coverage[i, f, k]), "gap_loss": float(fc.gap_loss[i, f, k]),
                     "telluric_loss": float(fc.telluric_loss[i, f, k]), "verdict": str(fc.verdict[i, f, k]),
                     "clear": f in strong and fc.verdict[i, f, k] == "clear"})
    return rows


def site_exposures(plan: Plan, epochs: list, rows, fc, refs: list, cols: list, snr_target: float):
    """Exposures of one site, all its epochs (``rows``: indices into ``epochs``) and setups in one batched call.

    Sampled at the trough of every strong feature of every epoch that has usable time and a strong
    feature seen clear by one of the setups (observed continuum ``fc.trough_flux_flam`` there), with
    that epoch's airmass, Moon and time: S/N per resolution element in the usable time, and
    (time, n_exp) for the target.  Returns (needed (n_epochs,) bool, snr, time s, n_exp), the last
    three arrays (n_setups, n_epochs, n_features): NaN / 0 where not evaluated.
    """
    from kncast.forecast import exposure

    n, nf = fc.tau.shape
    strong = strong_mask(fc.tau)[rows]                                                   # (n_rows, nf)
    hours = np.array([epochs[i].hours_available for i in rows])
    clear = (fc.verdict[rows][:, :, cols] == "clear") & strong[:, :, None]
    needed = np.zeros(n, dtype=bool)
    needed[rows] = clear.any(axis=(1, 2)) & (hours > 0)
    snr_all = np.full((len(refs), n, nf), np.nan)
    t_all, n_all = snr_all.copy(), np.zeros((len(refs), n, nf), dtype=int)
    e, f = np.nonzero(needed[rows][:, None] & strong)                             # samples: (epoch, feature)
    if not e.size:
        return needed, snr_all, t_all, n_all
    ep = rows[e]
    lam = fc.windows.trough_A[ep, f]
    cond = batched_conditions([epochs[i].window for i in rows], plan.atmospheres[epochs[rows[0]].site.id], e)
    grid = exposure.stack_grids([exposure.setup_grid(r.telescope, r.instrument, r.setup, wavelength_A=lam)
                                 for r in refs])                                    # (n_setups, n_samples)
    flux = fc.trough_flux_flam[ep, f][None, :]                                      # (1, n_samples)
    telluric = plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm)
    r = exposure.rates(flux, grid, cond, telluric)
    available = hours[e] * 3600.0
    n_exp = np.maximum(1, np.ceil(available / DEFAULT_MAX_EXPOSURE_S - 1e-9)).astype(int)
    snr_all[:, ep, f] = exposure.expose(r, available, n_exp).snr_per_resel
    t_all[:, ep, f], n_all[:, ep, f] = exposure.time_for_snr(r, snr_target, DEFAULT_MAX_EXPOSURE_S)
    return needed, snr_all, t_all, n_all


def _verdict(o: SetupOutcome) -> str:
    if o.n_strong == 0:
        return "no strong features"
    if not o.clear:
        return "only hidden features"
    if o.snr is None:
        return "no usable time"
    return "reaches target" if o.reaches_target else "too faint"


# ---------------------------------------------------------------------------- choice
def score(outcome: SetupOutcome) -> float:
    """N_clear_strong x S/N reachable in the usable window (0 when the target is not reached)."""
    if not outcome.reaches_target or outcome.snr is None:
        return 0.0
    return outcome.n_clear * float(outcome.snr)


def choose(p: NightPlan, snr_target: float, overhead_s: float) -> None:
    """Pick the best setup for the night and say why, in words."""
    if p.window is None:
        return
    w = p.window
    if not p.outcomes:
        p.status = "no-spectrograph"
        p.reason = f"nothing useful: no spectrograph setup known at {p.site.id}"
        return
    if p.hours_available <= 0:
        p.status = "too-short"
        p.reason = (f"nothing useful: the {w.hours:.2f} h window is shorter than the "
                    f"{overhead_s / 60:.0f} min overhead")
        return
    for o in p.outcomes:
        o.score = score(o)
    eligible = [o for o in p.outcomes if o.score > 0]
    if eligible:
        best = max(eligible, key=lambda o: (o.score, -(o.time_for_target_s or math.inf)))
        p.choice, p.status = best, "observe"
        p.reason = choice_words(best, p.hours_available, snr_target)
        return
    p.reason = "nothing useful, " + failure_words(p, snr_target)


def choice_words(o: SetupOutcome, hours: float, snr_target: float) -> str:
    """'X covers 5 of 6 strong features clear of telluric bands and reaches S/N 23 at the Ca II trough ...'"""
    words = (f"{o.setup} covers {o.n_clear} of {o.n_strong} strong features clear of telluric bands "
             f"and reaches S/N {o.snr:.0f} at the {o.species} trough ({o.trough_obs_A:.0f} A) in {hours:.1f} h")
    if o.nexp and o.exposure_s:
        words += f"; S/N {snr_target:g} needs {o.nexp} x {o.exposure_s:.0f} s"
    return words


def failure_words(p: NightPlan, snr_target: float) -> str:
    """Why no setup is useful: no strong features, only hidden ones, or too faint (with the best S/N)."""
    if all(o.n_strong == 0 for o in p.outcomes):
        p.status = "no-strong"
        return "no feature is expected to be strong at this epoch"
    seen = [o for o in p.outcomes if o.n_clear > 0]
    if not seen:
        p.status = "hidden"
        return ("only hidden features: every strong feature falls outside coverage, in a detector gap "
                "or in a telluric band for every setup here")
    best = max(seen, key=lambda o: o.snr or 0.0)
    p.status = "too-faint"
    return (f"too faint: at best S/N {best.snr or 0:.1f} (target {snr_target:g}) with {best.setup} at the "
            f"{best.species} trough in the usable {p.hours_available:.1f} h")


# ---------------------------------------------------------------------------- campaign
def campaign_summary(plan: Plan) -> dict:
    """Per site the useful epochs and last useful night; per setup when it becomes too faint."""
    target = plan.settings["snr_target"]
    sites = []
    for site in plan.sites:
        useful = [p for p in plan.nights if p.site.id == site.id and p.choice is not None]
        sites.append({"site": site.id, "useful_phases_d": [round(p.phase_d, 4) for p in useful],
                      "useful_nights": [p.record.night.isoformat() for p in useful],
                      "last_useful_night": useful[-1].record.night.isoformat() if useful else None,
                      "last_useful_phase_d": round(useful[-1].phase_d, 4) if useful else None})
    setups = []
    for sid in plan.settings["setups"]:
        rows = sorted(((p.phase_d, p.record.night, o) for p in plan.nights for o in p.outcomes if o.setup == sid),
                      key=lambda r: r[0])
        reach = [r for r in rows if r[2].snr is not None and r[2].snr >= target]
        last_ok = reach[-1][0] if reach else None
        later = [r for r in rows if last_ok is None or r[0] > last_ok]
        faint = next((r for r in later if r[2].snr is not None), None) if later else None
        measured = [r for r in rows if r[2].snr is not None]
        if not measured:
            note = "never sees a clear strong feature with usable time"
        elif last_ok is None:
            note = "never reaches the target"
        elif faint is None:
            note = "still reaches the target at its last epoch"
        else:
            note = f"too faint from day {faint[0]:.2f} on"
        setups.append({"setup": sid, "epochs_evaluated": len(rows), "note": note,
                       "last_reaches_target_phase_d": None if last_ok is None else round(last_ok, 4),
                       "too_faint_from_phase_d": None if faint is None else round(faint[0], 4),
                       "too_faint_from_night": None if faint is None else faint[1].isoformat()})
    useful = sorted(plan.useful(), key=lambda p: p.phase_d)
    point = lambda p: {"site": p.site.id, "night": p.record.night.isoformat(),  # noqa: E731
                       "phase_d": round(p.phase_d, 4), "setup": p.choice.setup}
    out = {"useful_nights": len(useful), "sites": sites, "setups": setups,
           "first_useful": point(useful[0]) if useful else None,
           "last_useful": point(useful[-1]) if useful else None}
    if not useful:
        counts = {}
        for p in plan.nights:
            counts[p.status] = counts.get(p.status, 0) + 1
        out["why_nothing"] = "; ".join(f"{STATUS_WORDS[k]} on {v} site-night(s)" for k, v in sorted(counts.items()))
    return out


# ---------------------------------------------------------------------------- documents and tables
SCORE_DEFINITION = ("score = N_clear_strong x S/N_window: the number of strong features (tau_sobolev >= "
                    f"{STRONG_TAU:g}) the setup sees clear, times the S/N per resolution element reachable in the "
                    "usable time at the reference feature's trough (the clear strong feature with the best S/N); "
                    "only setups reaching the target S/N are eligible; ties go to the shorter exposure")


def _r(value, digits: int = 4):
    return None if value is None else round(float(value), digits)


def outcome_summary(o: SetupOutcome) -> dict:
    return {"setup": o.setup, "aperture_m": o.aperture_m, "n_strong": o.n_strong, "n_clear_strong": o.n_clear,
            "strong_features": list(o.strong), "clear_features": list(o.clear), "feature": o.feature,
            "species": o.species, "trough_obs_A": _r(o.trough_obs_A, 2), "tau_sobolev": _r(o.tau_sobolev, 4),
            "snr_window": _r(o.snr, 3), "time_for_target_s": _r(o.time_for_target_s, 1), "nexp": o.nexp,
            "exposure_s": _r(o.exposure_s, 1), "reaches_target": bool(o.reaches_target),
            "score": _r(o.score, 3), "verdict": o.verdict}


def night_summary(p: NightPlan) -> dict:
    doc = p.record.summary()
    doc["status"], doc["reason"] = p.status, p.reason
    w = p.window
    doc["epoch"] = None if w is None else {
        "phase_d": _r(p.phase_d, 5), "utc": iso(w.best_time), "window_index": p.window_index,
        "window_start_utc": iso(w.start), "window_end_utc": iso(w.end), "window_hours": _r(w.hours, 4),
        "hours_available": _r(p.hours_available, 4), "airmass": _r(forecast_airmass(w), 4),
        "altitude_deg": _r(w.best_altitude_deg, 3), "moon_illumination": _r(w.moon_illumination, 4),
        "moon_sep_deg": _r(w.moon_sep_deg, 3), "moon_altitude_deg": _r(w.moon_altitude_deg, 3),
        "photosphere": {k: (_r(v, 6) if k.endswith("_c") or k.endswith("_d") else v)
                        for k, v in p.photosphere.items()}}
    doc["setups"] = [outcome_summary(o) for o in p.outcomes]
    c = p.choice
    doc["choice"] = None if c is None else {
        "setup": c.setup, "score": _r(c.score, 3), "feature": c.feature, "species": c.species,
        "trough_obs_A": _r(c.trough_obs_A, 2), "snr": _r(c.snr, 3), "time_for_target_s": _r(c.time_for_target_s, 1),
        "nexp": c.nexp, "exposure_s": _r(c.exposure_s, 1), "n_clear_strong": c.n_clear, "n_strong": c.n_strong}
    return doc


def iso(t):
    from kncast.planner.output import iso_utc

    return iso_utc(t)


def plan_document(plan: Plan, files: dict | None = None, references=None, assumptions=None) -> dict:
    """The ``plan.json`` document (schema in ``kncast.planner.plan.schema`` and docs/json.md, section "plan")."""
    from kncast.planner.output import document
    from kncast.planner.plan.report import CAUTIONS

    sites = [{"id": s.id, "name": s.name, "latitude_deg": s.latitude_deg, "longitude_deg": s.longitude_deg,
              "elevation_m": s.elevation_m, "setups": [sid for sid in plan.settings["setups"]
                                                       if sid.split("/")[0] == s.id]} for s in plan.sites]
    return document("plan", event=plan.event.summary(), settings=dict(plan.settings, score=SCORE_DEFINITION),
                    model=plan.model, sites=sites, nights=[night_summary(p) for p in plan.nights],
                    campaign=plan.campaign, candidates=[c.summary() for c in plan.candidates], files=files or {}, assumptions=list(assumptions or []),
                    references=list(references or []), cautions=list(CAUTIONS))
