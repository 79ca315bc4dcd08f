"""Benchmark: peak memory of the demo campaign plan at 10 and 60 nights (8 sites).

Each plan runs ``kncast plan`` in a fresh process; the process reports its own
peak resident set (``resource.getrusage(RUSAGE_SELF).ru_maxrss``, so the figure
worker processes are not counted).  Goal: the 60-night plan needs less than
twice the memory of the 10-night one (the per-feature measurement is linear
in the number of epochs).

``--one-block`` evaluates each epoch's flux at every epoch's troughs in one
model call (``kncast.forecast.source.ROWS_BLOCK`` set above the number of
epochs), the quadratic layout before the blocked one, for comparison.

Last line: ``RESULT mib_10=<peak MiB, 10 nights> mib_60=<peak MiB, 60 nights> ratio=<60 / 10> ok=<ratio < 2>``.
Run: python bench/plan_memory.py [--one-block]
"""
from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EVENT = ROOT / "demo_events" / "kn-demo-south.toml"
SITES = "paranal,las-campanas,pachon,sutherland,siding-spring,maunakea,la-palma,mount-graham"
NIGHTS = (10, 60)
GOAL_RATIO = 2.0

CHILD = """
import resource, sys
import kncast.forecast.source as source
if {one_block}:
    source.ROWS_BLOCK = 10 ** 9
from kncast.planner.cli import main
rc = main({argv!r})
print("MAXRSS_KIB", resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)
sys.exit(rc)
"""


def peak_mib(nights: int, out: Path, one_block: bool) -> tuple[float, float]:
    """(peak resident MiB, wall s) of one plan process."""
    argv = ["plan", "--event", str(EVENT), "--sites", SITES, "--nights", str(nights), "--out", str(out)]
    start = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", CHILD.format(one_block=one_block, argv=argv)],
                       capture_output=True, text=True)
    wall = time.perf_counter() - start
    if r.returncode != 0:
        sys.exit(f"plan --nights {nights} failed (exit {r.returncode}): {r.stderr.strip()[-400:]}")
    kib = next(int(line.split()[1]) for line in r.stderr.splitlines() if line.startswith("MAXRSS_KIB"))
    return kib / 1024.0, wall


def main() -> int:
    one_block = "--one-block" in sys.argv[1:]
    peaks = {}
    with tempfile.TemporaryDirectory() as tmp:
        for n in NIGHTS:
            peaks[n], wall = peak_mib(n, Path(tmp) / f"n{n}", one_block)
            print(f"8 sites x {n} nights: peak {peaks[n]:.0f} MiB, {wall:.1f} s wall"
                  + (" (one-block trough flux)" if one_block else ""))
    ratio = peaks[NIGHTS[1]] / peaks[NIGHTS[0]]
    print(f"RESULT mib_10={peaks[10]:.0f} mib_60={peaks[60]:.0f} ratio={ratio:.2f} ok={ratio < GOAL_RATIO}")
    return 0 if ratio < GOAL_RATIO else 1


if __name__ == "__main__":
    sys.exit(main())
