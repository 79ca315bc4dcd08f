"""Photosphere, photometry, extinction and heating checked against outside references.

Each test names its source: CODATA constants through astropy.constants,
astropy's BlackBody model, speclite's own synthetic photometry, published
photometric zero points and Vega-AB offsets, the Fitzpatrick (1999) law,
Korobkin et al. (2012) and Barnes et al. (2016), closed-form solutions of
Arnett's (1982) diffusion integral, and a published kilonova bolometric light
curve and spectral-fit velocities (Cowperthwaite et al. 2017; Waxman et al. 2018;
Watson et al. 2019; Perego et al. 2022; values marked from memory).
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u

from kncast.forecast.blackbody import planck_flam, planck_sum_flam, stefan_boltzmann_luminosity, wien_peak_A
from kncast.forecast.photometry import DEFAULT_BANDS, ab_minus_vega, mag_ab_from_spectrum

PLANCK_RTOL = 1e-10
SB_RTOL = 1e-6
AB_ZERO_TOL_MAG = 1e-3
SPECLITE_TOL_MAG = 0.005
VEGA_AB_TOL_MAG = 0.1  # published Vega-AB offsets differ by up to ~0.1 mag between sources


def test_planck_matches_astropy_blackbody_on_a_grid():
    # Reference library: astropy.modeling.models.BlackBody (CODATA 2018 constants)
    from astropy.modeling.models import BlackBody

    wave = np.geomspace(1000.0, 1e6, 40)
    for temp in (800.0, 2500.0, 5000.0, 12000.0, 60000.0):
        ref = BlackBody(temp * u.K, scale=1.0 * u.erg / (u.s * u.cm**2 * u.AA * u.sr))(wave * u.AA)
        ours = planck_flam(wave, temp)
        assert np.allclose(ours, ref.to_value(u.erg / (u.s * u.cm**2 * u.AA * u.sr)), rtol=PLANCK_RTOL, atol=0)


def test_multi_component_kernel_equals_sum_of_planck_functions():
    # Reference: the plain Planck function above (itself checked against astropy)
    wave = np.geomspace(500.0, 1e6, 400)
    temp = np.array([[1500.0, 4000.0, 9000.0], [2500.0, 30000.0, 3000.0]])
    weight = np.array([[1.0, 2.0, 3.0], [0.5, 1e-3, 7.0]])
    ref = (weight[:, :, None] * planck_flam(wave[None, None, :], temp[:, :, None])).sum(axis=0)
    assert np.allclose(planck_sum_flam(wave, temp, weight), ref, rtol=1e-8, atol=0)


@pytest.mark.parametrize("temp", [2000.0, 5000.0, 20000.0])
def test_wien_displacement_law(temp):
    # Wien's law lambda_max T = b, b = 2.897771955e-3 m K (CODATA 2018, astropy.constants.b_wien)
    wave = np.linspace(0.5, 1.5, 200001) * const.b_wien.to_value(u.AA * u.K) / temp
    peak = wave[np.argmax(planck_flam(wave, temp))]
    assert peak == pytest.approx(wien_peak_A(temp), rel=1e-5)
    assert peak * temp == pytest.approx(2.897771955e7, rel=1e-5)  # in A K


@pytest.mark.parametrize("temp", [1000.0, 3000.0, 5800.0, 25000.0])
def test_bolometric_integral_equals_stefan_boltzmann(temp):
    # pi * int B_lambda dlambda = sigma T^4 (Stefan-Boltzmann, sigma from CODATA 2018 via astropy.constants)
    from scipy.integrate import quad

    lam_peak = wien_peak_A(temp)
    integral = sum(quad(lambda x: planck_flam(x, temp), a, b, limit=200, epsrel=1e-10)[0]
                   for a, b in ((lam_peak * 0.01, lam_peak), (lam_peak, lam_peak * 100), (lam_peak * 100, lam_peak * 1e5)))
    sigma = const.sigma_sb.cgs.value
    assert np.pi * integral == pytest.approx(sigma * temp**4, rel=SB_RTOL)
    # and the luminosity helper uses the same law: L = 4 pi R^2 sigma T^4
    assert stefan_boltzmann_luminosity(temp, 1e14) == pytest.approx(4 * np.pi * 1e28 * sigma * temp**4, rel=1e-12)


BANDS_ALL = DEFAULT_BANDS + ("sdss2010-u", "sdss2010-g", "sdss2010-r", "sdss2010-i", "sdss2010-z")


@pytest.mark.parametrize("band", BANDS_ALL)
def test_flat_3631_jy_spectrum_is_ab_zero(band):
    # AB system: f_nu = 3631 Jy gives m_AB = 0 in every band (Oke & Gunn 1983, ApJ 266, 713)
    wave = np.linspace(2500.0, 30000.0, 27501)
    flam = 3631e-23 * const.c.to_value(u.AA / u.s) / wave**2
    assert mag_ab_from_spectrum(wave, flam, band) == pytest.approx(0.0, abs=AB_ZERO_TOL_MAG)


def test_synthetic_ab_magnitudes_match_speclite():
    # Reference library: speclite.filters.FilterSequence.get_ab_magnitudes on the same spectrum
    import speclite.filters

    wave = np.linspace(2500.0, 30000.0, 30000)
    flam = planck_flam(wave, 4500.0) * 1e-20
    filters = speclite.filters.load_filters(*BANDS_ALL)
    ref = filters.get_ab_magnitudes(flam * u.erg / (u.s * u.cm**2 * u.AA), wave * u.AA)
    for band in BANDS_ALL:
        assert mag_ab_from_spectrum(wave, flam, band) == pytest.approx(ref[band][0], abs=SPECLITE_TOL_MAG)

def test_filter_files_read_as_speclite_reads_them():
    # Reference library: speclite.filters.load_filter (its own reader, trimming and unit handling) on
    # every filter file speclite ships; kncast reads the same files without importing speclite
    import speclite.filters

    from kncast.forecast.photometry import _read_filter_file, known_bands

    for band in known_bands():
        lam, resp = _read_filter_file(band)
        ref = speclite.filters.load_filter(band)
        assert np.array_equal(lam, np.asarray(ref.wavelength, float)), band
        assert np.array_equal(resp, np.asarray(ref.response, float)), band



# m_AB - m_Vega, Blanton & Roweis 2007, AJ 133, 734, Table 1: U..I checked; J, H, Ks from memory.
BLANTON_ROWEIS_2007 = {"bessell-U": 0.79, "bessell-B": -0.09, "bessell-V": 0.02, "bessell-R": 0.21,
                       "bessell-I": 0.45, "twomass-J": 0.91, "twomass-H": 1.39, "twomass-Ks": 1.85}


@pytest.mark.parametrize("band", sorted(BLANTON_ROWEIS_2007))
def test_vega_ab_offsets_match_published_table(band):
    # our offsets come from zero points of Bessell, Castelli & Plez 1998 and Cohen et al. 2003;
    # compared with the independent table of Blanton & Roweis 2007
    assert ab_minus_vega(band) == pytest.approx(BLANTON_ROWEIS_2007[band], abs=VEGA_AB_TOL_MAG)


def test_f99_total_to_selective_extinction_is_3_1_at_v():
    # Fitzpatrick 1999 (PASP 111, 63) with R_V = A_V / E(B-V) = 3.1
    from kncast.forecast.extinction import a_lambda_over_a_v, extinction_mag
    from kncast.forecast.photosphere import PowerLawPhotosphere
    from kncast.forecast.source import Transient

    # monochromatic at V (5500 A): F99 curves are normalized to broad-band B, V, so a few per cent
    assert extinction_mag(5500.0, 1.0) == pytest.approx(3.1, rel=0.03)
    assert a_lambda_over_a_v(5500.0) == pytest.approx(1.0, rel=0.03)
    # broad-band for a hot star (R_V is defined with B, V photometry of early-type stars)
    hot = PowerLawPhotosphere(temperature_ref_K=10000.0, temperature_index=0.0)
    clear = Transient(hot, distance_mpc=10.0).mag_ab([1.5], ["bessell-B", "bessell-V"])
    dusty = Transient(hot, distance_mpc=10.0, ebv_mw=0.1).mag_ab([1.5], ["bessell-B", "bessell-V"])
    a_b = float(dusty["bessell-B"][0] - clear["bessell-B"][0])
    a_v = float(dusty["bessell-V"][0] - clear["bessell-V"][0])
    assert a_v / (a_b - a_v) == pytest.approx(3.1, abs=0.1)


def test_f99_matches_dust_extinction_inside_its_range_and_stays_finite_outside():
    # Reference library: dust_extinction.parameter_averages.F99 (Fitzpatrick 1999)
    from dust_extinction.parameter_averages import F99

    from kncast.forecast.extinction import a_lambda_over_a_v

    wave = np.linspace(1100.0, 33000.0, 500)
    assert np.allclose(a_lambda_over_a_v(wave), F99(Rv=3.1)(wave * u.AA), rtol=1e-12)
    outside = a_lambda_over_a_v(np.array([500.0, 40000.0, 1e5]))
    assert np.all(np.isfinite(outside)) and outside[1] > outside[2] > 0


def test_heating_rate_at_one_day_is_of_order_1e10():
    # Korobkin et al. 2012 (MNRAS 426, 1940): about 1e10 erg/g/s deposited at 1 day for a
    # thermalization of 0.5, i.e. ~2e10 erg/g/s total (REFERENCES: from memory)
    from kncast.forecast.heating import heating_rate_erg_g_s

    total = float(heating_rate_erg_g_s(86400.0))
    assert 1e10 < total < 4e10
    assert 5e9 < 0.5 * total < 2e10
    # power-law decay t^-1.3 after a few seconds (Korobkin et al. 2012, eq. 4)
    slope = np.log(heating_rate_erg_g_s(10 * 86400.0) / heating_rate_erg_g_s(86400.0)) / np.log(10.0)
    assert slope == pytest.approx(-1.3, abs=1e-3)


# Barnes et al. 2016 (ApJ 829, 110), Table 1 rows (a, b, d) -- from memory, also found in
# published kilonova light-curve codes: (mass Msun, velocity c) -> (a, b, d)
BARNES_ROWS = {
    (1e-3, 0.1): (2.01, 0.28, 1.12), (1e-3, 0.2): (4.52, 0.62, 1.39), (1e-3, 0.3): (8.16, 1.19, 1.52),
    (5e-3, 0.1): (0.81, 0.19, 0.86), (5e-3, 0.2): (1.90, 0.28, 1.21), (5e-3, 0.3): (3.20, 0.45, 1.39),
    (1e-2, 0.1): (0.56, 0.17, 0.74), (1e-2, 0.2): (1.31, 0.21, 1.13), (1e-2, 0.3): (2.19, 0.31, 1.32),
    (5e-2, 0.1): (0.27, 0.10, 0.60), (5e-2, 0.2): (0.55, 0.13, 0.90), (5e-2, 0.3): (0.95, 0.15, 1.13),
}


@pytest.mark.parametrize("key", sorted(BARNES_ROWS))
def test_thermalization_coefficients_reproduce_barnes_table(key):
    from kncast.forecast.heating import barnes_coefficients

    assert barnes_coefficients(*key) == pytest.approx(BARNES_ROWS[key], abs=1e-12)


def test_thermalization_efficiency_limits():
    # Barnes et al. 2016 eq. 36: eps_th -> 0.36 * 2 = 0.72 as t -> 0, decreasing with time
    from kncast.forecast.heating import thermalization_efficiency

    a, b, d = BARNES_ROWS[(1e-2, 0.2)]
    t = np.geomspace(1e-6, 100.0, 200)
    eps = thermalization_efficiency(t, a, b, d)
    assert eps[0] == pytest.approx(0.72, abs=1e-4)
    assert np.all(np.diff(eps) < 0) and 0 < eps[-1] < 0.1


def test_arnett_diffusion_of_constant_power():
    # Closed form of Arnett's (1982) integral for constant input L0: L = L0 (1 - exp(-(t/t_d)^2))
    from kncast.forecast.heating import diffuse

    t, td = np.array([0.01, 0.3, 1.0, 2.0, 5.0, 20.0, 100.0]), 1.7
    lum = diffuse(t, td, lambda x: np.full_like(x, 1e41), head_index=0.0)
    assert np.allclose(lum, 1e41 * -np.expm1(-(t / td) ** 2), rtol=1e-7)


def test_arnett_diffusion_of_power_law_heating():
    # Closed form for L_in = t^-n (Korobkin n = 1.3): with u = (t/t_d)^2, a = -n/2,
    # L = t_d^-n u^(a+1) / (a+1) * 1F1(1; a+2; -u)  (Kummer's function; Abramowitz & Stegun 13.1.27)
    from scipy.special import hyp1f1

    from kncast.forecast.heating import diffuse

    n, td = 1.3, 2.3
    t = np.array([0.05, 0.5, 1.0, 3.0, 10.0, 40.0])
    u_ = (t / td) ** 2
    ref = td**-n * u_ ** (1 - n / 2) / (1 - n / 2) * hyp1f1(1.0, 2 - n / 2, -u_)
    assert np.allclose(diffuse(t, td, lambda x: x**-n, head_index=n), ref, rtol=3e-5)


# ---------------------------------------------------------------- default power law against published kilonova data

def _thermalized_heating_reference(time_d, mass_msun, a, b, d):
    # Korobkin et al. 2012 (MNRAS 426, 1940) eq. 4, written out here: eps0 = 2e18 erg/g/s for a
    # thermalization of 0.5, t0 = 1.3 s, sigma = 0.11 s, alpha = 1.3; times Barnes et al. 2016
    # (ApJ 829, 110) eq. 36 with their Table 1 coefficients
    t_s = np.asarray(time_d) * 86400.0
    eps = 2e18 / 0.5 * (0.5 - np.arctan((t_s - 1.3) / 0.11) / np.pi) ** 1.3
    x = 2 * b * np.asarray(time_d) ** d
    eps_th = 0.36 * (np.exp(-a * np.asarray(time_d)) + np.log1p(x) / x)
    return mass_msun * const.M_sun.cgs.value * eps * eps_th


def _barnes_at(mass_msun, velocity_c):
    # Barnes et al. 2016 Table 1 rows (BARNES_ROWS above), linear in log10 M between the bracketing masses
    masses = sorted({m for m, v in BARNES_ROWS if v == velocity_c})
    lo = max(m for m in masses if m <= mass_msun)
    hi = min(m for m in masses if m >= mass_msun)
    f = 0.0 if hi == lo else (np.log10(mass_msun) - np.log10(lo)) / (np.log10(hi) - np.log10(lo))
    return tuple((1 - f) * p + f * q for p, q in zip(BARNES_ROWS[(lo, velocity_c)], BARNES_ROWS[(hi, velocity_c)]))


def test_default_powerlaw_never_radiates_more_than_its_thermalized_heating():
    # energy conservation after the diffusion peak: L <= M eps(t) eps_th(t) for the model's own ejecta mass
    # (Korobkin et al. 2012; Barnes et al. 2016 for 0.04 Msun at the model's 0.2 c), 0.5-20 d
    from kncast.forecast.photosphere import PowerLawPhotosphere

    model = PowerLawPhotosphere()
    assert (model.mass_msun, model.velocity_ref_c) == (0.04, 0.2)
    t = np.geomspace(0.5, 20.0, 300)
    lum = model.components(t)[2][0]
    heat = _thermalized_heating_reference(t, 0.04, *_barnes_at(0.04, 0.2))
    assert np.all(lum <= heat * (1 + 1e-9))
    # the cap binds late (it is not a rescaling): the early power law is left as it was
    assert np.all(lum[t < 1.5] < heat[t < 1.5]) and np.allclose(lum[t > 3.0], heat[t > 3.0], rtol=1e-9)


def test_default_powerlaw_reference_point_is_the_one_zone_model_at_one_day():
    # The default reference point is the one-zone radioactive kilonova (Metzger et al. 2010, MNRAS
    # 406, 2650; from memory) for 0.04 Msun at 0.2 c with kappa = 1 cm^2/g (kncast.forecast.photosphere):
    # recomputed here with its own Arnett (1982, ApJ 253, 785) integral by adaptive quadrature,
    # L(t) = exp(-u) int_0^u L_in(u') exp(u') du', u = (t / t_d)^2, t_d = sqrt(2 kappa M / (13.8 c v)),
    # L_in from Korobkin et al. 2012 x Barnes et al. 2016 (above), and T = (L / (4 pi sigma (v t)^2))^1/4.
    from scipy.integrate import quad

    from kncast.forecast.photosphere import REFERENCE_COMPONENT, PowerLawPhotosphere

    mass, v, kappa = (REFERENCE_COMPONENT[k] for k in ("mass_msun", "velocity_c", "opacity_cm2_g"))
    assert (mass, v, kappa) == (0.04, 0.2, 1.0)
    coeffs = _barnes_at(mass, v)
    c = const.c.cgs.value
    t_d = np.sqrt(2 * kappa * mass * const.M_sun.cgs.value / (13.8 * c * v * c)) / 86400.0   # days
    u_end = (1.0 / t_d) ** 2

    def integrand(log_u):    # in ln u: smooth over the many decades of early times
        u = np.exp(log_u)
        return _thermalized_heating_reference(t_d * np.sqrt(u), mass, *coeffs) * np.exp(u - u_end) * u

    lum = quad(integrand, np.log(1e-14), np.log(u_end), limit=400, epsabs=0, epsrel=1e-8)[0]
    radius = v * c * 86400.0
    temp = (lum / (4 * np.pi * const.sigma_sb.cgs.value * radius**2)) ** 0.25
    model = PowerLawPhotosphere()
    assert model.t_ref_d == 1.0 and model.velocity_ref_c == v and model.mass_msun == mass
    assert temp == pytest.approx(6264.0, rel=5e-3)                      # the value the docs quote
    assert model.temperature_ref_K == pytest.approx(round(temp, -2))     # rounded to 100 K


# Published bolometric light curve of a kilonova (values from memory -- check before tightening):
# Cowperthwaite et al. 2017 (ApJL 848, L17) and Waxman et al. 2018 (MNRAS 481, 3423) give
# L ~ 5e41-1e42 erg/s near 0.6-1 d, declining roughly as t^-1.3 to about a week; after ~7 d the
# decline steepens (d log L / d log t ~ -2.8: Waxman, Ofek & Kushnir 2019, ApJ 878, 93), so the
# t^-1.3 law extrapolated past a week is an upper bound on the observed luminosity.
KN_L_1D_ERG_S = 7e41        # geometric middle of 5e41-1e42 (from memory)
KN_DECLINE_INDEX = 1.3
KN_MODEL_FACTOR = 2.5       # one-zone / empirical models against a published light curve (and memory)


def _published_kilonova_l(time_d):
    return KN_L_1D_ERG_S * np.asarray(time_d) ** -KN_DECLINE_INDEX


@pytest.mark.parametrize("name", ["powerlaw", "heating"])
def test_default_luminosity_follows_a_published_kilonova_light_curve_to_a_week(name):
    from kncast.forecast.photosphere import build_model

    t = np.array([1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 7.0])
    lum = build_model({"name": name}).components(t)[2].sum(axis=0)
    ratio = lum / _published_kilonova_l(t)
    assert np.all((ratio > 1 / KN_MODEL_FACTOR) & (ratio < KN_MODEL_FACTOR)), ratio


def test_default_powerlaw_fades_at_least_as_fast_as_published_after_a_week():
    # after ~7 d the observed light curve falls faster than t^-1.3 (Waxman, Ofek & Kushnir 2019):
    # the default must not stay above that extrapolation (before the heating cap it was 2-4x above)
    from kncast.forecast.photosphere import PowerLawPhotosphere

    t = np.array([10.0, 14.0, 20.0])
    assert np.all(PowerLawPhotosphere().components(t)[2][0] <= _published_kilonova_l(t))


# Line-forming velocities from published spectral fits of a kilonova (from memory -- check before
# tightening): Watson et al. 2019 (Nature 574, 497) fit the Sr II P Cygni feature with ~0.2 c or more
# at ~1.5 d, receding to ~0.13-0.15 c by 4-5 d; Perego et al. 2022 (ApJ 925, 22) fit the same
# epochs (1.4-4.4 d) with photospheric velocities in the same range.
FIT_V_1P5D_C = (0.15, 0.30)
FIT_V_3_5D_C = (0.12, 0.25)


@pytest.mark.parametrize("name", ["powerlaw", "heating"])
def test_default_line_forming_velocity_matches_published_spectral_fits(name):
    from kncast.forecast.features import epochs_from
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient

    tr = Transient(build_model({"name": name}), distance_mpc=40.0, redshift=1e-4)
    ep = epochs_from(tr, [1.5, 3.0, 4.0, 5.0])
    lo, hi = FIT_V_1P5D_C
    assert lo <= ep.v_phot_c[0] <= hi
    lo, hi = FIT_V_3_5D_C
    assert np.all((ep.v_phot_c[1:] >= lo) & (ep.v_phot_c[1:] <= hi)), ep.v_phot_c
    assert np.all(np.diff(ep.v_phot_c) <= 0)   # receding, never accelerating


def test_f99_equals_dust_extinction_at_its_joints_edges_and_on_a_2d_grid():
    # Reference library: dust_extinction.parameter_averages.F99 (Fitzpatrick 1999, PASP 111, 63). Our
    # numpy curve must equal it where the recipe changes form: every spline anchor (infinite wavelength
    # excluded), the ultraviolet edge at 2700 A, the far-UV term's start at x = 5.9 micron^-1 and the
    # range's ends, each approached from both sides, and on a 2-d grid (shape kept)
    from dust_extinction.parameter_averages import F99

    from kncast.forecast import extinction

    joints = np.array([26500.0, 12200.0, 6000.0, 5470.0, 4670.0, 4110.0, 2700.0, 2600.0, 1e4 / 5.9,
                       1e4 / 0.3, 1e4 / 10.0])
    wave = np.concatenate([joints, joints * (1 + 1e-9), joints * (1 - 1e-9)])
    wave = wave[(wave >= 1e4 / 10.0) & (wave <= 1e4 / 0.3)]
    ref = F99(Rv=3.1)(wave * u.AA)
    assert np.allclose(extinction.a_lambda_over_a_v(wave), ref, rtol=1e-12)
    grid = np.geomspace(1000.0, 33333.0, 600).reshape(20, 30)
    ours = extinction.a_lambda_over_a_v(grid)
    assert ours.shape == grid.shape
    assert np.allclose(ours, F99(Rv=3.1)(grid.ravel() * u.AA).reshape(grid.shape), rtol=1e-12)
