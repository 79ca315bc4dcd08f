"""Benchmark: observed spectra and magnitudes of a three-component heating model.

1000 epochs x 5000 wavelengths (3000-25000 A) x 3 ejecta components, plus
synthetic AB magnitudes in 8 bands at the same 1000 epochs, with Milky Way
and host extinction and a redshift.  Goal: under 0.5 s on a 2-core machine.
One untimed warm-up call loads the filter curves and the extinction law.

Last line: ``RESULT seconds=<best of REPEATS>``.
Run: python bench/photosphere.py
"""
from __future__ import annotations

import time

import numpy as np

N_EPOCHS, N_WAVE, REPEATS = 1000, 5000, 5
BANDS = ("bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I", "twomass-J", "twomass-H", "twomass-Ks")


def build():
    from forecast.photosphere import EjectaComponent, HeatingPhotosphere
    from forecast.source import Transient

    model = HeatingPhotosphere((
        EjectaComponent("blue", 0.025, 0.25, 0.5, 3000.0),
        EjectaComponent("purple", 0.02, 0.2, 3.0, 2700.0),
        EjectaComponent("red", 0.04, 0.15, 10.0, 2500.0),
    ))
    return Transient(model, distance_mpc=150.0, ebv_mw=0.05, ebv_host=0.1)


def once(transient, phases, wave):
    flux = transient.flux_flam(phases, wave)
    mags = transient.mag_ab(phases, BANDS)
    return flux, mags


def main():
    transient = build()
    phases = np.geomspace(0.3, 30.0, N_EPOCHS)
    wave = np.linspace(3000.0, 25000.0, N_WAVE)
    once(transient, phases[:10], wave)  # warm-up: filter curves, extinction law, cosmology
    times, cpu = [], []
    for _ in range(REPEATS):
        t, c = time.perf_counter(), time.process_time()
        flux, mags = once(transient, phases, wave)
        times.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
    assert flux.shape == (N_EPOCHS, N_WAVE) and np.all(np.isfinite(flux))
    print(f"flux grid {flux.shape[0]} epochs x {flux.shape[1]} wavelengths x 3 components + {len(BANDS)} bands")
    print(f"wall times (s): {' '.join(f'{x:.3f}' for x in times)}; goal < 0.5 s")
    print(f"cpu times (s):  {' '.join(f'{x:.3f}' for x in cpu)} (less sensitive to other load)")
    print(f"RESULT seconds={min(times):.3f}")


if __name__ == "__main__":
    main()
