"""Benchmark: ``kncast demo`` (the campaign plan of the bundled event, 10 sites x 10 nights) as a user runs it.

Each repeat, interleaved so that all see the same machine load:

* the demo as a fresh process (``python -m kncast.planner.cli demo --out DIR``: start-up, every
  import, the plan, the whole output folder with its figures and report);
* the import floor: a bare ``python -c "import astropy.coordinates, astropy.table, matplotlib.pyplot"``,
  the libraries any such tool loads; ``ratio`` = demo / floor (goal <= 3, and the demo under 3 s
  on the 2-core machine);
* the baseline, as before: the separate per-question commands for the same event, each as its own
  process with ``--json`` and ``--plot``, summed -- ``kncast visibility`` (same sites and nights),
  ``kncast lightcurve`` (default epochs), ``kncast lines`` (default epochs) and ``kncast exposure``
  (the S/N spectrum of one hour), the last two for one representative setup: the plan's own choice
  for its first useful night, at that night's epoch (read from the first run's plan.json).  The plan
  does more than that sum, so ``speedup`` = baseline / demo understates what one plan run saves.

Then one instrumented run (a fresh process calling the same CLI ``main``) for the breakdown: time in
imports (outermost ``import`` statements, wherever they run), the ephemeris
(``sky.Ephemeris.build``), the rest of the plan (``build_plan``), the exposure and feature
measurements (``evaluate_setups``), tables (ECSV and plan.json, written while the figure workers
draw), figures (forking the figure process, sending it the plan and waiting for it: ``FigureServer``; or
the parent's own workers, ``FigureRun``), the report, and the rest (interpreter start-up, argument parsing,
event and site files, the terminal summary).  Each stage is counted without the stages and imports
nested in it, so the parts add up to the total.  After the run the same process draws every figure
of the plan once more, one at a time, and prints the seconds of each (goal: each under 0.25 s at
the saved size).

CPU seconds of the demo (its figure workers included) and of the floor are printed beside the wall
times: on a shared machine they move much less with the load than wall time does.

Last line: ``RESULT total_s=<median demo wall time> import_floor_s=<median floor> ratio=<total/floor>
baseline_s=<median sum of the four commands> speedup=<baseline/total> cpu_s=<median demo CPU time>``.
Run: python bench/plan.py  (``--repeats N``, default 3)
"""
from __future__ import annotations

import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EVENT = ROOT / "demo_events" / "kn-demo-south.toml"
NIGHTS = 10  # the demo's default
REPEATS = 3
GOAL_S, GOAL_RATIO = 3.0, 3.0
FLOOR_IMPORTS = "import astropy.coordinates, astropy.table, matplotlib.pyplot"
STAGES = ("startup", "imports", "ephemeris", "plan", "exposures", "tables", "figures", "report", "other")


def _children_cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


CPU_S: list[float] = []  # CPU seconds of each timed process (its figure workers included), in call order


def timed(cmd: list[str], what: str) -> float:
    """Wall seconds of one subprocess (its CPU seconds appended to CPU_S); exits if it fails."""
    cpu0, t = _children_cpu_s(), time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True, env={**os.environ, "MPLBACKEND": "Agg"})
    wall = time.perf_counter() - t
    CPU_S.append(_children_cpu_s() - cpu0)
    if r.returncode != 0:
        sys.exit(f"{what} failed (exit {r.returncode}): {r.stderr.strip()[-400:]}")
    return wall


def demo_cmd(out: Path) -> list[str]:
    return [sys.executable, "-m", "kncast.planner.cli", "demo", "--out", str(out)]


def run_demo(out: Path) -> float:
    wall = timed(demo_cmd(out), "kncast demo")
    for name in ("plan.json", "report.html", "report.md", "windows.ecsv", "features.ecsv", "exposures.ecsv"):
        if not (out / name).is_file():
            sys.exit(f"kncast demo did not write {name}")
    return wall


def representative(plan_json: Path) -> tuple[str, float]:
    """(setup id, phase_d) of the plan's choice for its first useful night."""
    first = json.loads(plan_json.read_text())["campaign"]["first_useful"]
    if not first or not first.get("setup"):
        sys.exit("the plan found no useful night: no representative setup for the baseline")
    return first["setup"], float(first["phase_d"])


def separate_commands(out: Path, setup: str, phase_d: float) -> dict[str, list[str]]:
    """The per-question commands for the same event, each writing its JSON document and figure."""
    out.mkdir(parents=True, exist_ok=True)
    base = [sys.executable, "-m", "kncast.planner.cli"]

    def cmd(name, *args):
        return base + [name, "--event", str(EVENT), *args, "--json", str(out / f"{name}.json"),
                       "--plot", str(out / f"{name}.png")]

    return {
        "visibility": cmd("visibility", "--nights", str(NIGHTS)),
        "lightcurve": cmd("lightcurve"),
        "lines": cmd("lines", "--setup", setup),
        "exposure": cmd("exposure", "--setup", setup, "--phase", f"{phase_d:g}", "--time", "3600"),
    }


# ---------------------------------------------------------------------------- the instrumented run
class Stages:
    """Exclusive wall time per stage: a stage's time excludes the stages and imports nested in it."""

    def __init__(self):
        self.seconds = dict.fromkeys(STAGES, 0.0)
        self.stack = []  # [stage, start, nested seconds]
        self.importing = False

    def _close(self, start: float) -> float:
        elapsed = time.perf_counter() - start
        if self.stack:
            self.stack[-1][2] += elapsed
        return elapsed

    def wrap(self, stage: str, fn):
        def timed_call(*args, **kwargs):
            self.stack.append([stage, time.perf_counter(), 0.0])
            try:
                return fn(*args, **kwargs)
            finally:
                _, start, nested = self.stack.pop()
                self.seconds[stage] += self._close(start) - nested

        return timed_call

    def wrap_import(self, original):
        def timed_import(*args, **kwargs):
            if self.importing:
                return original(*args, **kwargs)
            self.importing, start = True, time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.importing = False
                self.seconds["imports"] += self._close(start)

        return timed_import


def instrumented_main(out: str, report: str) -> None:
    """Run ``kncast demo --out OUT`` in this process with stage timers; write the seconds to REPORT."""
    import builtins

    stages = Stages()
    t0 = time.perf_counter()
    sys.argv[0] = "kncast"  # set up this process as the kncast command sets up its own (kncast.planner._early)
    builtins.__import__ = stages.wrap_import(builtins.__import__)
    import kncast.planner.cli as cli
    from kncast.planner import output
    from kncast.planner.plan import core, folder, report as plan_report
    from kncast.planner.visibility import sky

    build = sky.Ephemeris.build.__func__
    sky.Ephemeris.build = classmethod(stages.wrap("ephemeris", build))
    core.build_plan = stages.wrap("plan", core.build_plan)
    core.evaluate_setups = stages.wrap("exposures", core.evaluate_setups)
    for mod, name in ((folder, "write_tables"), (folder, "document"), (output, "write_json")):
        setattr(mod, name, stages.wrap("tables", getattr(mod, name)))
    from kncast.planner.plan.figureserver import FigureServer

    for cls, names in ((folder.FigureRun, ("__init__", "finish")), (FigureServer, ("__init__", "start", "finish"))):
        for name in names:
            setattr(cls, name, stages.wrap("figures", getattr(cls, name)))
    plan_report.write_report = stages.wrap("report", plan_report.write_report)
    plans = []
    build_plan = core.build_plan
    core.build_plan = lambda *a, **k: plans.append(build_plan(*a, **k)) or plans[-1]
    status = stages.wrap("other", cli.main)(["demo", "--out", out])
    if status:
        sys.exit(f"kncast demo failed (exit {status})")
    stages.seconds["in_process"] = time.perf_counter() - t0
    t1 = time.perf_counter()
    each = figure_seconds(plans[-1], Path(out))
    Path(report).write_text(json.dumps({**stages.seconds, "each_figure": each, "redraw": time.perf_counter() - t1}))


def figure_seconds(plan, out: Path) -> dict[str, float]:
    """Seconds to draw and save each figure of ``plan`` alone, in this process (matplotlib loaded)."""
    from kncast.planner.plan import folder

    scratch = out.parent / "figures-again"
    (scratch / "figures").mkdir(parents=True, exist_ok=True)
    from kncast.planner.plan.figureserver import _warm_up

    _warm_up(folder)  # matplotlib and the figure modules, loaded by the figure process in a real run
    import gc

    gc.freeze()  # as the figure process does with the plan it receives: no collection walks it
    seconds = {}
    for name, arg, _ in folder.figure_jobs(plan):
        t = time.perf_counter()
        path = folder.FIGURES[name](plan, scratch, arg)["path"]
        seconds[Path(path).stem] = time.perf_counter() - t
    return seconds


def breakdown(tmp: Path) -> dict[str, float]:
    """Seconds per stage of one instrumented demo run (startup: the wall time outside the process's own
    work) and of each figure drawn alone (``each_figure``)."""
    report = tmp / "stages.json"
    wall = timed([sys.executable, __file__, "--instrumented", str(tmp / "instrumented"), str(report)],
                 "instrumented kncast demo")
    seconds = json.loads(report.read_text())
    wall -= seconds.pop("redraw")  # the figures drawn again one by one come after the demo's own work
    seconds["startup"] = wall - seconds.pop("in_process")
    seconds["total"] = wall
    return seconds


# ---------------------------------------------------------------------------- main
def main(repeats: int = REPEATS) -> int:
    totals, floors, bases, cpus, floor_cpus = [], [], [], [], []
    per_cmd: dict[str, list[float]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for k in range(repeats):
            totals.append(run_demo(tmp / f"run{k}"))
            cpus.append(CPU_S[-1])
            floors.append(timed([sys.executable, "-c", FLOOR_IMPORTS], "import floor"))
            floor_cpus.append(CPU_S[-1])
            print(f"run {k + 1}: demo {totals[-1]:.2f} s wall ({cpus[-1]:.2f} s CPU, figure workers included), "
                  f"import floor {floors[-1]:.2f} s ({floor_cpus[-1]:.2f} s CPU)")
            if k == 0:
                setup, phase_d = representative(tmp / "run0" / "plan.json")
            total = 0.0
            for name, cmd in separate_commands(tmp / f"sep{k}", setup, phase_d).items():
                w = timed(cmd, f"kncast {name}")
                per_cmd.setdefault(name, []).append(w)
                total += w
            bases.append(total)
        parts = breakdown(tmp)
    total, floor, base = statistics.median(totals), statistics.median(floors), statistics.median(bases)
    print("breakdown of one instrumented demo run (s): "
          + ", ".join(f"{name} {parts[name]:.2f}" for name in STAGES) + f"; total {parts['total']:.2f}")
    each = parts["each_figure"]
    print(f"each figure drawn alone (s; goal < 0.25): " + ", ".join(f"{k} {v:.2f}" for k, v in each.items())
          + f"; slowest {max(each, key=each.get)} {max(each.values()):.2f}")
    print(f"demo: median {total:.2f} s, best {min(totals):.2f} s of {repeats} (goal < {GOAL_S:g} s and <= "
          f"{GOAL_RATIO:g} import floors; os.getloadavg() = {', '.join(f'{x:.1f}' for x in os.getloadavg())})")
    print(f"import floor (python -c '{FLOOR_IMPORTS}'): median {floor:.2f} s; demo / floor = {total / floor:.2f}")
    cpu, floor_cpu = statistics.median(cpus), statistics.median(floor_cpus)
    print(f"CPU (less sensitive to the machine's load than wall time): demo median {cpu:.2f} s, import floor "
          f"{floor_cpu:.2f} s, ratio {cpu / floor_cpu:.2f}")
    print(f"baseline, the separate commands as processes for setup {setup} (phase {phase_d:g} d for exposure): "
          + ", ".join(f"{n} {statistics.median(v):.2f} s" for n, v in per_cmd.items())
          + f"; sum median {base:.2f} s")
    print(f"RESULT total_s={total:.2f} import_floor_s={floor:.2f} ratio={total / floor:.2f} "
          f"baseline_s={base:.2f} speedup={base / total:.2f} cpu_s={cpu:.2f}")
    return 0


if __name__ == "__main__":
    if len(sys.argv) == 4 and sys.argv[1] == "--instrumented":
        instrumented_main(sys.argv[2], sys.argv[3])
        sys.exit(0)
    if len(sys.argv) == 3 and sys.argv[1] == "--repeats":
        sys.exit(main(int(sys.argv[2])))
    sys.exit(main())
