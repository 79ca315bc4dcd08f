"""The ``kncast`` command line: one sub-command per question, one error contract.

Each sub-command lives in ``planner/commands/<name>.py`` and exposes
``HELP`` (one line), ``add_arguments(parser)`` and ``run(args) -> int``.
Command modules import nothing heavy at module level, so ``kncast --help``
stays fast.  Bad input ends with one line on stderr and exit status 2;
an internal error says so in one line and ``--debug`` shows the traceback.
"""
from __future__ import annotations

import argparse
import importlib
import sys

COMMANDS = ["demo", "plan", "visibility", "lightcurve", "setups", "lines", "exposure", "coverage"]

EXIT_OK, EXIT_INTERNAL, EXIT_USAGE = 0, 1, 2


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
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_USAGE
    from kncast.planner.errors import USER_ERRORS

    try:
        return int(args.run(args) or EXIT_OK)
    except USER_ERRORS as err:
        print(f"kncast {args.command}: error: {user_message(err, args.option_of)}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"kncast {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as err:  # noqa: BLE001 - the last line of defence, see --debug
        if args.debug:
            raise
        print(f"kncast {args.command}: internal error: {type(err).__name__}: {err} "
              f"(run again with --debug for the traceback)", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
