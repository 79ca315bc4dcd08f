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
3. the feature forecast (windows, Sobolev tau, coverage) of every epoch in
   every setup, in one call (:mod:`kncast.forecast.features`);
4. per epoch, setup and feature: what the observer will measure in the usable
   time (:mod:`kncast.planner.measure`, :mod:`kncast.forecast.detect`): the
   trough's arm, the continuum S/N per velocity bin, the expected depth, the
   detection significance and the time to reach the target significance, one
   batched evaluation per site.

Decisions rest on what is measured (the rule in words: :func:`choice_rule`):
a night and setup are useful when at least one diagnostic feature (the
chosen ``features``, or every feature whose expected depth is at least
``min_depth`` at that epoch) reaches ``sigma`` in the usable time; the chosen
setup detects the most diagnostic features, ties going to the one whose best
feature reaches ``sigma`` soonest.  The reason names the feature, its trough,
arm and significance.  Usable time = min(window hours, ``max_hours``) minus
the acquisition and readout overhead.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kncast.planner.errors import ParameterError

from kncast.forecast.defaults import (CORRECTABLE_TRANSMISSION, DEFAULT_BIN_KMS, DEFAULT_MAX_EXPOSURE_S,
                                      DEFAULT_MIN_DEPTH, DEFAULT_SIGMA, SNR_BASIS)
from kncast.planner.observation import batched_conditions, forecast_airmass
from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED

__all__ = ["build_plan", "Plan", "NightPlan", "SetupOutcome", "plan_document", "score", "choose",
           "campaign_summary", "MAG_BANDS"]

DEFAULT_SNR = 10.0
DEFAULT_MAX_HOURS = 4.0
DEFAULT_OVERHEAD_S = 900.0
MAG_BANDS = ("bessell-R", "bessell-I", "twomass-J")  # model AB magnitudes quoted per epoch (speclite names)
CLASSIFICATION_DAYS = 1.0   # a window within the first day after t0 may be kept as a classification epoch
CLASSIFICATION_A = 6000.0   # where its continuum S/N is judged, vacuum A, unless snr_at_A is given

STATUS_WORDS = {
    "observe": "observe",
    "no-window": "no window",
    "no-spectrograph": "no spectrograph at this site",
    "too-short": "window too short",
    "hidden": "only hidden features",
    "no-targets": "no diagnostic features",
    "too-faint": "too faint",
}


@dataclass
class SetupOutcome:
    """What one setup measures at one epoch: its best diagnostic trough and the features it detects.

    Significances in sigma; S/N per velocity bin; times in seconds.
    """

    setup: str
    aperture_m: float
    telescope: str = ""                            # SITE/TELESCOPE: the choice is made per telescope
    targets: list = field(default_factory=list)    # diagnostic feature ids, best measured first
    detected: list = field(default_factory=list)   # targets at or above the target significance
    features: list = field(default_factory=list)   # per-feature records (kncast.planner.measure.feature_record)
    feature: str | None = None                     # reference: the best-measured diagnostic trough
    species: str | None = None
    words: str = ""                                # e.g. "Sr II 10039 A"
    trough_obs_A: float | None = None
    arm: str | None = None
    tau_sobolev: float | None = None
    depth: float | None = None
    snr_bin: float | None = None                   # continuum S/N per velocity bin at the trough, usable time
    significance: float | None = None              # in the usable time
    time_to_sigma_s: float | None = None
    nexp: int | None = None
    exposure_s: float | None = None                # length of each exposure
    detects: bool = False
    snr_at: float | None = None                    # plain continuum S/N per resolution element at snr_at_A
    score: float = 0.0
    verdict: str = ""


@dataclass
class NightPlan:
    """One site and local night: the window used, the epoch, every setup's outcome, the choice."""

    record: object                 # kncast.planner.visibility.core.NightRecord
    window_index: int | None = None
    phase_d: float | None = None
    hours_available: float = 0.0   # min(window, max_hours) - overhead, h
    photosphere: dict = field(default_factory=dict)
    outcomes: list = field(default_factory=list)
    choice: SetupOutcome | None = None             # the best of ``choices``
    choices: list = field(default_factory=list)    # the chosen setup of each telescope that is useful, best first
    detected: list = field(default_factory=list)   # feature ids the chosen setup detects
    ensemble: dict | None = None                   # percentiles over the draws (kncast.planner.plan.ensemble)
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
    blocks: list = field(default_factory=list)      # kncast.planner.plan.blocks.Block, one per chosen telescope and night
    ensemble: dict = field(default_factory=dict)    # draws summary (kncast.planner.plan.ensemble)
    forecast: object = None                         # the feature forecast of the planned epochs (FeatureForecast)

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


def check_detection(sigma, bin_kms, min_depth, snr_at_A) -> None:
    """Ranges of the detection settings (ParameterError naming the parameter)."""
    if not (math.isfinite(sigma) and 0.0 < sigma <= 100.0):
        raise ParameterError("sigma", sigma, "a significance in (0, 100]")
    if not (math.isfinite(bin_kms) and 10.0 <= bin_kms <= 30000.0):
        raise ParameterError("bin_kms", bin_kms, "km/s in [10, 30000]")
    if not (math.isfinite(min_depth) and 0.0 <= min_depth < 1.0):
        raise ParameterError("min_depth", min_depth, "a depth in [0, 1)")
    if snr_at_A is not None and not (math.isfinite(snr_at_A) and 1000.0 <= snr_at_A <= 60000.0):
        raise ParameterError("snr_at_A", snr_at_A, "a vacuum wavelength in [1000, 60000] A")


def build_plan(event, sites, nights: int = 7, snr_target: float = DEFAULT_SNR,
               max_hours: float = DEFAULT_MAX_HOURS, overhead_s: float = DEFAULT_OVERHEAD_S,
               twilight: str = "nautical", registry=None, model=None, overrides=None,
               progress=None, sigma: float = DEFAULT_SIGMA, bin_kms: float = DEFAULT_BIN_KMS,
               features=None, min_depth: float = DEFAULT_MIN_DEPTH, snr_at_A: float | None = None,
               telluric_threshold: float = CORRECTABLE_TRANSMISSION, setups=None, min_altitude_deg=None,
               max_airmass=None, min_moon_sep_deg=None, start_date=None, anchors=None,
               draws: int = DEFAULT_DRAWS, seed: int | None = DEFAULT_SEED, ready=None) -> Plan:
    """Plan spectroscopy of ``event`` from ``sites`` over ``nights`` local nights after t0.

    A night is useful when a diagnostic feature reaches ``sigma`` (detection significance of its
    trough, continuum S/N per ``bin_kms`` km/s bin); ``features`` (feature ids) picks the
    diagnostic features, by default every one whose expected depth is at least ``min_depth``.
    ``snr_at_A`` (vacuum A) adds a plain continuum S/N per resolution element there, reported
    beside the verdict; ``snr_target`` is the continuum S/N quoted with it, and the one a classification
    spectrum in the first day must reach (at ``snr_at_A``, or ``CLASSIFICATION_A``) when no feature is
    detected yet.  ``setups`` (ids) restricts the setups; ``min_altitude_deg``, ``max_airmass``,
    ``min_moon_sep_deg`` and ``start_date`` are the night rules of
    :func:`kncast.planner.visibility.core.compute_visibility`.  ``anchors`` ((band, AB mag, phase_d)
    items) rescale the photosphere model to measured photometry first (:mod:`kncast.forecast.anchor`).
    ``draws`` realisations of the distance and of the ``[model]`` ranges (:mod:`kncast.planner.plan.ensemble`;
    0: none) give every night 16/50/84 percentiles and the fraction of draws in which it is useful.  ``max_hours`` caps the time per
    night (h); ``overhead_s`` is the acquisition + readout overhead per night
    (s).  ``registry`` (a SiteRegistry) supplies the setups; by default the
    registry of the given sites.  ``model``/``overrides`` choose the
    photosphere model.  ``progress(step_text)`` is called before each step.  ``ready(part, value)`` is
    called as parts become final, for work that can start early (the figures): ``("visibility",
    VisibilityResult)`` once the windows are computed, ``("choices", Plan)`` once every night's outcomes
    and choice are (the ensemble, the campaign summary, the candidates and the blocks follow).
    """
    from kncast.planner.setups import all_setups
    from kncast.planner.source import transient_for_event
    from kncast.planner.visibility.core import compute_visibility

    check_settings(snr_target, max_hours, overhead_s, nights)
    check_detection(sigma, bin_kms, min_depth, snr_at_A)
    if not (math.isfinite(telluric_threshold) and 0.0 <= telluric_threshold <= 1.0):
        raise ParameterError("telluric_threshold", telluric_threshold, "a transmission in [0, 1]")
    say = progress or (lambda text: None)
    sites = list({s.id: s for s in sites}.values())  # each site once, in the order given
    say("visibility windows")
    rules = {"min_altitude_deg": min_altitude_deg, "max_airmass": max_airmass,
             "min_moon_sep_deg": min_moon_sep_deg, "start_date": start_date}
    vis = compute_visibility(event, sites, nights=nights, twilight=twilight, **rules)
    tell = ready or (lambda part, value: None)
    tell("visibility", vis)
    say("photosphere")
    transient = transient_for_event(event, model=model, overrides=overrides)
    anchoring = None
    if anchors:
        from kncast.forecast.anchor import anchor_transient

        anchoring = anchor_transient(transient, anchors)
        transient = anchoring.transient
    site_ids = {s.id for s in sites}
    refs = [r for r in all_setups(registry if registry is not None else sites_registry(sites))
            if r.site.id in site_ids]
    refs = restrict_setups(refs, setups)
    settings = {"nights": int(nights), "twilight": twilight, "snr_target": float(snr_target),
                "snr_per": SNR_BASIS.removeprefix("per "), "max_hours": float(max_hours), "overhead_s": float(overhead_s),
                "sites": [s.id for s in sites], "setups": [r.id for r in refs],
                "target": event.targets()[0].id, "mag_bands": list(MAG_BANDS), "sigma": float(sigma),
                "bin_kms": float(bin_kms), "min_depth": float(min_depth),
                "features": list(features) if features else None,
                "snr_at_A": None if snr_at_A is None else float(snr_at_A),
                "telluric_threshold": float(telluric_threshold),
                "night_rules": {k: (str(v) if k == "start_date" and v is not None else v) for k, v in rules.items()},
                "classification_A": float(snr_at_A) if snr_at_A is not None else CLASSIFICATION_A,
                "classification_days": CLASSIFICATION_DAYS, "draws": int(draws), "seed": seed,
                "model_overridden": bool(model or overrides)}
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
    if anchoring is not None:
        plan.model["anchoring"] = anchoring.to_dict()
    say("line features")
    by_site = {}
    for r in refs:
        by_site.setdefault(r.site.id, []).append(r)
    evaluate_setups(plan, epochs, by_site, say)
    for p in plans:
        choose(p, settings, overhead_s)
    tell("choices", plan)
    if draws:
        say("ensemble")
        _apply_ensemble(plan, epochs, by_site, draws, seed)
    plan.campaign = campaign_summary(plan)
    if event.candidates:
        from kncast.planner.visibility.candidates import rank_candidates

        say("ranking candidates")
        plan.candidates = rank_candidates(event, sites, nights=nights, twilight=twilight, ephemeris=vis.ephemeris,
                                          **rules)
    from kncast.planner.plan.blocks import plan_blocks

    plan.blocks = plan_blocks(plan)
    return plan


def _apply_ensemble(plan: Plan, epochs: list, by_site: dict, draws: int, seed) -> None:
    """Percentiles and the useful fraction of every planned night from ``draws`` realisations of the source."""
    from kncast.planner.plan.ensemble import run_ensemble

    if not epochs or not any(by_site.values()):
        return
    ens = run_ensemble(plan, epochs, by_site, draws, seed, MAG_BANDS, feature_forecast)
    plan.ensemble = {k: v for k, v in ens.items() if k != "nights"}
    for p in epochs:
        p.ensemble = ens["nights"][id(p)]
        if p.choice is not None:
            p.reason += f"; useful in {100 * p.ensemble['useful_fraction']:.0f}% of {draws} draws"


def restrict_setups(refs: list, setups) -> list:
    """Only the setups named in ``setups`` (ids; unknown ids suggest the closest), or all of them."""
    if not setups:
        return refs
    from kncast.planner.errors import UnknownNameError

    known = {r.id: r for r in refs}
    for sid in setups:
        if sid not in known:
            raise UnknownNameError("setup", sid, known)
    return [r for r in refs if r.id in set(setups)]


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
def evaluate_setups(plan: Plan, epochs: list, by_site: dict, say) -> None:
    """Fill ``NightPlan.outcomes`` for every epoch and every setup at its site.

    Features: one :func:`kncast.forecast.features.forecast_features` call for all epochs x all
    setups (airmass and water vapour per epoch).  Measurements: per site, one batched
    :func:`kncast.planner.measure.measure` for all its epochs and setups (the usable time of each
    epoch, its airmass and Moon), at the trough of every feature.
    """
    from kncast.planner.measure import measure_sites

    refs = [r for site_refs in by_site.values() for r in site_refs]
    if not epochs or not refs:
        return
    fc = plan.forecast = feature_forecast(plan, epochs, refs)
    say("exposure times")
    st = plan.settings
    for site_id, site_refs, rows, _seconds, m in measure_sites(plan, fc, epochs, by_site, refs, plan.transient):
        targets = _targets(m, fc, st)
        for k, i in enumerate(rows):
            p = epochs[i]
            p.outcomes = [_outcome(plan, p, fc, m, targets, k, j, ref) for j, ref in enumerate(site_refs)]
            if st.get("snr_at_A") is not None or p.phase_d < CLASSIFICATION_DAYS:
                _continuum_at(plan, p, site_refs, plan.atmospheres[site_id], st["classification_A"])


def _targets(m, fc, st) -> np.ndarray:
    from kncast.planner.measure import diagnostic_mask

    return diagnostic_mask(m, st.get("features"), [f.id for f in fc.features], st["min_depth"])


def site_conditions(site):
    """The Atmosphere of a site: its ``[atmosphere]`` table or the defaults."""
    from kncast.forecast.extinction_atm import atmosphere_for_site

    return atmosphere_for_site(site)


def feature_forecast(plan: Plan, epochs: list, refs: list, transient=None):
    """The feature forecast at every epoch for every setup (airmass, PWV of each epoch's night), for the
    plan's transient or ``transient`` (an ensemble node)."""
    from kncast.forecast.features import forecast_features
    from kncast.forecast.tellurics import TelluricModel

    phases = np.array([p.phase_d for p in epochs])
    airmass = np.array([forecast_airmass(p.window) for p in epochs])[:, None, None]
    if plan.tellurics is None:
        plan.tellurics = TelluricModel.load()
        plan.atmospheres = {s.id: site_conditions(s) for s in plan.sites}
    pwv = np.array([plan.atmospheres[p.site.id].pwv_mm for p in epochs])[:, None, None]
    return forecast_features(transient or plan.transient, phases, setups=[r.setup for r in refs],
                             tellurics=plan.tellurics, airmass=airmass, pwv_mm=pwv, setup_ids=[r.id for r in refs])


def _outcome(plan: Plan, p: NightPlan, fc, m, targets, k: int, j: int, ref) -> SetupOutcome:
    """What setup ``ref`` (column ``j`` of ``m``) measures at the epoch of row ``k``."""
    from kncast.planner.measure import feature_record, feature_words

    sigma = plan.settings["sigma"]
    o = SetupOutcome(setup=ref.id, aperture_m=ref.telescope.aperture_m, telescope=f"{ref.site.id}/{ref.telescope.id}")
    o.features = [feature_record(m, k, f, j, fc.features[f]) for f in range(len(fc.features))]
    plan.features.extend(_feature_rows(p, ref.id, rec, targets[k, f]) for f, rec in enumerate(o.features))
    idx = [f for f in np.argsort(-m.significance[k, :, j], kind="stable") if targets[k, f]]
    o.targets = [fc.features[f].id for f in idx]
    if p.hours_available <= 0:
        o.verdict = "no usable time"
        return o
    o.detected = [fc.features[f].id for f in idx if m.significance[k, f, j] >= sigma]
    seen = [f for f in idx if m.usable_trough[k, f, j] > 0]
    if seen:
        f = seen[0]
        rec = o.features[f]
        o.feature, o.species, o.words = rec["id"], rec["species"], feature_words(fc.features[f])
        o.trough_obs_A, o.arm, o.depth = rec["trough_A"], rec["arm"], rec["depth"]
        o.snr_bin, o.significance = rec["snr_bin"], rec["significance"]
        o.tau_sobolev = float(fc.tau[m.rows[k], f])
        t = float(m.time_to_sigma_s[k, f, j])
        if np.isfinite(t):
            o.time_to_sigma_s, o.nexp = t, int(m.nexp_to_sigma[k, f, j])
            o.exposure_s = t / o.nexp
    o.detects = bool(o.detected)
    o.verdict = _verdict(o)
    return o


def _feature_rows(p: NightPlan, setup_id: str, rec: dict, target: bool) -> dict:
    """One row of features.ecsv: the feature record of one setup at one epoch."""
    return {"site": p.site.id, "night": p.record.night.isoformat(), "phase_d": p.phase_d, "setup": setup_id,
            **rec, "target": bool(target)}


def _continuum_at(plan: Plan, p: NightPlan, refs: list, atm, wavelength_A: float) -> None:
    """The plain continuum S/N per resolution element at ``wavelength_A`` in the usable time, per setup."""
    from kncast.forecast import exposure

    lam = np.array([wavelength_A])
    cond = batched_conditions([p.window], atm)
    seconds = max(p.hours_available, 0.0) * 3600.0
    if seconds <= 0:
        return
    flux = plan.transient.flux_flam(np.array([p.phase_d]), lam)
    tell = plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm)
    for o, ref in zip(p.outcomes, refs):
        grid = exposure.setup_grid(ref.telescope, ref.instrument, ref.setup, wavelength_A=lam)
        r = exposure.rates(flux, grid, cond, tell)
        nexp = max(1, int(np.ceil(seconds / DEFAULT_MAX_EXPOSURE_S - 1e-9)))
        res = exposure.expose(r, seconds, nexp)
        o.snr_at = float(res.snr_per_resel.ravel()[0]) if bool(r.on_detector.ravel()[0]) else None


def _verdict(o: SetupOutcome) -> str:
    if not o.targets:
        return "no diagnostic features"
    if o.feature is None:
        return "no usable time" if not o.features or o.detected is None else "only hidden features"
    return "detects" if o.detected else "too faint"


# ---------------------------------------------------------------------------- choice
def score(outcome: SetupOutcome) -> float:
    """The number of diagnostic features the setup detects at the target significance in the usable time."""
    return float(len(outcome.detected or ()))


def choose(p: NightPlan, settings: dict, overhead_s: float) -> None:
    """Pick the setup that detects the most diagnostic features and say why, in words.

    Among setups detecting as many, the one whose best feature reaches the target significance
    soonest wins (then the higher significance).
    """
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
    p.choices = per_telescope([o for o in p.outcomes if o.score > 0], _rank_key)
    if p.choices:
        best = p.choices[0]
        p.choice, p.status = best, "observe"
        p.detected = list(best.detected)
        p.reason = choice_words(best, p.hours_available, settings["sigma"])
        return
    if _classification(p, settings):
        return
    p.reason = "nothing useful, " + failure_words(p, settings["sigma"])


def _rank_key(o: SetupOutcome):
    return (o.score, -(o.time_to_sigma_s or math.inf), o.significance or 0.0)


def per_telescope(outcomes: list, key) -> list:
    """The best outcome (by ``key``) of each telescope, best first."""
    best: dict = {}
    for o in outcomes:
        if o.telescope not in best or key(o) > key(best[o.telescope]):
            best[o.telescope] = o
    return sorted(best.values(), key=key, reverse=True)


def _classification(p: NightPlan, settings: dict) -> bool:
    """Within the first ``CLASSIFICATION_DAYS`` with nothing detected yet: keep the night as a classification
    spectrum when the continuum S/N per resolution element reaches ``snr_target`` at the classification
    wavelength in the usable time (the first spectrum a team wants, before any line is expected strong)."""
    if p.phase_d is None or p.phase_d >= CLASSIFICATION_DAYS:
        return False
    target = settings["snr_target"]
    ok = [o for o in p.outcomes if o.snr_at is not None and o.snr_at >= target]
    p.choices = per_telescope(ok, lambda o: o.snr_at)
    if not p.choices:
        return False
    best = p.choice = p.choices[0]
    p.status = "observe"
    p.reason = (f"{best.setup}: classification spectrum: continuum S/N {best.snr_at:.0f} per resolution element at "
                f"{settings['classification_A']:.0f} A in {p.hours_available:.1f} h (target {target:g}); no "
                f"diagnostic feature reaches {settings['sigma']:g} sigma yet")
    return True


def choice_words(o: SetupOutcome, hours: float, sigma: float) -> str:
    """'X: Sr II 10039 A trough at 8430 A (red arm): 7.2 sigma in 1.9 h; 5 sigma needs 1 x 1200 s; 3 features detected'"""
    arm = f" ({o.arm} arm)" if o.arm else ""
    words = (f"{o.setup}: {o.words} trough at {o.trough_obs_A:.0f} A{arm}: {o.significance:.1f} sigma in "
             f"{hours:.1f} h")
    if o.nexp and o.exposure_s:
        words += f"; {sigma:g} sigma needs {o.nexp} x {o.exposure_s:.0f} s"
    n = len(o.detected)
    return words + (f"; {n} of {len(o.targets)} diagnostic features at >= {sigma:g} sigma" if n > 1 else "")


def failure_words(p: NightPlan, sigma: float) -> str:
    """Why no setup is useful: no diagnostic feature, only hidden ones, or too faint (with the best figure)."""
    if all(not o.targets for o in p.outcomes):
        p.status = "no-targets"
        return "no diagnostic feature is expected to be deep enough at this epoch"
    seen = [o for o in p.outcomes if o.feature is not None]
    if not seen:
        p.status = "hidden"
        return ("only hidden features: every diagnostic trough falls outside coverage, in a detector gap, "
                "in an opaque telluric band or below the atmospheric cut-off for every setup here")
    best = max(seen, key=lambda o: o.significance or 0.0)
    p.status = "too-faint"
    return (f"too faint: at best {best.significance or 0:.1f} sigma (target {sigma:g}) with {best.setup} at the "
            f"{best.words} trough ({best.trough_obs_A:.0f} A) in the usable {p.hours_available:.1f} h")


# ---------------------------------------------------------------------------- campaign
def campaign_summary(plan: Plan) -> dict:
    """Per site the useful epochs and last useful night; per setup when it stops detecting anything."""
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
        reach = [r for r in rows if r[2].detected]
        last_ok = reach[-1][0] if reach else None
        later = [r for r in rows if last_ok is None or r[0] > last_ok]
        faint = next((r for r in later if r[2].significance is not None), None) if later else None
        measured = [r for r in rows if r[2].significance is not None]
        if not measured:
            note = "never measures a diagnostic trough with usable time"
        elif last_ok is None:
            note = "never detects a diagnostic feature at the target significance"
        elif faint is None:
            note = "still detects at its last epoch"
        else:
            note = f"detects nothing from day {faint[0]:.2f} on"
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
def choice_rule(sigma: float, min_depth: float, bin_kms: float) -> str:
    """The setup-choice rule in words (plan.json settings.score; quoted by the report)."""
    return (f"a night and setup are useful when at least one diagnostic feature (by default every feature whose "
            f"expected depth (1 - W)(1 - exp(-tau)) is at least {min_depth:g}) is detected at >= {sigma:g} sigma in the "
            f"usable time, significance = depth x continuum S/N per {bin_kms:g} km/s bin at the trough x sqrt(bins "
            f"across the usable trough); the chosen setup detects the most diagnostic features, ties going to the "
            f"one whose best feature reaches {sigma:g} sigma soonest")


def _r(value, digits: int = 4):
    return None if value is None else round(float(value), digits)


def _sig(value, digits: int):
    """``value`` with every float (in nested dicts and lists) rounded to ``digits`` significant digits."""
    if isinstance(value, dict):
        return {k: _sig(v, digits) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_sig(v, digits) for v in value]
    if isinstance(value, (float, np.floating)):
        return float(f"{float(value):.{digits}g}")
    return value


SIG_PHOTOSPHERE = 6  # significant digits of plan.json's photosphere values (model estimates; lightcurve agrees to 1e-4)
SIG_ENSEMBLE = 4     # significant digits of the percentiles over the draws (a few hundred draws: 3 are meaningful)


def reference_summary(o: SetupOutcome | None, sigma: float) -> dict | None:
    """What a verdict rests on: the best-measured diagnostic trough of the setup."""
    if o is None or o.feature is None:
        return None
    return {"setup": o.setup, "feature": o.feature, "species": o.species, "trough_A": _r(o.trough_obs_A, 1),
            "arm": o.arm or None, "depth": _r(o.depth, 4), "snr_bin": _r(o.snr_bin, 3),
            "significance": _r(o.significance, 3), "sigma_target": sigma,
            "basis": "detection significance of the absorption trough in the usable time"}


def outcome_summary(o: SetupOutcome) -> dict:
    return {"setup": o.setup, "aperture_m": o.aperture_m, "n_targets": len(o.targets),
            "n_detected": len(o.detected or ()), "targets": list(o.targets), "detected": list(o.detected or ()),
            "feature": o.feature, "species": o.species, "trough_obs_A": _r(o.trough_obs_A, 2), "arm": o.arm or None,
            "tau_sobolev": _r(o.tau_sobolev, 4), "depth": _r(o.depth, 4), "snr_bin": _r(o.snr_bin, 3),
            "significance": _r(o.significance, 3), "time_to_sigma_s": _r(o.time_to_sigma_s, 1), "nexp": o.nexp,
            "exposure_s": _r(o.exposure_s, 1), "detects": bool(o.detected), "snr_at": _r(o.snr_at, 3),
            "score": _r(o.score, 3), "verdict": o.verdict,
            "features": [f for f in o.features if f["id"] in o.targets or f["arm"]]}


def night_summary(p: NightPlan, sigma: float) -> dict:
    doc = p.record.summary()
    doc["status"], doc["reason"] = p.status, p.reason
    w = p.window
    doc["epoch"] = None if w is None else {
        "phase_d": _r(p.phase_d, 5), "utc": iso(w.best_time), "window_index": p.window_index,
        "window_start_utc": iso(w.start), "window_end_utc": iso(w.end), "window_hours": _r(w.hours, 4),
        "hours_available": _r(p.hours_available, 4), "airmass": _r(forecast_airmass(w), 4),
        "altitude_deg": _r(w.best_altitude_deg, 3), "moon_illumination": _r(w.moon_illumination, 4),
        "moon_sep_deg": _r(w.moon_sep_deg, 3), "moon_altitude_deg": _r(w.moon_altitude_deg, 3),
        "photosphere": {k: (_r(v, 6) if k.endswith("_c") or k.endswith("_d") else _sig(v, SIG_PHOTOSPHERE))
                        for k, v in p.photosphere.items()}}
    doc["setups"] = [outcome_summary(o) for o in p.outcomes]
    c = p.choice
    seen = [o for o in p.outcomes if o.feature is not None]
    doc["detected"] = list(c.detected) if c is not None else []
    doc["reference"] = reference_summary(c if c is not None else
                                         (max(seen, key=lambda o: o.significance or 0.0) if seen else None), sigma)
    doc["choice"] = None if c is None else {
        "setup": c.setup, "score": _r(c.score, 3), "feature": c.feature, "species": c.species,
        "trough_obs_A": _r(c.trough_obs_A, 2), "arm": c.arm or None, "significance": _r(c.significance, 3),
        "snr_bin": _r(c.snr_bin, 3), "time_to_sigma_s": _r(c.time_to_sigma_s, 1), "nexp": c.nexp,
        "exposure_s": _r(c.exposure_s, 1), "n_detected": len(c.detected), "n_targets": len(c.targets),
        "detected": list(c.detected), "telescope": c.telescope,
        "kind": "detection" if c.detected else "classification", "snr_at": _r(c.snr_at, 3)}
    doc["ensemble"] = _sig(p.ensemble, SIG_ENSEMBLE)
    doc["choices"] = [{"telescope": o.telescope, "setup": o.setup, "score": _r(o.score, 3),
                       "feature": o.feature, "significance": _r(o.significance, 3), "detected": list(o.detected),
                       "kind": "detection" if o.detected else "classification"} for o in p.choices]
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
    from kncast.planner.plan.blocks import block_records

    return document("plan", event=plan.event.summary(), settings=dict(plan.settings, score=choice_rule(
                        plan.settings["sigma"], plan.settings["min_depth"], plan.settings["bin_kms"])),
                    model=plan.model, sites=sites, nights=[night_summary(p, plan.settings["sigma"]) for p in plan.nights],
                    campaign=plan.campaign, candidates=[c.summary() for c in plan.candidates], files=files or {}, assumptions=list(assumptions or []),
                    references=list(references or []), cautions=list(CAUTIONS),
                    blocks=block_records(plan, plan.blocks), ensemble=_sig(plan.ensemble, SIG_ENSEMBLE) or None)
