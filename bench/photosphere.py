"""Benchmark: observed spectra and magnitudes of a three-component heating model.

1000 epochs x 5000 wavelengths (3000-25000 A) x 3 ejecta components, plus
synthetic AB magnitudes in 8 bands at the same 1000 epochs, with Milky Way
and host extinction and a redshift.  Goal: under 0.5 s on a 2-core machine.
One untimed warm-up call loads the filter curves and the extinction law.

Baseline, measured in the same run: the same spectra and magnitudes from
independent libraries, one epoch and one component at a time --
``astropy.modeling.models.BlackBody`` (with units) per component, scaled by
pi R^2 / (D_L^2 (1 + z)) and summed, reddened with
``dust_extinction.parameter_averages.F99.extinguish`` (host in the rest
frame, Milky Way in the observer frame), and AB magnitudes from
``speclite.filters.FilterSequence.get_ab_magnitudes`` on the 5000-point
spectrum.  The component temperatures and radii (the photosphere model
itself) come from kncast's ``Transient.state`` in both, computed once for
all epochs.  The per-epoch loop is slow, so it runs on every
BASELINE_STRIDE-th epoch and its time is scaled up to all epochs (the
output says so).  Agreement checked on those epochs: spectra within
FLUX_RTOL (relative), magnitudes within MAG_TOL (the two photometry codes
integrate on different grids: kncast on 200 points per filter, speclite on
the spectrum's 4.4 A grid).

Last line: ``RESULT seconds=<best of REPEATS> baseline_seconds=<scaled> speedup=<baseline/ours>
max_flux_rel_diff=... max_mag_diff=...``.
Run: python bench/photosphere.py
"""
from __future__ import annotations

import sys
import time

import numpy as np
from _report import finish

N_EPOCHS, N_WAVE, REPEATS = 1000, 5000, 5
BASELINE_STRIDE = 10  # the astropy baseline runs on every 10th epoch and is scaled by 10
FLUX_RTOL, MAG_TOL = 1e-9, 0.005  # agreement required of the baseline (relative; mag)
BANDS = ("bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I", "twomass-J", "twomass-H", "twomass-Ks")


def build():
    from kncast.forecast.photosphere import EjectaComponent, HeatingPhotosphere
    from kncast.forecast.source import Transient

    model = HeatingPhotosphere((
        EjectaComponent("fast", 0.025, 0.25, 0.5, 3000.0),
        EjectaComponent("intermediate", 0.02, 0.2, 3.0, 2700.0),
        EjectaComponent("slow", 0.04, 0.15, 10.0, 2500.0),
    ))
    return Transient(model, distance_mpc=150.0, ebv_mw=0.05, ebv_host=0.1)


def once(transient, phases, wave):
    flux = transient.flux_flam(phases, wave)
    mags = transient.mag_ab(phases, BANDS)
    return flux, mags


def baseline(transient, phases, wave, which):
    """Spectra (len(which), n_wave) and {band: mags} at epochs ``which``, one astropy call per epoch and component."""
    import astropy.units as u
    import speclite.filters
    from astropy.modeling.models import BlackBody
    from dust_extinction.parameter_averages import F99

    st = transient.state(phases)  # kncast's photosphere model, all epochs at once (as in flux_flam)
    law, filters = F99(Rv=3.1), speclite.filters.load_filters(*BANDS)
    flam = u.erg / (u.s * u.cm**2 * u.AA)
    z1 = 1.0 + transient.redshift
    lam = wave * u.AA
    lam_rest = lam / z1
    dust = law.extinguish(lam, Ebv=transient.ebv_mw) * law.extinguish(lam_rest, Ebv=transient.ebv_host)
    d_l = transient.luminosity_distance_cm * u.cm
    spectra, mags = [], {b: [] for b in BANDS}
    for i in which:  # per epoch ...
        total = np.zeros(wave.size) * flam
        for k in range(st.comp_temperature_K.shape[0]):  # ... and per component
            bb = BlackBody(temperature=st.comp_temperature_K[k, i] * u.K, scale=1.0 * flam / u.sr)
            solid = np.pi * u.sr * (st.comp_radius_cm[k, i] * u.cm) ** 2 / (d_l**2 * z1)
            total = total + (solid * bb(lam_rest)).to(flam)
        total = total * dust
        spectra.append(total.to_value(flam))
        row = filters.get_ab_magnitudes(total, lam)
        for b in BANDS:
            mags[b].append(float(row[b][0]))
    return np.array(spectra), {b: np.array(v) for b, v in mags.items()}


def main() -> int:
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
    ours = min(times)

    which = np.arange(0, N_EPOCHS, BASELINE_STRIDE)
    baseline(transient, phases[:2], wave, [0])  # warm-up: astropy modeling, speclite filters
    t = time.perf_counter()
    b_flux, b_mags = baseline(transient, phases, wave, which)
    b_time = (time.perf_counter() - t) * N_EPOCHS / which.size
    flux_diff = float(np.max(np.abs(b_flux / flux[which] - 1.0)))
    mag_diff = max(float(np.max(np.abs(b_mags[b] - mags[b][which]))) for b in BANDS)

    print(f"flux grid {flux.shape[0]} epochs x {flux.shape[1]} wavelengths x 3 components + {len(BANDS)} bands")
    print(f"wall times (s): {' '.join(f'{x:.3f}' for x in times)}; goal < 0.5 s")
    print(f"cpu times (s):  {' '.join(f'{x:.3f}' for x in cpu)} (less sensitive to other load)")
    print(f"baseline (astropy BlackBody x 3 components + dust_extinction F99 + speclite, one epoch at a time): "
          f"{which.size} of {N_EPOCHS} epochs in {b_time * which.size / N_EPOCHS:.3f} s, "
          f"scaled x{N_EPOCHS / which.size:g} to {b_time:.2f} s")
    print(f"agreement on those epochs: max |F_lambda ratio - 1| = {flux_diff:.2e} (tolerance {FLUX_RTOL:g}), "
          f"max |magnitude difference| = {mag_diff:.4f} mag (tolerance {MAG_TOL:g})")
    ok = flux_diff <= FLUX_RTOL and mag_diff <= MAG_TOL
    return finish(ours, b_time, ok, "kncast and the baseline differ by more than the tolerance",
                  f"max_flux_rel_diff={flux_diff:.2e} max_mag_diff={mag_diff:.4f}")


if __name__ == "__main__":
    sys.exit(main())
