"""``kncast plan``: a night-by-night spectroscopy plan and a proposal-ready report.

Writes one output folder (default ``./kncast-out/<event id>/``), atomically:
``plan.json``, ``windows.ecsv``, ``features.ecsv``, ``exposures.ecsv``,
``figures/*.png``, ``report.md`` and a self-contained ``report.html``
(layout in docs/commands/plan.md, schema in docs/json.md, section "plan").
"""
from __future__ import annotations

from pathlib import Path

from kncast.planner.commands import _common

HELP = "plan a spectroscopy campaign: best setup per site and night, exposure times, report"



def add_arguments(p) -> None:
    from kncast.planner.visibility.nights import TWILIGHT_DEG

    _common.add_event_options(p)
    _common.add_site_options(p)
    g = p.add_argument_group("plan")
    g.add_argument("--nights", type=_common.positive_int("--nights", 60), default=7, metavar="N",
                   help="local nights after t0 to plan (default 7)")
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
    from kncast.forecast.tellurics import CORRECTABLE_TRANSMISSION

    g.add_argument("--telluric-threshold", type=_common.finite_float("--telluric-threshold", 0, 1),
                   default=CORRECTABLE_TRANSMISSION, metavar="T",
                   help="telluric bands transmitting at least T are divided out (correctable); below it a trough "
                        f"is lost there (default {CORRECTABLE_TRANSMISSION:g})")
    g.add_argument("--snr-at", type=_common.finite_float("--snr-at", 1000, 60000), metavar="WAVELENGTH_A",
                   help="also report a plain continuum S/N per resolution element at this vacuum wavelength, A")
    g.add_argument("--snr", type=_common.finite_float("--snr", 0, 1000, low_open=True), default=10.0,
                   metavar="TARGET", help="with --snr-at: the continuum S/N per resolution element quoted as the "
                                          "target there (default 10)")
    g.add_argument("--max-hours", type=_common.finite_float("--max-hours", 0, 24, low_open=True), default=4.0,
                   metavar="H", help="at most this many hours per night on the target (default 4)")
    g.add_argument("--overhead-min", type=_common.finite_float("--overhead-min", 0, 240), default=15.0,
                   metavar="MIN", help="acquisition and readout overhead per night, minutes (default 15)")
    g.add_argument("--twilight", choices=tuple(TWILIGHT_DEG), default="nautical",
                   help="Sun altitude that ends twilight (default nautical, -12 deg)")
    o = p.add_argument_group("output")
    o.add_argument("--out", metavar="DIR", help="output folder (default ./kncast-out/<event id>/)")
    o.add_argument("--force", action="store_true",
                   help="replace a folder holding another event's plan (files kncast did not write are never deleted)")
    o.add_argument("--json", metavar="PATH", help="also write plan.json to PATH ('-' for stdout); quiet terminal")
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

        plan = build_plan(event, sites, nights=args.nights, snr_target=args.snr, max_hours=args.max_hours,
                          overhead_s=args.overhead_min * 60.0, twilight=args.twilight, registry=registry,
                          overrides=overrides, progress=say, sigma=args.sigma, bin_kms=args.bin_kms,
                          features=feature_ids(args), snr_at_A=args.snr_at,
                          telluric_threshold=args.telluric_threshold)
        doc = write_folder(plan, out, say)
    if args.json:
        _common.emit_json(args.json, doc)
    if args.json != "-":
        print_summary(plan, out, quiet=quiet)
    return 0


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


def write_folder(plan, out: Path, say=lambda text: None) -> dict:
    """Write every output file of ``plan`` into ``out`` atomically; returns the plan document."""
    from kncast.planner.plan import folder as plan_outputs
    from kncast.planner.errors import OptionError
    from kncast.planner.output import atomic_dir, write_json

    try:
        out.absolute().parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OptionError("--out", str(out), f"a folder that can be created ({err.strerror})") from None
    with atomic_dir(out) as tmp:
        say("tables")
        files = plan_outputs.write_tables(plan, tmp)
        say("figures")
        figures = plan_outputs.write_figures(plan, tmp)
        files["figures"] = [f["path"] for f in figures]
        files.update(plan="plan.json", report_md="report.md", report_html="report.html")
        doc = plan_outputs.document(plan, files)
        write_json(tmp / "plan.json", doc)
        say("report")
        from kncast.planner.plan.report import write_report

        write_report(tmp, doc, figures)
    return doc


def print_summary(plan, out: Path, quiet: bool = False) -> None:
    """Rich tables: the recommended observations (setup, epoch, exposure, S/N, reason) and, per site, the
    nights without a useful spectrum and why; then the report path and the cautions in one line."""
    from rich.table import Table

    from kncast.planner.plan.report import CAUTION_LINE

    con = _common.console()
    if not quiet:
        useful = sorted(plan.useful(), key=lambda p: p.phase_d)
        if useful:
            sigma = plan.settings["sigma"]
            t = Table(title=f"Recommended spectra of {plan.event.id} (exposure for {sigma:g} sigma on the best "
                            f"diagnostic trough; sigma reached in the usable time)")
            for col, kw in (("day", {"justify": "right"}), ("site", {}), ("night", {}), ("setup", {}),
                            ("exposure", {}), ("sigma", {"justify": "right"}), ("why", {"ratio": 1})):
                t.add_column(col, overflow="fold", **kw)
            for p in useful:
                c = p.choice
                t.add_row(f"{p.phase_d:.2f}", p.site.id, p.record.night.isoformat(), c.setup,
                          f"{c.nexp} x {c.exposure_s:.0f} s" if c.nexp else "-", f"{c.significance:.1f}", p.reason)
            con.print(t)
        rest = Table(title="Nights without a useful spectrum")
        for col in ("site", "nights", "why"):
            rest.add_column(col, overflow="fold", ratio=1 if col == "why" else None)
        for site, nights, reason in unused_runs(plan):
            rest.add_row(site, nights, reason)
        if rest.row_count:
            con.print(rest)
        camp = plan.campaign
        if camp["last_useful"]:
            lu = camp["last_useful"]
            con.print(f"Last useful night: {lu['night']} at {lu['site']} (day {lu['phase_d']:.2f}); "
                      f"{camp['useful_nights']} useful site-night(s).")
        else:
            con.print("Nothing useful can be done: " + camp.get("why_nothing", ""))
    con.print(f"Report: {out / 'report.html'}")
    con.print(CAUTION_LINE)


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
