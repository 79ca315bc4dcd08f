"""The ``kncast`` command line: one sub-command per question, one error contract.

Each sub-command lives in ``planner/commands/<name>.py`` and exposes
``HELP`` (one line), ``add_arguments(parser)`` and ``run(args) -> int``.
Command modules import nothing heavy at module level, so ``kncast --help``
stays fast.  Bad input ends with one line on stderr and exit status 2;
an internal error says so in one line and ``--debug`` shows the traceback.
SIGINT (Ctrl-C), SIGTERM and SIGHUP end a run the same way: one line, exit
status 128 + the signal's number, outputs from earlier runs left as they were
(every output is written aside and renamed into place, see kncast.planner.output);
forked workers leave the clean-up to the main process and print nothing.
"""
from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import signal
import sys
import threading

COMMANDS = ["demo", "plan", "visibility", "lightcurve", "setups", "lines", "exposure", "coverage", "semester"]

EXIT_OK, EXIT_INTERNAL, EXIT_USAGE = 0, 1, 2
EXIT_SIGNAL_BASE = 128  # a run stopped by signal N exits with 128 + N, as shells report it
STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n))


class Stopped(KeyboardInterrupt):
    """A stop signal (SIGINT, SIGTERM, SIGHUP) arrived; unwinds like Ctrl-C so every clean-up runs."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _raise_stopped(signum, _frame):
    raise Stopped(signum)


_handling = False  # True while main() handles the stop signals (read by forked children)
_installed: tuple = ()  # the signals main() handles (those not ignored when it started)


def _quiet_child() -> None:
    """In a process forked while main() runs (figure workers): Ctrl-C is the parent's to handle,
    SIGTERM/SIGHUP (the parent's pool sends SIGTERM) end the worker silently."""
    if _handling:
        for s in _installed:
            signal.signal(s, signal.SIG_IGN if s == signal.SIGINT else signal.SIG_DFL)


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_quiet_child)


@contextlib.contextmanager
def stop_signals():
    """SIGINT/SIGTERM/SIGHUP raise :class:`Stopped` inside the block; the previous handlers return after it."""
    global _handling, _installed
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    # a signal ignored by whoever started us stays ignored (nohup: SIGHUP; a shell's background job: SIGINT)
    previous = {s: signal.getsignal(s) for s in STOP_SIGNALS if signal.getsignal(s) is not signal.SIG_IGN}
    for s in previous:
        signal.signal(s, _raise_stopped)
    _handling, _installed = True, tuple(previous)
    try:
        yield
    finally:
        _handling, _installed = False, ()
        for s, handler in previous.items():
            signal.signal(s, handler if handler is not None else signal.SIG_DFL)


class OneLineParser(argparse.ArgumentParser):
    """argparse parser whose usage errors are one line and exit status 2."""

    def error(self, message):
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def _command_modules():
    for name in COMMANDS:
        try:
            yield name, importlib.import_module(f"kncast.planner.commands.{name}")
        except ModuleNotFoundError as err:
            if err.name != f"kncast.planner.commands.{name}":
                raise


def build_parser() -> argparse.ArgumentParser:
    from kncast.planner import __version__

    parser = OneLineParser(prog="kncast", description="Follow-up planning and spectral forecasts for "
                           "kilonova candidates. Forecasts are model estimates: the observatory's own "
                           "exposure-time tools and operating rules take precedence.")
    parser.add_argument("--version", action="version", version=f"kncast {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name, module in _command_modules():
        p = sub.add_parser(name, help=module.HELP, description=module.HELP)
        p.add_argument("--debug", action="store_true", help="show the full traceback of internal errors")
        module.add_arguments(p)
        p.set_defaults(run=module.run, option_of=_options_by_parameter(p, getattr(module, "PARAMETER_DESTS", {})))
    return parser


def _options_by_parameter(parser: argparse.ArgumentParser, aliases: dict) -> dict:
    """Parameter name of the Python API -> the option that sets it in this command.

    A parameter is found by the option's ``dest``, or through ``aliases`` (parameter -> dest) where
    the names differ (the command's ``PARAMETER_DESTS`` and the photosphere-model keys).
    """
    from kncast.planner.commands._common import PARAMETER_DESTS as common_dests
    from kncast.planner.commands._model_options import PARAMETER_DESTS as model_dests

    by_dest = {a.dest: max(a.option_strings, key=len) for a in parser._actions if a.option_strings}
    out = dict(by_dest)
    for parameter, dest in {**common_dests, **model_dests, **aliases}.items():
        if dest in by_dest:
            out[parameter] = by_dest[dest]
    return out


def user_message(err, option_of: dict) -> str:
    """The one-line message for a user error; a ParameterError names the option that sets it."""
    from kncast.forecast.errors import ParameterError

    if isinstance(err, ParameterError):
        return err.renamed(option_of)
    return str(err)


def main(argv=None) -> int:
    with stop_signals():
        try:
            return _main(argv)
        except KeyboardInterrupt as err:  # also a stop before the command is known
            return _stopped("kncast", err)


def _main(argv) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_USAGE
    from kncast.planner.errors import USER_ERRORS

    try:
        from kncast.planner.commands._outputs import check_outputs

        check_outputs(args)
        return int(args.run(args) or EXIT_OK)
    except USER_ERRORS as err:
        _say(f"kncast {args.command}: error: {user_message(err, args.option_of)}")
        return EXIT_USAGE
    except KeyboardInterrupt as err:
        return _stopped(f"kncast {args.command}", err)
    except Exception as err:  # noqa: BLE001 - the last line of defence, see --debug
        if args.debug:
            raise
        _say(f"kncast {args.command}: internal error: {type(err).__name__}: {err} "
             f"(run again with --debug for the traceback)")
        return EXIT_INTERNAL


def _stopped(prog: str, err: KeyboardInterrupt) -> int:
    """One line for a stop signal; the exit status 128 + its number (SIGINT: 130).  A second signal
    while stopping is ignored (the clean-up has run; stop_signals restores the handlers)."""
    with contextlib.suppress(ValueError):  # not the main thread
        for s in STOP_SIGNALS:
            signal.signal(s, signal.SIG_IGN)
    signum = getattr(err, "signum", signal.SIGINT)
    _say(f"{prog}: interrupted by {signal.Signals(signum).name}; earlier outputs are unchanged")
    return EXIT_SIGNAL_BASE + int(signum)


MAX_MESSAGE_CHARS = 1000  # a message quoting a huge value from a file is cut to this


def _say(line: str) -> None:
    """Print ``line`` on stderr as one line (line breaks become spaces, at most MAX_MESSAGE_CHARS), if
    stderr is still there (a hung-up terminal is not)."""
    line = " ".join(str(line).splitlines())
    if len(line) > MAX_MESSAGE_CHARS:
        line = line[:MAX_MESSAGE_CHARS - 5] + " ..."
    with contextlib.suppress(OSError, ValueError):
        print(line, file=sys.stderr)


def run() -> None:
    """The ``kncast`` program: :func:`main`, the exit handlers, then the end of the process with main's status.

    Every output file is written and closed when main returns (atomic writes), and the exit handlers
    (``atexit``: multiprocessing, logging) run as at a normal exit; only the interpreter's own teardown
    is skipped, which frees the run's objects one by one (0.3 s after a plan, measured) for nothing.
    """
    import atexit

    status = main()
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(OSError, ValueError):  # a closed pipe or terminal: nothing left to say
            stream.flush()
    os._exit(status)


if __name__ == "__main__":
    run()
