"""Atomic output files and the shared pieces of every JSON document.

Every file kncast writes goes to a temporary name in the target folder and
is renamed into place only when complete, so a failed run never leaves a
partial file at the requested path.
"""
from __future__ import annotations

import contextlib
import json
import math
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
from astropy.time import Time

SCHEMA_VERSION = 2  # 2: per-feature detectability (plan and lines)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _publish_mode(path: Path, directory: bool = False) -> None:
    """Give a finished temporary file/folder the permissions a plain ``open`` would (umask)."""
    os.chmod(path, (0o777 if directory else 0o666) & ~_umask())


@contextlib.contextmanager
def atomic_path(path, suffix: str | None = None):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success only."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix or path.suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        _publish_mode(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def atomic_dir(path):
    """Yield a temporary folder beside ``path``; it replaces ``path`` on success only."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", dir=path.parent))
    try:
        yield tmp
        _publish_mode(tmp, directory=True)
        if path.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{path.name}.old.", dir=path.parent))
            os.replace(path, old / "x")
            os.replace(tmp, path)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, path)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def iso_utc(t) -> str | None:
    """ISO 8601 UTC string with a trailing ``Z`` (seconds precision); None passes through."""
    if t is None:
        return None
    t = t if isinstance(t, Time) else Time(t)
    return t.utc.strftime("%Y-%m-%dT%H:%M:%SZ")


def to_jsonable(obj):
    """Convert numpy scalars/arrays, Times and non-finite floats for ``json``."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, Time):
        return iso_utc(obj) if obj.isscalar else [iso_utc(t) for t in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def document(kind: str, **fields) -> dict:
    """Top of every JSON document: ``{"kncast": VERSION, "kind": kind, "schema": N, ...}``."""
    from kncast.planner import __version__

    return {"kncast": __version__, "kind": kind, "schema": SCHEMA_VERSION, **fields}


def write_json(path, doc: dict) -> None:
    """Write ``doc`` as indented JSON to ``path`` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(to_jsonable(doc), indent=2, allow_nan=False) + "\n")


def save_figure(fig, path, **kwargs) -> None:
    """Save a matplotlib figure atomically (format from the path's suffix) and close it."""
    import matplotlib.pyplot as plt

    path = Path(path)
    fmt = path.suffix.lstrip(".") or "png"
    try:
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format=fmt, **{"dpi": 120, "bbox_inches": "tight", **kwargs})
    finally:
        plt.close(fig)
