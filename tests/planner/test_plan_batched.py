"""Batching over epochs changes no number: the sky model, the exposure kernels and the campaign plan
evaluated for many epochs in one call agree with one call per epoch (plain-float conditions).

The reference in every test is the same model called once per epoch with scalar conditions, the way the
exposure command calls it; agreement is required within 1e-9 relative (common practice for a pure
refactoring check: only floating-point rounding may differ).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from kncast.forecast import exposure as ex
from kncast.forecast import skybright as sb

ROOT = Path(__file__).resolve().parents[2]
RTOL = 1e-9

# per epoch: Moon illumination, separation (deg), altitude (deg), sky zenith distance (deg)
EPOCHS = [
    (0.9, 40.0, 35.0, 20.0),   # bright Moon up
    (0.5, 5.0, 60.0, 10.0),    # closer than 10 deg: the small-angle scattering form
    (0.7, 90.0, -5.0, 45.0),   # Moon below the horizon
    (0.0, 60.0, 40.0, 30.0),   # new Moon above the horizon
    (0.3, 120.0, 0.0, 60.0),   # Moon on the horizon
    (1.0, 180.0, 10.0, 0.0),
]


def _epoch_arrays(shape):
    cols = np.array(EPOCHS, dtype=float).T
    return [c.reshape(shape) for c in cols]


def test_sky_photons_over_an_epoch_axis_equal_one_call_per_epoch():
    lam = np.geomspace(3200.0, 24000.0, 60)
    k_v = 0.14
    illum, sep, alt, z = _epoch_arrays((-1, 1))
    batched = sb.sky_photons(lam, z, k_v, sb.MoonGeometry(illum, sep, alt), dark_offset_mag=0.2)
    assert batched.shape == (len(EPOCHS), lam.size)
    for e, (f, s, a, ze) in enumerate(EPOCHS):
        one = sb.sky_photons(lam, ze, k_v, sb.MoonGeometry(f, s, a), dark_offset_mag=0.2)
        np.testing.assert_allclose(batched[e], one, rtol=RTOL, atol=0)
        dark = sb.sky_photons(lam, ze, k_v, None, dark_offset_mag=0.2)
        if a > 0 and f > 0:   # the Moon adds light only when it is up and lit (K&S 1991 eq. 15)
            assert np.all(batched[e] > dark)
        else:
            np.testing.assert_array_equal(batched[e], dark)


def test_moon_geometry_arrays_are_range_checked():
    from kncast.forecast.errors import ForecastInputError

    with pytest.raises(ForecastInputError, match="moon altitude"):
        sb.MoonGeometry(np.array([0.5, 0.5]), np.array([30.0, 30.0]), np.array([10.0, 95.0]))


def _setups(n=3, n_wave=240):
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    refs = all_setups(SiteRegistry.load([]))
    picked = [refs[k * (len(refs) // n)] for k in range(n)]
    grids = [ex.setup_grid(r.telescope, r.instrument, r.setup, n_wave) for r in picked]
    return ex.stack_grids(grids)


def test_rates_expose_and_time_over_an_epoch_axis_equal_one_call_per_epoch():
    from kncast.forecast.tellurics import TelluricModel

    grid = _setups()                                                     # (n_setup, n_wave)
    n_ep = len(EPOCHS)
    illum, sep, alt, _ = _epoch_arrays((-1, 1, 1))
    airmass = np.linspace(1.02, 2.2, n_ep).reshape(-1, 1, 1)
    seeing = np.linspace(0.6, 1.4, n_ep).reshape(-1, 1, 1)
    pwv = np.linspace(1.0, 8.0, n_ep).reshape(-1, 1, 1)
    time_s = np.linspace(600.0, 7200.0, n_ep).reshape(-1, 1, 1)
    n_exp = np.array([1, 2, 3, 1, 4, 2]).reshape(-1, 1, 1)
    # AB 19-21 mag flat in f_nu: F_lambda = f_nu c / lambda^2 (Oke & Gunn 1983)
    mag = np.linspace(19.0, 21.0, n_ep).reshape(-1, 1, 1)
    flux = 10.0 ** (-0.4 * (mag + 48.60)) * sb.C_CGS / (grid.wavelength_A * 1e-8) ** 2 * 1e-8
    tell = TelluricModel.load()
    cond = ex.Conditions(airmass=airmass, seeing_arcsec=seeing, moon=sb.MoonGeometry(illum, sep, alt), pwv_mm=pwv)
    r = ex.rates(flux, grid, cond, tell.transmission(grid.wavelength_A, airmass, pwv))
    res = ex.expose(r, time_s, n_exp)
    t_need, n_need = ex.time_for_snr(r, 10.0, 1800.0)
    for e, (f, s, a, _) in enumerate(EPOCHS):
        c1 = ex.Conditions(airmass=float(airmass[e, 0, 0]), seeing_arcsec=float(seeing[e, 0, 0]),
                           moon=sb.MoonGeometry(f, s, a), pwv_mm=float(pwv[e, 0, 0]))
        r1 = ex.rates(flux[e], grid, c1, tell.transmission(grid.wavelength_A, c1.airmass, c1.pwv_mm))
        res1 = ex.expose(r1, float(time_s[e, 0, 0]), int(n_exp[e, 0, 0]))
        t1, n1 = ex.time_for_snr(r1, 10.0, 1800.0)
        for name in ("source_e", "sky_e", "snr_per_pixel", "snr_per_resel", "snr_per_A"):
            np.testing.assert_allclose(np.broadcast_to(getattr(res, name), res.snr_per_pixel.shape)[e],
                                       getattr(res1, name), rtol=RTOL, atol=0, err_msg=name)
        np.testing.assert_array_equal(res.saturated[e], res1.saturated)
        np.testing.assert_array_equal(res.systematics_limited[e], res1.systematics_limited)
        np.testing.assert_allclose(t_need[e], t1, rtol=RTOL, atol=0)
        np.testing.assert_array_equal(n_need[e], n1)
    assert np.ptp(res.sky_e[:, 0]) > 0   # the epochs really differ (Moon, airmass)


@pytest.fixture(scope="module")
def small_plan():
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    reg = SiteRegistry.load([])
    sites = [reg.get("paranal"), reg.get("sutherland")]   # fibre and slit spectrographs
    return build_plan(load_event(ROOT / "demo_events" / "kn-demo-south.toml"), sites, nights=4)


def _per_epoch_reference(plan, p, refs, trough_A, snr_target, max_exposure_s):
    """S/N, time and n_exp at ``trough_A`` for ``refs``: one epoch, plain-float conditions (one call per epoch).

    The source flux is taken, as in the plan, from one photosphere evaluation at every epoch's phase (the
    photosphere model is solved over the whole phase list, which moves the flux by ~1e-8 relative).
    """
    import math

    w, atm = p.window, plan.atmospheres[p.site.id]
    moon = sb.MoonGeometry(float(np.clip(w.moon_illumination, 0.0, 1.0)), float(np.clip(w.moon_sep_deg, 0.0, 180.0)),
                           float(np.clip(w.moon_altitude_deg, -90.0, 90.0)))
    cond = ex.Conditions(airmass=float(w.best_airmass), seeing_arcsec=atm.seeing_arcsec, moon=moon,
                         pwv_mm=atm.pwv_mm, atmosphere=atm)
    lam = np.asarray(trough_A, dtype=float)
    grid = ex.stack_grids([ex.setup_grid(r.telescope, r.instrument, r.setup, wavelength_A=lam) for r in refs])
    phases = np.array([q.phase_d for q in plan.nights if q.window is not None])
    flux = plan.transient.flux_flam(phases, lam)[int(np.flatnonzero(phases == p.phase_d)[0])][None, :]
    r = ex.rates(flux, grid, cond, plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm))
    available = p.hours_available * 3600.0
    snr = ex.expose(r, available, max(1, math.ceil(available / max_exposure_s - 1e-9))).snr_per_resel
    t, n = ex.time_for_snr(r, snr_target, max_exposure_s)
    return snr, t, n


def test_batched_plan_measurements_equal_one_call_per_epoch(small_plan):
    # the plan evaluates all epochs and setups of a site in one batched call; the continuum S/N per
    # resolution element at each feature's trough must equal a plain one-epoch evaluation
    from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S as MAX_EXPOSURE_S

    plan = small_plan
    by_id = {r.id: r for r in plan.setup_refs}
    checked, moon_up = 0, 0
    for p in plan.nights:
        measured = [o for o in p.outcomes if o.significance is not None]
        if not measured:
            continue
        refs = [by_id[o.setup] for o in p.outcomes]
        ids = [f["id"] for f in p.outcomes[0].features]
        troughs = [f["trough_A"] for f in p.outcomes[0].features]
        snr, _t, _n = _per_epoch_reference(plan, p, refs, troughs, 10.0, MAX_EXPOSURE_S)
        for j, o in enumerate(p.outcomes):
            for k, f in enumerate(o.features):
                assert f["id"] == ids[k]
                if f["arm"] is None:
                    continue
                assert f["snr_resel"] == pytest.approx(float(snr[j, k]), rel=1e-3, abs=0)
                checked += 1
        moon_up += p.window.moon_altitude_deg > 0 and p.window.moon_illumination > 0
    assert checked >= 20 and moon_up >= 1   # several epochs, with and without moonlight
