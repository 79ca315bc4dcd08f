"""Options and helpers shared by several sub-commands.

Everything here is light to import; heavy modules load inside functions.
"""
from __future__ import annotations

import argparse
import re
import sys

from kncast.planner.errors import InputError, OptionError


def add_event_options(p: argparse.ArgumentParser, distance: bool = True) -> None:
    """``--event FILE`` or ``--ra/--dec/--t0 [--distance-mpc]``."""
    # a word like "-35:12:00" or "-35d12m" is a value, not an option (argparse only knows plain numbers)
    p._negative_number_matcher = re.compile(r"^-\.?\d")
    g = p.add_argument_group("event (a file, or position and time)")
    g.add_argument("--event", metavar="FILE", help="event file (TOML, or VOEvent XML)")
    g.add_argument("--ra", help="right ascension: degrees, or sexagesimal hours '10:42:30'")
    g.add_argument("--dec", help="declination: degrees, or sexagesimal '-35:12:00'")
    g.add_argument("--t0", metavar="ISO", help="merger/alert time, ISO 8601 UTC, e.g. 2027-03-14T02:17:00Z")
    g.add_argument("--event-id", default="cli-event", help="id used in outputs with --ra/--dec (default: cli-event)")
    if distance:
        g.add_argument("--distance-mpc", type=finite_float("--distance-mpc"), metavar="D", help="luminosity distance, Mpc")
        g.add_argument("--redshift", type=finite_float("--redshift"), metavar="Z", help="redshift (instead of distance)")
        g.add_argument("--ebv-mw", type=finite_float("--ebv-mw"), default=0.0, metavar="MAG",
                       help="Milky Way E(B-V), mag (default 0)")


# parameter of the Python API -> dest of the option that sets it, where the names differ
PARAMETER_DESTS = {"extra_dirs": "sites_dir", "target_index": "target", "min_altitude_deg": "min_altitude",
                   "min_moon_sep_deg": "min_moon_sep", "snr_target": "snr", "step_min": "step", "start_date": "start"}


def event_from_args(args):
    """The Event named by ``--event`` or built from ``--ra/--dec/--t0``."""
    from kncast.planner.events.eventfile import event_from_values, load_event

    coords = [args.ra, args.dec, args.t0]
    if args.event:
        if any(v is not None for v in coords):
            raise InputError("--event: give either --event FILE or --ra/--dec/--t0, not both")
        return load_event(args.event)
    if any(v is None for v in coords):
        missing = [n for n, v in zip(("--ra", "--dec", "--t0"), coords) if v is None]
        raise InputError(f"no event: give --event FILE, or all of --ra --dec --t0 (missing {' '.join(missing)})")
    return event_from_values(args.ra, args.dec, args.t0, getattr(args, "distance_mpc", None),
                              event_id=args.event_id, redshift=getattr(args, "redshift", None),
                              ebv_mw=getattr(args, "ebv_mw", 0.0) or 0.0)


def add_site_options(p: argparse.ArgumentParser, select: bool = True) -> None:
    g = p.add_argument_group("sites")
    if select:
        g.add_argument("--sites", action="append", metavar="ID,...",
                       help="site ids, comma separated (default: every known site)")
    g.add_argument("--sites-dir", action="append", default=[], metavar="DIR",
                   help="extra folder of site TOML files (repeatable)")


def sites_from_args(args):
    """(registry, selected sites) from ``--sites-dir`` and ``--sites``."""
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load(args.sites_dir)
    ids = split_list(getattr(args, "sites", None))
    return registry, registry.select(ids)


def add_night_rule_options(g, subject: str, max_nights: int, default_nights: int = 3) -> None:
    """``--nights --start --twilight --min-altitude --max-airmass --min-moon-sep`` for ``subject``
    ("target", "pixel"): the one set of night rules of every command that finds windows."""
    g.add_argument("--nights", type=positive_int("--nights", high=max_nights), default=default_nights, metavar="N",
                   help=f"local nights from the one in progress at t0 (default {default_nights})")
    g.add_argument("--start", type=iso_date("--start"), metavar="YYYY-MM-DD",
                   help="local evening date of the first night, when later than the night in progress at t0")
    from kncast.planner.visibility.nights import TWILIGHT_DEG

    g.add_argument("--twilight", choices=tuple(TWILIGHT_DEG), default="nautical",
                   help="darkness starts when the Sun is below -6 / -12 / -18 deg (default nautical)")
    g.add_argument("--min-altitude", type=finite_float("--min-altitude", 0, 89), metavar="DEG",
                   help=f"lowest {subject} altitude, replaces each site's own limit (0-89 deg)")
    g.add_argument("--max-airmass", type=finite_float("--max-airmass", 1, 38, low_open=True), metavar="X",
                   help="highest airmass (Kasten & Young 1989), in (1, 38]")
    g.add_argument("--min-moon-sep", type=finite_float("--min-moon-sep", 0, 180), metavar="DEG",
                   help=f"smallest Moon-{subject} separation (0-180 deg; default: no Moon rule)")


def add_time_per_night_options(g) -> None:
    """``--max-hours --overhead-min``: the time a night gives the target (plan and semester)."""
    g.add_argument("--max-hours", type=finite_float("--max-hours", 0, 24, low_open=True), default=4.0,
                   metavar="H", help="at most this many hours per night on the target (default 4)")
    g.add_argument("--overhead-min", type=finite_float("--overhead-min", 0, 240), default=15.0,
                   metavar="MIN", help="acquisition and readout overhead per night, minutes (default 15)")


def night_rules_from_args(args) -> dict:
    """The night-rule options as keyword arguments of compute_visibility / build_plan / compute_coverage."""
    return {"nights": args.nights, "twilight": args.twilight, "min_altitude_deg": args.min_altitude,
            "max_airmass": args.max_airmass, "min_moon_sep_deg": args.min_moon_sep, "start_date": args.start}


def iso_date(option: str):
    """argparse ``type=`` for an ISO calendar date (YYYY-MM-DD)."""
    import datetime as dt

    def convert(text: str):
        try:
            return dt.date.fromisoformat(text.strip())
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r}: expected a date YYYY-MM-DD") from None

    return convert


def add_output_options(p: argparse.ArgumentParser, plot: bool = True) -> None:
    g = p.add_argument_group("output")
    g.add_argument("--json", metavar="PATH", help="write machine-readable JSON to PATH ('-' for stdout)")
    if plot:
        g.add_argument("--plot", metavar="PATH", help="write a figure to PATH (.png, .pdf or .svg)")


def check_plot_path(path) -> None:
    if path and not str(path).lower().endswith((".png", ".pdf", ".svg")):
        raise OptionError("--plot", path, "a path ending in .png, .pdf or .svg")


def check_output_file(option: str, path) -> None:
    """An output file path: not a folder, inside a folder that exists or can be made."""
    import os
    from pathlib import Path

    target = Path(path)
    if target.is_dir():
        raise OptionError(option, str(path), "a file path (this is a folder)")
    base = target.absolute().parent
    while not base.exists():
        base = base.parent
    if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
        raise OptionError(option, str(path), f"a file in a folder that can be written ({base} is not writable)")


def emit_json(path, doc: dict) -> None:
    """Write ``doc`` to PATH atomically, or to stdout for '-'."""
    from kncast.planner.output import json_text, write_json

    if path == "-":
        sys.stdout.write(json_text(doc) + "\n")
    else:
        write_json(path, doc)


def split_list(values) -> list[str]:
    """Flatten repeatable comma-separated option values into a list of non-empty strings."""
    out: list[str] = []
    for v in values or []:
        out.extend(x.strip() for x in v.split(",") if x.strip())
    return out


def finite_float(option: str, low=None, high=None, low_open=False):
    """argparse ``type=`` for a finite float in [low, high] with a one-line error."""

    def convert(text: str) -> float:
        try:
            v = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
        bad = v != v or v in (float("inf"), float("-inf"))
        bad |= low is not None and (v <= low if low_open else v < low)
        bad |= high is not None and v > high
        if bad:
            lo = "-inf" if low is None else f"{low:g}"
            hi = "inf" if high is None else f"{high:g}"
            raise argparse.ArgumentTypeError(f"{text!r} out of range (allowed {'(' if low_open else '['}{lo}, {hi}])")
        return v

    convert.__name__ = option
    return convert


def positive_int(option: str, high: int = 10_000):
    """argparse ``type=`` for a whole number in [1, high]."""

    def convert(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if not 1 <= v <= high:
            raise argparse.ArgumentTypeError(f"{v} out of range (allowed 1 to {high})")
        return v

    convert.__name__ = option
    return convert


def parse_phases(text: str, option: str = "--phases", high: float = 100.0) -> list[float]:
    """Comma-separated epochs in days since t0, each in (0, high]."""
    out = []
    for item in text.split(","):
        item = item.strip()
        if not item:
            continue
        try:
            v = float(item)
        except ValueError:
            raise OptionError(option, item, f"comma-separated days since t0, each in (0, {high:g}]") from None
        if not 0.0 < v <= high:
            raise OptionError(option, item, f"days since t0 in (0, {high:g}]")
        out.append(v)
    if not out:
        raise OptionError(option, text, "at least one epoch in days since t0")
    return out


def console(stderr: bool = False, markup: bool = False):
    """A rich Console; decoration only on a terminal (plain text when piped).

    Rich markup (``[bold]``) is off unless asked for: ids, names and paths from files are then shown as
    they are.  A caller that asks for ``markup`` escapes every such string (``rich.markup.escape``).
    """
    from rich.console import Console

    return Console(stderr=stderr, highlight=False, soft_wrap=False, markup=markup, emoji=False,
                   width=None if sys.stdout.isatty() else _columns())


def _columns(default: int = 160) -> int:
    """The width for output that is not a terminal: $COLUMNS when set (a whole number >= 40), else ``default``."""
    import os

    text = os.environ.get("COLUMNS", "")
    return int(text) if text.isdigit() and int(text) >= 40 else default


def fit_table(table, width: int | None = None, must_fit: bool = False):
    """``table`` (a rich Table with its rows) laid out to fit ``width`` columns without cutting a word.

    Every column is at least as wide as its longest word (header or cell: ids, dates and numbers stay
    whole, no header is cut to an ellipsis); when the columns do not fit with the usual padding and
    borders, the padding and the vertical rules go; ids still too long (setup ids) break after a "/"
    or ":".  With ``must_fit``, None when whole words cannot fit (the caller then shows a narrower table).
    """
    from rich import box

    width = width or console().width
    cols = table.columns
    longest = [_longest_word(col) for col in cols]

    def needed(pad: int) -> int:
        return sum(longest) + 2 * pad * len(cols) + len(cols) + 1

    if needed(1) > width:
        table.box, table.show_edge, table.pad_edge = box.SIMPLE_HEAD, False, False
        table.padding = (0, 1) if needed(1) - 2 <= width else (0, 0)
    pad = table.padding[1] if len(table.padding) > 1 else table.padding[0]
    for k, col in enumerate(cols):
        excess = needed(pad) - width
        if excess > 0 and any("/" in _plain(c) for c in [col.header, *col._cells]):
            limit = max(8, longest[k] - excess)
            col._cells = [_break_after_slash(c, limit) for c in col._cells]
            col.header = _break_after_slash(col.header, limit)
            longest[k] = _longest_word(col)
    fits = _set_widths(table, longest, width)
    return table if fits or not must_fit else None


def _set_widths(table, longest: list, width: int) -> bool:
    """Fixed column widths: each column its longest word, the room left shared by how much more each wants."""
    cols = table.columns
    pad = table.padding[1] if len(table.padding) > 1 else table.padding[0]
    rules = len(cols) + 1 if table.show_edge else len(cols) - 1
    room = width - rules - 2 * pad * len(cols) - sum(longest)
    for col in cols:
        col.overflow = "fold"
    if room < 0:  # cannot fit whole words: rich shares the width (long words fold)
        for k, col in enumerate(cols):
            col.min_width = min(longest[k], width)
        return False
    full = [max((len(line) for c in [col.header, *col._cells] for line in _plain(c).splitlines()), default=1)
            for col in cols]
    want = [max(0, f - m) for f, m in zip(full, longest)]
    total = sum(want)
    extra = want if total <= room else [w * room // total for w in want]
    for k, col in enumerate(cols):
        col.width = longest[k] + extra[k]
    return True


def _plain(cell) -> str:
    from rich.text import Text

    return cell.plain if isinstance(cell, Text) else Text.from_markup(str(cell)).plain


def _longest_word(col) -> int:
    """Length of the longest whitespace-free run in a column's header and cells."""
    return max((len(w) for c in [col.header, *col._cells] for w in _plain(c).split()), default=1)


def _break_after_slash(cell, width: int):
    """A cell whose words longer than ``width`` are put on new lines after their "/" separators."""
    from rich.text import Text

    if isinstance(cell, Text) or "/" not in str(cell):
        return cell
    out = []
    for line in str(cell).split("\n"):
        words = []
        for w in line.split(" "):
            if len(w) > width and "/" in w:
                parts, cur = [], ""
                for seg in re.split(r"(?<=[/:])", w):  # pieces ending in their separator
                    if cur and len(cur) + len(seg) > width:
                        parts.append(cur)
                        cur = seg
                    else:
                        cur += seg
                parts.append(cur)
                w = "\n".join(parts)
            words.append(w)
        out.append(" ".join(words))
    return "\n".join(out)


def progress(disable: bool = False):
    """A rich Progress on stderr, shown only when stderr is a terminal."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(),
                    console=console(stderr=True), transient=True,
                    disable=disable or not sys.stderr.isatty())
