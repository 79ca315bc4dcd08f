"""One setup on one night: the observing conditions, the strong features and the S/N spectrum.

Both ``kncast exposure`` and the campaign plan (its S/N figures) go through
:func:`observe`; the plan's batched evaluation of every epoch and setup uses the
same conditions (:func:`batched_conditions`) and the same strong-feature rule
(:func:`kncast.forecast.features.strong_mask`).

Conditions are a plain dict (airmass, seeing, Moon, water vapour, the site
atmosphere, where the values came from) so that they print and serialise as
they are; :func:`forecast_conditions` turns them into
:class:`kncast.forecast.exposure.Conditions`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S, STRONG_TAU
from kncast.planner.errors import InputError, ParameterError, UnknownNameError

DEFAULT_MOON_ALT_DEG = 45.0   # Moon altitude assumed when only its phase and separation are given
MAX_TIME_S = 1e6              # longest total integration considered, s
REFERENCE_A = (3600.0, 4500.0, 5500.0, 6500.0, 8000.0, 10000.0, 12500.0, 16500.0, 22000.0)
DEFAULT_SAMPLES = 300
MAX_PHASE_D = 100.0           # latest epoch an observation is computed for, observer-frame days
DARK_SKY_MODEL = "model: dark sky (Benn & Ellison 1998) + moonlight (Krisciunas & Schaefer 1991)"

__all__ = ["Request", "Given", "night_conditions", "window_conditions", "batched_conditions",
           "forecast_conditions", "observe", "strong_features", "best_window", "moon_at", "forecast_airmass",
           "DEFAULT_MOON_ALT_DEG", "MAX_TIME_S", "REFERENCE_A", "DEFAULT_SAMPLES"]


@dataclass(frozen=True)
class Request:
    """What to compute for one setup at one epoch.

    ``phase_d``: observer-frame days since t0.  Give ``time_s`` (total, s; ``nexp`` optional) or
    ``snr_target`` (per resolution element, reached at ``at``: a feature id or a vacuum wavelength
    in A as text; default the strongest feature's trough).  ``max_exposure_s`` caps each exposure.
    """

    phase_d: float
    time_s: float | None = None
    nexp: int | None = None
    snr_target: float | None = None
    at: str | None = None
    max_exposure_s: float = DEFAULT_MAX_EXPOSURE_S
    ideal: bool = False
    profile: str = "moffat"
    samples: int = DEFAULT_SAMPLES
    draws: int = 0                      # realisations of the source for 16/50/84 percentiles (0: none)
    seed: int | None = 1
    model_overridden: bool = False      # model options replaced the event's [model]: its ranges are not drawn


@dataclass(frozen=True)
class Given:
    """Conditions fixed by the user (None: from the site and the planner's best window of that night).

    Airmass; zenith seeing FWHM at 5000 A (arcsec); Moon illuminated fraction, separation (deg) and
    altitude (deg); precipitable water vapour (mm).
    """

    airmass: float | None = None
    seeing_arcsec: float | None = None
    moon_illumination: float | None = None
    moon_sep_deg: float | None = None
    moon_altitude_deg: float | None = None
    pwv_mm: float | None = None


# ------------------------------------------------------------------ conditions
def night_conditions(event, site, phase_d: float, given: Given = Given(), ideal: bool = False) -> dict:
    """Airmass, seeing, Moon and water vapour: ``given`` first, then the best window of the night of
    ``t0 + phase_d`` at ``site`` (the lowest airmass of its windows), then the site's atmosphere."""
    from kncast.forecast.extinction_atm import atmosphere_for_site

    atm = atmosphere_for_site(site)
    cond = {"airmass": given.airmass,
            "seeing_arcsec": given.seeing_arcsec if given.seeing_arcsec is not None else atm.seeing_arcsec,
            "moon_illumination": given.moon_illumination, "moon_sep_deg": given.moon_sep_deg,
            "moon_altitude_deg": None, "pwv_mm": given.pwv_mm if given.pwv_mm is not None else atm.pwv_mm,
            "source": "options", "window": None, "atmosphere": atm}
    if given.moon_illumination is not None:
        cond["moon_altitude_deg"] = (given.moon_altitude_deg if given.moon_altitude_deg is not None
                                     else DEFAULT_MOON_ALT_DEG)
    if ideal or (given.airmass is not None and given.moon_illumination is not None):
        if ideal:
            cond["source"] = "ideal (no atmosphere, no sky)"
        return cond
    night, window = best_window(event, site, phase_d)
    if window is None:
        if given.airmass is None:
            raise ParameterError(
                "airmass", also=("moon_illumination", "moon_sep_deg"),
                message=f"no observing window for {event.id} from {site.id} on the night of phase {phase_d:g} d "
                        f"({night.note if night is not None else 'no night found'}); give {{airmass}} (and "
                        f"{{moon_illumination}}/{{moon_sep_deg}}) to compute anyway")
        if given.moon_illumination is None:
            cond.update(moon_at(event, site, event.t0.mjd + phase_d),
                        source="options; Moon at t0 + phase (no window that night)")
        return cond
    if given.airmass is None:
        cond["airmass"] = forecast_airmass(window)
    if given.moon_illumination is None:
        cond.update(_window_moon(window))
    cond["source"] = f"best window of the night of {night.night.isoformat()} at {site.id}" + \
        (" (some values from options)" if given.airmass is not None or given.moon_illumination is not None else "")
    cond["window"] = window.summary()
    return cond


def window_conditions(window, atmosphere, night_label: str) -> dict:
    """The conditions of one planned window: its best airmass, the Moon at its best time, the site's
    seeing and water vapour (``atmosphere``: kncast.forecast.extinction_atm.Atmosphere)."""
    return {"airmass": forecast_airmass(window), "seeing_arcsec": atmosphere.seeing_arcsec, **_window_moon(window),
            "pwv_mm": atmosphere.pwv_mm, "source": f"planned window, {night_label}", "window": window.summary(),
            "atmosphere": atmosphere}


def _window_moon(window) -> dict:
    return {"moon_illumination": float(np.clip(window.moon_illumination, 0.0, 1.0)),
            "moon_sep_deg": float(np.clip(window.moon_sep_deg, 0.0, 180.0)),
            "moon_altitude_deg": float(np.clip(window.moon_altitude_deg, -90.0, 90.0))}


def forecast_airmass(window) -> float:
    """The window's best airmass (Kasten & Young 1989, >= 1) as the forecasts' plain float."""
    return float(window.best_airmass)


def forecast_conditions(cond: dict, ideal: bool = False, sky=None):
    """kncast.forecast.exposure.Conditions from a conditions dict (airmass 1 when none is known, e.g.
    in ideal mode); ``sky`` a user sky spectrum or None."""
    from kncast.forecast.exposure import Conditions
    from kncast.forecast.skybright import MoonGeometry

    moon = None
    if cond["moon_illumination"] is not None and not ideal:
        moon = MoonGeometry(cond["moon_illumination"], cond["moon_sep_deg"], cond["moon_altitude_deg"])
    airmass = cond["airmass"] if cond["airmass"] is not None else 1.0
    return Conditions(airmass=airmass, seeing_arcsec=cond["seeing_arcsec"], moon=moon, pwv_mm=cond["pwv_mm"],
                      atmosphere=cond["atmosphere"], sky=sky)


def batched_conditions(windows, atmosphere, index=None):
    """kncast.forecast.exposure.Conditions with one value per window (arrays (n_windows,), or picked by
    ``index``): best airmass and the Moon at the best time; the site's seeing, water vapour and
    atmosphere.  The batched form of :func:`window_conditions`."""
    from kncast.forecast.exposure import Conditions
    from kncast.forecast.skybright import MoonGeometry

    def values(get, lo=-np.inf, hi=np.inf):
        v = np.clip(np.array([float(get(w)) for w in windows]), lo, hi)
        return v if index is None else v[index]

    moon = MoonGeometry(illumination=values(lambda w: w.moon_illumination, 0.0, 1.0),
                        sep_deg=values(lambda w: w.moon_sep_deg, 0.0, 180.0),
                        altitude_deg=values(lambda w: w.moon_altitude_deg, -90.0, 90.0))
    return Conditions(airmass=values(forecast_airmass), seeing_arcsec=atmosphere.seeing_arcsec,
                      moon=moon, pwv_mm=atmosphere.pwv_mm, atmosphere=atmosphere)


def best_window(event, site, phase_d: float):
    """(NightRecord, Window with the lowest airmass) for the local night holding t0 + phase (noon to noon)."""
    from kncast.planner.visibility.core import compute_visibility

    nights = int(math.ceil(phase_d)) + 2
    result = compute_visibility(event, [site], nights=nights)
    t = result.t0_mjd + phase_d
    bounds = result.night_bounds_mjd[0]
    for k, rec in enumerate(result.for_site(site.id)):
        if bounds[k] <= t < bounds[k + 1]:
            if not rec.windows:
                return rec, None
            return rec, min(rec.windows, key=lambda w: w.best_airmass)
    return None, None


def moon_at(event, site, mjd: float) -> dict:
    """Moon illumination, separation from the target (deg) and altitude (deg) at ``mjd`` (UTC) at ``site``."""
    from kncast.planner.visibility import sky

    eph = sky.Ephemeris.build(mjd - 0.05, mjd + 0.05, [event.ra_deg], [event.dec_deg])
    sites = sky.SiteArrays.of([site])
    unit, alt = sky.moon_topocentric(eph, sites, np.array([mjd]))
    illum, _phase = sky.moon_illumination(eph, np.array([mjd]))
    sep = sky.separation_deg(unit, eph.target(np.broadcast_to(np.array([mjd]), (1, 1))))
    return {"moon_illumination": float(np.ravel(illum)[0]), "moon_sep_deg": float(np.ravel(sep)[0]),
            "moon_altitude_deg": float(np.ravel(alt)[0])}


# ------------------------------------------------------------------ features
def strong_features(transient, phase_d: float, ref, tellurics, airmass: float, pwv_mm: float) -> list[dict]:
    """Features with Sobolev tau >= STRONG_TAU at this epoch whose trough or emission peak falls in the
    setup's range, strongest first."""
    from kncast.forecast.features import forecast_features, strong_mask

    fc = forecast_features(transient, np.array([phase_d]), setups=[ref.setup], tellurics=tellurics,
                           airmass=airmass, pwv_mm=pwv_mm, setup_ids=[ref.id])
    strong = strong_mask(fc.tau)[0]
    lo, hi = ref.setup.min_A, ref.setup.max_A
    out = []
    for f in fc.rank[0]:
        trough, peak = float(fc.windows.trough_A[0, f]), float(fc.windows.emission_peak_A[0, f])
        if not strong[f] or not (lo <= trough <= hi or lo <= peak <= hi):
            continue
        out.append({"feature": fc.features[f].id, "species": fc.features[f].species,
                    "tau_sobolev": float(f"{float(fc.tau[0, f]):.4g}"), "trough_obs_A": round(trough, 1),
                    "emission_peak_obs_A": round(peak, 1),
                    "absorption_obs_A": [round(float(fc.windows.absorption_lo_A[0, f]), 1),
                                         round(float(fc.windows.absorption_hi_A[0, f]), 1)],
                    "coverage": round(float(fc.coverage[0, f, 0]), 4)})
    return out


# ------------------------------------------------------------------ the S/N spectrum
def observe(event, ref, transient, cond: dict, request: Request, sky_file=None, tellurics=None) -> dict:
    """Everything one setup gives at one epoch: S/N on the sample grid, at the strong features and at
    reference wavelengths, for the requested time or the time reaching the target S/N.

    ``ref`` a kncast.planner.setups.SetupRef; ``cond`` from :func:`night_conditions` or
    :func:`window_conditions`; ``tellurics`` a TelluricModel (default: the bundled bands; none when
    ``request.ideal``).
    """
    from kncast.forecast import exposure as ex

    conditions = forecast_conditions(cond, request.ideal, sky_file)
    if tellurics is None and not request.ideal:
        from kncast.forecast.tellurics import TelluricModel

        tellurics = TelluricModel.load()
    if request.ideal:
        tellurics = None
    airmass = conditions.airmass
    feats = strong_features(transient, request.phase_d, ref, tellurics, airmass, cond["pwv_mm"])

    def rates_on(wavelength_A=None, n=None):
        grid = ex.setup_grid(ref.telescope, ref.instrument, ref.setup, n or 2 * len(ref.setup.arms),
                             wavelength_A=wavelength_A)
        flux = transient.flux_flam(np.array([request.phase_d]), grid.wavelength_A)[0]
        tell = 1.0 if tellurics is None else tellurics.transmission(grid.wavelength_A, airmass, cond["pwv_mm"])
        return grid, ex.rates(flux, grid, conditions, tell, ideal=request.ideal, profile=request.profile)

    time_s, nexp, target = _exposure_plan(request, feats, ref, rates_on)
    grid, r = rates_on(n=max(request.samples, 2 * len(ref.setup.arms)))
    res = ex.expose(r, time_s, nexp)
    points = np.array([f["trough_obs_A"] for f in feats] + [f["emission_peak_obs_A"] for f in feats]
                      + list(REFERENCE_A) + ([target["wavelength_A"]] if target else []), dtype=float)
    _, r_pts = rates_on(points)
    res_pts = ex.expose(r_pts, time_s, nexp)
    nf = len(feats)
    for i, f in enumerate(feats):
        f["snr_per_resel"] = _snr(res_pts, i)
        f["snr_per_resel_emission"] = _snr(res_pts, nf + i)
        f["systematics_limited"] = bool(res_pts.systematics_limited[i])
    refs = [{"wavelength_A": w, "snr_per_resel": _snr(res_pts, 2 * nf + k)}
            for k, w in enumerate(REFERENCE_A) if res_pts.on_detector[2 * nf + k]]
    if target:
        target["snr_check"] = _snr(res_pts, points.size - 1)
        target["systematics_limited"] = bool(res_pts.systematics_limited[-1])
    ranges = _draw_ranges(event, transient, request, points, r_pts, time_s, nexp, target, nf) if request.draws else None
    if ranges:
        for i, f in enumerate(feats):
            f["snr_per_resel_range"] = ranges["points"][i]
    return {"ranges": ranges, "event": event, "ref": ref, "phase_d": request.phase_d, "conditions": cond, "ideal": request.ideal,
            "time_s": time_s, "nexp": nexp, "max_exposure_s": request.max_exposure_s, "grid": grid, "rates": r,
            "result": res, "features": feats, "reference": refs, "target": target,
            "warnings": _warnings(res, target, time_s, nexp, feats), "profile": request.profile,
            "tellurics": tellurics, "sky": "user file " + sky_file.source if sky_file else
            ("none (ideal)" if request.ideal else DARK_SKY_MODEL)}


def _draw_ranges(event, transient, request: Request, points, r_pts, time_s, nexp, target, n_feats) -> dict:
    """16/50/84 percentiles over the draws of the source (kncast.planner.plan.ensemble) of the S/N at the sample
    points and of the time for the target: the rates at the points scaled per draw, one call per model node."""
    from kncast.forecast import exposure as ex
    from kncast.planner.draws import percentiles, source_draws

    distances, nodes, node_of, _ranges = source_draws(event, transient, request.draws, request.seed,
                                                      request.model_overridden)
    snr = np.full((request.draws, points.size), np.nan)
    need = np.full(request.draws, np.nan)
    base = transient.flux_flam(np.array([request.phase_d]), points)[0]
    for j, node in enumerate(nodes):  # at most MAX_NODES parameter sets; the draws are an array axis
        mine = np.flatnonzero(node_of == j)
        shape = node.flux_flam(np.array([request.phase_d]), points)[0] / np.where(base > 0, base, 1.0)
        scale = (transient.distance_mpc / distances[mine])[:, None] ** 2 * shape[None, :]
        r_d = ex.scale_source(r_pts, scale)
        snr[mine] = np.where(r_pts.on_detector, ex.expose(r_d, time_s, nexp).snr_per_resel, np.nan)
        if target:
            t, _n = ex.time_for_snr(r_d, target["snr_per_resel"], request.max_exposure_s)
            need[mine] = np.where(np.isfinite(t[:, -1]), t[:, -1], np.nan)
    return {"points": [percentiles(snr[:, i]) for i in range(points.size)],
            "time_for_target_s": percentiles(need) if target else None, "draws": request.draws}


def _exposure_plan(request: Request, feats: list, ref, rates_on):
    """(total time s, number of exposures, target dict or None) for the request."""
    from kncast.forecast import exposure as ex

    if request.snr_target is None:
        nexp = request.nexp or max(1, math.ceil(request.time_s / request.max_exposure_s - 1e-9))
        return request.time_s, nexp, None
    at_A, at_label = target_wavelength(request.at, feats, ref)
    _, r_at = rates_on(np.array([at_A]))
    if not r_at.on_detector[0]:
        raise ParameterError("at", request.at, f"a wavelength on the detector of {ref.id} ({_ranges(ref)})")
    t, n = ex.time_for_snr(r_at, request.snr_target, request.max_exposure_s)
    if not np.isfinite(t[0]) or t[0] > MAX_TIME_S:
        where = at_label if at_label.endswith(" A") else f"{at_label} ({at_A:.0f} A)"
        raise ParameterError("snr_target", also=("at",), message=(
            f"{{snr_target}} {request.snr_target:g}: not reachable at {where} within {MAX_TIME_S:g} s, the source "
            f"is too faint there for {ref.id}; choose another place with {{at}}"))
    target = {"snr_per_resel": request.snr_target, "at": at_label, "wavelength_A": round(at_A, 2)}
    return float(t[0]), int(n[0]), target


def target_wavelength(at, feats: list, ref):
    """(wavelength A, label) where the target S/N is asked: a number is a vacuum wavelength in A,
    otherwise a feature id (its trough); None: the strongest feature's trough on the detector."""
    if at is None:
        on = [f for f in feats if ref.setup.min_A <= f["trough_obs_A"] <= ref.setup.max_A]
        if on:
            return on[0]["trough_obs_A"], f"{on[0]['feature']} trough"
        first = ref.setup.arms[0]
        mid = 5500.0 if ref.setup.min_A <= 5500.0 <= ref.setup.max_A else 0.5 * (first.min_A + first.max_A)
        return mid, f"{mid:.0f} A (no strong feature on the detector)"
    try:
        w = float(at)
    except ValueError:
        w = None
    if w is not None:
        if not (math.isfinite(w) and ref.setup.min_A <= w <= ref.setup.max_A):
            raise ParameterError("at", at, f"a feature id or a vacuum wavelength in A within {_ranges(ref)}")
        return w, f"{w:g} A"
    from kncast.forecast.linelist import LineList

    known = {f.id: f for f in LineList.load().features()}
    key = at.strip()
    if key not in known:
        raise UnknownNameError("feature", key, known)
    match = [f for f in feats if f["feature"] == key]
    if not match:
        raise ParameterError("at", at, f"a feature that is strong (tau >= {STRONG_TAU:g}) at phase and falls on "
                             f"{ref.id}; strong here: {', '.join(f['feature'] for f in feats) or 'none'}")
    return match[0]["trough_obs_A"], f"{key} trough"


def _snr(res, i):
    return round(float(res.snr_per_resel[i]), 3) if res.on_detector[i] else None


def _ranges(ref) -> str:
    return ", ".join(f"{a.min_A:g}-{a.max_A:g} A" for a in ref.setup.arms)


def _warnings(res, target, time_s, nexp, feats) -> list[str]:
    out = []
    if np.any(res.saturated):
        lam = res.wavelength_A[res.saturated]
        out.append(f"a single exposure of {time_s / nexp:.0f} s saturates the brightest pixel at "
                   f"{lam.min():.0f}-{lam.max():.0f} A: use more, shorter exposures")
    if target and target["systematics_limited"]:
        out.append(f"at {target['wavelength_A']:.0f} A the source is below 1% of the sky in the aperture: "
                   "sky-subtraction systematics, not photon noise, will limit the S/N")
    elif feats and any(f["systematics_limited"] for f in feats):
        names = ", ".join(f["feature"] for f in feats if f["systematics_limited"])
        out.append(f"source below 1% of the sky at the troughs of {names}: systematics-limited there")
    on = res.on_detector
    if np.any(on) and np.median(res.systematics_limited[on]) > 0:
        out.append("over most of the range the source is below 1% of the sky: systematics-limited")
    return out


def check_request(request: Request) -> None:
    """Ranges of a request that need no file (ParameterError naming the field)."""
    def check(name, value, low, high, low_open=False):
        if value is not None and ((value <= low if low_open else value < low) or value > high):
            raise ParameterError(name, value, f"{'(' if low_open else '['}{low:g}, {high:g}]")

    check("phase_d", request.phase_d, 0.0, MAX_PHASE_D, low_open=True)
    check("time_s", request.time_s, 0.0, MAX_TIME_S, low_open=True)
    check("snr_target", request.snr_target, 0.0, 1e4, low_open=True)
    check("max_exposure_s", request.max_exposure_s, 1.0, 1e5)
    if (request.time_s is None) == (request.snr_target is None):
        raise InputError("give either a total time or a target S/N")
    if request.nexp is not None and request.time_s / request.nexp > request.max_exposure_s:
        raise ParameterError("time_s", also=("nexp", "max_exposure_s"), message=(
            f"{{time_s}} {request.time_s:g} s in {{nexp}} {request.nexp} exposures is "
            f"{request.time_s / request.nexp:g} s each, above {{max_exposure_s}} {request.max_exposure_s:g} s"))
