"""Errors raised by the physics library for inputs outside their valid range."""
from __future__ import annotations


class ForecastInputError(ValueError):
    """A physical parameter or data file outside its allowed range.

    ``str(err)`` is a complete one-line message naming the parameter (or
    file and field), the value and the allowed range.
    """


def check_range(name: str, value, low=None, high=None, *, low_open=False, high_open=False, unit: str = ""):
    """Raise ForecastInputError unless every element of ``value`` lies in the range.

    ``low``/``high`` may be None for a one-sided range; ``*_open`` makes that bound strict.
    Returns ``value`` unchanged for chaining.
    """
    import numpy as np

    arr = np.asarray(value, dtype=float)
    bad = ~np.isfinite(arr)
    if low is not None:
        bad |= (arr <= low) if low_open else (arr < low)
    if high is not None:
        bad |= (arr >= high) if high_open else (arr > high)
    if np.any(bad):
        lo = "-inf" if low is None else f"{low:g}"
        hi = "inf" if high is None else f"{high:g}"
        interval = ("(" if low_open or low is None else "[") + f"{lo}, {hi}" + (")" if high_open or high is None else "]")
        shown = arr[bad].ravel()[0]
        raise ForecastInputError(f"{name} = {shown:g}{unit}: allowed {interval}{(' ' + unit.strip()) if unit else ''}")
    return value


class DataFileError(ForecastInputError):
    """A data file (TOML, ECSV, FITS, XML) with a missing, malformed or out-of-range field."""

    def __init__(self, path, key: str, problem: str, allowed: str | None = None):
        self.path, self.key, self.problem, self.allowed = str(path), key, problem, allowed
        msg = f"{path}: {key}: {problem}" if key else f"{path}: {problem}"
        if allowed:
            msg += f" (allowed: {allowed})"
        super().__init__(msg)
