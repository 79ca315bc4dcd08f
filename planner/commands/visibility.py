"""``kncast visibility``: from which sites, on which nights, between which times."""
from __future__ import annotations

from kncast.planner.commands._common import (fit_table, night_rules_from_args, add_event_options, add_night_rule_options, add_output_options,
                                      add_site_options, check_plot_path, console, emit_json, event_from_args,
                                      sites_from_args)

HELP = "observing windows per site and night: dusk, dawn, airmass and Moon"

CAUTION = ("Windows are computed from geometry only: check Sun-avoidance limits and the observatory's own "
           "tools and rules, which take precedence.")


def add_arguments(p) -> None:
    add_event_options(p)
    add_site_options(p)
    g = p.add_argument_group("nights and rules")
    add_night_rule_options(g, "target", max_nights=366)
    g.add_argument("--candidates", action="store_true",
                   help="also rank the event's [[candidate]] positions per site and night (table; "
                        "'candidates' in --json)")
    add_output_options(p)


def run(args) -> int:
    check_plot_path(args.plot)
    event = event_from_args(args)
    _, sites = sites_from_args(args)
    from kncast.planner.visibility.core import compute_visibility

    rules = night_rules_from_args(args)
    result = compute_visibility(event, sites, **rules)
    ranking = None
    if getattr(args, "candidates", False):
        from kncast.planner.visibility.candidates import rank_candidates

        ranking = rank_candidates(event, sites, **rules)
    if args.plot:
        from kncast.planner.figures.campaign import campaign_figure
        from kncast.planner.output import save_figure

        save_figure(campaign_figure(result), args.plot)
    if args.json:
        doc = visibility_document(result)
        if ranking is not None:
            doc["candidates"] = [n.summary() for n in ranking]
        emit_json(args.json, doc)
    if args.json != "-":
        print_tables(result)
        if ranking is not None:
            print_ranking(ranking)
    return 0


def visibility_document(result) -> dict:
    """The ``--json`` document (schema in docs/json.md, section "visibility")."""
    from kncast.planner.output import document

    return document("visibility", event=result.event.summary(), settings=result.settings(),
                    nights=[n.summary() for n in result.nights], caution=CAUTION)


def _local(t, tz) -> str:
    return t.to_datetime(timezone=tz).strftime("%H:%M")


def _utc(t, with_date: bool = False) -> str:
    return t.utc.strftime("%m-%d %H:%M" if with_date else "%H:%M")


def print_tables(result) -> None:
    """One rich table per site: each night with its windows (or the reason there is none)."""
    from rich.table import Table

    from rich.markup import escape

    out = console(markup=True)  # every string from a file below is escaped
    ev = result.event
    out.print(f"[bold]{escape(ev.id)}[/bold]  RA {ev.ra_deg:.4f} deg  Dec {ev.dec_deg:+.4f} deg  "
              f"t0 {ev.t0.utc.strftime('%Y-%m-%d %H:%M:%S')} UTC   twilight: {result.twilight} "
              f"(Sun < {result.rules.twilight_deg:g} deg)")
    for site in result.sites:
        tz = site.tz
        table = Table(title=escape(f"{site.name}  (id {site.id}, {site.timezone})"), title_justify="left")
        for col, just in [("night", "left"), ("dusk-dawn UTC", "left"), ("window UTC", "left"),
                          ("window local", "left"), ("hours", "right"), ("best X", "right"),
                          ("best UTC", "left"), ("Moon illum.", "right"), ("Moon sep", "right"),
                          ("days since t0", "right")]:
            table.add_column(col, justify=just)
        for rec in result.for_site(site.id):
            dark = (f"{_utc(rec.dusk)}-{_utc(rec.dawn)}" if rec.dusk is not None and rec.dawn is not None
                    else "-")
            if not rec.windows:
                table.add_row(rec.night.isoformat(), dark, f"[dim]{escape(rec.note)}[/dim]", *[""] * 7)
                continue
            for k, w in enumerate(rec.windows):
                table.add_row(
                    rec.night.isoformat() if k == 0 else "", dark if k == 0 else "",
                    f"{_utc(w.start, True)} - {_utc(w.end)}", f"{_local(w.start, tz)} - {_local(w.end, tz)}",
                    f"{w.hours:.2f}", f"{w.best_airmass:.2f}", _utc(w.best_time),
                    f"{100 * w.moon_illumination:.0f}%", f"{w.moon_sep_deg:.0f} deg",
                    f"{w.phase_start_d:.2f}-{w.phase_end_d:.2f}")
            if rec.note:
                table.add_row("", "", f"[dim]{escape(rec.note)}[/dim]", *[""] * 7)
        out.print(fit_table(table, out.width))
    out.print(f"[dim]{CAUTION}[/dim]")


def print_ranking(nights: list) -> None:
    """One rich table: per site and night, the candidates in observing order."""
    from rich.markup import escape
    from rich.table import Table

    table = Table(title="Candidates ranked per site and night (most observable hours first, then best airmass)",
                  title_justify="left")
    for col, just in [("site", "left"), ("night", "left"), ("rank", "right"), ("candidate", "left"),
                      ("hours", "right"), ("best X", "right"), ("best UTC", "left"), ("Moon sep", "right"),
                      ("note", "left")]:
        table.add_column(col, justify=just)
    for night in nights:
        for k, r in enumerate(night.ranking):
            table.add_row(night.site.id if k == 0 else "", night.night.isoformat() if k == 0 else "", str(r.rank),
                          escape(r.candidate.id), f"{r.hours:.2f}",
                          "-" if r.best_airmass is None else f"{r.best_airmass:.2f}",
                          "-" if r.best_time is None else r.best_time.utc.strftime("%m-%d %H:%M"),
                          "-" if r.moon_sep_deg is None else f"{r.moon_sep_deg:.0f} deg",
                          f"[dim]{escape(r.note)}[/dim]" if not r.observable else "")
    out = console(markup=True)
    out.print(fit_table(table, out.width))
