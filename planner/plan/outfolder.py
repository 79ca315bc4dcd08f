"""The output folder of a plan: its default name and the checks before a plan may replace it.

A plan folder is replaced as a whole (:func:`kncast.planner.output.atomic_dir`), so before any
work the folder already at that place is inspected: it must be new, empty, or a folder that an
earlier ``plan`` of the same event wrote, holding only the files its ``plan.json`` lists.  Files
kncast did not write are never deleted, and the plan of another event is replaced only when the
caller says so (``force``).  Every refusal is a ParameterError naming the parameter ``out``.
"""
from __future__ import annotations

import hashlib
import json
import os
import re
import stat
import unicodedata
from pathlib import Path

from kncast.planner.errors import ParameterError

MAX_NAME_CHARS = 60  # of the readable part of a default folder name
MAX_PLAN_JSON_BYTES = 64 * 1024 * 1024  # an earlier plan.json larger than this is not read
MAX_LISTED = 20_000  # entries of an existing folder that are inspected before it is refused as too large
SHOWN_FOREIGN = 3  # names quoted in the refusal
# Files an operating system's file browser drops into folders it shows; replaced with the folder.
BROWSER_DROPPINGS = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})
_WINDOWS_RESERVED = frozenset({"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(1, 10)),
                               *(f"LPT{i}" for i in range(1, 10))})
_TMP_NAME = re.compile(r"^\..+\.kncast-(new|old|tmp)-\d+-[A-Za-z0-9_]+(\.[^.]*)?$")  # as kncast.planner.output


def folder_name(event_id: str) -> str:
    """A folder name for ``event_id``: readable, and different for different ids.

    Letters (any script), digits, ``.``, ``_`` and ``-`` are kept; when anything had to change (other
    characters, length, a name Windows reserves, Unicode normalisation) 8 hex digits of the id's
    SHA-256 are appended, so ``a/b`` and ``a_b`` (or two ids in another script) never share a folder.
    """
    text = unicodedata.normalize("NFC", str(event_id))
    base = re.sub(r"[^\w.-]+", "_", text).strip("._-")[:MAX_NAME_CHARS].rstrip("._-")
    if base and base == event_id and base.split(".")[0].upper() not in _WINDOWS_RESERVED:
        return base
    digest = hashlib.sha256(str(event_id).encode("utf-8", "surrogatepass")).hexdigest()[:8]
    return f"{base or 'event'}-{digest}"


def _refuse(out: Path, allowed: str, problem: str) -> ParameterError:
    return ParameterError("out", message=f"{{out}} {str(out)!r}: {problem} (allowed: {allowed})")


def check_plan_folder(out, event_id: str, force: bool = False) -> None:
    """Refuse ``out`` unless a plan of ``event_id`` may be written there (see the module docstring).

    Raises ParameterError("out") naming the folder and, for files kncast did not write, those files.
    """
    from kncast.planner.output import sweep_stale

    out = Path(out)
    allowed = "a new folder, or an earlier kncast plan folder of this event"
    sweep_stale(out)  # a folder a killed run left aside comes back first, and is checked like any other
    if os.path.islink(out):
        raise _refuse(out, allowed, "a symbolic link; give the folder it points to")
    try:
        st = os.stat(out)
    except FileNotFoundError:
        return
    except OSError as err:
        raise _refuse(out, allowed, f"cannot be inspected ({err.strerror})") from None
    if not stat.S_ISDIR(st.st_mode):
        raise _refuse(out, allowed, "an existing file, not a folder")
    entries = _entries(out, allowed)
    if not entries:
        return
    doc = _plan_document(out, allowed)
    if doc is None:
        raise _refuse(out, allowed, f"holds files and no kncast plan.json ({_names(sorted(entries))})")
    previous = str((doc.get("event") or {}).get("id", ""))
    if previous != event_id and not force:
        raise ParameterError("out", also=("force",), message=(
            f"{{out}} {str(out)!r}: holds the plan of event {previous!r}, not {event_id!r} (allowed: {allowed}; "
            "or {force} to replace the other event's plan)"))
    foreign = sorted(rel for rel, kind in entries.items() if not _ours(rel, kind, _listed(doc)))
    if foreign:
        raise _refuse(out, "a folder holding only the files an earlier plan listed in its plan.json",
                      f"holds {len(foreign)} file(s) kncast did not write ({_names(foreign)}); "
                      "move them elsewhere, or choose another folder")


def _entries(out: Path, allowed: str) -> dict[str, str]:
    """Relative path -> "file" | "dir" | "other" (links, FIFOs, devices) of everything under ``out``."""
    found: dict[str, str] = {}
    stack = [Path("")]
    while stack:
        rel = stack.pop()
        try:
            with os.scandir(out / rel) as it:
                items = list(it)
        except OSError as err:
            raise _refuse(out, allowed, f"cannot be listed ({err.strerror})") from None
        for e in items:
            sub = rel / e.name
            kind = ("dir" if e.is_dir(follow_symlinks=False) else
                    "file" if e.is_file(follow_symlinks=False) else "other")
            found[sub.as_posix()] = kind
            if kind == "dir":
                stack.append(sub)
            if len(found) > MAX_LISTED:
                raise _refuse(out, allowed, f"holds more than {MAX_LISTED} files and folders")
    return found


def _plan_document(out: Path, allowed: str) -> dict | None:
    """The earlier plan.json (a dict of kind "plan" with a files table), or None when there is none."""
    from kncast.forecast.datafiles import read_input_bytes
    from kncast.forecast.errors import DataFileError

    path = out / "plan.json"
    if not os.path.lexists(path):
        return None
    if not stat.S_ISREG(os.lstat(path).st_mode):
        raise _refuse(out, allowed, "its plan.json is not a regular file kncast wrote")
    try:
        doc = json.loads(read_input_bytes(path, "a plan.json", MAX_PLAN_JSON_BYTES))
    except (DataFileError, ValueError, RecursionError):
        doc = None
    if not (isinstance(doc, dict) and doc.get("kind") == "plan" and isinstance(doc.get("files"), dict)):
        raise _refuse(out, allowed, "its plan.json is not a kncast plan document")
    return doc


def _listed(doc: dict) -> set[str]:
    """The relative paths named in plan.json ``files`` (strings, or lists of strings)."""
    out = set()
    for value in doc["files"].values():
        for item in value if isinstance(value, list) else [value]:
            if isinstance(item, str) and item and not item.startswith("/") and ".." not in item.split("/"):
                out.add(Path(item).as_posix())
    return out


def _ours(rel: str, kind: str, listed: set[str]) -> bool:
    name = rel.rsplit("/", 1)[-1]
    if kind == "dir":
        return any(p.startswith(rel + "/") for p in listed) or rel == "figures"
    if kind != "file":
        return False
    return rel in listed or name in BROWSER_DROPPINGS or bool(_TMP_NAME.match(name))


def _names(items: list[str]) -> str:
    shown = ", ".join(items[:SHOWN_FOREIGN])
    return shown + (f" and {len(items) - SHOWN_FOREIGN} more" if len(items) > SHOWN_FOREIGN else "")


__all__ = ["folder_name", "check_plan_folder"]
