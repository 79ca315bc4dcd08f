"""``kncast coverage``: how much of a HEALPix probability map each site can observe, night by night."""
from __future__ import annotations

import sys

from kncast.planner.commands._common import (night_rules_from_args, add_night_rule_options, add_output_options, add_site_options,
                                      check_plot_path, console, emit_json, finite_float, sites_from_args)

HELP = "observable probability of a HEALPix sky map per site and night"

CAUTION = ("Coverage is computed from geometry only (pixel centres sampled in time): check Sun-avoidance "
           "limits and the observatory's own tools and rules, which take precedence.")


def add_arguments(p) -> None:
    g = p.add_argument_group("sky map and time")
    g.add_argument("--map", required=True, metavar="FILE",
                   help="HEALPix probability map, FITS (flat NESTED/RING or multi-order NUNIQ)")
    g.add_argument("--t0", required=True, metavar="ISO",
                   help="merger/alert time, ISO 8601 UTC, e.g. 2027-03-14T02:17:00Z (nothing counts before it)")
    add_site_options(p)
    g = p.add_argument_group("nights and rules")
    add_night_rule_options(g, "pixel", max_nights=31)
    g.add_argument("--step", type=finite_float("--step", 1, 60), default=10.0, metavar="MIN",
                   help="time step inside each dark interval, minutes (1-60, default 10)")
    add_output_options(p)


def run(args) -> int:
    check_plot_path(args.plot)
    from kncast.planner.events.model import parse_time_utc

    t0 = parse_time_utc(args.t0, "--t0")
    _, sites = sites_from_args(args)
    skymap, notices = _load(args.map)
    for line in notices:
        print(f"kncast coverage: warning: {line}", file=sys.stderr)
    from kncast.planner.visibility.skycoverage import FIRST_NIGHTS, compute_coverage

    result = compute_coverage(skymap, sites, t0, **night_rules_from_args(args), step_min=args.step,
                              pixel_flags=FIRST_NIGHTS if args.plot else False)  # the chart's nights only
    doc = coverage_document(result, t0)
    fig = None
    if args.plot:
        from kncast.planner.figures.skymap import coverage_figure

        fig = coverage_figure(result)
    if fig is not None:  # everything is computed: now write, each file atomically
        from kncast.planner.output import save_figure

        save_figure(fig, args.plot)
    if args.json:
        emit_json(args.json, doc)
    if args.json != "-":
        print_table(result, t0)
    return 0


def _load(path):
    """The validated map and the one-line notices (e.g. renormalisation) raised while reading it."""
    import warnings

    from kncast.planner.events.skymap import SkymapWarning, load_skymap

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SkymapWarning)
        skymap = load_skymap(path)
    notices = [str(w.message) for w in caught if issubclass(w.category, SkymapWarning)]
    for w in caught:
        if not issubclass(w.category, SkymapWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return skymap, notices


def coverage_document(result, t0) -> dict:
    """The ``--json`` document (schema in docs/json.md, section "coverage")."""
    from kncast.planner.output import document, iso_utc

    return document("coverage", map=result.skymap.summary(), t0_utc=iso_utc(t0), settings=result.settings,
                    nights=[n.summary() for n in result.nights], caution=CAUTION)


def print_table(result, t0) -> None:
    """One rich table: every site and night with its observable probability, hours and area."""
    from rich.table import Table

    from rich.markup import escape

    out = console(markup=True)  # every string from a file below is escaped
    m = result.skymap
    s = m.summary()
    dist = (f"  distance {s['distance_mean_mpc']:.0f} +- {s['distance_std_mpc']:.0f} Mpc"
            if s["distance_mean_mpc"] is not None and s["distance_std_mpc"] is not None else "")
    out.print(f"[bold]{escape(str(m.path))}[/bold]  {s['ordering']} nside {s['nside']} ({s['npix']} pixels)  "
              f"90% area {s['area90_deg2']:.1f} deg2  peak RA {s['peak_ra_deg']:.2f} Dec {s['peak_dec_deg']:+.2f}"
              f"{dist}")
    st = result.settings
    moon = f", Moon > {st['min_moon_sep_deg']:g} deg" if st.get("min_moon_sep_deg") is not None else ""
    out.print(f"t0 {t0.utc.strftime('%Y-%m-%d %H:%M:%S')} UTC   twilight: {st['twilight']} "
              f"(Sun < {st['twilight_sun_altitude_deg']:g} deg){moon}   step {st['step_min']:g} min")
    table = Table(title="Probability observable per site and night", title_justify="left")
    for col, just in [("site", "left"), ("night", "left"), ("dusk-dawn UTC", "left"), ("dark h", "right"),
                      ("P observable", "right"), ("P x hours", "right"), ("90% area observable", "right"),
                      ("note", "left")]:
        table.add_column(col, justify=just)
    area90 = s["area90_deg2"]
    for n in result.nights:
        dark = (f"{n.dusk.utc.strftime('%m-%d %H:%M')}-{n.dawn.utc.strftime('%H:%M')}"
                if n.dusk is not None and n.dawn is not None else "-")
        frac = n.area90_observable_deg2 / area90 if area90 > 0 else 0.0
        table.add_row(n.site.id, n.night.isoformat(), dark, f"{n.dark_hours:.2f}",
                      f"{100 * n.observable_probability:.1f}%", f"{n.weighted_hours:.2f} h",
                      f"{n.area90_observable_deg2:.1f} deg2 ({100 * frac:.0f}%)", f"[dim]{escape(n.note)}[/dim]")
    out.print(table)
    out.print(f"[dim]{CAUTION}[/dim]")
