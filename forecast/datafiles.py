"""Reading and validating kncast's own TOML data files.

Every loader (sites, events, instruments, abundance tables) goes through
:func:`read_toml` and :func:`field`, so a bad file always yields one line
that names the file, the key and what is allowed.
"""
from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path

from kncast.forecast.errors import DataFileError

_MISSING = object()


# Size limits of input files (docs/formats.md, section "Limits"): anything larger is refused
# before it is read, so a hostile or mistaken path cannot exhaust memory.
MAX_TEXT_BYTES = 4 * 1024 * 1024  # TOML and XML files: 4 MiB
MAX_TABLE_BYTES = 64 * 1024 * 1024  # ECSV tables and sky spectra: 64 MiB
MAX_NESTING = 16  # tables and arrays inside each other in one TOML document
MAX_STRING_CHARS = 4096  # one string value or key in a TOML document

MIB = 1024 * 1024


def check_input_file(path, expected: str, limit: int = MAX_TEXT_BYTES) -> int:
    """Size in bytes of ``path`` if it is a regular file of at most ``limit`` bytes, else DataFileError.

    A folder, FIFO, device or socket is refused without being opened (opening a FIFO could
    wait forever); ``expected`` names the kind of file in the message ("a TOML file").
    """
    path = Path(path)
    try:
        st = path.stat()
    except FileNotFoundError:
        raise DataFileError(path, "", "file not found") from None
    except OSError as err:
        raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    _check_kind(path, st.st_mode, expected)
    if st.st_size > limit:
        raise DataFileError(path, "", f"file too large ({st.st_size / MIB:.1f} MiB)",
                            f"at most {limit / MIB:g} MiB for {expected}")
    return st.st_size


def _check_kind(path, mode: int, expected: str) -> None:
    import stat

    if stat.S_ISDIR(mode):
        raise DataFileError(path, "", f"is a folder, expected {expected}")
    if not stat.S_ISREG(mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or
                stat.S_ISBLK(mode) else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        raise DataFileError(path, "", f"is {kind}, expected {expected} (a regular file)")


def read_input_bytes(path, expected: str, limit: int = MAX_TEXT_BYTES) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes (DataFileError otherwise).

    The file is opened without blocking and checked again once open, so a path that turns
    into a FIFO or device between the check and the read cannot hang the program.
    """
    import os

    path = Path(path)
    check_input_file(path, expected, limit)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    except OSError as err:
        raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    with os.fdopen(fd, "rb") as f:
        _check_kind(path, os.fstat(f.fileno()).st_mode, expected)
        try:
            raw = f.read(limit + 1)
        except OSError as err:
            raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    if len(raw) > limit:
        raise DataFileError(path, "", "file too large (it grew while being read)",
                            f"at most {limit / MIB:g} MiB for {expected}")
    return raw


def read_nonempty_bytes(path, expected: str, limit: int = MAX_TEXT_BYTES) -> bytes:
    """The bytes of a data file; missing, unreadable, irregular, too large or empty files raise DataFileError.

    ``expected`` names the kind of file in the message ("a TOML file").
    """
    raw = read_input_bytes(path, expected, limit)
    if not raw.strip():
        raise DataFileError(path, "", "file is empty")
    return raw


def decode_text(raw: bytes, path, expected: str) -> str:
    """UTF-8 text (an initial byte-order mark is dropped); binary content raises DataFileError."""
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise DataFileError(path, "", f"not a text file (binary content), expected {expected}") from None
    if "\x00" in text:
        raise DataFileError(path, "", f"not a text file (binary content), expected {expected}")
    return text


def read_toml(path) -> dict:
    """Parse a TOML file, turning every failure into a DataFileError naming the file.

    Beyond the TOML grammar: at most :data:`MAX_TEXT_BYTES`, :data:`MAX_NESTING` levels of tables
    and arrays, strings of at most :data:`MAX_STRING_CHARS` characters without control characters
    (other than tab, newline and carriage return) or bidirectional-text overrides.
    """
    path = Path(path)
    text = decode_text(read_nonempty_bytes(path, "a TOML file"), path, "TOML")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise DataFileError(path, "", f"malformed TOML: {err}") from None
    except RecursionError:
        raise DataFileError(path, "", "arrays or tables nested too deeply", f"at most {MAX_NESTING} levels") from None
    check_document(doc, path)
    return doc



def read_ecsv(path, expected: str, columns=()):
    """An astropy Table from an ECSV file of at most :data:`MAX_TABLE_BYTES` with the named ``columns``;
    every failure becomes a DataFileError naming the file (and the missing column)."""
    from astropy.table import Table

    path = Path(path)
    check_input_file(path, expected, MAX_TABLE_BYTES)
    try:
        table = Table.read(path, format="ascii.ecsv")
    except Exception as err:  # astropy raises many kinds; all mean "not a valid ECSV table"
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise DataFileError(path, "", f"malformed ECSV table ({first[:160]})") from None
    missing = [c for c in columns if c not in table.colnames]
    if missing:
        raise DataFileError(path, f"column {missing[0]}", "required column missing", ", ".join(columns))
    return table

# C0 and C1 control characters (tab, newline and carriage return allowed) and the bidirectional overrides/isolates
_UNSAFE_CHARS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def check_document(doc, path) -> None:
    """Refuse nesting deeper than MAX_NESTING, over-long strings and unsafe characters (iteratively)."""
    stack = [(doc, "", 0)]
    while stack:
        value, where, depth = stack.pop()
        if depth > MAX_NESTING:
            raise DataFileError(path, where, "arrays or tables nested too deeply", f"at most {MAX_NESTING} levels")
        if isinstance(value, dict):
            for key, item in value.items():
                _check_string(key, f"{where}.{key}" if where else key, path, what="key")
                stack.append((item, f"{where}.{key}" if where else key, depth + 1))
        elif isinstance(value, list):
            stack.extend((item, f"{where}[{i}]", depth + 1) for i, item in enumerate(value))
        elif isinstance(value, str):
            _check_string(value, where, path)


def _check_string(text: str, where: str, path, what: str = "string") -> None:
    shown = where if len(where) <= 80 else where[:77] + "..."
    if len(text) > MAX_STRING_CHARS:
        raise DataFileError(path, shown, f"{what} of {len(text)} characters is too long",
                            f"at most {MAX_STRING_CHARS}")
    bad = _UNSAFE_CHARS.search(text)
    if bad:
        raise DataFileError(path, shown, f"{what} holds the control character U+{ord(bad.group()):04X}",
                            "printable text (tab and line breaks allowed)")


def check_keys(tab: dict, allowed, path, where: str = "") -> None:
    """Refuse keys of ``tab`` outside ``allowed``, naming the key, the allowed ones and the closest."""
    import difflib

    unknown = [k for k in tab if k not in allowed]
    if not unknown:
        return
    key = unknown[0]
    close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    name = f"{where}.{key}" if where else (f"[{key}]" if isinstance(tab.get(key), dict) else key)
    raise DataFileError(path, name, f"unknown key{hint}", " | ".join(sorted(allowed)))


def table(doc: dict, key: str, path, required: bool = True) -> dict:
    """Return the sub-table ``doc[key]`` (empty dict if optional and absent)."""
    value = doc.get(key, _MISSING)
    if value is _MISSING:
        if required:
            raise DataFileError(path, f"[{key}]", "table missing")
        return {}
    if not isinstance(value, dict):
        raise DataFileError(path, key, f"expected a [{key}] table, got {type(value).__name__}")
    return value


def field(tab: dict, key: str, path, *, prefix: str = "", kind=float, default=_MISSING,
          low=None, high=None, low_open=False, high_open=False, choices=None, unit: str = ""):
    """Fetch and validate one field of a TOML table.

    ``kind`` is float, int, str, bool or list.  Numeric values are checked
    against [low, high] (open ends with ``*_open``); strings against
    ``choices``.  ``prefix`` names the enclosing table in messages.
    """
    name = f"{prefix}.{key}" if prefix else key
    if key not in tab:
        if default is not _MISSING:
            return default
        raise DataFileError(path, name, "required key missing", _allowed(kind, low, high, low_open, high_open, choices, unit))
    value = tab[key]
    if kind is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise DataFileError(path, name, f"expected a number, got {value!r}")
        value = float(value)
        if not math.isfinite(value) or _out(value, low, high, low_open, high_open):
            raise DataFileError(path, name, f"value {value:g} out of range",
                                _allowed(kind, low, high, low_open, high_open, choices, unit))
    elif kind is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise DataFileError(path, name, f"expected a whole number, got {value!r}")
        if _out(value, low, high, low_open, high_open):
            raise DataFileError(path, name, f"value {value} out of range",
                                _allowed(kind, low, high, low_open, high_open, choices, unit))
    elif kind is str:
        if not isinstance(value, str) or not value.strip():
            raise DataFileError(path, name, f"expected a non-empty string, got {value!r}")
        if choices is not None and value not in choices:
            raise DataFileError(path, name, f"value {value!r} not recognised", " | ".join(choices))
    elif kind is bool:
        if not isinstance(value, bool):
            raise DataFileError(path, name, f"expected true or false, got {value!r}")
    elif kind is list:
        if not isinstance(value, list):
            raise DataFileError(path, name, f"expected an array, got {value!r}")
    return value


def _out(v, low, high, low_open, high_open) -> bool:
    if low is not None and (v <= low if low_open else v < low):
        return True
    return high is not None and (v >= high if high_open else v > high)


def _allowed(kind, low, high, low_open, high_open, choices, unit):
    if choices is not None:
        return " | ".join(choices)
    if low is None and high is None:
        return {float: "a number", int: "a whole number", str: "a string", bool: "true or false", list: "an array"}[kind]
    lo = "-inf" if low is None else f"{low:g}"
    hi = "inf" if high is None else f"{high:g}"
    left = "(" if (low_open or low is None) else "["
    right = ")" if (high_open or high is None) else "]"
    return f"{left}{lo}, {hi}{right}" + (f" {unit}" if unit else "")
