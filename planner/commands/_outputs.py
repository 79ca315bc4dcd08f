"""Output paths are checked before any work: ``--json``, ``--plot``, ``--ics`` and ``--out``.

An output file must be new or an existing regular file (never a folder, a device, a FIFO or a
dangling link), in a place that can be written, and must not be one of the run's input files
or another of its outputs.  The plan's output folder gets its own checks later, once the event
is known (kncast.planner.plan.outfolder).  A refusal is one OptionError line, exit status 2,
and nothing is written.
"""
from __future__ import annotations

import os
import stat
from pathlib import Path

from kncast.planner.errors import OptionError

OUTPUT_FILES = {"json": "--json", "plot": "--plot", "ics": "--ics"}  # dest -> option
OUTPUT_FOLDERS = {"out": "--out"}
INPUT_FILES = {"event": "--event", "map": "--map", "sky": "--sky", "abundances": "--abundances",
               "lines": "--lines"}  # dest -> option (values may be lists, comma-separated)
STDOUT = "-"


def check_outputs(args) -> None:
    """Refuse bad output paths of the parsed ``args`` (see the module docstring)."""
    inputs = _inputs(args)
    seen: dict[str, str] = {}
    for dest, option in {**OUTPUT_FILES, **OUTPUT_FOLDERS}.items():
        value = getattr(args, dest, None)
        if value is None or (dest == "json" and value == STDOUT):
            continue
        if not str(value).strip():
            raise OptionError(option, value, "a path")
        path = Path(value)
        if dest in OUTPUT_FILES:
            _check_file(option, path)
        _check_place(option, path)
        key = os.path.normcase(os.path.abspath(path))
        if key in seen:
            raise OptionError(option, str(value), f"a path other than the {seen[key]} path")
        seen[key] = option
        for in_option, in_path in inputs:
            if _same(path, in_path):
                raise OptionError(option, str(value), f"a path other than the input file of {in_option}")


def _inputs(args) -> list[tuple[str, Path]]:
    out = []
    for dest, option in INPUT_FILES.items():
        value = getattr(args, dest, None)
        items = value if isinstance(value, list) else [value]
        for item in items:
            if isinstance(item, str):
                out += [(option, Path(p.strip())) for p in item.split(",") if p.strip()]
    return out


def _check_file(option: str, path: Path) -> None:
    if not os.path.lexists(path):
        return
    try:
        mode = os.stat(path).st_mode
    except OSError:
        raise OptionError(option, str(path), "a file path (this is a symbolic link to nothing)") from None
    if stat.S_ISDIR(mode):
        raise OptionError(option, str(path), "a file path (this is a folder)")
    if not stat.S_ISREG(mode):
        kind = ("a FIFO" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
                else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        raise OptionError(option, str(path), f"a regular file (this is {kind})")


def _check_place(option: str, path: Path) -> None:
    """The nearest existing folder above ``path`` must be a folder we may write into."""
    base = path.absolute().parent
    while not os.path.lexists(base) and base != base.parent:
        base = base.parent
    if not base.is_dir():
        raise OptionError(option, str(path), f"a path inside a folder ({base} is not a folder)")
    if not os.access(base, os.W_OK | os.X_OK):
        raise OptionError(option, str(path), f"a path in a folder that can be written ({base} is not writable)")


def _same(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.normcase(os.path.abspath(a)) == os.path.normcase(os.path.abspath(b))


__all__ = ["check_outputs"]
