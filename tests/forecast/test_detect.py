"""Per-feature detectability kernels (kncast.forecast.detect): hand cases, the closed-form inverse, Planck."""
from __future__ import annotations

import math

import numpy as np
import pytest

from kncast.forecast import detect
from kncast.forecast import exposure as ex


def test_depth_of_a_scattering_line():
    # Sobolev scattering line against the photosphere: I / I_c = e^-tau + W (1 - e^-tau), so the depth is
    # (1 - W)(1 - e^-tau) (Jeffery & Branch 1990; from memory); W = 1/2 at the photosphere (geometry)
    assert detect.PHOTOSPHERE_DILUTION == 0.5
    got = detect.absorption_depth([0.0, 1.0, np.log(2.0), np.nan, 50.0])
    np.testing.assert_allclose(got[:3], [0.0, 0.5 * (1.0 - math.exp(-1.0)), 0.25], rtol=1e-12)
    assert np.isnan(got[3]) and got[4] == pytest.approx(0.5)
    # W = 0: a pure absorber, 1 - e^-tau
    assert detect.absorption_depth(1.0, dilution=0.0) == pytest.approx(1.0 - math.exp(-1.0))


def test_bin_width_hand_case():
    # 1500 km/s at 8000 A: 8000 x 1500 / 299792.458 = 40.0277 A (c exact, CODATA)
    assert detect.bin_width_A(8000.0, 1500.0) == pytest.approx(40.02769, rel=1e-6)


def test_significance_hand_case():
    # depth 0.4, continuum S/N 5 per pixel, 2 A pixels, 40 A bins (20 pixels: S/N 5 sqrt(20) per bin),
    # a 400 A trough (10 bins): 0.4 x 22.36 x sqrt(10) = 28.28 sigma (worked by hand)
    s_bin = detect.snr_per_bin(5.0, 2.0, 40.0)
    assert s_bin == pytest.approx(5.0 * math.sqrt(20.0))
    n = detect.velocity_bins(8000.0, 8400.0, 40.0, usable=1.0)
    assert n == pytest.approx(10.0)
    assert detect.significance(0.4, s_bin, n) == pytest.approx(0.4 * 5.0 * math.sqrt(20.0) * math.sqrt(10.0))
    # half the trough in an opaque band: half the bins
    assert detect.velocity_bins(8000.0, 8400.0, 40.0, usable=0.5) == pytest.approx(5.0)
    assert detect.velocity_bins(8000.0, 8400.0, 40.0, usable=0.0) == 0.0


def _setup():
    """A bundled example setup (an invented instrument; any setup serves these checks)."""
    from kncast.planner.setups import resolve_setup
    from kncast.planner.sites import SiteRegistry

    ref = resolve_setup("sutherland/t8m/wide-3arm", SiteRegistry.load([]))
    return ref.telescope, ref.instrument, ref.setup


def test_time_to_sigma_inverts_the_significance():
    # the closed-form inverse of the CCD equation: exposing for time_to_sigma gives back sigma
    tel, spec, setup = _setup()
    lam = np.array([6000.0, 8500.0])
    grid = ex.setup_grid(tel, spec, setup, wavelength_A=lam)
    r = ex.rates(np.full(2, 2e-18), grid, ex.Conditions(airmass=1.2), 1.0)
    res = ex.expose(r, 600.0, 1)
    det = detect.detect(r, res, 0.3, lam - 300.0, lam + 300.0, 1.0, sigma=5.0, max_exposure_s=1800.0)
    t = det.time_to_sigma_s
    assert np.all(np.isfinite(t))
    back = ex.expose(r, t, det.nexp_to_sigma)
    again = detect.detect(r, back, 0.3, lam - 300.0, lam + 300.0, 1.0, sigma=5.0)
    np.testing.assert_allclose(again.significance, 5.0, rtol=1e-6)


def test_red_trough_beats_blue_for_a_cool_photosphere():
    # a 3000 K blackbody peaks at b / T = 9659 A (Wien's law, b = 2.897772e-3 m K, CODATA): the same
    # exposure gives more S/N per bin at 8500 A than at 4900 A
    from astropy import units as u
    from astropy.modeling.models import BlackBody

    tel, spec, setup2 = _setup()
    lam = np.array([4900.0, 8500.0])
    flam = BlackBody(3000 * u.K)(lam * u.AA).to(u.erg / u.s / u.cm**2 / u.AA / u.sr,
                                              equivalencies=u.spectral_density(lam * u.AA)).value * 1e-20
    grid = ex.setup_grid(tel, spec, setup2, wavelength_A=lam)
    r = ex.rates(flam, grid, ex.Conditions(airmass=1.0), 1.0)
    res = ex.expose(r, 1800.0, 1)
    s_bin = detect.snr_per_bin(res.snr_per_pixel, r.dispersion_A_per_pix, detect.bin_width_A(lam))
    assert s_bin[1] > s_bin[0]
