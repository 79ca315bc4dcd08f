"""Benchmark: the feature forecast for 50 epochs x 40 lines x 20 spectrograph setups.

Timed: ``kncast.forecast.features.forecast_features`` from a Transient (photosphere
state, LTE ionization balance with the charge-neutrality solve, Sobolev tau of
every line, P Cygni windows, coverage / gap / telluric fractions and verdicts
for every feature x setup x epoch).  Not timed: loading the line list, the
composition, the telluric table and the site files, and one warm-up call.

The bundled line list has fewer than 40 lines and the bundled sites may hold
fewer or more than 20 setups: lines are tiled (copies with new feature ids)
up to 40, setups are tiled or cut to 20; the script says so when it does.
Goal: under 0.2 s on a 2-core machine.

Baseline, measured in the same run: the same forecast as a Python loop over
the epochs, one ``forecast_features`` call per epoch (same Transient, line
list, setups, tellurics and conditions) -- what the vectorization over
epochs gains.  Both are timed as best of REPEATS.  The results must agree:
Sobolev tau of every line, electron densities and ionization fractions to a
relative TAU_RTOL, window edges and coverage / gap / telluric fractions to
ABS_TOL, verdicts and ranking identical; the largest differences are printed.

Last line: ``RESULT seconds=<best> baseline_seconds=<best of the loop> speedup=<loop/ours>
max_tau_rel_diff=... max_abs_diff=...``.
Run: python bench/features.py
"""
from __future__ import annotations

import sys
import time

import numpy as np
from _report import finish

N_EPOCHS, N_LINES, N_SETUPS, REPEATS = 50, 40, 20, 5
TAU_RTOL, ABS_TOL = 1e-9, 1e-9  # agreement required of the per-epoch loop (relative; A and fractions)


def tiled_lines(n: int):
    """The bundled line list, tiled to ``n`` lines (each copy a separate feature id)."""
    from kncast.forecast.linelist import LineList

    base = LineList.load()
    reps = -(-n // len(base))
    take = np.resize(np.arange(len(base)), n)
    copy = np.repeat(np.arange(reps), len(base))[:n]
    cols = {name: np.asarray(getattr(base, name))[take] for name in
            ("species", "element", "ion_stage", "wavelength_A", "E_low_eV", "log_gf", "gf", "source",
             "uncertain", "note")}
    cols["feature"] = np.array([f"{base.feature[i]}-{c}" for i, c in zip(take, copy)], dtype=object)
    return LineList(cols, f"{base.path} (tiled to {n})"), len(base)


def build():
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    transient = Transient(build_model({"name": "powerlaw"}), distance_mpc=120.0, ebv_mw=0.05)
    refs = all_setups(SiteRegistry.load([]))
    setups = [refs[k % len(refs)].setup for k in range(N_SETUPS)]
    return transient, setups, len(refs), TelluricModel.load()


def per_epoch(run_one, n: int):
    """The forecast as a Python loop over epochs: one call per epoch, results stacked on the epoch axis."""
    parts = [run_one(i) for i in range(n)]
    cat = lambda get: np.concatenate([get(p) for p in parts])  # noqa: E731
    return {
        "tau_lines": cat(lambda p: p.tau_lines), "tau": cat(lambda p: p.tau), "n_e": cat(lambda p: p.lte.n_e_cm3),
        "ion": cat(lambda p: p.lte.fractions), "coverage": cat(lambda p: p.coverage),
        "gap_loss": cat(lambda p: p.gap_loss), "telluric_loss": cat(lambda p: p.telluric_loss),
        "verdict": cat(lambda p: p.verdict), "rank": cat(lambda p: p.rank),
        "edges": np.stack([cat(lambda p, k=k: getattr(p.windows, k)) for k in WINDOW_EDGES]),
    }


WINDOW_EDGES = ("absorption_lo_A", "absorption_hi_A", "trough_A", "emission_lo_A", "emission_hi_A", "emission_peak_A")


def rel_diff(a, b) -> float:
    """Largest relative difference of two arrays with the same nan pattern (inf if the patterns differ)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    if not np.array_equal(np.isnan(a), np.isnan(b)):
        return float("inf")
    ok = ~np.isnan(a)
    return float(np.max(np.abs(a[ok] - b[ok]) / np.maximum(np.abs(b[ok]), 1e-300), initial=0.0))


def compare(result, loop) -> tuple[float, float, bool]:
    """(max relative tau / n_e difference, max absolute fraction or edge difference, verdicts and ranks equal)."""
    tau = max(rel_diff(loop["tau_lines"], result.tau_lines), rel_diff(loop["tau"], result.tau),
              rel_diff(loop["n_e"], result.lte.n_e_cm3))
    edges = np.stack([getattr(result.windows, k) for k in WINDOW_EDGES])
    absolute = max(float(np.max(np.abs(loop[k] - v))) for k, v in
                   (("ion", result.lte.fractions), ("coverage", result.coverage), ("gap_loss", result.gap_loss),
                    ("telluric_loss", result.telluric_loss), ("edges", edges)))
    same = np.array_equal(loop["verdict"], result.verdict) and np.array_equal(loop["rank"], result.rank)
    return tau, absolute, same


def main() -> int:
    from kncast.forecast.features import forecast_features
    from kncast.forecast.lte import Composition

    transient, setups, n_real_setups, tellurics = build()
    lines, n_real_lines = tiled_lines(N_LINES)
    comp = Composition.load()
    phases = np.linspace(1.0, 10.0, N_EPOCHS)
    run = lambda: forecast_features(transient, phases, lines, setups, tellurics, airmass=1.3,  # noqa: E731
                                    pwv_mm=3.0, composition=comp)
    run_one = lambda i: forecast_features(transient, phases[i:i + 1], lines, setups, tellurics,  # noqa: E731
                                          airmass=1.3, pwv_mm=3.0, composition=comp)
    run()  # warm-up
    times = []
    for _ in range(REPEATS):
        t = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - t)
    loop_times = []
    for _ in range(REPEATS):
        t = time.perf_counter()
        loop = per_epoch(run_one, N_EPOCHS)
        loop_times.append(time.perf_counter() - t)
    tau_diff, abs_diff, same = compare(result, loop)
    assert result.coverage.shape == (N_EPOCHS, len(result.features), N_SETUPS)
    assert np.all(np.isfinite(result.windows.trough_A))
    if n_real_lines < N_LINES:
        print(f"line list: {n_real_lines} bundled lines tiled to {N_LINES} ({len(result.features)} features)")
    if n_real_setups != N_SETUPS:
        how = "tiled" if n_real_setups < N_SETUPS else "cut"
        print(f"setups: {n_real_setups} bundled setups {how} to {N_SETUPS}")
    print(f"feature forecast: {N_EPOCHS} epochs x {N_LINES} lines x {N_SETUPS} setups; "
          f"best {min(times):.4f} s, median {np.median(times):.4f} s of {REPEATS} (goal < 0.2 s)")
    ours, base = min(times), min(loop_times)
    print(f"baseline, one forecast_features call per epoch ({N_EPOCHS} calls): best {base:.4f} s, "
          f"median {np.median(loop_times):.4f} s of {REPEATS}")
    print(f"agreement: max relative difference of tau / n_e {tau_diff:.2e} (tolerance {TAU_RTOL:g}), "
          f"max difference of ionization fractions, window edges (A) and coverage fractions {abs_diff:.2e} "
          f"(tolerance {ABS_TOL:g}), verdicts and ranks {'identical' if same else 'DIFFERENT'}")
    ok = tau_diff <= TAU_RTOL and abs_diff <= ABS_TOL and same
    return finish(ours, base, ok, "the vectorized forecast and the per-epoch loop differ",
                  f"max_tau_rel_diff={tau_diff:.2e} max_abs_diff={abs_diff:.2e}", digits=4)


if __name__ == "__main__":
    sys.exit(main())
