"""The first half-second of the ``kncast`` command: a stop signal before the command line is ready, and
the garbage collector's thresholds.

Importing the package loads astropy (kncast.planner._offline) before kncast.planner.cli can take
over the stop signals; a Ctrl-C in that time would end in a KeyboardInterrupt traceback.  When this
process is the ``kncast`` console script, SIGINT, SIGTERM and SIGHUP meanwhile end it with the one
line and exit status (128 + the signal's number) of kncast.planner.cli; nothing has been written
yet, so there is nothing to clean up.  Imported as a library, kncast changes no signal handler and
leaves the collector as it is.
"""
from __future__ import annotations

import os
import signal
import sys

# The command allocates ~10^5 long-lived objects (astropy, the plan) and makes few reference cycles: with
# the interpreter's default (700, 10, 10) it spends ~0.12 s of a demo run in collections, with this ~0.02 s
# (bench/plan.py; memory +2%).  Set for the command's process only, never for kncast used as a library.
COLLECTOR_THRESHOLDS = (100_000, 10, 10)
STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n))


def is_command() -> bool:
    """True when this process is the ``kncast`` command: its script, or ``python -m kncast.planner.cli``."""
    script = os.path.basename(sys.argv[0] or "") if sys.argv else ""
    orig = list(getattr(sys, "orig_argv", []))
    as_module = any(a == "-m" and b == "kncast.planner.cli" for a, b in zip(orig, orig[1:]))
    return script in ("kncast", "kncast.exe") or as_module


def guard_start() -> None:
    """Install the early stop handler, and the collector thresholds, when the process is the ``kncast``
    command."""
    if not is_command():
        return
    import gc

    gc.set_threshold(*COLLECTOR_THRESHOLDS)
    for s in STOP_SIGNALS:
        if signal.getsignal(s) is not signal.SIG_IGN:  # ignored by whoever started us: stays ignored
            signal.signal(s, _stop_now)


def _stop_now(signum, _frame) -> None:
    name = signal.Signals(signum).name
    try:
        os.write(2, f"kncast: interrupted by {name}; earlier outputs are unchanged\n".encode())
    finally:
        os._exit(128 + signum)


__all__ = ["guard_start"]
