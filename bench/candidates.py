"""Benchmark: ``kncast plan`` of an event with 100 candidate positions against the same plan with one.

The event is the bundled ``kn-demo-south`` (its own single position), and the same file with
N_CANDIDATES invented ``[[candidate]]`` positions added: a seeded scatter within ~10 deg of the event
position, for timing only (no real sources).  Event files allow at most
``kncast.planner.events.model.MAX_CANDIDATES`` candidates; the bench lifts that cap in its own
processes so it can time the 100 the issue asks about.

Each repeat, interleaved so both see the same machine load: ``kncast plan --event FILE --out DIR``
(every known site, the default 7 nights, the whole output folder with figures and report) as a
fresh process, once for the single-position event and once for the 100-candidate one.
``added_s`` = median(100 candidates) - median(single); goal: under GOAL_ADDED_S.

Then, in this process (imports warm), the breakdown of ``build_plan`` + ``plan_document`` for both
events: visibility of the event itself (``compute_visibility``), the candidate ranking
(``rank_candidates``, all its work included), the plan document (``plan_document``, which summarises every ranked
candidate) and the rest of the plan.

Baseline, measured in the same run: the ranking done one target at a time (``compute_visibility``
per ``target_index`` with the shared ephemeris, then the same ordering), as ``rank_candidates`` did
before the many-target path.  ``speedup`` = that / ``rank_candidates``.  Agreement: every site,
night and candidate has the same rank, hours (1e-9 h), window edges and best time (1e-6 d) in both.

``--profile``: also print the 20 largest cumulative entries of cProfile over the 100-candidate
``build_plan``.

Last line: ``RESULT single_s=<median single plan> hundred_s=<median 100-candidate plan>
added_s=<difference> speedup=<one-at-a-time ranking / rank_candidates> rank_s=<rank_candidates>``.
Run: python bench/candidates.py  (``--repeats N``, default 3; ``--profile``)
"""
from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EVENT = ROOT / "demo_events" / "kn-demo-south.toml"
N_CANDIDATES = 100
NIGHTS = 7  # kncast plan's default
SCATTER_DEG = 10.0  # half-width of the invented candidate scatter around the event position
SEED = 19
REPEATS = 3
GOAL_ADDED_S = 3.0
LIFT_CAP = "import kncast.planner.events.eventfile as ef; ef.MAX_CANDIDATES = 10**6"


def write_event(path: Path) -> Path:
    """The demo event file with N_CANDIDATES invented candidate positions appended (timing only)."""
    import numpy as np

    from kncast.planner.events.eventfile import load_event

    base = load_event(EVENT)
    rng = np.random.default_rng(SEED)
    ra = base.ra_deg + rng.uniform(-SCATTER_DEG, SCATTER_DEG, N_CANDIDATES)
    dec = np.clip(base.dec_deg + rng.uniform(-SCATTER_DEG, SCATTER_DEG, N_CANDIDATES), -89.0, 89.0)
    rows = [f'\n[[candidate]]\nid = "bench-{k:03d}"\nra = {a % 360.0:.5f}\ndec = {d:.5f}\n'
            for k, (a, d) in enumerate(zip(ra, dec))]
    path.write_text(EVENT.read_text() + "".join(rows))
    return path


def plan_cmd(event: Path, out: Path) -> list[str]:
    code = f"{LIFT_CAP}; import sys; from kncast.planner.cli import main; sys.exit(main(sys.argv[1:]))"
    return [sys.executable, "-c", code, "plan", "--event", str(event), "--nights", str(NIGHTS), "--out", str(out),
            "--force"]


def timed(cmd: list[str], what: str) -> float:
    """Wall seconds of one subprocess; exits if it fails."""
    t = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True, env={**os.environ, "MPLBACKEND": "Agg"})
    wall = time.perf_counter() - t
    if r.returncode != 0:
        sys.exit(f"{what} failed (exit {r.returncode}): {r.stderr.strip()[-400:]}")
    return wall


# ---------------------------------------------------------------------------- in this process
class Timers:
    """Exclusive seconds of wrapped functions (a wrapped call's time excludes wrapped calls nested in
    it), except that everything inside ``ranking`` counts as ranking."""

    def __init__(self):
        self.seconds, self.stack = {}, []  # stack: [name, nested seconds]

    def wrap(self, name, fn):
        def timed_call(*args, **kwargs):
            if any(frame[0] == "ranking" for frame in self.stack):
                return fn(*args, **kwargs)
            self.stack.append([name, 0.0])
            t = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                elapsed = time.perf_counter() - t
                nested = self.stack.pop()[1]
                self.seconds[name] = self.seconds.get(name, 0.0) + elapsed - nested
                if self.stack:
                    self.stack[-1][1] += elapsed

        return timed_call


def breakdown(event, sites, registry) -> tuple[dict, object]:
    """Seconds per part of ``build_plan`` + ``plan_document`` for ``event``; and the plan."""
    from kncast.planner.plan import core
    from kncast.planner.visibility import candidates, core as vis_core

    timers = Timers()
    saved = core.build_plan, vis_core.compute_visibility, candidates.rank_candidates, core.plan_document
    vis_core.compute_visibility = timers.wrap("visibility", saved[1])
    candidates.rank_candidates = timers.wrap("ranking", saved[2])
    try:
        plan = timers.wrap("rest of the plan", saved[0])(event, sites, nights=NIGHTS, registry=registry)
        timers.wrap("plan document", saved[3])(plan)
    finally:
        core.build_plan, vis_core.compute_visibility, candidates.rank_candidates, core.plan_document = saved
    return timers.seconds, plan


def one_at_a_time(event, sites, ephemeris):
    """The ranking of every candidate computed one target at a time (the baseline)."""
    from kncast.planner.visibility.candidates import CandidateNight, _entry, _order
    from kncast.planner.visibility.core import compute_visibility

    targets = event.targets()
    per_target = [compute_visibility(event, sites, nights=NIGHTS, target_index=i, ephemeris=ephemeris).nights
                  for i in range(len(targets))]
    out = []
    for k, base in enumerate(per_target[0]):
        entries = sorted((_entry(targets[i], i, per_target[i][k]) for i in range(len(targets))), key=_order)
        for r, e in enumerate(entries, start=1):
            e.rank = r
        out.append(CandidateNight(site=base.site, night=base.night, dusk=base.dusk, dawn=base.dawn, ranking=entries))
    return out


def disagreement(a, b) -> str:
    """'' when two rankings agree (ranks, hours to 1e-9 h, window edges and best times to 1e-6 d)."""
    if len(a) != len(b):
        return f"{len(a)} site/nights against {len(b)}"
    for na, nb in zip(a, b):
        for ra, rb in zip(na.ranking, nb.ranking):
            where = f"{na.site.id} {na.night} rank {ra.rank}"
            if ra.candidate.id != rb.candidate.id or abs(ra.hours - rb.hours) > 1e-9 or ra.note != rb.note:
                return f"{where}: {ra.candidate.id} {ra.hours} h against {rb.candidate.id} {rb.hours} h"
            if len(ra.windows) != len(rb.windows):
                return f"{where}: {len(ra.windows)} windows against {len(rb.windows)}"
            for wa, wb in zip(ra.windows, rb.windows):
                for attr in ("start", "end", "best_time"):
                    if abs(getattr(wa, attr).mjd - getattr(wb, attr).mjd) > 1e-6:
                        return f"{where}: window {attr} differs"
    return ""


def in_process(event1, event100, profile: bool) -> dict:
    from kncast.planner.sites import SiteRegistry
    from kncast.planner.visibility.candidates import rank_candidates

    registry = SiteRegistry.load()
    sites = registry.select(None)
    breakdown(event1, sites, registry)  # warm-up: imports, bundled tables, caches
    parts1, _ = breakdown(event1, sites, registry)
    parts100, plan = breakdown(event100, sites, registry)
    eph = plan.visibility.ephemeris
    t = time.perf_counter()
    base = one_at_a_time(event100, sites, eph)
    base_s = time.perf_counter() - t
    t = time.perf_counter()
    ours = rank_candidates(event100, sites, nights=NIGHTS, ephemeris=eph)
    rank_s = time.perf_counter() - t
    if profile:
        import cProfile
        import pstats

        prof = cProfile.Profile()
        prof.runcall(breakdown, event100, sites, registry)
        pstats.Stats(prof).sort_stats("cumulative").print_stats(20)
    return {"single": parts1, "hundred": parts100, "base_s": base_s, "rank_s": rank_s,
            "disagreement": disagreement(ours, base)}


def main(repeats: int = REPEATS, profile: bool = False) -> int:
    exec(LIFT_CAP)
    from kncast.planner.events.eventfile import load_event

    singles, hundreds = [], []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        many = write_event(tmp / "kn-demo-south-100.toml")
        for k in range(repeats):
            singles.append(timed(plan_cmd(EVENT, tmp / f"one{k}"), "kncast plan (single position)"))
            hundreds.append(timed(plan_cmd(many, tmp / f"many{k}"), f"kncast plan ({N_CANDIDATES} candidates)"))
            print(f"run {k + 1}: kncast plan single position {singles[-1]:.2f} s, "
                  f"{N_CANDIDATES} candidates {hundreds[-1]:.2f} s")
        r = in_process(load_event(EVENT), load_event(many), profile)
    for label, parts in (("single position", r["single"]), (f"{N_CANDIDATES} candidates", r["hundred"])):
        print(f"in-process build_plan + plan_document, {label} (s): "
              + ", ".join(f"{k} {v:.2f}" for k, v in parts.items()) + f"; total {sum(parts.values()):.2f}")
    added = {k: r["hundred"].get(k, 0.0) - r["single"].get(k, 0.0) for k in r["hundred"]}
    print("added by the candidates in-process (s): " + ", ".join(f"{k} {v:+.2f}" for k, v in added.items())
          + f"; total {sum(added.values()):+.2f}")
    print(f"ranking {N_CANDIDATES} candidates x {NIGHTS} nights x every site: rank_candidates {r['rank_s']:.2f} s, "
          f"one target at a time {r['base_s']:.2f} s")
    single, hundred = statistics.median(singles), statistics.median(hundreds)
    print(f"kncast plan as a process: single {single:.2f} s, {N_CANDIDATES} candidates {hundred:.2f} s, "
          f"added {hundred - single:.2f} s (median of {repeats}; goal < {GOAL_ADDED_S:g} s; "
          f"os.getloadavg() = {', '.join(f'{x:.1f}' for x in os.getloadavg())})")
    if r["disagreement"]:
        print(f"DISAGREEMENT: {r['disagreement']}", file=sys.stderr)
    print(f"RESULT single_s={single:.2f} hundred_s={hundred:.2f} added_s={hundred - single:.2f} "
          f"speedup={r['base_s'] / r['rank_s']:.1f} rank_s={r['rank_s']:.2f}")
    return 1 if r["disagreement"] else 0


if __name__ == "__main__":
    args = sys.argv[1:]
    n = int(args[args.index("--repeats") + 1]) if "--repeats" in args else REPEATS
    sys.exit(main(n, "--profile" in args))
