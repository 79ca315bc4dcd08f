"""Photosphere models, the Transient and its state: physics consistency, validation, properties."""
from __future__ import annotations

import numpy as np
import pytest
from astropy import units as u
from astropy.cosmology import Planck18
from hypothesis import given, settings
from hypothesis import strategies as st

from kncast.forecast.blackbody import SIGMA_SB_CGS, planck_flam
from kncast.forecast.errors import ForecastInputError
from kncast.forecast.photosphere import EjectaComponent, HeatingPhotosphere, PowerLawPhotosphere, build_model
from kncast.forecast.source import PhotosphereState, Transient

PHASES = np.array([0.3, 0.5, 1.0, 1.5, 2.0, 3.0, 5.0, 7.0, 10.0, 14.0, 30.0])


def _models():
    return [build_model({"name": "powerlaw"}), build_model({"name": "heating"}),
            HeatingPhotosphere((EjectaComponent("a", 0.01, 0.3, 0.5, 4000.0),
                                EjectaComponent("b", 0.02, 0.2, 3.0, 2700.0),
                                EjectaComponent("c", 0.05, 0.1, 10.0, 2000.0)))]


@pytest.mark.parametrize("model", _models(), ids=["powerlaw", "heating", "heating3"])
def test_luminosity_is_4_pi_r2_sigma_t4_at_every_epoch(model):
    # Stefan-Boltzmann law, for every component and for the totals (sigma: CODATA 2018 via astropy)
    s = Transient(model, distance_mpc=100.0).state(PHASES)
    assert isinstance(s, PhotosphereState)
    comp = 4 * np.pi * s.comp_radius_cm**2 * SIGMA_SB_CGS * s.comp_temperature_K**4
    assert np.allclose(comp, s.comp_luminosity_erg_s, rtol=1e-10)
    assert np.allclose(4 * np.pi * s.radius_cm**2 * SIGMA_SB_CGS * s.temperature_K**4, s.luminosity_erg_s, rtol=1e-10)
    assert np.allclose(s.comp_luminosity_erg_s.sum(axis=0), s.luminosity_erg_s, rtol=1e-12)
    n = len(s.component_names)
    assert s.comp_temperature_K.shape == s.comp_radius_cm.shape == (n, PHASES.size)
    for arr in (s.phase_d, s.age_d, s.temperature_K, s.radius_cm, s.luminosity_erg_s, s.v_phot_c, s.v_max_c):
        assert arr.shape == PHASES.shape and np.all(np.isfinite(arr))
    assert np.all(s.v_phot_c <= s.v_max_c + 1e-12) and np.all(s.v_phot_c > 0)
    # line-forming velocity: inside the ejecta, never below the blackbody radius over c t,
    # and the luminosity-weighted mean of the components' values (as the other totals)
    assert s.v_line_c.shape == PHASES.shape and s.comp_v_line_c.shape == (n, PHASES.size)
    assert np.all(s.v_line_c <= s.v_max_c + 1e-12) and np.all(s.comp_v_line_c >= s.comp_v_phot_c * (1 - 1e-12))
    weights = s.comp_luminosity_erg_s / s.luminosity_erg_s
    assert np.allclose((weights * s.comp_v_line_c).sum(axis=0), s.v_line_c, rtol=1e-12)


def test_powerlaw_defaults_follow_common_practice():
    # the reference point (6300 K at 1 d) is checked against its published model family in
    # tests/accuracy/test_accuracy_photosphere.py; here the rest is common practice: ~2500 K within a
    # week, features forming at 0.1-0.3 c (the line-forming velocity; the blackbody radius recedes
    # faster once L is capped by the heating)
    s = Transient(PowerLawPhotosphere(), distance_mpc=40.0).state([1.0 * (1 + 0.00925), 7.0])
    assert s.temperature_K[0] == pytest.approx(6300.0, rel=0.01)
    assert s.temperature_K[1] == pytest.approx(2500.0, rel=0.05)
    day = Transient(PowerLawPhotosphere(), distance_mpc=40.0).state(np.linspace(1.0, 5.0, 9))
    assert np.all((day.v_line_c >= 0.1) & (day.v_line_c <= 0.3))
    assert np.all(day.v_phot_c <= day.v_line_c * (1 + 1e-12))
    assert np.all(np.diff(day.temperature_K) < 0) and np.all(np.diff(day.luminosity_erg_s) < 0)


def test_heating_defaults_are_a_plausible_kilonova():
    # common practice: ~1e41-1e42 erg/s near 1 day, the fast component fading first, the slow one
    # dominating after a few days; photosphere a few thousand K at 1-2 days
    s = Transient(build_model({"name": "heating"}), distance_mpc=40.0).state([1.0, 1.5, 7.0])
    assert 1e41 < s.luminosity_erg_s[0] < 2e42
    assert 3500 < s.temperature_K[1] < 7000
    fast, slow = s.component_names.index("fast"), s.component_names.index("slow")
    assert s.comp_luminosity_erg_s[fast, 0] > s.comp_luminosity_erg_s[slow, 0]
    assert s.comp_luminosity_erg_s[slow, 2] > s.comp_luminosity_erg_s[fast, 2]
    assert s.v_max_c[0] == pytest.approx(0.3)   # the fastest default component (invented value, not a check)


def test_heating_diffusion_converges_with_grid_density():
    # second-order method: halving the spacing cuts the difference about four-fold
    from kncast.forecast.heating import arnett_luminosity

    t = np.array([0.5, 1.0, 2.0, 5.0, 10.0, 20.0])
    lums = [arnett_luminosity(t, 0.04, 0.15, 10.0, points_per_decade=ppd) for ppd in (50, 100, 200, 3200)]
    err = [np.max(np.abs(l / lums[-1] - 1)) for l in lums[:-1]]
    assert err[2] < 1e-4
    assert 3.0 < err[0] / err[1] < 5.0 and 3.0 < err[1] / err[2] < 5.0


def test_redshift_and_time_dilation():
    # astropy.cosmology Planck18: z <-> D_L, rest-frame age = phase / (1 + z)
    tr = Transient(PowerLawPhotosphere(), distance_mpc=400.0)
    assert Planck18.luminosity_distance(tr.redshift).to_value(u.Mpc) == pytest.approx(400.0, rel=1e-6)
    tz = Transient(PowerLawPhotosphere(), redshift=0.05)
    assert tz.distance_mpc == pytest.approx(Planck18.luminosity_distance(0.05).to_value(u.Mpc))
    s = tr.state([2.0])
    assert s.age_d[0] == pytest.approx(2.0 / (1 + tr.redshift))
    assert tr.luminosity_distance_cm == pytest.approx((400 * u.Mpc).to_value(u.cm))


def test_observed_flux_is_redshifted_blackbody_over_4_pi_dl2():
    # F_obs(lambda) = L_lambda,rest(lambda/(1+z)) / (4 pi D_L^2 (1+z)), L_lambda = 4 pi R^2 pi B_lambda
    tr = Transient(PowerLawPhotosphere(), distance_mpc=300.0)
    s = tr.state([2.0])
    wave = np.linspace(3000.0, 25000.0, 50)
    z1 = 1 + tr.redshift
    l_rest = 4 * np.pi**2 * s.radius_cm[0] ** 2 * planck_flam(wave / z1, s.temperature_K[0])
    ref = l_rest / (4 * np.pi * tr.luminosity_distance_cm**2 * z1)
    assert np.allclose(tr.flux_flam([2.0], wave)[0], ref, rtol=1e-10)


def test_milky_way_and_host_extinction_frames():
    # MW dust at observed wavelengths, host dust at rest wavelengths (Fitzpatrick 1999, R_V = 3.1)
    from kncast.forecast.extinction import a_lambda_over_a_v

    wave = np.array([4000.0, 6000.0, 12000.0])
    kw = dict(redshift=0.1)
    clear = Transient(PowerLawPhotosphere(), **kw).flux_flam([2.0], wave)[0]
    mw = Transient(PowerLawPhotosphere(), ebv_mw=0.2, **kw).flux_flam([2.0], wave)[0]
    host = Transient(PowerLawPhotosphere(), ebv_host=0.2, **kw).flux_flam([2.0], wave)[0]
    assert np.allclose(-2.5 * np.log10(mw / clear), 0.62 * a_lambda_over_a_v(wave), rtol=1e-10)
    assert np.allclose(-2.5 * np.log10(host / clear), 0.62 * a_lambda_over_a_v(wave / 1.1), rtol=1e-10)


def test_vega_magnitudes_follow_ab_offsets():
    from kncast.forecast.photometry import ab_minus_vega

    tr = Transient(PowerLawPhotosphere(), distance_mpc=100.0)
    ab = tr.mag_ab([1.0, 2.0], ["bessell-V", "twomass-Ks"])
    vega = tr.mag_vega([1.0, 2.0], ["bessell-V", "twomass-Ks"])
    for band in ab:
        assert np.allclose(ab[band] - vega[band], ab_minus_vega(band))
    with pytest.raises(ForecastInputError, match="no Vega zero point"):
        tr.mag_vega([1.0], ["sdss2010-r"])


def test_transient_needs_a_distance():
    with pytest.raises(ForecastInputError, match=r"distance needed: give distance_mpc \(in an event file: distance_mpc\)"):
        Transient(PowerLawPhotosphere())


@pytest.mark.parametrize("phase", [0.0, -1.0, float("nan")])
def test_phases_must_be_positive(phase):
    tr = Transient(PowerLawPhotosphere(), distance_mpc=50.0)
    with pytest.raises(ForecastInputError, match="phase_d"):
        tr.state([1.0, phase])


def test_unknown_band_suggests_names():
    tr = Transient(PowerLawPhotosphere(), distance_mpc=50.0)
    with pytest.raises(ForecastInputError, match="did you mean bessell-V"):
        tr.mag_ab([1.0], ["bessel-V"])


@pytest.mark.parametrize("config, match", [
    ({"name": "heating", "component": [{"mass_msun": 0.0, "velocity_c": 0.2, "opacity_cm2_g": 1,
                                        "temperature_floor_K": 2500}]}, r"mass_msun = 0: allowed \(0, 1\] Msun"),
    ({"name": "heating", "component": [{"mass_msun": 0.01, "velocity_c": 0.8, "opacity_cm2_g": 1,
                                        "temperature_floor_K": 2500}]}, r"velocity_c = 0.8: allowed \(0, 0.8\) c"),
    ({"name": "heating", "component": [{"mass_msun": 0.01, "velocity_c": 0.2, "opacity_cm2_g": -1,
                                        "temperature_floor_K": 2500}]}, r"opacity_cm2_g = -1: allowed"),
    ({"name": "heating", "component": [{"mass_msun": 0.01, "velocity_c": 0.2, "opacity_cm2_g": 1,
                                        "temperature_floor_K": 0}]}, r"temperature_floor_K = 0: allowed"),
    ({"name": "heating", "component": [{"mass_msun": 0.01, "velocity_c": 0.2, "opacity_cm2_g": 1}]},
     r"component\[0\].temperature_floor_K: required key missing"),
    ({"name": "heating", "component": [{"mass_msun": 0.01, "velocity_c": 0.2, "opacity_cm2_g": 1,
                                        "temperature_floor_K": 2500, "colour": "red"}]}, r"colour: unknown key"),
    ({"name": "heating", "component": []}, r"no components"),
    ({"name": "heating", "component": "fast"}, r"expected an array"),
    ({"name": "powerlaw", "v_max_c": 0.0}, r"v_max_c = 0: allowed \(0, 0.8\) c"),
    ({"name": "powerlaw", "velocity_ref_c": 0.5, "v_max_c": 0.4}, r"must not exceed"),
    ({"name": "powerlaw", "temperature_ref_K": "hot"}, r"expected a number"),
    ({"name": "powerlaw", "opacity_cm2_g": 3.0}, r"not a parameter of the powerlaw model"),
    ({"name": "arnett"}, r"allowed powerlaw \| heating"),
])
def test_model_parameters_are_validated(config, match):
    with pytest.raises(ForecastInputError, match=match) as info:
        build_model(config, where="ev.toml: [model]")
    assert str(info.value).startswith("ev.toml: [model]") and "\n" not in str(info.value)


@settings(max_examples=40, deadline=None)
@given(d1=st.floats(1.0, 2000.0), factor=st.floats(1.01, 20.0), phase=st.floats(0.2, 30.0))
def test_flux_scales_as_inverse_square_of_luminosity_distance(d1, factor, phase):
    # inverse-square law at fixed redshift (given with the distance, so only D_L changes)
    wave = np.array([3500.0, 8000.0, 20000.0])
    f1 = Transient(PowerLawPhotosphere(), distance_mpc=d1, redshift=0.01).flux_flam([phase], wave)
    f2 = Transient(PowerLawPhotosphere(), distance_mpc=d1 * factor, redshift=0.01).flux_flam([phase], wave)
    assert np.allclose(f1 / f2, factor**2, rtol=1e-10)


@settings(max_examples=25, deadline=None)
@given(d1=st.floats(5.0, 3000.0), factor=st.floats(1.05, 5.0), phase=st.floats(0.3, 20.0))
def test_magnitudes_increase_with_distance(d1, factor, phase):
    # farther (and, through Planck18, more redshifted) is fainter in every band
    bands = ["bessell-B", "bessell-V", "bessell-I", "twomass-J", "twomass-Ks"]
    near = Transient(PowerLawPhotosphere(), distance_mpc=d1).mag_ab([phase], bands)
    far = Transient(PowerLawPhotosphere(), distance_mpc=d1 * factor).mag_ab([phase], bands)
    assert all(far[b][0] > near[b][0] for b in bands)


@settings(max_examples=30, deadline=None)
@given(mass=st.floats(1e-3, 0.1), vel=st.floats(0.05, 0.5), kappa=st.floats(0.1, 30.0),
       floor=st.floats(500.0, 6000.0), phases=st.lists(st.floats(0.05, 60.0), min_size=1, max_size=8))
def test_temperature_never_below_its_floor(mass, vel, kappa, floor, phases):
    model = HeatingPhotosphere((EjectaComponent("x", mass, vel, kappa, floor),))
    s = Transient(model, distance_mpc=100.0).state(phases)
    assert np.all(s.comp_temperature_K >= floor) and np.all(s.temperature_K >= floor * (1 - 1e-12))
    pl = PowerLawPhotosphere(temperature_floor_K=floor)
    assert np.all(Transient(pl, distance_mpc=100.0).state(phases).temperature_K >= floor)


@pytest.mark.parametrize("text, fragment", [
    ("", "file is empty"),
    ("[[band]]\nname = \"bessell-V\"\nsource = \"x\"\n", "band[0].f_nu_jy: required key missing"),
    ("[[band]]\nname = \"bessell-V\"\nf_nu_jy = -3.0\nsource = \"x\"\n", "band[0].f_nu_jy: value -3 out of range"),
    ("[[band]]\nname = \"bessell-V\"\nf_nu_jy = 3636.0\n", "band[0].source: required key missing"),
    ("[[band]]\nname = \"johnson-V\"\nf_nu_jy = 3636.0\nsource = \"x\"\n", "not a speclite band"),
    ("title = 'no rows'\n", "expected one or more [[band]] tables"),
    ("[[band]\nname = 1\n", "malformed TOML"),
])
def test_malformed_zero_point_file_is_refused(tmp_path, text, fragment):
    from kncast.forecast.errors import DataFileError
    from kncast.forecast.photometry import load_vega_zero_points

    path = tmp_path / "zp.toml"
    path.write_text(text)
    with pytest.raises(DataFileError) as info:
        load_vega_zero_points(path)
    assert fragment in str(info.value) and str(path) in str(info.value)


def test_bundled_zero_point_file_has_provenance_for_every_default_band():
    from kncast.forecast.photometry import DEFAULT_BANDS, VEGA_ZERO_POINTS_FILE, load_vega_zero_points

    assert set(DEFAULT_BANDS) <= set(load_vega_zero_points(VEGA_ZERO_POINTS_FILE))
