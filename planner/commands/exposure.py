"""``kncast exposure``: S/N per resolution element of a spectrum, or the time to reach a target S/N."""
from __future__ import annotations

import math

from kncast.planner.commands._common import (add_event_options, add_output_options, check_plot_path, console, emit_json,
                                      event_from_args, finite_float, positive_int)
from kncast.planner.commands._model_options import add_model_options, overrides_from_args

HELP = "S/N per resolution element for a setup at one epoch, or the exposure time for a target S/N"

SNR_BASIS = "per resolution element"
MAX_PHASE_D = 100.0
DEFAULT_MAX_EXPOSURE_S = 1800.0
MAX_TIME_S = 1e6
DEFAULT_SAMPLES = 300
DEFAULT_MOON_ALT_DEG = 45.0
STRONG_TAU = 1.0      # Sobolev optical depth above which a feature counts as strong (common practice)
SHOWN_FEATURES = 8
REFERENCE_A = (3600.0, 4500.0, 5500.0, 6500.0, 8000.0, 10000.0, 12500.0, 16500.0, 22000.0)
CAUTION = ("Model estimates (continuum S/N at the feature wavelengths; line depths not applied): the "
           "observatory's own exposure-time tools take precedence.")


def add_arguments(p) -> None:
    add_event_options(p)
    add_model_options(p)
    g = p.add_argument_group("setup and epoch")
    g.add_argument("--setup", required=True, metavar="SITE/TELESCOPE/INSTRUMENT[:SETUP]",
                   help="spectrograph setup (see kncast setups)")
    g.add_argument("--sites-dir", action="append", default=[], metavar="DIR",
                   help="extra folder of site TOML files (repeatable)")
    g.add_argument("--phase", required=True, type=finite_float("--phase"), metavar="D",
                   help=f"observer-frame days since t0, in (0, {MAX_PHASE_D:g}]")
    e = p.add_argument_group("exposure (give --time or --snr)")
    mode = e.add_mutually_exclusive_group(required=True)
    mode.add_argument("--time", type=finite_float("--time"), metavar="S",
                      help="total integration time, s, in (0, 1e6]")
    mode.add_argument("--snr", type=finite_float("--snr"), metavar="TARGET",
                      help="target S/N per resolution element, in (0, 10000]")
    e.add_argument("--nexp", type=positive_int("--nexp"), metavar="N",
                   help="with --time: number of equal exposures (default: the fewest within --max-exposure)")
    e.add_argument("--at", metavar="FEATURE_OR_WAVELENGTH_A",
                   help="with --snr: feature id (its absorption trough) or vacuum wavelength in A "
                        "(default: the strongest feature's trough on the detector)")
    e.add_argument("--max-exposure", type=finite_float("--max-exposure"), default=DEFAULT_MAX_EXPOSURE_S,
                   metavar="S", help=f"longest single exposure, s, in [1, 1e5] (default {DEFAULT_MAX_EXPOSURE_S:g})")
    c = p.add_argument_group("conditions (default: the best window of that night from the planner)")
    c.add_argument("--airmass", type=finite_float("--airmass"), metavar="X", help="airmass, in [1, 10]")
    c.add_argument("--seeing", type=finite_float("--seeing"), metavar="ARCSEC",
                   help="zenith seeing FWHM at 5000 A, arcsec, in [0.1, 10] (default: the site's [atmosphere] "
                        "seeing_arcsec, else 0.8)")
    c.add_argument("--moon-illumination", type=finite_float("--moon-illumination"), metavar="F",
                   help="illuminated fraction of the Moon, in [0, 1] (with --moon-sep)")
    c.add_argument("--moon-sep", type=finite_float("--moon-sep"), metavar="DEG",
                   help="Moon-target separation, deg, in [0, 180] (with --moon-illumination)")
    c.add_argument("--moon-alt", type=finite_float("--moon-alt"), metavar="DEG",
                   help=f"Moon altitude, deg, in [-90, 90] (with the Moon options; default {DEFAULT_MOON_ALT_DEG:g})")
    c.add_argument("--pwv", type=finite_float("--pwv"), metavar="MM",
                   help="precipitable water vapour, mm, in [0, 50] (default: the site's, else 2.5)")
    c.add_argument("--sky", metavar="FILE",
                   help="your sky spectrum: two columns, vacuum wavelength_A and F_lambda per arcsec^2 "
                        "(erg s^-1 cm^-2 A^-1 arcsec^-2); replaces the sky model")
    c.add_argument("--ideal", action="store_true",
                   help="unit throughput, no atmosphere, no sky, no detector noise, no slit loss (upper bound)")
    c.add_argument("--profile", choices=("moffat", "gaussian"), default="moffat",
                   help="seeing profile for the slit losses (default moffat)")
    add_output_options(p)
    p.add_argument("--samples", type=positive_int("--samples", high=100_000), default=DEFAULT_SAMPLES, metavar="N",
                   help=f"wavelength samples across the arms in --json and --plot (default {DEFAULT_SAMPLES})")


# ------------------------------------------------------------------ option checks

def _check(option, value, low, high, low_open=False):
    from kncast.planner.errors import OptionError

    if value is None:
        return
    if (value <= low if low_open else value < low) or value > high:
        raise OptionError(option, value, f"{'(' if low_open else '['}{low:g}, {high:g}]")


def check_options(args) -> None:
    """Validate every option that needs no file, before any work is done."""
    from kncast.planner.errors import InputError

    check_plot_path(args.plot)
    _check("--phase", args.phase, 0.0, MAX_PHASE_D, low_open=True)
    _check("--time", args.time, 0.0, MAX_TIME_S, low_open=True)
    _check("--snr", args.snr, 0.0, 1e4, low_open=True)
    _check("--max-exposure", args.max_exposure, 1.0, 1e5)
    _check("--airmass", args.airmass, 1.0, 10.0)
    _check("--seeing", args.seeing, 0.1, 10.0)
    _check("--moon-illumination", args.moon_illumination, 0.0, 1.0)
    _check("--moon-sep", args.moon_sep, 0.0, 180.0)
    _check("--moon-alt", args.moon_alt, -90.0, 90.0)
    _check("--pwv", args.pwv, 0.0, 50.0)
    if (args.moon_illumination is None) != (args.moon_sep is None):
        raise InputError("--moon-illumination and --moon-sep go together: give both or neither")
    if args.moon_alt is not None and args.moon_illumination is None:
        raise InputError("--moon-alt needs --moon-illumination and --moon-sep")
    if args.nexp is not None and args.time is None:
        raise InputError("--nexp goes with --time (with --snr the number of exposures follows from --max-exposure)")
    if args.at is not None and args.snr is None:
        raise InputError("--at goes with --snr (the wavelength or feature where the target S/N is reached)")
    if args.nexp is not None and args.time / args.nexp > args.max_exposure:
        raise InputError(f"--time {args.time:g} s in --nexp {args.nexp} exposures is {args.time / args.nexp:g} s each, "
                         f"above --max-exposure {args.max_exposure:g} s")


# ------------------------------------------------------------------ conditions

def observing_conditions(args, event, ref) -> dict:
    """Airmass, seeing, Moon and water vapour: options first, then the planner's best window of that night."""
    from kncast.forecast.extinction_atm import atmosphere_for_site

    atm = atmosphere_for_site(ref.site)
    cond = {"airmass": args.airmass, "seeing_arcsec": args.seeing if args.seeing is not None else atm.seeing_arcsec,
            "moon_illumination": args.moon_illumination, "moon_sep_deg": args.moon_sep,
            "moon_altitude_deg": None, "pwv_mm": args.pwv if args.pwv is not None else atm.pwv_mm,
            "source": "options", "window": None, "atmosphere": atm}
    if args.moon_illumination is not None:
        cond["moon_altitude_deg"] = args.moon_alt if args.moon_alt is not None else DEFAULT_MOON_ALT_DEG
    if args.ideal or (args.airmass is not None and args.moon_illumination is not None):
        if args.ideal:
            cond["source"] = "ideal (no atmosphere, no sky)"
        return cond
    night, window = best_window(event, ref.site, args.phase)
    if window is None:
        if args.airmass is None:
            from kncast.planner.errors import InputError

            raise InputError(f"no observing window for {event.id} from {ref.site.id} on the night of phase "
                             f"{args.phase:g} d ({night.note if night is not None else 'no night found'}); "
                             f"give --airmass (and --moon-illumination/--moon-sep) to compute anyway")
        if args.moon_illumination is None:
            moon = moon_at(event, ref.site, event.t0.mjd + args.phase)
            cond.update(moon, source="options; Moon at t0 + phase (no window that night)")
        return cond
    if args.airmass is None:
        cond["airmass"] = float(window.best_airmass)
    if args.moon_illumination is None:
        cond.update(moon_illumination=float(window.moon_illumination), moon_sep_deg=float(window.moon_sep_deg),
                    moon_altitude_deg=float(window.moon_altitude_deg))
    cond["source"] = f"best window of the night of {night.night.isoformat()} at {ref.site.id}" + \
        (" (some values from options)" if args.airmass is not None or args.moon_illumination is not None else "")
    cond["window"] = window.summary()
    return cond


def best_window(event, site, phase_d):
    """(NightRecord, Window with the lowest airmass) for the local night holding t0 + phase (noon to noon)."""
    from kncast.planner.visibility.core import compute_visibility

    nights = int(math.ceil(phase_d)) + 2
    result = compute_visibility(event, [site], nights=nights)
    t = result.t0_mjd + phase_d
    bounds = result.night_bounds_mjd[0]
    records = result.for_site(site.id)
    for k, rec in enumerate(records):
        if bounds[k] <= t < bounds[k + 1]:
            if not rec.windows:
                return rec, None
            return rec, min(rec.windows, key=lambda w: w.best_airmass)
    return None, None


def moon_at(event, site, mjd) -> dict:
    """Moon illumination, separation from the target and altitude at ``mjd`` (UTC) for ``site``."""
    import numpy as np

    from kncast.planner.visibility import sky

    eph = sky.Ephemeris.build(mjd - 0.05, mjd + 0.05, [event.ra_deg], [event.dec_deg])
    sites = sky.SiteArrays.of([site])
    unit, alt = sky.moon_topocentric(eph, sites, np.array([mjd]))
    illum, _phase = sky.moon_illumination(eph, np.array([mjd]))
    sep = sky.separation_deg(unit, eph.target(np.broadcast_to(np.array([mjd]), (1, 1))))
    return {"moon_illumination": float(np.ravel(illum)[0]), "moon_sep_deg": float(np.ravel(sep)[0]),
            "moon_altitude_deg": float(np.ravel(alt)[0])}


# ------------------------------------------------------------------ computation

def run(args) -> int:
    check_options(args)
    event = event_from_args(args)
    from kncast.planner.setups import resolve_setup
    from kncast.planner.sites import SiteRegistry

    sky_file = None
    if args.sky:
        from kncast.forecast.skybright import load_sky_spectrum

        sky_file = load_sky_spectrum(args.sky)
    ref = resolve_setup(args.setup, SiteRegistry.load(args.sites_dir))
    from kncast.planner.source import transient_for_event

    transient = transient_for_event(event, overrides=overrides_from_args(args))
    cond = observing_conditions(args, event, ref)
    result = compute(args, event, ref, transient, cond, sky_file)
    if args.plot:
        from kncast.planner.output import save_figure
        from kncast.planner.figures.exposure import exposure_figure

        save_figure(exposure_figure(result), args.plot)
    if args.json:
        emit_json(args.json, exposure_document(result))
    if args.json != "-":
        print_tables(result)
    return 0


def compute(args, event, ref, transient, cond, sky_file) -> dict:
    """Everything the outputs need: S/N on the sample grid, at features and at reference wavelengths."""
    import numpy as np

    from kncast.forecast import exposure as ex
    from kncast.forecast.skybright import MoonGeometry

    moon = None
    if cond["moon_illumination"] is not None and not args.ideal:
        moon = MoonGeometry(cond["moon_illumination"], cond["moon_sep_deg"], cond["moon_altitude_deg"])
    airmass = cond["airmass"] if cond["airmass"] is not None else 1.0
    conditions = ex.Conditions(airmass=airmass, seeing_arcsec=cond["seeing_arcsec"], moon=moon,
                               pwv_mm=cond["pwv_mm"], atmosphere=cond["atmosphere"], sky=sky_file)
    tellurics = None if args.ideal else _tellurics()
    feats = strong_features(transient, args.phase, ref, tellurics, airmass, cond["pwv_mm"])

    def rates_on(wavelength_A=None, n=None):
        grid = ex.setup_grid(ref.telescope, ref.instrument, ref.setup, n or 2 * len(ref.setup.arms),
                             wavelength_A=wavelength_A)
        flux = transient.flux_flam(np.array([args.phase]), grid.wavelength_A)[0]
        tell = 1.0 if tellurics is None else tellurics.transmission(grid.wavelength_A, airmass, cond["pwv_mm"])
        return grid, ex.rates(flux, grid, conditions, tell, ideal=args.ideal, profile=args.profile)

    target = None
    if args.snr is not None:
        at_A, at_label = _target_wavelength(args.at, feats, ref)
        _, r_at = rates_on(np.array([at_A]))
        if not r_at.on_detector[0]:
            from kncast.planner.errors import OptionError

            raise OptionError("--at", args.at, f"a wavelength on the detector of {ref.id} ({_ranges(ref)})")
        t, n = ex.time_for_snr(r_at, args.snr, args.max_exposure)
        if not np.isfinite(t[0]) or t[0] > MAX_TIME_S:
            from kncast.planner.errors import InputError

            where = at_label if at_label.endswith(" A") else f"{at_label} ({at_A:.0f} A)"
            raise InputError(f"--snr {args.snr:g}: not reachable at {where} within {MAX_TIME_S:g} s, "
                             f"the source is too faint there for {ref.id}; choose another place with --at")
        time_s, nexp = float(t[0]), int(n[0])
        target = {"snr_per_resel": args.snr, "at": at_label, "wavelength_A": round(at_A, 2)}
    else:
        time_s = args.time
        nexp = args.nexp or max(1, math.ceil(args.time / args.max_exposure - 1e-9))
    grid, r = rates_on(n=max(args.samples, 2 * len(ref.setup.arms)))
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
    return {"event": event, "ref": ref, "phase_d": args.phase, "conditions": cond, "ideal": args.ideal,
            "time_s": time_s, "nexp": nexp, "max_exposure_s": args.max_exposure, "grid": grid, "rates": r,
            "result": res, "features": feats, "reference": refs, "target": target,
            "warnings": _warnings(res, res_pts, target, time_s, nexp, feats), "profile": args.profile,
            "tellurics": tellurics, "sky": "user file " + sky_file.source if sky_file else
            ("none (ideal)" if args.ideal else "model: dark sky (Benn & Ellison 1998) + moonlight "
                                                "(Krisciunas & Schaefer 1991)")}


def _tellurics():
    from kncast.forecast.tellurics import TelluricModel

    return TelluricModel.load()


def _snr(res, i):
    return round(float(res.snr_per_resel[i]), 3) if res.on_detector[i] else None


def _ranges(ref) -> str:
    return ", ".join(f"{a.min_A:g}-{a.max_A:g} A" for a in ref.setup.arms)


def strong_features(transient, phase_d, ref, tellurics, airmass, pwv_mm) -> list[dict]:
    """Features with Sobolev tau >= 1 at this epoch whose trough or emission peak falls in the setup's range."""
    import numpy as np

    from kncast.forecast.features import forecast_features

    fc = forecast_features(transient, np.array([phase_d]), setups=[ref.setup], tellurics=tellurics,
                           airmass=airmass, pwv_mm=pwv_mm, setup_ids=[ref.id])
    lo, hi = ref.setup.min_A, ref.setup.max_A
    out = []
    for f in fc.rank[0]:
        tau = float(fc.tau[0, f])
        trough, peak = float(fc.windows.trough_A[0, f]), float(fc.windows.emission_peak_A[0, f])
        if not (np.isfinite(tau) and tau >= STRONG_TAU):
            continue
        if not (lo <= trough <= hi or lo <= peak <= hi):
            continue
        out.append({"feature": fc.features[f].id, "species": fc.features[f].species,
                    "tau_sobolev": float(f"{tau:.4g}"), "trough_obs_A": round(trough, 1),
                    "emission_peak_obs_A": round(peak, 1),
                    "absorption_obs_A": [round(float(fc.windows.absorption_lo_A[0, f]), 1),
                                         round(float(fc.windows.absorption_hi_A[0, f]), 1)],
                    "coverage": round(float(fc.coverage[0, f, 0]), 4)})
    return out


def _target_wavelength(at, feats, ref):
    """(wavelength A, label) for --at: a number is a vacuum wavelength, otherwise a feature id."""
    from kncast.planner.errors import OptionError, UnknownNameError

    if at is None:
        on = [f for f in feats if ref.setup.min_A <= f["trough_obs_A"] <= ref.setup.max_A]
        if on:
            return on[0]["trough_obs_A"], f"{on[0]['feature']} trough"
        mid = 5500.0 if ref.setup.min_A <= 5500.0 <= ref.setup.max_A else 0.5 * (ref.setup.arms[0].min_A +
                                                                                  ref.setup.arms[0].max_A)
        return mid, f"{mid:.0f} A (no strong feature on the detector)"
    try:
        w = float(at)
    except ValueError:
        w = None
    if w is not None:
        if not (math.isfinite(w) and ref.setup.min_A <= w <= ref.setup.max_A):
            raise OptionError("--at", at, f"a feature id or a vacuum wavelength in A within {_ranges(ref)}")
        return w, f"{w:g} A"
    from kncast.forecast.linelist import LineList

    known = {f.id: f for f in LineList.load().features()}
    key = at.strip()
    if key not in known:
        raise UnknownNameError("feature", key, known)
    match = [f for f in feats if f["feature"] == key]
    if not match:
        raise OptionError("--at", at, f"a feature that is strong (tau >= {STRONG_TAU:g}) at phase and falls on "
                          f"{ref.id}; strong here: {', '.join(f['feature'] for f in feats) or 'none'}")
    return match[0]["trough_obs_A"], f"{key} trough"


def _warnings(res, res_pts, target, time_s, nexp, feats) -> list[str]:
    import numpy as np

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


# ------------------------------------------------------------------ outputs

def exposure_document(res: dict) -> dict:
    """The ``--json`` document (schema in README.md, section "Exposure times and S/N")."""
    from kncast.planner.output import document

    cond = res["conditions"]
    e = res["result"]
    on = e.on_detector
    samples = [{"wavelength_A": round(float(e.wavelength_A[i]), 2),
                "arm": res["grid"].arm_names[int(res["grid"].arm_index[i])],
                "snr_per_pixel": round(float(e.snr_per_pixel[i]), 4),
                "snr_per_resel": round(float(e.snr_per_resel[i]), 4),
                "snr_per_A": round(float(e.snr_per_A[i]), 4),
                "source_e": round(float(e.source_e[i]), 3), "sky_e": round(float(e.sky_e[i]), 3)}
               for i in range(e.wavelength_A.size) if on[i]]
    doc = document(
        "exposure", event=res["event"].summary(), setup=res["ref"].id, phase_d=res["phase_d"],
        snr_basis=SNR_BASIS, ideal=res["ideal"],
        conditions={"airmass": _r(cond["airmass"]), "seeing_arcsec": _r(cond["seeing_arcsec"]),
                    "moon_illumination": _r(cond["moon_illumination"]), "moon_sep_deg": _r(cond["moon_sep_deg"]),
                    "moon_altitude_deg": _r(cond["moon_altitude_deg"]), "pwv_mm": _r(cond["pwv_mm"]),
                    "source": cond["source"], "window": cond["window"], "sky": res["sky"],
                    "atmosphere": {"source": cond["atmosphere"].source,
                                   "k_5500_mag_per_airmass": _r(float(cond["atmosphere"].k_mag(5500.0)))},
                    "profile": res["profile"]},
        exposure={"time_s": round(res["time_s"], 3), "nexp": res["nexp"],
                  "single_exposure_s": round(res["time_s"] / res["nexp"], 3), "max_exposure_s": res["max_exposure_s"]},
        samples=samples,
        features=[{k: f[k] for k in ("feature", "species", "tau_sobolev", "trough_obs_A", "snr_per_resel",
                                     "emission_peak_obs_A", "snr_per_resel_emission")} for f in res["features"]],
        reference=res["reference"],
    )
    if res["target"] is not None:
        doc["time_for_target_s"] = round(res["time_s"], 3)
        doc["target"] = {k: res["target"][k] for k in ("snr_per_resel", "at", "wavelength_A")}
    doc["warnings"] = res["warnings"]
    doc["caution"] = CAUTION
    return doc


def _r(v, nd=4):
    return None if v is None else round(float(v), nd)


def print_tables(res: dict) -> None:
    from rich.markup import escape
    from rich.table import Table

    out = console()
    cond = res["conditions"]
    ev = res["event"]
    moon = ("Moon not given" if cond["moon_illumination"] is None else
            f"Moon {100 * cond['moon_illumination']:.0f}% lit, {cond['moon_sep_deg']:.0f} deg away, "
            f"altitude {cond['moon_altitude_deg']:.0f} deg")
    out.print(f"[bold]{escape(ev.id)}[/bold]  {res['ref'].id}  phase {res['phase_d']:g} d")
    if res["ideal"]:
        out.print("ideal mode: unit throughput, no atmosphere, no sky, no detector noise, no slit loss")
    else:
        out.print(f"airmass {cond['airmass']:.2f}  seeing {cond['seeing_arcsec']:.2f} arcsec  {moon}  "
                  f"PWV {cond['pwv_mm']:g} mm  ({escape(cond['source'])})")
    single = res["time_s"] / res["nexp"]
    if res["target"] is not None:
        t = res["target"]
        where = t["at"] if t["at"].endswith(" A") else f"{t['at']} ({t['wavelength_A']:.0f} A)"
        out.print(f"[bold]time for S/N {t['snr_per_resel']:g} per resolution element at {escape(where)}: "
                  f"{res['time_s']:.0f} s = {res['nexp']} x {single:.0f} s[/bold]")
    else:
        out.print(f"exposure: {res['nexp']} x {single:.0f} s = {res['time_s']:.0f} s")
    if res["features"]:
        table = Table(title=f"S/N per resolution element at strong features ({res['nexp']} x {single:.0f} s)",
                      title_justify="left")
        for col, just in [("feature", "left"), ("tau", "right"), ("trough A", "right"), ("S/N trough", "right"),
                          ("peak A", "right"), ("S/N peak", "right")]:
            table.add_column(col, justify=just)
        for f in res["features"][:SHOWN_FEATURES]:
            table.add_row(escape(f["feature"]), f"{f['tau_sobolev']:.3g}", f"{f['trough_obs_A']:.0f}",
                          _fmt(f["snr_per_resel"]), f"{f['emission_peak_obs_A']:.0f}",
                          _fmt(f["snr_per_resel_emission"]))
        out.print(table)
        if len(res["features"]) > SHOWN_FEATURES:
            out.print(f"[dim]{len(res['features']) - SHOWN_FEATURES} more strong features in --json[/dim]")
    else:
        out.print(f"no feature with tau >= {STRONG_TAU:g} falls on this setup at this phase")
    table = Table(title="S/N per resolution element at reference wavelengths", title_justify="left")
    table.add_column("wavelength A", justify="right")
    table.add_column("S/N", justify="right")
    for row in res["reference"]:
        table.add_row(f"{row['wavelength_A']:.0f}", _fmt(row["snr_per_resel"]))
    out.print(table)
    for w in res["warnings"]:
        out.print(f"[yellow]warning:[/yellow] {escape(w)}")
    out.print(f"[dim]{CAUTION}[/dim]")


def _fmt(v) -> str:
    return "off detector" if v is None else f"{v:.1f}"
