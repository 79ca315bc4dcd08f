"""Atomic output files and the shared pieces of every JSON document.

Every file kncast writes goes to a temporary name in the target folder and
is renamed into place only when complete, so a failed run never leaves a
partial file at the requested path; a plan folder is swapped in whole, with
the previous one restored if the swap fails, and what killed runs left behind
is restored or swept on the next run.
"""
from __future__ import annotations

import contextlib
import errno
import math
import os
import re
import shutil
import signal
import tempfile
import threading
from pathlib import Path

import numpy as np
from astropy.time import Time

from kncast.planner.errors import InputError

SCHEMA_VERSION = 2  # 2: per-feature detectability (plan and lines)


# Errors of the file system that mean "this place cannot take the output" (the user's to fix: exit 2):
# disk full, quota, read-only, no permission, name too long, file too large.
DISK_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT, errno.EROFS, errno.EACCES, errno.EPERM, errno.ENAMETOOLONG,
                         errno.EFBIG, errno.EIO})
_TMP_TAG = ".kncast-"  # temporary names: .<name>.kncast-<new|old|tmp>-<pid>-<random>
_TMP_NAME = re.compile(r"^\.(?P<name>.+)\.kncast-(?P<kind>new|old|tmp)-(?P<pid>\d+)-[A-Za-z0-9_]+(\.[^.]*)?$")
STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n))


class OutputError(InputError):
    """An output path the file system refuses (disk full, read-only, no permission): one line, exit 2."""

    def __init__(self, path, err: OSError):
        self.path, self.errno = str(path), err.errno
        super().__init__(f"cannot write {path}: {err.strerror or err} (nothing was replaced)")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _publish_mode(path: Path, directory: bool = False) -> None:
    """Give a finished temporary file/folder the permissions a plain ``open`` would (umask)."""
    os.chmod(path, (0o777 if directory else 0o666) & ~_umask())


@contextlib.contextmanager
def signals_held():
    """Hold SIGINT/SIGTERM/SIGHUP until the block ends (a rename pair or a clean-up is never cut in two).

    Only the main thread can do this; elsewhere (and on systems without pthread_sigmask) it does nothing.
    """
    can = hasattr(signal, "pthread_sigmask") and threading.current_thread() is threading.main_thread()
    old = signal.pthread_sigmask(signal.SIG_BLOCK, STOP_SIGNALS) if can else None
    try:
        yield
    finally:
        if can:
            signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _tmp_prefix(path: Path, kind: str) -> str:
    return f".{path.name}{_TMP_TAG}{kind}-{os.getpid()}-"


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return False  # a leftover of an earlier process that had our number
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def sweep_stale(path) -> list[Path]:
    """Restore or remove what killed runs left beside ``path``; returns what was removed.

    A run killed between the two renames of a folder swap leaves the previous folder as
    ``.<name>.kncast-old-<pid>-*/x`` with nothing at ``path``: it is renamed back.  Temporary
    folders and files of runs whose process is gone are removed; those of running processes stay.
    """
    path = Path(path)
    parent = path.absolute().parent
    removed = []
    try:
        entries = list(os.scandir(parent))
    except OSError:
        return removed
    for entry in entries:
        m = _TMP_NAME.match(entry.name)
        if not m or m.group("name") != path.name or _pid_alive(int(m.group("pid"))):
            continue
        stale = Path(entry.path)
        with signals_held():
            if m.group("kind") == "old" and entry.is_dir(follow_symlinks=False):
                previous = stale / "x"
                if previous.exists() and not os.path.lexists(path):
                    os.replace(previous, path)
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(stale, ignore_errors=True)
            else:
                with contextlib.suppress(OSError):
                    stale.unlink()
        removed.append(stale)
    return removed


@contextlib.contextmanager
def disk_errors(path):
    """Turn a file-system refusal (DISK_ERRNOS) inside the block into an OutputError naming ``path``."""
    try:
        yield
    except OSError as err:
        if err.errno in DISK_ERRNOS:
            raise OutputError(path, err) from None
        raise


@contextlib.contextmanager
def atomic_path(path, suffix: str | None = None):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success only.

    A refusal of the file system (disk full, no permission) becomes an OutputError; the file
    at ``path``, if any, is left as it was.
    """
    path = Path(path)
    with disk_errors(path):
        path.parent.mkdir(parents=True, exist_ok=True)
        sweep_stale(path)
        fd, tmp = tempfile.mkstemp(prefix=_tmp_prefix(path, "tmp"), suffix=suffix or path.suffix, dir=path.parent)
        os.close(fd)
        try:
            yield Path(tmp)
            _publish_mode(Path(tmp))
            os.replace(tmp, path)
        except BaseException:
            with signals_held(), contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            raise


@contextlib.contextmanager
def atomic_dir(path):
    """Yield a temporary folder beside ``path``; it replaces ``path`` on success only.

    The swap is two renames with the stop signals held: the previous folder moves aside, the new
    one into place, and if the second rename fails the previous folder is moved back.  Leftovers
    of killed runs are swept first (:func:`sweep_stale`).  A refusal of the file system becomes an
    OutputError and leaves the previous folder as it was.
    """
    path = Path(path)
    with disk_errors(path):
        path.parent.mkdir(parents=True, exist_ok=True)
        sweep_stale(path)
        tmp = Path(tempfile.mkdtemp(prefix=_tmp_prefix(path, "new"), dir=path.parent))
        try:
            yield tmp
            _publish_mode(tmp, directory=True)
            _swap(tmp, path)
        except BaseException:
            with signals_held():
                shutil.rmtree(tmp, ignore_errors=True)
            raise


def _swap(new: Path, path: Path) -> None:
    """Put folder ``new`` at ``path``; a previous folder there is removed only once ``new`` is in place."""
    with signals_held():
        if not os.path.lexists(path):
            os.replace(new, path)
            return
        old = Path(tempfile.mkdtemp(prefix=_tmp_prefix(path, "old"), dir=path.parent))
        os.replace(path, old / "x")
        try:
            os.replace(new, path)
        except BaseException:
            os.replace(old / "x", path)
            os.rmdir(old)
            raise
    shutil.rmtree(old, ignore_errors=True)


def iso_utc(t) -> str | None:
    """ISO 8601 UTC string with a trailing ``Z`` (seconds precision); None passes through.

    The same text as ``t.utc.strftime("%Y-%m-%dT%H:%M:%SZ")`` (its calendar split, ``erfa.d2dtf`` at
    millisecond precision, seconds truncated), formatted directly for one time: a plan writes
    about a thousand of them.
    """
    if t is None:
        return None
    t = t if isinstance(t, Time) else Time(t)
    u = t.utc
    if u.isscalar and not u.masked:
        text = _iso_jd(u.jd1, u.jd2)
        if text is not None:
            return text
    return u.strftime("%Y-%m-%dT%H:%M:%SZ")


def iso_utc_mjd(mjd: float) -> str | None:
    """:func:`iso_utc` of ``Time(mjd, format="mjd", scale="utc")`` without building the Time; None for
    None or NaN."""
    return iso_utc_mjds([mjd])[0]


def iso_utc_mjds(mjds) -> list[str | None]:
    """:func:`iso_utc_mjd` of many MJDs (UTC) in one vectorized pass: the same two-part Julian dates
    as astropy's MJD format (``day_frac`` twice), then ``erfa.d2dtf`` on all of them."""
    import erfa
    from astropy.time.utils import day_frac

    mjd = np.array([np.nan if m is None else m for m in mjds], dtype=float)
    ok = np.isfinite(mjd)
    out: list[str | None] = [None] * mjd.size
    if not ok.any():
        return out
    jd1, jd2 = day_frac(mjd[ok], 0.0)
    jd1, jd2 = day_frac(jd1 + erfa.DJM0, jd2)
    for k, text in zip(np.flatnonzero(ok).tolist(), _iso_jds(jd1, jd2)):
        out[k] = text if text is not None else iso_utc(Time(mjd[k], format="mjd", scale="utc"))
    return out


def _iso_jd(jd1: float, jd2: float) -> str | None:
    """``YYYY-MM-DDTHH:MM:SSZ`` of a UTC two-part Julian date (seconds truncated), None outside years 1000-9999."""
    return _iso_jds(np.atleast_1d(jd1), np.atleast_1d(jd2))[0]


def _iso_jds(jd1: np.ndarray, jd2: np.ndarray) -> list[str | None]:
    import erfa

    y, mo, d, hmsf = erfa.d2dtf("UTC", 3, jd1, jd2)
    return [f"{y:04d}-{mo:02d}-{d:02d}T{h:02d}:{m:02d}:{sec:02d}Z" if 1000 <= y <= 9999 else None
            for y, mo, d, h, m, sec in zip(y.tolist(), mo.tolist(), d.tolist(), hmsf["h"].tolist(),
                                           hmsf["m"].tolist(), hmsf["s"].tolist())]


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


def json_text(doc) -> str:
    """Indented JSON (two spaces) of ``doc``: numpy scalars and arrays as numbers, astropy Times as ISO UTC,
    non-finite floats as null; the value of ``json.dumps(to_jsonable(doc), indent=2, allow_nan=False)``."""
    return json_bytes(doc).decode("ascii")


def json_bytes(doc) -> bytes:
    """:func:`json_text` as ASCII bytes (what :func:`write_json` writes, without a text copy).

    Encoded by orjson (a plan document of several MB in ~6 ms, against ~70 ms for an encoder in Python);
    a document it does not take (keys that are not text, integers beyond 64 bits) goes through
    :func:`to_jsonable` and the standard library.
    """
    import orjson

    try:
        data = orjson.dumps(doc, default=_json_default, option=orjson.OPT_INDENT_2 | orjson.OPT_SERIALIZE_NUMPY)
    except TypeError:  # orjson.JSONEncodeError
        import json

        return json.dumps(to_jsonable(doc), indent=2, allow_nan=False).encode("ascii")
    # ASCII as the standard library writes it (non-ASCII characters, which occur only inside strings, as
    # \uXXXX escapes): the files and the terminal need no particular encoding
    return data if data.isascii() else _NON_ASCII.sub(_json_escape, data.decode()).encode("ascii")


_NON_ASCII = re.compile(r"[^\x00-\x7f]")


def _json_escape(match) -> str:
    """A non-ASCII character as JSON escapes (a surrogate pair beyond U+FFFF), lower-case hex as ``json``."""
    n = ord(match.group())
    if n < 0x10000:
        return f"\\u{n:04x}"
    n -= 0x10000
    return f"\\u{0xd800 | (n >> 10):04x}\\u{0xdc00 | (n & 0x3ff):04x}"


def _json_default(obj):
    """What orjson does not encode itself: astropy Times and other numpy scalars."""
    if isinstance(obj, Time):
        return iso_utc(obj) if obj.isscalar else [iso_utc(t) for t in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    raise TypeError(f"Object of type {type(obj).__name__} is not JSON serializable")


def write_json(path, doc: dict) -> None:
    """Write ``doc`` as indented JSON to ``path`` atomically."""
    data = json_bytes(doc)
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as f:
            f.write(data)
            f.write(b"\n")


# zlib level 1: encodes a 1000 x 900 chart ~3.5x faster than PIL's default 6 (0.05 against 0.16 s,
# measured), files ~25% larger
PNG_OPTIONS = {"pil_kwargs": {"compress_level": 1}}
# glyphs drawn without FreeType's hinting: a text-heavy chart (the campaign feature map) draws in 0.25 s
# instead of 0.30 (measured), the letters as legible at the saved sizes
DRAWING_RC = {"text.hinting": "none"}


def save_figure(fig, path, **kwargs) -> None:
    """Save a matplotlib figure atomically (format from the path's suffix) and close it."""
    import matplotlib.pyplot as plt

    path = Path(path)
    fmt = path.suffix.lstrip(".") or "png"
    options = {"dpi": 120, "bbox_inches": "tight", **(PNG_OPTIONS if fmt == "png" else {}), **kwargs}
    try:
        with atomic_path(path) as tmp, plt.rc_context(DRAWING_RC):
            try:
                fig.savefig(tmp, format=fmt, **options)
            except ValueError:  # a text matplotlib cannot typeset as mathtext: draw every text as written
                for text in fig.findobj(lambda a: hasattr(a, "set_parse_math")):
                    text.set_parse_math(False)
                fig.savefig(tmp, format=fmt, **options)
    finally:
        plt.close(fig)
