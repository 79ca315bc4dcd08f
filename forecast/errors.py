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


class ParameterError(ForecastInputError):
    """A bad value for a named parameter (``distance_mpc``, ``snr_target``, ``twilight`` ...).

    The library names the parameter; an application that knows which of its own options sets it
    shows that instead (:meth:`renamed`).  ``message`` may name parameters as ``{name}`` placeholders
    (``parameter`` and those in ``also``); a message that starts with the bare parameter name has that
    name replaced too.  ``str(err)`` is a complete one-line message on its own.
    """

    def __init__(self, parameter: str, value=None, allowed: str | None = None, message: str | None = None,
                 also: tuple = ()):
        self.parameter, self.value, self.allowed, self.also = parameter, value, allowed, tuple(also)
        self.template = message if message is not None else f"{{{parameter}}} {value!r}: allowed {allowed}"
        if not self.template.startswith("{") and self.template.startswith(parameter):
            self.template = "{" + parameter + "}" + self.template[len(parameter):]
        super().__init__(self.renamed({}))

    def renamed(self, option_of: dict) -> str:
        """The message with every ``{name}`` placeholder replaced by the option that sets it
        (``option_of``: parameter -> option) or else by the parameter's name; the option is added when
        the message does not name the parameter."""
        msg = self.template
        for name in (self.parameter, *self.also):
            msg = msg.replace("{" + name + "}", option_of.get(name, name))
        if self.parameter in option_of and option_of[self.parameter] not in msg:
            msg += f" (option {option_of[self.parameter]})"
        return msg


class DataFileError(ForecastInputError):
    """A data file (TOML, ECSV, FITS, XML) with a missing, malformed or out-of-range field."""

    def __init__(self, path, key: str, problem: str, allowed: str | None = None):
        self.path, self.key, self.problem, self.allowed = str(path), key, problem, allowed
        msg = f"{path}: {key}: {problem}" if key else f"{path}: {problem}"
        if allowed:
            msg += f" (allowed: {allowed})"
        super().__init__(msg)
