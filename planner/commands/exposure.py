"""``kncast exposure``: S/N per resolution element of a spectrum, or the time to reach a target S/N."""
from __future__ import annotations

from kncast.planner.commands._common import (fit_table, add_event_options, add_output_options, check_plot_path, console, emit_json,
                                      event_from_args, finite_float, positive_int)
from kncast.planner.commands._model_options import add_model_options, overrides_from_args
from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S, SNR_BASIS, STRONG_TAU
from kncast.planner.observation import DEFAULT_MOON_ALT_DEG, DEFAULT_SAMPLES, MAX_PHASE_D

HELP = "S/N per resolution element for a setup at one epoch, or the exposure time for a target S/N"

SHOWN_FEATURES = 8
# parameters of the observation request -> dests of the options that set them
PARAMETER_DESTS = {"phase_d": "phase", "time_s": "time", "max_exposure_s": "max_exposure",
                   "moon_altitude_deg": "moon_alt", "moon_sep_deg": "moon_sep"}
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
    from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED

    p.add_argument("--draws", type=positive_int("--draws", high=5000), default=DEFAULT_DRAWS, metavar="N",
                   help="realisations of the distance (distance_err_mpc) and of the [model] ranges for the 16-84%% "
                        f"ranges of the S/N and of the time for --snr (default {DEFAULT_DRAWS})")
    p.add_argument("--seed", type=positive_int("--seed", high=2**31 - 1), default=DEFAULT_SEED, metavar="S",
                   help=f"seed of the draws (default {DEFAULT_SEED})")
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

    from kncast.planner.observation import check_request

    check_plot_path(args.plot)
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
    check_request(request_from_args(args)[0])


# ------------------------------------------------------------------ computation

def request_from_args(args):
    """The observation request and the given conditions from the options."""
    from kncast.planner.observation import Given, Request

    request = Request(phase_d=args.phase, time_s=args.time, nexp=args.nexp, snr_target=args.snr, at=args.at,
                      max_exposure_s=args.max_exposure, ideal=args.ideal, profile=args.profile,
                      samples=args.samples, draws=args.draws, seed=args.seed,
                      model_overridden=bool(overrides_from_args(args)))
    given = Given(airmass=args.airmass, seeing_arcsec=args.seeing, moon_illumination=args.moon_illumination,
                  moon_sep_deg=args.moon_sep, moon_altitude_deg=args.moon_alt, pwv_mm=args.pwv)
    return request, given


def run(args) -> int:
    check_options(args)
    event = event_from_args(args)
    from kncast.planner.observation import night_conditions, observe
    from kncast.planner.setups import resolve_setup
    from kncast.planner.sites import SiteRegistry

    sky_file = None
    if args.sky:
        from kncast.forecast.skybright import load_sky_spectrum

        sky_file = load_sky_spectrum(args.sky)
    ref = resolve_setup(args.setup, SiteRegistry.load(args.sites_dir))
    from kncast.planner.source import transient_for_event

    transient = transient_for_event(event, overrides=overrides_from_args(args))
    request, given = request_from_args(args)
    cond = night_conditions(event, ref.site, request.phase_d, given, ideal=request.ideal)
    result = observe(event, ref, transient, cond, request, sky_file)
    if args.plot:
        from kncast.planner.figures.exposure import exposure_figure
        from kncast.planner.output import save_figure

        save_figure(exposure_figure(result), args.plot)
    if args.json:
        emit_json(args.json, exposure_document(result))
    if args.json != "-":
        print_tables(result)
    return 0


# ------------------------------------------------------------------ outputs

def exposure_document(res: dict) -> dict:
    """The ``--json`` document (schema in docs/json.md, section "exposure")."""
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
        features=[{**{k: f[k] for k in ("feature", "species", "tau_sobolev", "trough_obs_A", "snr_per_resel",
                                        "emission_peak_obs_A", "snr_per_resel_emission")},
                   "snr_per_resel_range": f.get("snr_per_resel_range")} for f in res["features"]],
        reference=res["reference"],
    )
    ranges = res.get("ranges")
    doc["draws"] = ranges["draws"] if ranges else 0
    if res["target"] is not None:
        doc["time_for_target_s"] = round(res["time_s"], 3)
        doc["time_for_target_range_s"] = ranges["time_for_target_s"] if ranges else None
        doc["target"] = {k: res["target"][k] for k in ("snr_per_resel", "at", "wavelength_A")}
    doc["warnings"] = res["warnings"]
    doc["caution"] = CAUTION
    return doc


def _r(v, nd=4):
    return None if v is None else round(float(v), nd)


def print_tables(res: dict) -> None:
    from rich.markup import escape
    from rich.table import Table

    out = console(markup=True)  # every string from a file below is escaped
    cond = res["conditions"]
    ev = res["event"]
    moon = ("Moon not given" if cond["moon_illumination"] is None else
            f"Moon {100 * cond['moon_illumination']:.0f}% lit, {cond['moon_sep_deg']:.0f} deg away, "
            f"altitude {cond['moon_altitude_deg']:.0f} deg")
    out.print(f"[bold]{escape(ev.id)}[/bold]  {escape(res['ref'].id)}  phase {res['phase_d']:g} d")
    if res["ideal"]:
        out.print("ideal mode: unit throughput, no atmosphere, no sky, no detector noise, no slit loss")
    else:
        out.print(f"airmass {cond['airmass']:.2f}  seeing {cond['seeing_arcsec']:.2f} arcsec  {moon}  "
                  f"PWV {cond['pwv_mm']:g} mm  ({escape(cond['source'])})")
    single = res["time_s"] / res["nexp"]
    if res["target"] is not None:
        t = res["target"]
        where = t["at"] if t["at"].endswith(" A") else f"{t['at']} ({t['wavelength_A']:.0f} A)"
        ranges = res.get("ranges") or {}
        span = ranges.get("time_for_target_s")
        spread = (f" (16-84% over {ranges['draws']} draws of the source: {span['p16']:.0f}-{span['p84']:.0f} s)"
                  if span else "")
        out.print(f"[bold]time for S/N {t['snr_per_resel']:g} per resolution element at {escape(where)}: "
                  f"{res['time_s']:.0f} s = {res['nexp']} x {single:.0f} s[/bold]{spread}")
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
        out.print(fit_table(table, out.width))
        if len(res["features"]) > SHOWN_FEATURES:
            out.print(f"[dim]{len(res['features']) - SHOWN_FEATURES} more strong features in --json[/dim]")
    else:
        out.print(f"no feature with tau >= {STRONG_TAU:g} falls on this setup at this phase")
    table = Table(title="S/N per resolution element at reference wavelengths", title_justify="left")
    table.add_column("wavelength A", justify="right")
    table.add_column("S/N", justify="right")
    for row in res["reference"]:
        table.add_row(f"{row['wavelength_A']:.0f}", _fmt(row["snr_per_resel"]))
    out.print(fit_table(table, out.width))
    for w in res["warnings"]:
        out.print(f"[yellow]warning:[/yellow] {escape(w)}")
    out.print(f"[dim]{CAUTION}[/dim]")


def _fmt(v) -> str:
    return "off detector" if v is None else f"{v:.1f}"
