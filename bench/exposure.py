"""Benchmark: S/N spectra for 14 epochs x 10 spectrograph setups x 20000 wavelength samples.

Timed (best of REPEATS): the observed F_lambda of a Transient on every setup's
grid (14 x 200000), telluric transmission, electron rates (extinction, seeing,
slit losses, sky with moonlight, detector), the S/N spectra per pixel / per
resolution element / per A for 2 x 1800 s, and the closed-form time to reach
S/N 10 per resolution element at every sample.  Each setup has its own
airmass.  Not timed: loading site files and building the setup grids; one
warm-up call (Moffat slit table, tellurics).  The bundled sites may hold more
or fewer than 10 setups: they are cut or tiled to 10 and the script says so.
Goal: under 1 s.

Baseline, measured in the same run: the same quantities from a Python loop
over epochs x setups (140 iterations), each iteration calling the same
kernels on one setup's own (unstacked) grid with scalar conditions -- the
flux of one epoch, the telluric transmission at that setup's airmass,
``rates``, ``expose`` and ``time_for_snr``; what batching all epochs and
setups into one call gains.  Both timed as best of REPEATS.  Agreement:
S/N per resolution element and time for S/N 10 to a relative RTOL (same
infinite-time samples), numbers of exposures identical; the largest
differences are printed.

Last line: ``RESULT seconds=<best> baseline_seconds=<best of the loop> speedup=<loop/ours>
max_snr_rel_diff=... max_time_rel_diff=...``.
Run: python bench/exposure.py
"""
from __future__ import annotations

import sys
import time

import numpy as np
from _report import finish

N_EPOCHS, N_SETUPS, N_WAVE, REPEATS = 14, 10, 20000, 3
RTOL = 1e-9  # agreement required of the per-epoch x per-setup loop (relative)


def build():
    from kncast.forecast.exposure import setup_grid, stack_grids
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    refs = all_setups(SiteRegistry.load([]))
    chosen = [refs[k % len(refs)] for k in range(N_SETUPS)]
    grids = [setup_grid(r.telescope, r.instrument, r.setup, N_WAVE) for r in chosen]
    transient = Transient(build_model({"name": "powerlaw"}), distance_mpc=120.0, ebv_mw=0.05)
    return transient, stack_grids(grids), grids, TelluricModel.load(), len(refs)


def loop(transient, grids, tellurics, phases, conditions):
    """S/N per resolution element, time and number of exposures for S/N 10, one epoch and one setup at a time."""
    from kncast.forecast import exposure as ex

    snr = np.empty((phases.size, len(grids), N_WAVE))
    t, n = np.empty_like(snr), np.empty_like(snr)
    for i, phase in enumerate(phases):
        for k, (g, cond) in enumerate(zip(grids, conditions)):
            flux = transient.flux_flam(phase, g.wavelength_A)[0]
            tell = tellurics.transmission(g.wavelength_A, cond.airmass, cond.pwv_mm)
            r = ex.rates(flux, g, cond, tell)
            snr[i, k] = ex.expose(r, 3600.0, 2).snr_per_resel
            t[i, k], n[i, k] = ex.time_for_snr(r, 10.0, 1800.0)
    return snr, t, n


def rel_diff(a, b) -> float:
    """Largest relative difference where b is finite and non-zero (inf if the infinite samples differ)."""
    if not np.array_equal(np.isfinite(a), np.isfinite(b)):
        return float("inf")
    ok = np.isfinite(b) & (b != 0)
    return float(np.max(np.abs(a[ok] / b[ok] - 1.0), initial=0.0))


def main() -> int:
    from kncast.forecast import exposure as ex
    from kncast.forecast.skybright import MoonGeometry

    transient, grid, grids, tellurics, n_real = build()
    phases = np.linspace(1.0, 14.0, N_EPOCHS)
    airmass = np.linspace(1.0, 1.9, N_SETUPS)[:, None]
    moon = MoonGeometry(0.6, 50.0, 30.0)
    cond = ex.Conditions(airmass=airmass, seeing_arcsec=0.9, moon=moon, pwv_mm=3.0)
    per_setup = [ex.Conditions(airmass=float(x), seeing_arcsec=0.9, moon=moon, pwv_mm=3.0) for x in airmass[:, 0]]

    def run():
        flux = transient.flux_flam(phases, grid.wavelength_A.ravel()).reshape(N_EPOCHS, N_SETUPS, N_WAVE)
        tell = tellurics.transmission(grid.wavelength_A, airmass, cond.pwv_mm)
        r = ex.rates(flux, grid, cond, tell)
        res = ex.expose(r, 3600.0, 2)
        t, n = ex.time_for_snr(r, 10.0, 1800.0)
        return res, t, n

    res, t, n_exp = run()  # warm-up
    best = np.inf
    for _ in range(REPEATS):
        start = time.perf_counter()
        res, t, n_exp = run()
        best = min(best, time.perf_counter() - start)
    base = np.inf
    for _ in range(REPEATS):
        start = time.perf_counter()
        snr, t_loop, n_loop = loop(transient, grids, tellurics, phases, per_setup)
        base = min(base, time.perf_counter() - start)
    snr_diff, t_diff = rel_diff(snr, res.snr_per_resel), rel_diff(t_loop, t)
    same_n = np.array_equal(n_loop, n_exp)
    if n_real != N_SETUPS:
        print(f"note: {n_real} bundled setups, {'tiled' if n_real < N_SETUPS else 'cut'} to {N_SETUPS}")
    on = res.on_detector & np.isfinite(t)
    print(f"S/N spectra: {N_EPOCHS} epochs x {N_SETUPS} setups x {N_WAVE} samples = "
          f"{res.snr_per_resel.size} values; median S/N per resolution element {np.median(res.snr_per_resel[on]):.2f}; "
          f"median time for S/N 10: {np.median(t[on]):.3g} s")
    print(f"best of {REPEATS}: {best:.3f} s (goal < 1 s)")
    print(f"baseline, loop over {N_EPOCHS} epochs x {N_SETUPS} setups ({N_EPOCHS * N_SETUPS} calls of the same "
          f"kernels): best of {REPEATS}: {base:.3f} s")
    print(f"agreement: max relative difference of S/N per resolution element {snr_diff:.2e}, of the time for "
          f"S/N 10 {t_diff:.2e} (tolerance {RTOL:g}); numbers of exposures {'identical' if same_n else 'DIFFERENT'}")
    ok = snr_diff <= RTOL and t_diff <= RTOL and same_n
    return finish(best, base, ok, "the batched call and the per-epoch x per-setup loop differ",
                  f"max_snr_rel_diff={snr_diff:.2e} max_time_rel_diff={t_diff:.2e}", digits=4)


if __name__ == "__main__":
    sys.exit(main())
