"""``kncast lightcurve``: the photosphere and synthetic magnitudes of the transient, epoch by epoch."""
from __future__ import annotations

from kncast.planner.commands._common import (add_event_options, add_output_options, check_plot_path, console, emit_json,
                                      event_from_args, finite_float, parse_phases, positive_int, split_list)
from kncast.forecast.defaults import DEFAULT_BANDS
from kncast.planner.commands._model_options import add_model_options, overrides_from_args

HELP = "forecast the photosphere (T, R, L, v) and AB magnitudes at chosen days after t0"

DEFAULT_PHASES = "0.5,1,1.5,2,3,4,5,7,10,14"
CAUTION = ("Model estimates from a blackbody photosphere: real kilonova spectra depart from it; "
           "use the observatory's own tools for any exposure decision.")


def add_arguments(p) -> None:
    add_event_options(p)
    p.add_argument("--ebv-host", type=finite_float("--ebv-host", 0.0, 10.0), default=None, metavar="MAG",
                   help="host-galaxy E(B-V), mag, applied in the rest frame (default: event file, else 0)")
    add_model_options(p)
    p.add_argument("--phases", default=DEFAULT_PHASES, metavar="D,D,...",
                   help=f"observer-frame days since t0 (default {DEFAULT_PHASES})")
    p.add_argument("--bands", action="append", metavar="BAND,...",
                   help="speclite band names, comma separated (default: Bessell UBVRI and 2MASS JHKs)")
    from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED

    p.add_argument("--draws", type=positive_int("--draws", high=5000), default=DEFAULT_DRAWS, metavar="N",
                   help="realisations of the distance (distance_err_mpc) and of the [model] ranges for the 16-84%% "
                        f"magnitude ranges (default {DEFAULT_DRAWS})")
    p.add_argument("--seed", type=positive_int("--seed", high=2**31 - 1), default=DEFAULT_SEED, metavar="S",
                   help=f"seed of the draws (default {DEFAULT_SEED})")
    add_output_options(p)


def bands_from_args(args) -> tuple[str, ...]:
    """Validated band names (UnknownNameError with suggestions for a misspelt one)."""
    from kncast.forecast.photometry import known_bands
    from kncast.planner.errors import UnknownNameError

    bands = split_list(args.bands) or list(DEFAULT_BANDS)
    for band in bands:
        if band not in known_bands():
            raise UnknownNameError("band (--bands)", band, known_bands())
    return tuple(dict.fromkeys(bands))


def compute(args):
    """(event, transient, state, bands, AB mags, Vega mags, AB-magnitude percentiles over the draws or None)."""
    import dataclasses

    from kncast.forecast.photometry import vega_zero_points
    from kncast.planner.source import transient_for_event

    phases = parse_phases(args.phases)
    bands = bands_from_args(args)
    check_plot_path(args.plot)
    event = event_from_args(args)
    if args.ebv_host is not None:
        event = dataclasses.replace(event, ebv_host=args.ebv_host)
    transient = transient_for_event(event, overrides=overrides_from_args(args))
    state = transient.state(phases)
    mags = transient.mag_ab(phases, bands)
    if args.draws:
        from kncast.planner.draws import magnitude_draws, percentiles

        draws = magnitude_draws(event, transient, phases, bands, args.draws, args.seed,
                                model_overridden=bool(overrides_from_args(args)))
        ranges = {b: [percentiles(draws[b][:, i]) for i in range(len(phases))] for b in bands}
    else:
        ranges = None
    vega_bands = [b for b in bands if b in vega_zero_points()]
    vega = transient.mag_vega(phases, vega_bands) if vega_bands else {}
    return event, transient, state, bands, mags, vega, ranges


def document_for(event, transient, state, bands, mags, vega, ranges=None, draws: int = 0) -> dict:
    """The ``lightcurve`` JSON document (schema in docs/json.md, section "lightcurve")."""
    from kncast.planner.output import document

    multi = len(state.component_names) > 1
    epochs = []
    for i, phase in enumerate(state.phase_d):
        row = {
            "phase_d": float(phase), "age_d": float(state.age_d[i]),
            "temperature_K": float(state.temperature_K[i]), "radius_cm": float(state.radius_cm[i]),
            "luminosity_erg_s": float(state.luminosity_erg_s[i]), "v_phot_c": float(state.v_phot_c[i]),
            "v_max_c": float(state.v_max_c[i]),
            "mag_ab": {b: float(mags[b][i]) for b in bands},
            **({"mag_ab_range": {b: ranges[b][i] for b in bands}} if ranges else {}),
            "mag_vega": {b: float(m[i]) for b, m in vega.items()},
        }
        if multi:
            row["components"] = [
                {"name": name, "temperature_K": float(state.comp_temperature_K[k, i]),
                 "radius_cm": float(state.comp_radius_cm[k, i]),
                 "luminosity_erg_s": float(state.comp_luminosity_erg_s[k, i]),
                 "v_phot_c": float(state.comp_v_phot_c[k, i])}
                for k, name in enumerate(state.component_names)]
        epochs.append(row)
    model = transient.photosphere
    return document(
        "lightcurve", event=event.summary(),
        model={"name": model.name, "parameters": model.parameters(),
               "ejecta_mass_msun": transient.ejecta_mass_msun},
        source={"distance_mpc": transient.distance_mpc, "redshift": transient.redshift,
                "ebv_mw": transient.ebv_mw, "ebv_host": transient.ebv_host, "cosmology": "Planck18",
                "extinction_law": "Fitzpatrick 1999, R_V = 3.1"},
        bands=list(bands), epochs=epochs, draws=draws, caution=CAUTION)


def run(args) -> int:
    event, transient, state, bands, mags, vega, ranges = compute(args)
    doc = document_for(event, transient, state, bands, mags, vega, ranges, draws=args.draws if ranges else 0)
    if args.plot:
        from kncast.planner.figures.lightcurve import distance_range_mpc, lightcurve_figure
        from kncast.planner.output import save_figure

        near_far = distance_range_mpc(event, transient, args.draws or None, args.seed)
        save_figure(lightcurve_figure(transient, state, bands, event.id, distance_range=near_far), args.plot)
    if args.json:
        emit_json(args.json, doc)
    if args.json != "-":
        _print_tables(event, transient, state, bands, mags)
    return 0


def _print_tables(event, transient, state, bands, mags) -> None:
    from rich.markup import escape
    from rich.table import Table

    out = console(markup=True)  # every string from a file below is escaped
    model = transient.photosphere
    title = (f"{escape(event.id)}: {escape(model.name)} photosphere at {transient.distance_mpc:.1f} Mpc "
             f"(z = {transient.redshift:.4f}, E(B-V)_MW = {transient.ebv_mw:.2f}) - AB magnitudes")
    table = Table(title=title, title_justify="left")
    for head in ("days since t0", "T [K]", "R [1e14 cm]", "L [erg/s]", "v_phot [c]"):
        table.add_column(escape(head), justify="right")
    for b in bands:
        table.add_column(escape(b), justify="right")
    for i, phase in enumerate(state.phase_d):
        table.add_row(f"{phase:g}", f"{state.temperature_K[i]:.0f}", f"{state.radius_cm[i] / 1e14:.2f}",
                      f"{state.luminosity_erg_s[i]:.2e}", f"{state.v_phot_c[i]:.3f}",
                      *[_mag(mags[b][i]) for b in bands])
    out.print(table)
    if len(state.component_names) > 1:
        comp = Table(title=escape("components: T [K] / L [erg/s] / v_phot [c]"), title_justify="left")
        comp.add_column("days since t0", justify="right")
        for name in state.component_names:
            comp.add_column(escape(name), justify="right")
        for i, phase in enumerate(state.phase_d):
            comp.add_row(f"{phase:g}", *[f"{state.comp_temperature_K[k, i]:.0f} / "
                                         f"{state.comp_luminosity_erg_s[k, i]:.2e} / "
                                         f"{state.comp_v_phot_c[k, i]:.3f}"
                                         for k in range(len(state.component_names))])
        out.print(comp)
    out.print(CAUTION)


def _mag(m: float) -> str:
    return f"{m:.2f}" if m == m and abs(m) != float("inf") else "-"
