"""``kncast demo``: the campaign plan for the bundled southern demo event, in one command."""
from __future__ import annotations

HELP = "plan the bundled demo event (kn-demo-south) into a folder and say where the report is"

DEMO_EVENT = "kn-demo-south.toml"


def add_arguments(p) -> None:
    p.add_argument("--out", metavar="DIR", help="output folder (default ./kncast-out/kn-demo-south/)")
    p.add_argument("--force", action="store_true", help="replace a folder holding another event's plan")
    from kncast.planner.commands._common import positive_int

    p.add_argument("--nights", type=positive_int("--nights", 60), default=10, metavar="N",
                   help="local nights after t0 to plan (default 10)")


def demo_event_path():
    """The bundled demo event file (wheel, editable install or source checkout)."""
    from kncast.planner.sites import bundled_dir

    return bundled_dir("kncast.planner._demo_events", "demo_events") / DEMO_EVENT


def run(args) -> int:
    from kncast.planner.cli import build_parser

    argv = ["plan", "--event", str(demo_event_path()), "--nights", str(args.nights)]
    if args.out:
        argv += ["--out", args.out]
    if args.force:
        argv.append("--force")
    plan_args = build_parser().parse_args(argv)
    plan_args.debug = args.debug
    return plan_args.run(plan_args)
