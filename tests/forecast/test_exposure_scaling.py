"""Scaling laws of the S/N as property tests (CCD equation, Merline & Howell 1995):
S/N ~ sqrt(t) when sky-limited, ~ t when read-noise-limited, ~ aperture diameter when source-limited."""
from __future__ import annotations

import numpy as np
from hypothesis import given, settings, strategies as st

from kncast.forecast import ccd
from kncast.forecast.exposure import Conditions, expose, rates, setup_grid
from kncast.forecast.instruments import Arm, Setup, Spectrograph, Telescope
from kncast.forecast.skybright import SkySpectrum

times = st.floats(min_value=10.0, max_value=5000.0)
factors = st.floats(min_value=1.5, max_value=20.0)


@settings(max_examples=40, deadline=None)
@given(t=times, f=factors, sky=st.floats(min_value=1e3, max_value=1e6))
def test_sky_limited_snr_grows_as_sqrt_time(t, f, sky):
    # source 1e-4 of the sky per pixel, no read noise: S/N proportional to sqrt(t)
    src = 1e-4 * sky
    s1 = ccd.snr_from_rates(t, 1, src, 10, sky, 0.0, 0.0)
    s2 = ccd.snr_from_rates(f * t, 1, src, 10, sky, 0.0, 0.0)
    assert np.isclose(s2 / s1, np.sqrt(f), rtol=1e-6)


@settings(max_examples=40, deadline=None)
@given(t=times, f=factors, rn=st.floats(min_value=50.0, max_value=100.0))
def test_read_noise_limited_snr_grows_linearly_with_time(t, f, rn):
    # tiny source, no sky or dark, one read: S/N = a t / sqrt(a t + n R^2) ~ t while a t << n R^2
    a = 1e-6
    s1 = ccd.snr_from_rates(t, 1, a, 10, 0.0, 0.0, rn * rn)
    s2 = ccd.snr_from_rates(f * t, 1, a, 10, 0.0, 0.0, rn * rn)
    assert np.isclose(s2 / s1, f, rtol=1e-3)


def _grid(aperture_m):
    arm = Arm(name="a", min_A=4000.0, max_A=9000.0, resolving_power=3000.0, dispersion_A_per_pix=0.8,
              read_noise_e=0.0, dark_e_per_s=0.0, gain_e_per_adu=1e-3, full_well_e=1e7,
              throughput_A=np.array([4000.0, 9000.0]), throughput=np.array([0.25, 0.35]))
    spec = Spectrograph("s", "s", "slit", 1.0, 0.25, (arm,), (Setup("default", "all", (arm,)),))
    return setup_grid(Telescope("t", "t", aperture_m, 0.1, (spec,)), spec, spec.setups[0], 200)


@settings(max_examples=25, deadline=None)
@given(d=st.floats(min_value=1.0, max_value=10.0), f=st.floats(min_value=1.2, max_value=4.0),
       ideal=st.booleans())
def test_source_limited_snr_grows_with_aperture(d, f, ideal):
    # no sky (a zero sky spectrum), no detector noise (digitisation made negligible by a tiny gain):
    # S/N = sqrt(N*) ~ sqrt(area) ~ diameter
    dark_sky = SkySpectrum(np.array([3000.0, 10000.0]), np.zeros(2), "zero sky")
    cond = Conditions(airmass=1.1, seeing_arcsec=0.7, sky=dark_sky)
    g1, g2 = _grid(d), _grid(f * d)
    flam = np.full(g1.wavelength_A.shape, 1e-17)
    s1 = expose(rates(flam, g1, cond, ideal=ideal), 600.0).snr_per_resel
    s2 = expose(rates(flam, g2, cond, ideal=ideal), 600.0).snr_per_resel
    assert np.allclose(s2 / s1, f, rtol=1e-6)


@settings(max_examples=60, deadline=None)
@given(target=st.floats(min_value=1.0, max_value=200.0), a=st.floats(min_value=0.01, max_value=100.0),
       sky=st.floats(min_value=0.0, max_value=50.0), rn=st.floats(min_value=0.0, max_value=20.0),
       t_max=st.floats(min_value=60.0, max_value=3600.0))
def test_fewest_exposures_reach_the_target(target, a, sky, rn, t_max):
    # CCD equation (Merline & Howell 1995): n - 1 full-length exposures fall short, n exposures reach the target
    t, n = ccd.time_and_exposures(target, a, 8.0, sky, 0.0, rn * rn, t_max)
    assert t <= n * t_max * (1 + 1e-9)
    assert np.isclose(ccd.snr_from_rates(t, n, a, 8.0, sky, 0.0, rn * rn), target, rtol=1e-6)
    if n > 1:
        assert ccd.snr_from_rates((n - 1) * t_max, n - 1, a, 8.0, sky, 0.0, rn * rn) < target
