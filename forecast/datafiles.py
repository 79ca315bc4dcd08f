"""Reading and validating kncast's own TOML data files.

Every loader (sites, events, instruments, abundance tables) goes through
:func:`read_toml` and :func:`field`, so a bad file always yields one line
that names the file, the key and what is allowed.
"""
from __future__ import annotations

import math
import tomllib
from pathlib import Path

from kncast.forecast.errors import DataFileError

_MISSING = object()


def read_nonempty_bytes(path, expected: str) -> bytes:
    """The bytes of a data file; missing, unreadable or empty files raise DataFileError.

    ``expected`` names the kind of file in the message ("a TOML file").
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise DataFileError(path, "", "file not found") from None
    except IsADirectoryError:
        raise DataFileError(path, "", f"is a folder, expected {expected}") from None
    except OSError as err:
        raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    if not raw.strip():
        raise DataFileError(path, "", "file is empty")
    return raw


def read_toml(path) -> dict:
    """Parse a TOML file, turning every failure into a DataFileError naming the file."""
    path = Path(path)
    raw = read_nonempty_bytes(path, "a TOML file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise DataFileError(path, "", "not a text file (binary content), expected TOML") from None
    if "\x00" in text:
        raise DataFileError(path, "", "not a text file (binary content), expected TOML")
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise DataFileError(path, "", f"malformed TOML: {err}") from None


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
