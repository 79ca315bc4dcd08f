"""A figure process started before the plan is computed.

Building a plan keeps one core busy and leaves the other idle; drawing its figures first needs matplotlib
and the figure modules loaded (~0.3 s).  :class:`FigureServer` forks a process at the start of
``kncast plan`` that loads them meanwhile.  The parent sends it the parts of the plan as they become final:

* the visibility, as soon as the windows are computed: the server draws the campaign chart, which needs
  nothing else, while the parent evaluates the setups;
* the plan once every night's choice is made (pickled without what only the tables read: ~7 ms, 1.2 MB
  for the demo's 10 sites x 10 nights; no figure shows the ensemble, the candidates or the blocks that
  follow): the server draws the other
  figures with its own :class:`~kncast.planner.plan.folder.FigureRun` (two workers forked from it, both
  with matplotlib loaded) while the parent finishes the plan and writes the tables.

The server draws into a staging folder of its own and sends the PNG files back with their captions; the
parent writes them into its output folder (:meth:`FigureServer.into`), so nothing is written beside the
output before the plan is complete.  The parent never loads matplotlib.

Where the platform cannot fork, the machine has one core, or the plan cannot be sent (larger than
MAX_PLAN_BYTES), ``start`` returns None and the caller draws with a FigureRun of its own.
"""
from __future__ import annotations

import os
import pickle
import shutil
import signal
import tempfile
import threading
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
        self.started = False
        self._folder: Path | None = None
        self._sender: threading.Thread | None = None
        self._send_failed = False

    @classmethod
    def available(cls) -> bool:
        import multiprocessing

        return (os.cpu_count() or 1) >= 2 and "fork" in multiprocessing.get_all_start_methods()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _send(self, message: tuple) -> bool:
        """Pickle and send ``message``; False when it cannot be pickled or is larger than MAX_PLAN_BYTES."""
        try:
            data = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
        except (pickle.PicklingError, TypeError, AttributeError):
            return False
        if len(data) > MAX_PLAN_BYTES:
            return False
        self._wait_sent()
        if self._send_failed:
            return False
        # written by a thread: the pipe takes the plan (megabytes) only as fast as the server reads it
        self._sender = threading.Thread(target=self._write, args=(data,), name="kncast-figures-send", daemon=True)
        self._sender.start()
        return True

    def _write(self, data: bytes) -> None:
        try:
            self._conn.send_bytes(data)
        except OSError:  # the server has ended (it could not load its modules, say)
            self._send_failed = True

    def _wait_sent(self) -> None:
        if self._sender is not None:
            self._sender.join()
            self._sender = None

    def draw_visibility(self, visibility) -> None:
        """Send the visibility: the server draws the campaign chart before the plan arrives (if it
        cannot be sent, the chart is drawn with the other figures)."""
        if self._proc is not None and not self.started:
            self._send(("visibility", visibility))

    def start(self, plan, figures: str = "chosen"):
        """Send the plan (its choices made): the server starts drawing.  Returns self, or None when the plan
        cannot be sent (the server is then stopped)."""
        from kncast.planner.plan.folder import figure_jobs, figure_path, figure_view

        if self._proc is None or not self._send(("plan", figure_view(plan), figures)):
            self.close()
            return None
        self.paths = [figure_path(kind, arg) for kind, arg, _ in figure_jobs(plan, figures)]
        self.started = True
        return self

    def into(self, folder: Path):
        """The folder :meth:`finish` writes the figure files into; returns self."""
        self._folder = Path(folder)
        return self

    def finish(self) -> list[dict]:
        """Wait for the figures, write them into the :meth:`into` folder; their {"title", "path", "caption"}
        in report order."""
        from kncast.planner.errors import InputError
        from kncast.planner.plan.folder import FigureError, check_announced

        self._wait_sent()
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
        results, files = rest
        for rel, data in files.items():
            _write_file(self._folder / rel, data)
        return check_announced(results, self.paths)

    def close(self) -> None:
        """Stop the server (and its workers) unless it has ended."""
        if self._proc is None:
            return
        if self._sender is not None and self._sender.is_alive():
            self._proc.terminate()  # it is not reading what is being sent: stop it, which ends the write
        self._wait_sent()
        self._conn.close()  # a server still waiting for a plan sees the end of the pipe and ends
        self._proc.join(0.5)
        if self._proc.is_alive():  # drawing: it stops its workers on SIGTERM
            self._proc.terminate()
            self._proc.join(JOIN_TIMEOUT_S)
            if self._proc.is_alive():
                self._proc.kill()
                self._proc.join()
        self._proc = None


def _write_file(path: Path, data: bytes) -> None:
    """Write a figure file inside the (temporary) output folder; a refusal of the disk is an OutputError."""
    from kncast.planner.output import atomic_path

    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)


def _serve(conn, parents_end) -> None:
    """The server: load the figure modules, draw what the parent sends until the plan, send back the
    figures, end."""
    parents_end.close()
    signal.signal(signal.SIGTERM, _stop)  # stop the workers (FigureRun's clean-up) before ending
    staging = Path(tempfile.mkdtemp(prefix="kncast-figures-"))
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot  # noqa: F401

        from kncast.planner.plan import folder as plan_outputs

        _warm_up(plan_outputs)
        drawn = {}
        while True:
            try:
                kind, *message = _load(conn.recv_bytes())
            except (EOFError, OSError):
                return  # no plan is coming (the parent stopped or drew the figures itself)
            if kind == "visibility":
                drawn.update(_early_campaign(plan_outputs, message[0], staging))
                continue
            plan, figures = message
            conn.send(_draw(plan_outputs, plan, staging, figures, drawn))
            return
    except _Stopped:
        pass
    finally:
        conn.close()
        shutil.rmtree(staging, ignore_errors=True)
        os._exit(0)  # no interpreter teardown in a forked copy of the parent


def _load(data: bytes):
    """Unpickle a message with the garbage collector paused, then exempt what it holds from later
    collections (the plan is ~10^5 objects that live until the end: each full collection would walk them
    all, in the server and in each worker forked from it)."""
    import gc

    gc.disable()
    try:
        return pickle.loads(data)
    finally:
        gc.freeze()
        gc.enable()


def _early_campaign(plan_outputs, visibility, staging: Path) -> dict:
    """{("campaign", None): result} drawn from the visibility alone, or {} if that fails (the chart is
    then drawn with the plan, where a failure is reported)."""
    try:
        (staging / "figures").mkdir(exist_ok=True)
        return {("campaign", None): plan_outputs.campaign_chart_of(visibility, staging)}
    except Exception:  # noqa: BLE001 - drawn again, and reported, with the other figures
        return {}


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


def _draw(plan_outputs, plan, folder: Path, figures: str, drawn: dict) -> tuple:
    """("ok", results, {path: PNG bytes}) of every figure drawn into ``folder``, or the failure."""
    import traceback

    from kncast.planner.errors import InputError

    try:
        with plan_outputs.start_figures(plan, folder, figures, drawn) as drawing:
            results = drawing.finish()
        return ("ok", results, {r["path"]: (folder / r["path"]).read_bytes() for r in results})
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
