"""Exceptions for bad user input; the CLI turns each into one line and exit status 2."""
from __future__ import annotations

import difflib

from kncast.forecast.errors import DataFileError, ForecastInputError
from kncast.forecast.errors import ParameterError as BaseParameterError

FileFieldError = DataFileError  # a data file with a missing, malformed or out-of-range field


class InputError(ValueError):
    """Bad input from a user: a file, a key, an option or a value outside its range.

    ``str(err)`` is the complete one-line message shown to the user.
    """


class OptionError(InputError):
    """A command-line option with a bad value."""

    def __init__(self, option: str, value, allowed: str):
        self.option, self.value, self.allowed = option, value, allowed
        super().__init__(f"{option} {value!r}: allowed {allowed}")


class ParameterError(InputError, BaseParameterError):
    """A bad value for a named parameter of the Python API (see
    :class:`kncast.forecast.errors.ParameterError`); also an InputError."""


class UnknownNameError(InputError):
    """An unknown site, setup or feature id; suggests the closest known ids."""

    def __init__(self, what: str, name: str, known):
        known = sorted(known)
        close = difflib.get_close_matches(name, known, n=3, cutoff=0.4)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        shown = ", ".join(known[:12]) + (" ..." if len(known) > 12 else "")
        super().__init__(f"unknown {what} {name!r}{hint} (known: {shown})")


USER_ERRORS = (InputError, ForecastInputError)

__all__ = ["InputError", "FileFieldError", "OptionError", "ParameterError", "UnknownNameError", "USER_ERRORS"]
