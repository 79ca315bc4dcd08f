"""Benchmark: the feature forecast for 50 epochs x 40 lines x 20 spectrograph setups.

Timed: ``forecast.features.forecast_features`` from a Transient (photosphere
state, LTE ionization balance with the charge-neutrality solve, Sobolev tau of
every line, P Cygni windows, coverage / gap / telluric fractions and verdicts
for every feature x setup x epoch).  Not timed: loading the line list, the
composition, the telluric table and the site files, and one warm-up call.

The bundled line list has fewer than 40 lines and the bundled sites may hold
fewer or more than 20 setups: lines are tiled (copies with new feature ids)
up to 40, setups are tiled or cut to 20; the script says so when it does.
Goal: under 0.2 s on a 2-core machine.  Last line: ``RESULT seconds=<best of REPEATS>``.
Run: python bench/features.py
"""
from __future__ import annotations

import time

import numpy as np

N_EPOCHS, N_LINES, N_SETUPS, REPEATS = 50, 40, 20, 5


def tiled_lines(n: int):
    """The bundled line list, tiled to ``n`` lines (each copy a separate feature id)."""
    from forecast.linelist import LineList

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
    from forecast.photosphere import build_model
    from forecast.source import Transient
    from forecast.tellurics import TelluricModel
    from planner.setups import all_setups
    from planner.sites import SiteRegistry

    transient = Transient(build_model({"name": "powerlaw"}), distance_mpc=120.0, ebv_mw=0.05)
    refs = all_setups(SiteRegistry.load([]))
    setups = [refs[k % len(refs)].setup for k in range(N_SETUPS)]
    return transient, setups, len(refs), TelluricModel.load()


def main():
    from forecast.features import forecast_features
    from forecast.lte import Composition

    transient, setups, n_real_setups, tellurics = build()
    lines, n_real_lines = tiled_lines(N_LINES)
    comp = Composition.load()
    phases = np.linspace(1.0, 10.0, N_EPOCHS)
    run = lambda: forecast_features(transient, phases, lines, setups, tellurics, airmass=1.3,  # noqa: E731
                                    pwv_mm=3.0, composition=comp)
    run()  # warm-up
    times = []
    for _ in range(REPEATS):
        t = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - t)
    assert result.coverage.shape == (N_EPOCHS, len(result.features), N_SETUPS)
    assert np.all(np.isfinite(result.windows.trough_A))
    if n_real_lines < N_LINES:
        print(f"line list: {n_real_lines} bundled lines tiled to {N_LINES} ({len(result.features)} features)")
    if n_real_setups != N_SETUPS:
        how = "tiled" if n_real_setups < N_SETUPS else "cut"
        print(f"setups: {n_real_setups} bundled setups {how} to {N_SETUPS}")
    print(f"feature forecast: {N_EPOCHS} epochs x {N_LINES} lines x {N_SETUPS} setups; "
          f"best {min(times):.4f} s, median {np.median(times):.4f} s of {REPEATS} (goal < 0.2 s)")
    print(f"RESULT seconds={min(times):.4f}")


if __name__ == "__main__":
    main()
