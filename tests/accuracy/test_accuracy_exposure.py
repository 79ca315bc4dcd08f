"""Exposure model against outside references: AB photon counts, the CCD equation,
Gaussian slit losses, Kasten & Young airmass, Krisciunas & Schaefer moonlight,
Benn & Ellison dark sky and Rayleigh optical depths."""
from __future__ import annotations

import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u

from kncast.forecast import ccd
from kncast.forecast import skybright as sb
from kncast.forecast import slit
from kncast.forecast.airmass import airmass_kasten_young
from kncast.forecast.exposure import Conditions, expose, rates, setup_grid, time_for_snr
from kncast.forecast.extinction_atm import (Atmosphere, atmosphere_from_table, extinction_k_mag,
                                     pressure_from_elevation_hpa, rayleigh_tau)
from kncast.forecast.instruments import Arm, Setup, Spectrograph, Telescope

REL = 1e-3  # 0.1%


def _setup(aperture_m=8.0, read_noise_e=3.0, dark=0.001, kind="slit"):
    arm = Arm(name="a", min_A=4000.0, max_A=9000.0, resolving_power=2000.0, dispersion_A_per_pix=1.0,
              read_noise_e=read_noise_e, dark_e_per_s=dark, gain_e_per_adu=1.0, full_well_e=1e5,
              throughput_A=np.array([4000.0, 9000.0]), throughput=np.array([0.3, 0.3]))
    spec = Spectrograph("s", "s", kind, 1.0, 0.2, (arm,), (Setup("default", "all", (arm,)),))
    tel = Telescope("t", "t", aperture_m, 0.0, (spec,))
    return tel, spec, spec.setups[0]


def _flat_fnu_flam(mag_ab, wavelength_A):
    """F_lambda of a flat-f_nu source: f_nu = 10^(-0.4 (m + 48.60)) (Oke & Gunn 1983), F_lambda = f_nu c / lambda^2."""
    fnu = 10 ** (-0.4 * (mag_ab + 48.60))
    return fnu * const.c.cgs.value / (wavelength_A * 1e-8) ** 2 * 1e-8


def test_ab_zero_photon_rate_at_5500():
    # Oke & Gunn 1983 AB zero point 3631 Jy; astropy spectral_density (independent library): ~996 ph/s/cm2/A
    ref = (3631 * u.Jy).to(u.photon / (u.s * u.cm ** 2 * u.AA), equivalencies=u.spectral_density(5500 * u.AA))
    assert sb.ab_to_photons(0.0, 5500.0) == pytest.approx(ref.value, rel=REL)
    assert sb.ab_to_photons(0.0, 5500.0) == pytest.approx(996.0, rel=2e-3)  # REFERENCES.md, computed


def test_ideal_mode_is_pure_photon_statistics():
    tel, spec, setup = _setup()
    grid = setup_grid(tel, spec, setup, 501)
    lam = grid.wavelength_A
    m_ab, t = 18.0, 1200.0
    r = rates(_flat_fnu_flam(m_ab, lam), grid, Conditions(), ideal=True)
    res = expose(r, t, 1)
    # by hand: photons s^-1 cm^-2 A^-1 = f_nu / (h lambda) (Oke & Gunn 1983 AB definition; CODATA h)
    fnu = 3631e-23 * 10 ** (-0.4 * m_ab)
    n_hand = fnu / (const.h.cgs.value * lam * 1e-8) * 1e-8 * math.pi * 400.0 ** 2 * 1.0 * t
    assert np.allclose(res.source_e, n_hand, rtol=REL)
    assert np.allclose(res.snr_per_pixel, np.sqrt(n_hand), rtol=REL)
    # per resolution element: lambda / R / dispersion pixels summed
    assert np.allclose(res.snr_per_resel, np.sqrt(n_hand * lam / 2000.0), rtol=REL)


def test_ccd_equation_hand_worked():
    # Merline & Howell 1995 eq. (2), worked by hand: N*=10000, n_pix=10, N_S=100, N_D=5, N_R=5, sigma_f=0
    # S/N = 10000 / sqrt(10000 + 10 * (100 + 5 + 25)) = 10000 / sqrt(11300) = 94.0721
    rv = ccd.noise_per_read(5.0, 1.0, sigma_f_adu=0.0)
    assert ccd.snr(10000.0, 10, 100.0, 5.0, rv) == pytest.approx(94.0721, rel=1e-5)
    # with a finite background area n_B = 40: factor (1 + 10/40) = 1.25 -> sqrt(10000 + 1625) = 107.8193
    assert ccd.snr(10000.0, 10, 100.0, 5.0, rv, n_background=40) == pytest.approx(10000 / 107.8193, rel=1e-5)
    # faint read-noise-limited case: N*=100, n_pix=20, no sky/dark, N_R=10 -> 100/sqrt(100+2000) = 2.18218
    rv = ccd.noise_per_read(10.0, 1.0, sigma_f_adu=0.0)
    assert ccd.snr(100.0, 20, 0.0, 0.0, rv) == pytest.approx(2.18218, rel=1e-5)
    # 4 exposures of 25 e- each: read noise enters 4 times -> 100 / sqrt(100 + 20 * 4 * 100) = 1.1110
    assert ccd.snr(100.0, 20, 0.0, 0.0, rv, n_exp=4) == pytest.approx(100 / math.sqrt(8100), rel=1e-5)
    # digitisation term G^2 sigma_f^2 with G = 2 e-/ADU, sigma_f = 0.289 ADU (Merline & Howell 1995)
    assert ccd.noise_per_read(0.0, 2.0) == pytest.approx(4 * 0.289 ** 2)


@pytest.mark.parametrize("target", [3.0, 10.0, 50.0, 150.0])
def test_time_for_snr_round_trips(target):
    tel, spec, setup = _setup()
    grid = setup_grid(tel, spec, setup, 301)
    r = rates(_flat_fnu_flam(21.0, grid.wavelength_A), grid, Conditions(airmass=1.3))
    t, n = time_for_snr(r, target, max_exposure_s=900.0)
    assert np.all(np.ceil(t / 900.0 - 1e-9) == n)
    # forward model at each sample's own (t, n) gives back the target per resolution element (hand loop)
    for i in (0, 150, 300):
        res = expose(r, t[i], int(n[i]))
        assert res.snr_per_resel[i] == pytest.approx(target, rel=REL)


def test_gaussian_slit_equal_to_fwhm_passes_761_permille():
    # common practice: erf(sqrt(ln 2)) = 0.7610 for a slit as wide as the Gaussian FWHM
    assert slit.gaussian_slit_fraction(1.0, 1.0) == pytest.approx(0.761, abs=5e-4)
    assert slit.slit_fraction(0.9, 100.0, 0.9, "gaussian") == pytest.approx(0.761, abs=5e-4)


def test_moffat_rectangle_matches_closed_forms():
    # Moffat (1969) profile normalised to 1: a very large box holds all the light, and a
    # box's fraction lies between the inscribed and circumscribed circles' closed forms
    assert slit.slit_fraction(40.0, 40.0, 1.0, "moffat") == pytest.approx(1.0, abs=1e-4)
    box = float(slit.slit_fraction(1.0, 1.0, 1.0, "moffat"))
    inner = float(slit.fibre_fraction(1.0, 1.0, "moffat"))
    outer = float(slit.fibre_fraction(math.sqrt(2.0), 1.0, "moffat"))
    assert inner < box < outer


def test_bundled_moffat_table_is_the_rectangle_integral_and_another_beta_is_computed():
    # data/moffat_slit.ecsv (read at run time) against moffat_rectangle recomputed here with scipy's
    # incomplete beta function (reference library: scipy.special.betainc); a beta other than the
    # table's is tabulated on demand and differs
    u = slit.moffat_grid()
    recomputed = slit.moffat_rectangle(u[:, None], u[None, :], slit.MOFFAT_BETA)
    np.testing.assert_allclose(slit._read_moffat_table(), recomputed, rtol=1e-14, atol=0.0)
    assert float(slit.slit_fraction(1.0, 2.0, 1.0, "moffat", beta=2.5)) != float(slit.slit_fraction(1.0, 2.0, 1.0, "moffat"))


def test_erf_is_scipys():
    # Reference library: scipy.special.erf; kncast's erf is math.erf element by element (shape kept)
    from scipy.special import erf as scipy_erf

    x = np.linspace(-6.0, 6.0, 4001).reshape(4001, 1)
    assert slit.erf(x).shape == x.shape
    np.testing.assert_allclose(slit.erf(x), scipy_erf(x), rtol=1e-15, atol=1e-16)


def test_seeing_scaling():
    # common practice: FWHM ~ X^0.6 lambda^-0.2 (Kolmogorov)
    assert slit.seeing_fwhm_arcsec(1.0, 2.0, 5000.0) == pytest.approx(2 ** 0.6)
    assert slit.seeing_fwhm_arcsec(1.0, 1.0, 20000.0) == pytest.approx(4 ** -0.2)


def test_kasten_young_airmass_reused():
    # Kasten & Young 1989 eq. (3): X(60 deg) = 1 / (0.5 + 0.50572 * 36.07995^-1.6364) = 1.99429 (by hand)
    assert airmass_kasten_young(60.0) == pytest.approx(1.99429, rel=1e-5)
    from kncast.forecast.exposure import _zenith_deg

    assert _zenith_deg(airmass_kasten_young(60.0)) == pytest.approx(60.0, abs=2e-3)


# --- Krisciunas & Schaefer (1991, PASP 103, 1033) ---------------------------------------

def test_ks_nanolambert_conversion():
    # K&S eq. (1); their zenith dark sky V = 21.587 corresponds to 79.0 nL (from memory)
    assert sb.nanolambert_from_vmag(21.587) == pytest.approx(79.0, rel=2e-3)
    assert sb.vmag_from_nanolambert(sb.nanolambert_from_vmag(20.3)) == pytest.approx(20.3)


def test_ks_terms_by_hand():
    # eq. (9): m = -12.73 + 0.026 * 90 + 4e-9 * 90^4 = -10.12756 at quarter phase (by hand)
    assert sb.moon_magnitude(90.0) == pytest.approx(-10.12756, abs=1e-5)
    assert sb.moon_magnitude(0.0) == pytest.approx(-12.73)
    # eq. (8): I* = 10^(-0.4 (m + 16.57)) footcandles
    assert sb.moon_illuminance(0.0) == pytest.approx(10 ** (-0.4 * 3.84))
    # eq. (21) at rho = 60: 10^5.36 (1.06 + 0.25) + 10^(6.15 - 1.5) = 300089 + 44668 (by hand)
    assert sb.scattering_function(60.0) == pytest.approx(10 ** 5.36 * 1.31 + 10 ** 4.65, rel=1e-9)
    # eq. (3): X(Z) = (1 - 0.96 sin^2 Z)^-1/2; X(90) = 5
    assert sb.ks_airmass(90.0) == pytest.approx(5.0)
    assert sb.ks_airmass(0.0) == pytest.approx(1.0)
    # eq. (15) at Z_moon = Z = 0, k = 0.172 (their Mauna Kea value): f I* 10^-0.0688 (1 - 10^-0.0688)
    k = 0.172
    expected = sb.scattering_function(60.0) * sb.moon_illuminance(0.0) * 10 ** (-0.4 * k) * (1 - 10 ** (-0.4 * k))
    assert sb.moon_brightness_nl(0.0, 60.0, 0.0, 0.0, k) == pytest.approx(expected)
    # eq. (2): dark sky at Z = 60 deg: B_zen 10^(-0.4 k (X - 1)) X
    x = 1 / math.sqrt(1 - 0.96 * 0.75)
    assert sb.dark_brightness_nl(60.0, k, 21.587) == pytest.approx(79.0 * 10 ** (-0.4 * k * (x - 1)) * x, rel=2e-3)


def test_ks_moonlight_behaviour():
    # K&S 1991 Fig. 1-3 behaviour: sky brighter (smaller mag) nearer full Moon and closer to the Moon
    k = 0.172
    by_phase = sb.sky_v_mag(np.array([0.0, 45.0, 90.0, 135.0]), 60.0, 40.0, 30.0, k)
    assert np.all(np.diff(by_phase) > 0)
    by_sep = sb.sky_v_mag(20.0, np.array([15.0, 30.0, 60.0, 90.0]), 40.0, 30.0, k)
    assert np.all(np.diff(by_sep) > 0)
    # Moon below the horizon: only the dark sky remains
    assert sb.sky_v_mag(0.0, 60.0, 95.0, 0.0, k, v_zenith_mag=21.587) == pytest.approx(21.587, abs=1e-3)
    # a bright Moon 30 deg away makes the sky several magnitudes brighter (K&S Fig. 3: V ~ 17-18 near full)
    assert 16.0 < float(sb.sky_v_mag(10.0, 30.0, 40.0, 30.0, k)) < 19.5


def test_dark_sky_benn_ellison_bands():
    # Benn & Ellison 1998 (U 22.0, B 22.7, V 21.9, R 21.0, I 20.0 Vega mag/arcsec^2) with
    # Blanton & Roweis 2007 AB - Vega offsets (U +0.79, B -0.09, V +0.02, R +0.21, I +0.45)
    for band, vega, off in [("U", 22.0, 0.79), ("B", 22.7, -0.09), ("V", 21.9, 0.02), ("R", 21.0, 0.21),
                            ("I", 20.0, 0.45)]:
        lam = sb.DARK_SKY_BANDS[band][0]
        assert sb.dark_sky_ab_mag(lam) == pytest.approx(vega + off)
    # at the zenith without Moon the model sky equals the V band value converted to photons
    lam_v = sb.DARK_SKY_BANDS["V"][0]
    assert sb.sky_photons(lam_v, 0.0, 0.15) == pytest.approx(sb.ab_to_photons(21.92, lam_v))


def test_moonlight_spectrum_is_bluer_and_normalised():
    # common practice: scattered moonlight is bluer than sunlight; normalisation at 5500 A to the V value
    ph = sb.moonlight_photons(np.array([4000.0, 5500.0, 8000.0]), 18.0, 60.0)
    assert ph[1] == pytest.approx(sb.ab_to_photons(18.02, 5500.0))
    assert ph[0] / ph[1] > 1.0 > ph[2] / ph[1]


# --- atmospheric extinction ---------------------------------------------------------------

def test_rayleigh_optical_depth_sea_level():
    # Bucholtz 1995 (Applied Optics 34, 2765) Table: tau_R(550 nm) ~ 0.097, tau_R(400 nm) ~ 0.364 (from memory)
    assert rayleigh_tau(5500.0) == pytest.approx(0.097, rel=0.02)
    assert rayleigh_tau(4000.0) == pytest.approx(0.364, rel=0.03)
    # scales with pressure
    assert rayleigh_tau(5500.0, 506.625) == pytest.approx(rayleigh_tau(5500.0) / 2)


def test_barometric_pressure():
    # barometric formula with H = 8 km (common practice): 1013.25 exp(-2635/8000) = 728.90 hPa (by hand)
    assert pressure_from_elevation_hpa(2635.0) == pytest.approx(728.90, abs=0.01)


def test_k_v_high_site_typical():
    # common practice: k_V 0.1-0.2 mag/airmass at a good high site; bluer light is extinguished more
    atm = atmosphere_from_table({}, 2400.0)
    assert 0.1 <= float(atm.k_mag(5500.0)) <= 0.2
    k = atm.k_mag(np.array([3500.0, 4500.0, 5500.0, 8000.0, 22000.0]))
    assert np.all(np.diff(k) < 0)
    assert float(extinction_k_mag(5500.0)) > float(atm.k_mag(5500.0))  # sea level extinguishes more


def test_atmosphere_table_validation():
    from kncast.forecast.errors import DataFileError

    a = atmosphere_from_table({"aerosol_k5500": 0.05, "source": "test"}, 2000.0)
    assert isinstance(a, Atmosphere) and a.aerosol_k5500 == 0.05
    with pytest.raises(DataFileError, match="aerosol_k5500"):
        atmosphere_from_table({"aerosol_k5500": -1.0}, 2000.0)
    with pytest.raises(DataFileError, match="unknown key"):
        atmosphere_from_table({"pressure": 700.0}, 2000.0)


def test_moffat_slit_against_direct_2d_integration():
    # independent check: brute-force trapezoid integration of the Moffat (1969) profile over the box
    beta = slit.MOFFAT_BETA
    a = slit.moffat_alpha(1.0, beta)
    x = np.linspace(-0.4, 0.4, 1601)
    y = np.linspace(-1.2, 1.2, 4801)
    xx, yy = np.meshgrid(x, y)
    prof = (beta - 1) / (np.pi * a * a) * (1 + (xx ** 2 + yy ** 2) / a ** 2) ** -beta
    direct = np.trapezoid(np.trapezoid(prof, x, axis=1), y)
    assert float(slit.slit_fraction(0.8, 2.4, 1.0, "moffat")) == pytest.approx(direct, rel=1e-3)


def test_bilinear_equals_scipy_regular_grid_interpolator():
    # Reference library: scipy.interpolate.RegularGridInterpolator (method "linear") on an uneven grid,
    # at random points and at the grid nodes and edges
    from scipy.interpolate import RegularGridInterpolator

    rng = np.random.default_rng(5)
    xg, yg = np.sort(rng.uniform(-3, 2, 17)), np.sort(rng.uniform(0, 4, 23))
    table = rng.normal(size=(17, 23))
    x = np.concatenate([rng.uniform(xg[0], xg[-1], 500), xg, [xg[0], xg[-1]]])
    y = np.concatenate([rng.uniform(yg[0], yg[-1], 500), yg[:17], [yg[-1], yg[0]]])
    ref = RegularGridInterpolator((xg, yg), table)(np.stack([x, y], axis=-1))
    np.testing.assert_allclose(slit.bilinear(xg, yg, table, x, y), ref, rtol=1e-12, atol=1e-13)
