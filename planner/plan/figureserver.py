"""A figure process started before the plan is computed.

Building a plan keeps one core busy and leaves the other idle; drawing its figures first needs matplotlib
and the figure modules loaded (~0.3 s).  :class:`FigureServer` forks a process at the start of
``kncast plan`` that loads them meanwhile and then waits.  Once the plan is built it is sent over a pipe
(pickled: ~15 ms for the demo's 10 sites x 10 nights), and the server draws the figures with its own
:class:`~kncast.planner.plan.folder.FigureRun` (two workers forked from it, both with matplotlib loaded)
while the parent writes the tables.  The parent never loads matplotlib.

Where the platform cannot fork, the machine has one core, or the plan cannot be sent (larger than
MAX_PLAN_BYTES), ``start`` returns None and the caller draws with a FigureRun of its own.
"""
from __future__ import annotations

import os
import pickle
import signal
from pathlib import Path

MAX_PLAN_BYTES = 256 * 1024 * 1024  # a plan larger than this (pickled) is drawn by the parent's own workers
JOIN_TIMEOUT_S = 10.0  # wait for a stopped server to stop its workers before killing it


class FigureServer:
    """The figure process (see the module docstring); use as a context manager, which stops it."""

    def __init__(self):
        import multiprocessing

        ctx = multiprocessing.get_context("fork")
        self._conn, theirs = ctx.Pipe()
        self._proc = ctx.Process(target=_serve, args=(theirs, self._conn), name="kncast-figures", daemon=False)
        self._proc.start()
        theirs.close()
        self.paths: list[str] = []

    @classmethod
    def available(cls) -> bool:
        import multiprocessing

        return (os.cpu_count() or 1) >= 2 and "fork" in multiprocessing.get_all_start_methods()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def start(self, plan, folder: Path, figures: str = "chosen"):
        """Send the plan: the server starts drawing into ``folder``.  Returns self, or None when the plan
        cannot be sent (the server is then stopped)."""
        from kncast.planner.plan.folder import figure_jobs, figure_path

        try:
            data = pickle.dumps((plan, str(folder), figures), protocol=pickle.HIGHEST_PROTOCOL)
        except (pickle.PicklingError, TypeError, AttributeError):
            data = None
        if data is None or len(data) > MAX_PLAN_BYTES:
            self.close()
            return None
        self.paths = [figure_path(kind, arg) for kind, arg, _ in figure_jobs(plan, figures)]
        self._conn.send_bytes(data)
        return self

    def finish(self) -> list[dict]:
        """Wait for the figures: their {"title", "path", "caption"} in report order."""
        from kncast.planner.errors import InputError
        from kncast.planner.plan.folder import FigureError, check_announced

        try:
            kind, *rest = self._conn.recv()
        except EOFError:
            raise FigureError("the figure process ended before drawing the figures") from None
        finally:
            self.close()
        if kind == "input":
            raise InputError(rest[0])
        if kind == "error":
            raise FigureError(*rest)
        return check_announced(rest[0], self.paths)

    def close(self) -> None:
        """Stop the server (and its workers) unless it has ended."""
        if self._proc is None:
            return
        self._conn.close()  # a server still waiting for a plan sees the end of the pipe and ends
        self._proc.join(0.5)
        if self._proc.is_alive():  # drawing: it stops its workers on SIGTERM
            self._proc.terminate()
            self._proc.join(JOIN_TIMEOUT_S)
            if self._proc.is_alive():
                self._proc.kill()
                self._proc.join()
        self._proc = None


def _serve(conn, parents_end) -> None:
    """The server: load the figure modules, wait for a plan, draw it, send back the outcome, end."""
    parents_end.close()
    signal.signal(signal.SIGTERM, _stop)  # stop the workers (FigureRun's clean-up) before ending
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot  # noqa: F401

        from kncast.planner.plan import folder as plan_outputs

        _warm_up(plan_outputs)
        try:
            plan, where, figures = pickle.loads(conn.recv_bytes())
        except (EOFError, OSError):
            return  # no plan is coming (the parent stopped or drew the figures itself)
        conn.send(_draw(plan_outputs, plan, Path(where), figures))
    except _Stopped:
        pass
    finally:
        conn.close()
        os._exit(0)  # no interpreter teardown in a forked copy of the parent


# What unpickling a plan and drawing its figures import, loaded while the parent computes the plan
WARM_MODULES = ("kncast.planner.plan.core", "kncast.planner.plan.blocks", "kncast.planner.observation",
                "kncast.planner.setups", "kncast.planner.visibility.core", "kncast.planner.visibility.windows",
                "kncast.forecast.source", "kncast.forecast.features", "kncast.forecast.exposure",
                "kncast.forecast.photosphere", "kncast.forecast.heating", "kncast.forecast.tellurics",
                *(f"kncast.planner.figures.{name}" for name in ("campaign", "lightcurve", "lines", "exposure",
                                                                 "significance")))


def _warm_up(plan_outputs) -> None:
    import importlib

    from kncast.forecast import extinction

    for name in WARM_MODULES:
        importlib.import_module(name)
    extinction.a_lambda_over_a_v(5500.0)
    plan_outputs._line_inputs()
    _draw_text_once()


def _draw_text_once() -> None:
    """Draw a line of text off screen: matplotlib finds and loads its font files on first use (~0.2 s),
    once here instead of in every worker."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(1, 1))
    fig.text(0.5, 0.5, "kncast 0123456789 \u00c5", fontsize=9, fontweight="bold")
    fig.add_subplot().plot([0, 1])
    FigureCanvasAgg(fig).draw()


def _draw(plan_outputs, plan, folder: Path, figures: str) -> tuple:
    import traceback

    from kncast.planner.errors import InputError

    try:
        with plan_outputs.start_figures(plan, folder, figures) as drawing:
            return ("ok", drawing.finish())
    except InputError as err:  # e.g. the disk is full: the user's to fix
        return ("input", str(err))
    except plan_outputs.FigureError as err:
        return ("error", str(err), err.trace)
    except Exception as err:  # noqa: BLE001 - re-raised in the parent
        return ("error", f"figures: {type(err).__name__}: {err}", traceback.format_exc())


class _Stopped(BaseException):
    pass


def _stop(_signum, _frame):
    raise _Stopped
