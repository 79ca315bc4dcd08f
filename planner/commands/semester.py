"""``kncast semester``: how many useful spectroscopic epochs a site network should expect in a semester.

Writes one output folder (default ``./kncast-out/semester-<start>-<end>/``), atomically:
``semester.json``, ``grid.ecsv``, ``setups.ecsv``, ``epochs.ecsv``, ``figures/*.png``, ``report.md`` and a
self-contained ``report.html`` (docs/commands/semester.md; schema in docs/json.md, section "semester").
"""
from __future__ import annotations

from pathlib import Path

from kncast.planner.commands import _common

HELP = "semester forecast for a target-of-opportunity proposal: expected events and useful spectroscopic epochs"

PARAMETER_DESTS = {"velocity_c": "velocity_c", "mass_msun": "mass_msun"}


def add_arguments(p) -> None:
    from kncast.planner.semester import run as r

    _common.add_site_options(p)
    g = p.add_argument_group("semester and population")
    g.add_argument("--start", type=_common.iso_date("--start"), required=True, metavar="YYYY-MM-DD",
                   help="first day of the semester (UTC)")
    g.add_argument("--end", type=_common.iso_date("--end"), required=True, metavar="YYYY-MM-DD",
                   help="end of the semester (UTC, exclusive)")
    g.add_argument("--horizon-mpc", type=_common.finite_float("--horizon-mpc", 0, r.HORIZON_MAX_MPC, low_open=True),
                   default=r.DEFAULT_HORIZON_MPC, metavar="D",
                   help=f"luminosity distance out to which the gravitational-wave network detects the merger class, "
                        f"Mpc (default {r.DEFAULT_HORIZON_MPC:g}: low end of the planned 160-190 Mpc range of the "
                        "fourth observing run, Abbott et al. 2020, Living Rev. Relativ. 23, 3, from memory)")
    g.add_argument("--duty", type=_common.finite_float("--duty", 0, 1, low_open=True), default=r.DEFAULT_DUTY,
                   metavar="F", help=f"fraction of the time the network is observing (default {r.DEFAULT_DUTY:g}, "
                                     "third-run duty cycles, same source, from memory)")
    g.add_argument("--rate", metavar="R|LO,HI", default=f"{r.DEFAULT_RATE[0]:g},{r.DEFAULT_RATE[1]:g}",
                   help="volumetric merger rate or its interval, Gpc^-3 yr^-1 (default 10,1700: GWTC-3 population "
                        "analysis, Phys. Rev. X 13, 011048 (2023), quoted from memory)")
    g.add_argument("--events", type=_common.positive_int("--events", high=10_000_000), default=r.DEFAULT_EVENTS,
                   metavar="N", help=f"simulated mergers (default {r.DEFAULT_EVENTS})")
    g.add_argument("--seed", type=int, default=1, metavar="N", help="random seed (default 1): same seed, same numbers")
    g.add_argument("--mass-msun", metavar="LO,HI", default=f"{r.DEFAULT_MASS_MSUN[0]:g},{r.DEFAULT_MASS_MSUN[1]:g}",
                   help="ejecta mass prior, log-uniform, Msun (default 0.01,0.1: Metzger 2019, Living Rev. Relativ. "
                        "23, 1, from memory)")
    g.add_argument("--velocity-c", metavar="LO,HI",
                   default=f"{r.DEFAULT_VELOCITY_C[0]:g},{r.DEFAULT_VELOCITY_C[1]:g}",
                   help="photospheric velocity at 1 d prior, uniform, c (default 0.1,0.3, same source)")
    n = p.add_argument_group("nights and detection")
    n.add_argument("--nights", type=_common.positive_int("--nights", high=30), default=r.DEFAULT_NIGHTS, metavar="N",
                   help=f"local nights followed per merger (default {r.DEFAULT_NIGHTS}, as kncast plan)")
    from kncast.forecast.defaults import DEFAULT_SIGMA
    from kncast.planner.visibility.nights import TWILIGHT_DEG

    n.add_argument("--twilight", choices=tuple(TWILIGHT_DEG), default="nautical",
                   help="darkness starts when the Sun is below -6 / -12 / -18 deg (default nautical)")
    n.add_argument("--max-airmass", type=_common.finite_float("--max-airmass", 1, 38, low_open=True), metavar="X",
                   help="highest airmass (Kasten & Young 1989), in (1, 38]")
    n.add_argument("--sigma", type=_common.finite_float("--sigma", 0, 100, low_open=True), default=DEFAULT_SIGMA,
                   metavar="N", help=f"significance a diagnostic feature must reach for a useful epoch "
                                     f"(default {DEFAULT_SIGMA:g}, common practice)")
    _common.add_time_per_night_options(n)
    o = p.add_argument_group("output and scale")
    o.add_argument("--out", metavar="DIR", help="output folder (default ./kncast-out/semester-START-END/)")
    o.add_argument("--json", metavar="PATH", help="also write semester.json to PATH ('-' for stdout); quiet terminal")
    o.add_argument("--dask", metavar="ADDRESS",
                   help="spread the chunks of mergers over the Dask cluster at ADDRESS (needs kncast[dask])")


def pair(option: str, text: str, single: bool = False) -> tuple[float, float]:
    """'LO,HI' (or one value when ``single``) as two floats."""
    from kncast.planner.errors import OptionError

    parts = [x.strip() for x in str(text).split(",")]
    try:
        values = [float(x) for x in parts]
    except ValueError:
        values = []
    if len(values) == 1 and single:
        values = values * 2
    if len(values) != 2:
        raise OptionError(option, text, "R or LO,HI" if single else "LO,HI")
    return values[0], values[1]


def settings_from_args(args):
    from kncast.planner.semester.run import Settings

    registry, sites = _common.sites_from_args(args)
    return Settings(start=args.start, end=args.end, sites=sites, horizon_mpc=args.horizon_mpc, duty=args.duty,
                    rate=pair("--rate", args.rate, single=True), events=args.events, seed=args.seed,
                    nights=args.nights, sigma=args.sigma, max_hours=args.max_hours,
                    overhead_s=args.overhead_min * 60.0, twilight=args.twilight, max_airmass=args.max_airmass,
                    mass_msun=pair("--mass-msun", args.mass_msun), velocity_c=pair("--velocity-c", args.velocity_c),
                    registry=registry)


def run(args) -> int:
    from kncast.planner.semester.run import check, simulate_semester

    st = settings_from_args(args)
    check(st)
    out = Path(args.out) if args.out else Path("kncast-out") / f"semester-{st.start}-{st.end}"
    check_out(out)
    if args.json and args.json != "-":
        _common.check_output_file("--json", args.json)
    client = None
    if args.dask:
        from kncast.planner.semester.cluster import connect

        client = connect(args.dask)  # before the work: an unreachable scheduler fails at once
    quiet = bool(args.json)
    try:
        with _common.progress(disable=quiet) as bar:
            task = bar.add_task("semester", total=5)
            res = simulate_semester(st, dask_address=client,
                                    progress=lambda t: bar.update(task, description=t, advance=1))
    finally:
        if client is not None:
            client.close()
    from kncast.planner.semester.report import write_folder

    doc = write_folder(res, out)
    if args.json:
        _common.emit_json(args.json, doc)
    if args.json != "-":
        print_summary(doc, out, quiet=quiet)
    return 0


def check_out(out: Path) -> None:
    """The folder must be new, empty or an earlier semester folder holding only the files it lists."""
    import json
    import os

    from kncast.planner.errors import OptionError

    base = out.absolute().parent
    while not base.exists():
        base = base.parent
    if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
        raise OptionError("--out", str(out), f"a folder that can be created ({base} is not writable)")
    if not out.exists():
        return
    if not out.is_dir():
        raise OptionError("--out", str(out), "a folder path (this is an existing file)")
    entries = {e.name for e in out.iterdir()}
    if not entries:
        return
    try:
        doc = json.loads((out / "semester.json").read_text())
        listed = {str(v).split("/")[0] for v in doc["files"].values() if isinstance(v, str)} | {"figures"}
        ok = doc.get("kind") == "semester" and entries <= listed
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        ok = False
    if not ok:
        raise OptionError("--out", str(out), "a new or empty folder, or an earlier semester folder holding only "
                                             "the files its semester.json lists")


def print_summary(doc: dict, out: Path, quiet: bool = False) -> None:
    """The expected numbers as a rich table (not when ``quiet``), the report path and the cautions."""
    from rich.table import Table

    con = _common.console()
    if quiet:
        con.print(f"Report: {out / 'report.html'}")
        return
    e = doc["expected"]
    t = Table(title=f"Semester {doc['settings']['start']} to {doc['settings']['end']}: expected numbers",
              title_justify="left")
    for c in ("quantity", "median", "90% interval"):
        t.add_column(c, justify="left" if c == "quantity" else "right")
    for k, name in (("gw_events", "mergers detected"), ("events", "mergers with a useful spectrum"),
                    ("useful_epochs", "useful spectroscopic epochs")):
        t.add_row(name, f"{e[k]['median']:.0f}", f"{e[k]['p05']:.0f}-{e[k]['p95']:.0f}")
    con.print(t)
    con.print(f"Report: {out / 'report.html'}")
    con.print("Cautions: hard horizon, no weather or Moon, rate interval quoted from memory; see the report.")
