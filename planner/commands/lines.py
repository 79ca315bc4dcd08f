"""``kncast lines``: where each diagnostic feature lands per epoch, how strong it is, which setups see it."""
from __future__ import annotations

from kncast.planner.commands._common import (fit_table, add_event_options, add_output_options, check_plot_path, console, emit_json,
                                      event_from_args, finite_float, parse_phases, split_list)
from kncast.planner.commands._model_options import add_model_options, overrides_from_args

HELP = "forecast diagnostic line features per epoch: observed windows, LTE strength, coverage per setup"

DEFAULT_AIRMASS = 1.2
DEFAULT_PWV_MM = 2.5
DEFAULT_TIME_S = 3600.0
MAX_VELOCITY_C = 0.8
DETAIL_SETUPS = 4  # up to this many setups: one detailed column per setup in the feature table
CAUTION = ("Model estimates: windows from a homologous P Cygni picture, strengths from an LTE/Sobolev estimate "
           "with the line-list elements in solar r-process proportions; the observatory's own tools and rules "
           "take precedence.")


def add_arguments(p) -> None:
    add_event_options(p)
    add_model_options(p)
    from kncast.forecast.defaults import DEFAULT_LINE_EPOCHS, LINE_RULE_TEMPERATURE_K

    low, high = LINE_RULE_TEMPERATURE_K
    p.add_argument("--phases", metavar="D,D,...",
                   help=f"observer-frame days since t0, each in (0, 100] (default: {DEFAULT_LINE_EPOCHS} epochs "
                        f"log-spaced over the time the event's photosphere cools from {high:g} K to {low:g} K, "
                        "the range the line list was chosen for; rounded to 0.1 d)")
    g = p.add_argument_group("setups and atmosphere")
    g.add_argument("--setup", action="append", metavar="SITE/TELESCOPE/INSTRUMENT[:SETUP]",
                   help="spectrograph setup (repeatable or comma separated; default: every setup; "
                        "see kncast setups)")
    g.add_argument("--sites-dir", action="append", default=[], metavar="DIR",
                   help="extra folder of site TOML files (repeatable)")
    g.add_argument("--airmass", type=finite_float("--airmass", 1.0, 10.0), default=DEFAULT_AIRMASS, metavar="X",
                   help=f"airmass for the telluric bands, 1-10 (default {DEFAULT_AIRMASS:g})")
    g.add_argument("--pwv", type=finite_float("--pwv", 0.0, 50.0), default=DEFAULT_PWV_MM, metavar="MM",
                   help=f"precipitable water vapour, mm, 0-50 (default {DEFAULT_PWV_MM:g})")
    from kncast.forecast.defaults import DEFAULT_BIN_KMS, DEFAULT_SIGMA

    m = p.add_argument_group("what each feature will show (dark sky, each setup's site seeing and extinction)")
    m.add_argument("--time", type=finite_float("--time", 1.0, 1e6), default=DEFAULT_TIME_S, metavar="S",
                   help=f"time on the target for the S/N and significance per feature, s (default {DEFAULT_TIME_S:g})")
    m.add_argument("--sigma", type=finite_float("--sigma", 0, 100, low_open=True), default=DEFAULT_SIGMA,
                   metavar="N", help=f"target significance for time_to_sigma_s (default {DEFAULT_SIGMA:g})")
    m.add_argument("--bin-kms", type=finite_float("--bin-kms", 10, 30000), default=DEFAULT_BIN_KMS, metavar="KMS",
                   help=f"velocity bin of the continuum S/N across a trough, km/s (default {DEFAULT_BIN_KMS:g})")
    from kncast.forecast.defaults import CORRECTABLE_TRANSMISSION

    m.add_argument("--telluric-threshold", type=finite_float("--telluric-threshold", 0, 1),
                   default=CORRECTABLE_TRANSMISSION, metavar="T",
                   help="telluric bands transmitting at least T are divided out (correctable); below it a trough "
                        f"is lost there (default {CORRECTABLE_TRANSMISSION:g})")
    v = p.add_argument_group("what-if line-forming shell (replaces the model's velocities at every epoch)")
    v.add_argument("--shell-inner-c", type=finite_float("--shell-inner-c"), metavar="C",
                   help="inner edge of the line-forming shell (the photosphere), fraction of c, "
                        f"in (0, {MAX_VELOCITY_C:g})")
    v.add_argument("--shell-outer-c", type=finite_float("--shell-outer-c"), metavar="C",
                   help=f"outer edge of the ejecta, fraction of c, in (0, {MAX_VELOCITY_C:g}), above --shell-inner-c")
    d = p.add_argument_group("line data")
    d.add_argument("--lines", action="append", metavar="FILE",
                   help="your own line list (ECSV, schema in docs/formats.md, Line list), added to the bundled list (repeatable)")
    d.add_argument("--only-lines", action="store_true", help="use only the --lines files, not the bundled list")
    d.add_argument("--abundances", metavar="FILE",
                   help="element mass fractions (TOML like forecast/data/abundances.toml; default: the bundled "
                        "solar r-process proportions of the line-list elements)")
    add_output_options(p)


def _check_velocity(option: str, value) -> None:
    from kncast.planner.errors import OptionError

    if value is not None and not 0.0 < value < MAX_VELOCITY_C:
        raise OptionError(option, value, f"a fraction of c in (0, {MAX_VELOCITY_C:g})")


def check_options(args) -> list[float] | None:
    """Validate options that need no files; returns the phases (None: the model's default epochs)."""
    from kncast.planner.errors import OptionError

    phases = parse_phases(args.phases) if args.phases is not None else None
    check_plot_path(args.plot)
    _check_velocity("--shell-inner-c", args.shell_inner_c)
    _check_velocity("--shell-outer-c", args.shell_outer_c)
    inner, outer = args.shell_inner_c, args.shell_outer_c
    if inner is not None and outer is not None and inner >= outer:
        raise OptionError("--shell-inner-c", inner, f"below --shell-outer-c {outer:g}")
    if args.only_lines and not args.lines:
        raise OptionError("--only-lines", True, "together with at least one --lines FILE")
    return phases


def load_lines(args):
    from kncast.forecast.linelist import LineList

    lists = [] if args.only_lines else [LineList.load()]
    lists += [LineList.load(path) for path in split_list(args.lines)] if args.lines else []
    return LineList.merge(lists)


def select_setups(args):
    """SetupRefs named by --setup (every setup by default)."""
    from kncast.planner.errors import InputError
    from kncast.planner.setups import all_setups, resolve_setup
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load(args.sites_dir)
    ids = split_list(args.setup)
    refs = [resolve_setup(i, registry) for i in ids] if ids else all_setups(registry)
    if not refs:
        raise InputError("no spectrograph setups known: add instruments to a site file or use --sites-dir")
    return list({r.id: r for r in refs}.values())


def _check_against_model(args, state) -> None:
    """A lone --shell-inner-c/--shell-outer-c must stay on the right side of the model's other velocity."""
    from kncast.planner.errors import OptionError

    inner, outer = args.shell_inner_c, args.shell_outer_c
    if inner is not None and outer is None and (inner >= state.v_max_c).any():
        i = int((inner >= state.v_max_c).argmax())
        raise OptionError("--shell-inner-c", inner, f"below the model's v_max {state.v_max_c[i]:.3f} c at "
                          f"{state.phase_d[i]:g} d (or give --shell-outer-c too)")
    if outer is not None and inner is None and (outer <= state.v_line_c).any():
        i = int((outer <= state.v_line_c).argmax())  # features form at the line-forming velocity
        raise OptionError("--shell-outer-c", outer, f"above the model's v_phot {state.v_line_c[i]:.3f} c at "
                          f"{state.phase_d[i]:g} d (or give --shell-inner-c too)")


def compute(args):
    """(event, transient, forecast result, setup refs, line list) for parsed options."""
    from kncast.forecast.epochs import useful_phases
    from kncast.forecast.features import forecast_features
    from kncast.forecast.lte import Composition
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.source import transient_for_event

    phases = check_options(args)
    event = event_from_args(args)
    transient = transient_for_event(event, overrides=overrides_from_args(args))
    phases = phases if phases is not None else useful_phases(transient)
    _check_against_model(args, transient.state(phases))
    linelist = load_lines(args)
    composition = Composition.load(args.abundances)
    refs = select_setups(args)
    result = forecast_features(transient, phases, linelist, [r.setup for r in refs], TelluricModel.load(),
                               airmass=args.airmass, pwv_mm=args.pwv,
                               vphot_c=args.shell_inner_c, vmax_c=args.shell_outer_c,
                               composition=composition, setup_ids=[r.id for r in refs])
    return event, transient, result, refs, linelist


def lines_document(event, transient, result, args, linelist, refs) -> dict:
    """The ``--json`` document (schema in docs/json.md, section "lines")."""
    from kncast.planner.output import document

    comp = result.lte.composition
    settings = {
        "airmass": args.airmass, "pwv_mm": args.pwv,
        "shell_inner_override_c": args.shell_inner_c, "shell_outer_override_c": args.shell_outer_c,
        "redshift": transient.redshift, "ejecta_mass_msun": transient.ejecta_mass_msun,
        "line_list": linelist.path, "abundances": comp.path, "abundance_source": comp.source,
        "mass_fractions": dict(zip(comp.elements, [round(float(x), 6) for x in comp.mass_fraction])),
        "density_index": comp.density_index, "inner_velocity_c": comp.inner_velocity_c,
        "wavelengths": "vacuum Angstrom; observed frame except rest_vac_A",
        "coverage_window": "whole P Cygni profile: absorption_obs_A[0] .. emission_obs_A[1]",
        "non_lte_rule": _non_lte_rule(),
    }
    settings.update(time_s=args.time, sigma=args.sigma, bin_kms=args.bin_kms,
                    telluric_threshold=args.telluric_threshold,
                    measurement="dark sky at the given airmass and water vapour; each setup with its site's "
                                "seeing and extinction")
    epochs = result.epoch_rows()
    _add_measurements(epochs, result, transient, args, refs)
    return document("lines", event=event.summary(), model={"name": transient.photosphere.name},
                    settings=settings, setups=result.setup_ids, epochs=epochs, caution=CAUTION)


def _add_measurements(epochs: list, result, transient, args, refs) -> None:
    """Merge each feature's measurement record into its per-setup entries (keys in docs/json.md)."""
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.measure import records_for_setups

    records = records_for_setups(transient, result, refs, args.airmass, args.pwv, args.time, TelluricModel.load(),
                                 sigma=args.sigma, bin_kms=args.bin_kms,
                                 telluric_threshold=args.telluric_threshold)
    index = {f.id: k for k, f in enumerate(result.features)}
    for i, ep in enumerate(epochs):
        for feat in ep["features"]:
            for k, entry in enumerate(feat["setups"]):
                rec = dict(records[i][index[feat["feature"]]][k])
                rec.pop("id"), rec.pop("species")
                entry.update(rec)


def _non_lte_rule() -> str:
    from kncast.forecast.features import NON_LTE_NOTE
    from kncast.forecast.linelist import NON_LTE_E_LOW_EV

    return (f"'{NON_LTE_NOTE}' (lte = false, tau null) for lines from levels more than {NON_LTE_E_LOW_EV:g} eV "
            "above the ground, where LTE does not apply; ranked with the unknown strengths")


def run(args) -> int:
    event, transient, result, refs, linelist = compute(args)
    doc = lines_document(event, transient, result, args, linelist, refs)
    if args.plot:
        from kncast.planner.figures.text import plain
        from kncast.planner.output import save_figure
        from kncast.planner.figures.lines import lines_figure

        save_figure(lines_figure(transient, result, refs, airmass=args.airmass, pwv_mm=args.pwv, title=plain(event.id),
                                 telluric_threshold=args.telluric_threshold),
                    args.plot, bbox_inches=None)   # the chart has a fixed layout: no second, "tight" pass
    if args.json:
        emit_json(args.json, doc)
    if args.json != "-":
        print_tables(event, doc, len(refs))
    return 0


# ---------------------------------------------------------------------------------------------- terminal

_CODE = {"clear": "C", "partly hidden": "P", "hidden by atmosphere": "A", "in detector gap": "G",
         "outside coverage": "O"}
_STYLE = {"clear": "green", "partly hidden": "yellow", "hidden by atmosphere": "magenta",
          "in detector gap": "red", "outside coverage": "dim"}


def _tau(f) -> str:
    """The tau cell of a feature record: its tau, the non-LTE note, or n/a (no estimate)."""
    from kncast.forecast.features import NON_LTE_NOTE

    if not f.get("lte", True):
        return NON_LTE_NOTE
    return "n/a" if f["tau_sobolev"] is None else f"{f['tau_sobolev']:.3g}"


def _span(lo_hi) -> str:
    return f"{lo_hi[0]:.0f}-{lo_hi[1]:.0f}"


def _usable(s) -> float:
    return max(0.0, s["coverage"] - s["telluric_loss"])


def _detail(s) -> str:
    from rich.markup import escape

    word = s["verdict"]
    return (f"[{_STYLE.get(word, '')}]{escape(word)}[/] "
            f"{100 * s['coverage']:.0f}/{100 * s['telluric_loss']:.0f}")


def print_tables(event, doc, n_setups: int) -> None:
    """Per epoch: features ranked by tau with windows; verdicts per setup (detailed or as a matrix)."""
    from rich.markup import escape

    out = console(markup=True)  # every string from a file below is escaped
    st = doc["settings"]
    out.print(f"[bold]{escape(event.id)}[/bold]  z = {st['redshift']:.4f}  ejecta {st['ejecta_mass_msun']:g} Msun  "
              f"airmass {st['airmass']:g}  PWV {st['pwv_mm']:g} mm  {n_setups} setup(s)  (vacuum A, observed frame)")
    for ep in doc["epochs"]:
        detailed = n_setups <= DETAIL_SETUPS
        table = fit_table(_feature_table(ep, doc, detailed), out.width, must_fit=detailed) if detailed else None
        if table is None:  # many setups, or too narrow for a column per setup: the matrix below instead
            detailed = False
            table = fit_table(_feature_table(ep, doc, detailed), out.width)
        out.print(table)
        if not detailed:
            _print_matrix(out, ep)
    out.print("[dim]tau: Sobolev optical depth of the strongest member (LTE estimate); "
              f"{_non_lte_rule()}. Per setup: verdict, then "
              "% of the whole P Cygni profile on the detector / % lost to telluric bands.[/dim]")
    out.print(f"[dim]{CAUTION}[/dim]")


def _feature_table(ep, doc, detailed: bool):
    """The features of one epoch ranked by tau, with a column per setup (``detailed``) or the best setup."""
    from rich.markup import escape
    from rich.table import Table

    head = (f"day {ep['phase_d']:g}: T {ep['temperature_K']:.0f} K, v_phot {ep['v_phot_c']:.3f} c, "
            f"v_max {ep['v_max_c']:.3f} c, n_e {ep['electron_density_cm3']:.2g} cm^-3")
    table = Table(title=escape(head), title_justify="left")
    for name, just in [("#", "right"), ("feature", "left"), ("species", "left"), ("tau", "right"),
                       ("trough", "right"), ("absorption", "right"), ("emission", "right")]:
        table.add_column(name, justify=just)
    if detailed:
        for sid in doc["setups"]:
            table.add_column(escape(sid), justify="left")
    else:
        table.add_column("clear in", justify="right")
        table.add_column("best setup (usable %)", justify="left")
    for f in ep["features"]:
        name = f["feature"] + (" [dim](uncertain)[/dim]" if f["uncertain"] else "")
        cells = [str(f["rank"]), name, escape(f["species"]), _tau(f), f"{f['trough_obs_A']:.0f}",
                 _span(f["absorption_obs_A"]), _span(f["emission_obs_A"])]
        if detailed:
            cells += [_detail(s) for s in f["setups"]]
        else:
            clear = sum(s["verdict"] == "clear" for s in f["setups"])
            best = max(f["setups"], key=_usable)
            cells += [f"{clear}/{len(f['setups'])}", f"{escape(best['setup'])} ({100 * _usable(best):.0f}%)"]
        table.add_row(*cells)
    return table


def _print_matrix(out, ep) -> None:
    """Setups x features: verdict code and usable % (coverage minus telluric loss).

    Setups whose results are identical for every feature (the same instrument design on
    several sites) share one row.
    """
    from rich.markup import escape
    from rich.table import Table

    feats = ep["features"]
    groups: dict[tuple, list[str]] = {}
    for k, sid in enumerate(s["setup"] for s in feats[0]["setups"]):
        key = tuple((f["setups"][k]["verdict"], round(_usable(f["setups"][k]), 2)) for f in feats)
        groups.setdefault(key, []).append(sid)
    table = Table(title=f"day {ep['phase_d']:g}: verdict per setup (C clear, P partly hidden, A hidden by "
                        f"atmosphere, G in detector gap, O outside coverage) and usable %", title_justify="left")
    table.add_column("setup", justify="left", no_wrap=True)
    for f in feats:  # columns headed by rank, as in the feature table above
        table.add_column(f"#{f['rank']}", justify="right", no_wrap=True)
    for key, ids in groups.items():
        label = ids[0] + (f" (+{len(ids) - 1} alike)" if len(ids) > 1 else "")
        cells = [f"[{_STYLE.get(word, '')}]{_CODE.get(word, '?')}{100 * usable:.0f}[/]" for word, usable in key]
        table.add_row(escape(label), *cells)
    out.print(fit_table(table, out.width))
