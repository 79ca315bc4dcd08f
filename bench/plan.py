"""Benchmark: the full demo campaign plan, 8 sites x 10 nights, timed as a whole process.

Runs ``python -m kncast.planner.cli plan`` on the southern demo event in a fresh
subprocess (so Python start-up and every import count), writing the whole
output folder (plan.json, ECSV tables, figures, report.md, report.html).
Repeats a few times and reports the median wall time.  Goal: under 10 s on
the 2-core machine.

Baseline, measured in the same run (interleaved with the plan runs, so both
see the same machine load): the separate per-question commands for the
same event, each as its own process with ``--json`` and ``--plot``, summed --
``kncast visibility`` (same sites and nights), ``kncast lightcurve``
(default epochs), ``kncast lines`` (default epochs, which now also measures every feature) and
``kncast exposure`` (the S/N spectrum of one hour), the last two for one representative setup: the plan's own choice
for its first useful night, at that night's epoch (read from the first
run's plan.json).  The plan does more than that sum (features and exposures
for every setup of every site at every planned epoch, plus the report), so
``speedup`` = baseline / plan understates what one plan run saves.  Also
printed, for information: the import floor, ``python -c "import kncast.planner.cli"``.

Last line: ``RESULT seconds=<median plan wall time> baseline_seconds=<median sum of the four commands>
speedup=<baseline/plan>``.
Run: python bench/plan.py
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
SITES = "paranal,las-campanas,pachon,sutherland,siding-spring,maunakea,la-palma,mount-graham"
NIGHTS = 10
REPEATS = 3
GOAL_S = 10.0


def _children_cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def timed(cmd: list[str], what: str) -> tuple[float, float]:
    """(wall s, CPU s) of one subprocess; exits if it fails."""
    cpu0, t = _children_cpu_s(), time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    wall, cpu = time.perf_counter() - t, _children_cpu_s() - cpu0
    if r.returncode != 0:
        sys.exit(f"{what} failed (exit {r.returncode}): {r.stderr.strip()[-400:]}")
    return wall, cpu


def run_once(out: Path) -> tuple[float, float]:
    cmd = [sys.executable, "-m", "kncast.planner.cli", "plan", "--event", str(EVENT), "--sites", SITES,
           "--nights", str(NIGHTS), "--out", str(out)]
    wall, cpu = timed(cmd, "plan")
    for name in ("plan.json", "report.html", "report.md", "windows.ecsv", "features.ecsv", "exposures.ecsv"):
        if not (out / name).is_file():
            sys.exit(f"plan did not write {name}")
    return wall, cpu


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
        "visibility": cmd("visibility", "--sites", SITES, "--nights", str(NIGHTS)),
        "lightcurve": cmd("lightcurve"),
        "lines": cmd("lines", "--setup", setup),
        "exposure": cmd("exposure", "--setup", setup, "--phase", f"{phase_d:g}", "--time", "3600"),
    }


def main() -> int:
    times, base_times, floor_times = [], [], []
    per_cmd: dict[str, list[float]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for k in range(REPEATS):
            wall, cpu = run_once(Path(tmp) / f"run{k}")
            times.append(wall)
            print(f"run {k + 1}: {wall:.2f} s wall, {cpu:.2f} s CPU (8 sites x {NIGHTS} nights, whole process "
                  f"incl. imports and the figure workers)")
            if k == 0:
                setup, phase_d = representative(Path(tmp) / "run0" / "plan.json")
            total = 0.0
            for name, cmd in separate_commands(Path(tmp) / f"sep{k}", setup, phase_d).items():
                w, _ = timed(cmd, f"kncast {name}")
                per_cmd.setdefault(name, []).append(w)
                total += w
            base_times.append(total)
            floor_times.append(timed([sys.executable, "-c", "import kncast.planner.cli"], "import kncast.planner.cli")[0])
    median = statistics.median(times)
    base = statistics.median(base_times)
    floor = statistics.median(floor_times)
    print(f"median {median:.2f} s, best {min(times):.2f} s (goal < {GOAL_S:g} s; wall time depends on the load "
          f"of the machine, see os.getloadavg() = {', '.join(f'{x:.1f}' for x in os.getloadavg())})")
    print(f"baseline, the separate commands as processes for setup {setup} (phase {phase_d:g} d for exposure): "
          + ", ".join(f"{n} {statistics.median(v):.2f} s" for n, v in per_cmd.items())
          + f"; sum median {base:.2f} s of {REPEATS}")
    print(f"import floor (python -c 'import kncast.planner.cli'): median {floor:.2f} s; plan / import floor = "
          f"{median / floor:.1f}")
    print(f"RESULT seconds={median:.2f} baseline_seconds={base:.2f} speedup={base / median:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
