"""``kncast plan``: a night-by-night spectroscopy plan and a proposal-ready report.

Writes one output folder (default ``./kncast-out/<event id>/``), atomically:
``plan.json``, ``windows.ecsv``, ``features.ecsv``, ``exposures.ecsv``,
``figures/*.png``, ``report.md`` and a self-contained ``report.html``
(layout in docs/commands/plan.md, schema in docs/json.md, section "plan").
"""
from __future__ import annotations

from pathlib import Path

from kncast.planner.commands import _common

PARAMETER_DESTS = {"anchors": "anchor", "setups": "setups"}  # API parameter -> option dest

HELP = "plan a spectroscopy campaign: best setup per site and night, exposure times, report"



def add_arguments(p) -> None:
    _common.add_event_options(p)
    _common.add_site_options(p)
    n = p.add_argument_group("nights and windows")
    _common.add_night_rule_options(n, "target", max_nights=60, default_nights=7)
    g = p.add_argument_group("plan")
    g.add_argument("--anchor", action="append", metavar="BAND=MAG@UTC",
                   help="measured AB magnitude to rescale the photosphere model to before planning (repeatable; "
                        "band names as kncast lightcurve lists them), e.g. bessell-R=20.8@2027-03-15T01:10:00Z")
    from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED

    g.add_argument("--draws", type=_common.positive_int("--draws", high=5000), default=DEFAULT_DRAWS, metavar="N",
                   help="realisations of the distance (distance_err_mpc) and of the [model] ranges for the "
                        f"16-84%% ranges and how often a night is useful (default {DEFAULT_DRAWS})")
    g.add_argument("--seed", type=_common.positive_int("--seed", high=2**31 - 1), default=DEFAULT_SEED, metavar="S",
                   help=f"seed of the draws (default {DEFAULT_SEED}: the same numbers every run)")
    g.add_argument("--setups", action="append", metavar="ID,...",
                   help="only these setups (SITE/TELESCOPE/INSTRUMENT[:SETUP], as kncast setups lists them)")
    from kncast.forecast.defaults import DEFAULT_BIN_KMS, DEFAULT_MIN_DEPTH, DEFAULT_SIGMA

    g.add_argument("--sigma", type=_common.finite_float("--sigma", 0, 100, low_open=True), default=DEFAULT_SIGMA,
                   metavar="N", help="detection significance a diagnostic feature must reach in the usable time "
                                     f"for the night to be useful (default {DEFAULT_SIGMA:g})")
    g.add_argument("--features", action="append", metavar="ID,...",
                   help="diagnostic features to judge by (feature ids as in kncast lines; default: every feature "
                        f"whose expected depth (1 - W)(1 - exp(-tau)) is at least {DEFAULT_MIN_DEPTH:g} at that epoch)")
    g.add_argument("--bin-kms", type=_common.finite_float("--bin-kms", 10, 30000), default=DEFAULT_BIN_KMS,
                   metavar="KMS", help=f"velocity bin of the continuum S/N across a trough, km/s "
                                       f"(default {DEFAULT_BIN_KMS:g})")
    from kncast.forecast.defaults import CORRECTABLE_TRANSMISSION

    g.add_argument("--telluric-threshold", type=_common.finite_float("--telluric-threshold", 0, 1),
                   default=CORRECTABLE_TRANSMISSION, metavar="T",
                   help="telluric bands transmitting at least T are divided out (correctable); below it a trough "
                        f"is lost there (default {CORRECTABLE_TRANSMISSION:g})")
    g.add_argument("--snr-at", type=_common.finite_float("--snr-at", 1000, 60000), metavar="WAVELENGTH_A",
                   help="also report a plain continuum S/N per resolution element at this vacuum wavelength, A")
    g.add_argument("--snr", type=_common.finite_float("--snr", 0, 1000, low_open=True), default=10.0,
                   metavar="TARGET", help="continuum S/N per resolution element a first-day classification "
                                          "spectrum must reach (at --snr-at, else 6000 A), quoted with --snr-at "
                                          "(default 10)")
    _common.add_time_per_night_options(g)
    o = p.add_argument_group("output")
    o.add_argument("--out", metavar="DIR", help="output folder (default ./kncast-out/<event id>/)")
    o.add_argument("--force", action="store_true",
                   help="replace a folder holding another event's plan (files kncast did not write are never deleted)")
    o.add_argument("--json", metavar="PATH", help="also write plan.json to PATH ('-' for stdout); quiet terminal")
    o.add_argument("--ics", metavar="FILE", help="also write the planned blocks as an iCalendar file (RFC 5545, UTC)")
    o.add_argument("--verbose", action="store_true",
                   help="also print every night's reason and the nights without a spectrum")
    from kncast.planner.plan.folder import FIGURE_SETS, MAX_SNR_FIGURES

    o.add_argument("--figures", choices=FIGURE_SETS, default=FIGURE_SETS[0],
                   help=f"'chosen' (default): the campaign's feature map (a row per day) and S/N spectra of the "
                        f"most often chosen setups (at most {MAX_SNR_FIGURES}); 'all': also a feature map per day "
                        "(a row per chosen epoch) and S/N spectra of every setup with a measured epoch")
    from kncast.planner.commands._model_options import add_model_options

    add_model_options(p)


def run(args) -> int:
    quiet = bool(args.json)
    event = _common.event_from_args(args)
    registry, sites = _common.sites_from_args(args)
    from kncast.planner.commands._model_options import overrides_from_args

    overrides = overrides_from_args(args)
    out = Path(args.out) if args.out else Path("kncast-out") / safe_name(event.id)
    check_out(out, event.id, force=getattr(args, "force", False))
    if args.ics:
        _common.check_output_file("--ics", args.ics)
    from kncast.planner.plan.figureserver import FigureServer

    # forked before the progress display starts its thread; loads the figure modules while the plan is built
    server = FigureServer() if FigureServer.available() else None
    try:
        return _plan_and_write(args, event, registry, sites, overrides, out, quiet, server)
    finally:
        if server is not None:
            server.close()


def _plan_and_write(args, event, registry, sites, overrides, out: Path, quiet: bool, server) -> int:
    with _common.progress(disable=quiet) as bar:
        task = bar.add_task("planning", total=7)

        def say(text):
            bar.update(task, description=text, advance=1)
            # the figures are drawn by forked workers: pause the display's refresh thread meanwhile
            if text == "figures" and bar.live.is_started:
                bar.refresh()
                bar.stop()
            elif not bar.disable and not bar.live.is_started:
                bar.start()

        from kncast.planner.plan.core import build_plan

        rules = _common.night_rules_from_args(args)
        ready = _early_figures(server, args.figures) if server is not None else None
        plan = build_plan(event, sites, snr_target=args.snr, max_hours=args.max_hours,
                          overhead_s=args.overhead_min * 60.0, registry=registry,
                          overrides=overrides, progress=say, sigma=args.sigma, bin_kms=args.bin_kms,
                          features=feature_ids(args), snr_at_A=args.snr_at,
                          telluric_threshold=args.telluric_threshold, setups=_common.split_list(args.setups) or None,
                          anchors=anchors_from_args(args, event), draws=args.draws, seed=args.seed,
                          ready=ready, **rules)
        doc = write_folder(plan, out, say, figures=args.figures, server=server)
    if args.ics:
        from kncast.planner.output import atomic_path
        from kncast.planner.plan.exports import blocks_ics

        with atomic_path(args.ics) as tmp:
            Path(tmp).write_bytes(blocks_ics(doc))
    if args.json:
        _common.emit_json(args.json, doc)
    if args.json != "-":
        print_summary(plan, doc, out, quiet=quiet, verbose=args.verbose)
    return 0


def anchors_from_args(args, event) -> list | None:
    """``--anchor BAND=MAG@UTC`` items as (band, AB mag, observer-frame days since t0)."""
    if not args.anchor:
        return None
    from kncast.planner.errors import OptionError
    from kncast.planner.events.model import parse_time_utc

    out = []
    for text in args.anchor:
        band, eq, rest = text.partition("=")
        mag, at, when = rest.partition("@")
        try:
            value = float(mag)
        except ValueError:
            value = None
        if not (eq and at and band.strip() and value is not None):
            raise OptionError("--anchor", text, "BAND=MAG@UTC, e.g. bessell-R=20.8@2027-03-15T01:10:00Z")
        t = parse_time_utc(when.strip(), "--anchor")
        out.append((band.strip(), value, float((t - event.t0).to_value("day"))))
    return out


def feature_ids(args) -> list[str] | None:
    """The --features ids, checked against the line list (unknown ids suggest the closest)."""
    ids = _common.split_list(args.features)
    if not ids:
        return None
    from kncast.forecast.linelist import LineList
    from kncast.planner.errors import UnknownNameError

    known = {f.id for f in LineList.load().features()}
    for i in ids:
        if i not in known:
            raise UnknownNameError("feature (--features)", i, known)
    return list(dict.fromkeys(ids))


def safe_name(text: str) -> str:
    """A folder name from an event id: readable, different for different ids (kncast.planner.plan.outfolder)."""
    from kncast.planner.plan.outfolder import folder_name

    return folder_name(text)


def check_out(out: Path, event_id: str, force: bool = False) -> None:
    """The output folder must be new, empty or an earlier plan folder of this event holding only the files
    its plan.json lists (another event's only with --force), inside a folder we may write."""
    import os

    from kncast.planner.errors import OptionError
    from kncast.planner.plan.outfolder import check_plan_folder

    base = out.absolute().parent
    while not base.exists():
        base = base.parent
    if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
        raise OptionError("--out", str(out), f"a folder that can be created ({base} is not writable)")
    if out.exists() and not out.is_dir():
        raise OptionError("--out", str(out), "a folder path (this is an existing file)")
    check_plan_folder(out, event_id, force=force)  # names the files kncast did not write


def previous_plan(out: Path, event_id: str) -> dict | None:
    """The plan.json already in ``out`` for the same event (kept as plan.previous.json by a re-plan), or None."""
    import json

    path = out / "plan.json"
    try:
        doc = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    ok = isinstance(doc, dict) and doc.get("kind") == "plan" and (doc.get("event") or {}).get("id") == event_id
    return doc if ok else None


def write_folder(plan, out: Path, say=lambda text: None, figures: str = "chosen", server=None) -> dict:
    """Write every output file of ``plan`` into ``out`` atomically; returns the plan document.

    ``figures`` picks the figure set (kncast.planner.plan.folder.FIGURE_SETS); ``server``, a started
    :class:`~kncast.planner.plan.figureserver.FigureServer`, draws them (else this process's workers)."""
    from kncast.planner.plan import folder as plan_outputs
    from kncast.planner.errors import OptionError
    from kncast.planner.output import atomic_dir, write_json

    try:
        out.absolute().parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OptionError("--out", str(out), f"a folder that can be created ({err.strerror})") from None
    say("figures")  # before the figure workers fork (the progress display pauses its thread)
    with atomic_dir(out) as tmp, _drawing(plan, tmp, figures, server) as drawing:
        files = plan_outputs.write_tables(plan, tmp)  # while the workers draw
        files["figures"] = drawing.paths
        files.update(plan="plan.json", report_md="report.md", report_html="report.html")
        files["blocks"] = "blocks.txt"
        previous = previous_plan(out, plan.event.id)
        if previous is not None:
            files["previous"] = "plan.previous.json"
        doc = plan_outputs.document(plan, files)
        if previous is not None:
            from kncast.planner.plan.changes import plan_changes

            doc["changes"] = plan_changes(previous, doc)
            write_json(tmp / "plan.previous.json", previous)
        write_json(tmp / "plan.json", doc)
        from kncast.planner.plan.exports import blocks_text

        (tmp / "blocks.txt").write_text(blocks_text(doc))
        drawn = drawing.finish()
        say("report")
        from kncast.planner.plan.report import write_report

        write_report(tmp, doc, drawn)
    return doc


def _early_figures(server, figures: str):
    """build_plan's ``ready`` hook: the server draws the campaign chart from the visibility, and the other
    figures from the plan once its choices are made."""
    def ready(part, value):
        if part == "visibility":
            server.draw_visibility(value)
        elif part == "choices":
            server.start(value, figures)

    return ready


def _drawing(plan, folder: Path, figures: str, server):
    """The figures of ``plan`` being drawn into ``folder``: by ``server`` when it has taken (or can take)
    the plan, else by this process's workers."""
    from kncast.planner.plan import folder as plan_outputs

    if server is not None and (server.started or server.start(plan, figures)):
        return server.into(folder)
    return plan_outputs.start_figures(plan, folder, figures)


def print_summary(plan, doc: dict, out: Path, quiet: bool = False, verbose: bool = False) -> None:
    """Rich tables: one row per planned block (epoch, telescope, UTC block, airmass, N x t, S/N of that
    exposure, detected features); with ``verbose`` every night's reason and the nights without a spectrum;
    then the report path and the cautions in one line.  Fits 80 columns."""
    from kncast.planner.plan.report import CAUTION_LINE

    con = _common.console()
    if not quiet:
        blocks = doc.get("blocks", [])
        if blocks:
            con.print(_common.fit_table(blocks_table(plan, blocks), con.width))
        if verbose:
            con.print(_common.fit_table(reasons_table(plan), con.width))
            rest = unused_table(plan)
            if rest.row_count:
                con.print(_common.fit_table(rest, con.width))
        camp = plan.campaign
        if camp["last_useful"]:
            lu = camp["last_useful"]
            con.print(f"Last useful night: {lu['night']} at {lu['site']} (day {lu['phase_d']:.2f}); "
                      f"{camp['useful_nights']} useful site-night(s), {len(blocks)} block(s)."
                      + ("" if verbose else " Reasons: --verbose."))
        else:
            con.print("Nothing useful can be done: " + camp.get("why_nothing", ""))
    con.print(f"Report: {out / 'report.html'}")
    con.print(CAUTION_LINE)


def _block_utc(b: dict) -> str:
    """'03-16 03:43-03:58' (month-day, start-end, UTC), wrapping at the space when narrow."""
    return f"{b['start_utc'][5:10]} {b['start_utc'][11:16]}-{b['end_utc'][11:16]}"


def blocks_table(plan, blocks: list):
    """The planned blocks, one row each: setup ids shown as 'site telescope' over 'instrument' (wrapping at
    spaces, never inside a word), the detected features as short trade names."""
    from rich import box
    from rich.table import Table

    from kncast.planner.measure import feature_short_names

    names = feature_short_names()
    sigma = plan.settings["sigma"]
    t = Table(title=f"Planned spectra of {plan.event.id}: S/N per {plan.settings['bin_kms']:g} km/s bin at the "
                    f"trough for that exposure; detected at >= {sigma:g} sigma", title_justify="left",
              box=box.SIMPLE_HEAD, pad_edge=False)
    longest = max((len(w) for b in blocks for w in b["setup"].replace("/", " ").split()), default=8)
    answer = {"style": "bold"}  # where, when and how long stand out (on a terminal; plain text when piped)
    for col, kw in (("day", {"justify": "right"}), ("setup", {"min_width": longest, **answer}),
                    ("UTC", {"min_width": 11, **answer}), ("X", {"justify": "right"}), ("N x t", answer),
                    ("S/N", {"justify": "right"}),
                    ("detected", {"ratio": 1, "min_width": 14})):
        t.add_column(col, overflow="fold", **kw)
    for b in blocks:
        x = b["airmass"][1]
        found = [names.get(f, f) for f in b["detected"]]
        what = (found[0] + (f" +{len(found) - 1}" if len(found) > 1 else "")) if found else b["kind"]
        rng = b.get("exposure_range_s")
        span = f"\n({rng['p16']:.0f}-{rng['p84']:.0f})" if rng else ""
        t.add_row(f"{b['phase_d']:.2f}", b["setup"].replace("/", " "), _block_utc(b),
                  "-" if x is None else f"{x:.2f}", f"{b['n_exp']}x{b['exp_s']:.0f}s{span}",
                  "-" if b["snr"] is None else f"{b['snr']:.1f}", what)
    return t


def reasons_table(plan):
    from rich.table import Table

    t = Table(title="Every site and night: the reason", title_justify="left")
    for col, kw in (("site", {"min_width": 6}), ("night", {"no_wrap": True}), ("reason", {"ratio": 1})):
        t.add_column(col, **kw)
    for p in plan.nights:
        t.add_row(p.site.id, p.record.night.isoformat(), p.reason)
    return t


def unused_table(plan):
    from rich.table import Table

    rest = Table(title="Nights without a useful spectrum", title_justify="left")
    for col in ("site", "nights", "why"):
        rest.add_column(col, ratio=1 if col == "why" else None)
    for site, nights, reason in unused_runs(plan):
        rest.add_row(site, nights, reason)
    return rest


def unused_runs(plan) -> list[tuple[str, str, str]]:
    """(site, nights, reason) for runs of consecutive nights of one site with the same status and no choice."""
    runs = []
    for p in plan.nights:
        if p.choice is not None:
            continue
        last = runs[-1] if runs else None
        if last and last[0] is p.site and last[1] == p.status and last[3] == p.record.night.toordinal() - 1:
            last[2].append(p)
            last[3] = p.record.night.toordinal()
        else:
            runs.append([p.site, p.status, [p], p.record.night.toordinal()])
    out = []
    for site, _status, group, _end in runs:
        first, end = group[0].record.night.isoformat(), group[-1].record.night.isoformat()
        nights = first if len(group) == 1 else f"{first} to {end} ({len(group)})"
        reason = group[0].reason + ("" if len(group) == 1 else " (first night of the run)")
        out.append((site.id, nights, reason))
    return out
