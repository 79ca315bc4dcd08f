"""Exceptions for bad user input; the CLI turns each into one line and exit status 2."""
from __future__ import annotations

import difflib

from kncast.forecast.errors import DataFileError, ForecastInputError

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


class ParameterError(InputError):
    """A bad value for a named parameter of the Python API (``snr_target``, ``twilight``, a ``[model]`` key).

    Lower layers name the parameter; the command layer, which knows which option sets it, shows the
    option instead (:meth:`renamed`).  ``message`` may name parameters as ``{name}`` placeholders
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
