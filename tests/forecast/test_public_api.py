"""The public names of kncast.forecast: each resolves, and each Quantity entry point gives the numbers of
the float kernel it wraps, whatever units it is called with."""
from __future__ import annotations

import importlib
import inspect
import pkgutil

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const

import kncast.forecast as forecast
from kncast.forecast import (ForecastInputError, TelluricModel, Transient, build_model, exposure_time_for_snr,
                             features_at, load_telescopes, moon_geometry, observing_conditions, snr_spectrum)


def _all_submodules():
    for info in pkgutil.iter_modules(forecast.__path__):
        importlib.import_module(f"kncast.forecast.{info.name}")


def test_every_public_name_resolves_and_no_submodule_shadows_it():
    before = {name: getattr(forecast, name) for name in forecast.__all__}
    _all_submodules()  # importing a submodule sets a package attribute of its name: none may be a public name
    for name in forecast.__all__:
        value = getattr(forecast, name)
        assert not inspect.ismodule(value), name
        assert value is before[name], name
        assert name in dir(forecast)
    assert len(set(forecast.__all__)) == len(forecast.__all__)


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no_such_name"):
        forecast.no_such_name  # noqa: B018


@pytest.fixture(scope="module")
def transient():
    return Transient(build_model({"name": "powerlaw"}), distance=40 * u.Mpc, ebv_mw=0.05)


@pytest.fixture(scope="module")
def telescope():
    from conftest import ROOT

    (tel,) = load_telescopes(ROOT / "sites" / "siding-spring.toml")[:1]
    return tel


# ---------------------------------------------------------------- Transient

def test_distance_quantity_equals_distance_mpc():
    model = build_model()
    by_mpc = Transient(model, distance_mpc=40.0)
    assert Transient(model, distance=40 * u.Mpc).redshift == by_mpc.redshift
    assert Transient(model, distance=0.04 * u.Gpc).distance_mpc == pytest.approx(40.0, rel=1e-12)
    with pytest.raises(ForecastInputError, match="distance"):
        Transient(model, distance=40.0)
    with pytest.raises(ForecastInputError, match="distance and distance_mpc"):
        Transient(model, distance_mpc=40.0, distance=40 * u.Mpc)


def test_spectrum_equals_flux_flam(transient):
    lam = np.linspace(3500.0, 24000.0, 50)
    phases = np.array([0.5, 1.0, 3.0])
    flux = transient.spectrum(phases * u.day, lam * u.AA)
    assert flux.unit == u.erg / (u.s * u.cm**2 * u.AA)
    np.testing.assert_array_equal(flux.value, transient.flux_flam(phases, lam))


def test_spectrum_accepts_other_units_and_keeps_shapes(transient):
    ref = transient.flux_flam([2.0], [6000.0, 12000.0])[0]
    nm = transient.spectrum(48 * u.hour, [600.0, 1200.0] * u.nm)
    micron = transient.spectrum(2 * u.day, [0.6, 1.2] * u.micron)
    assert nm.shape == (2,) and micron.shape == (2,)
    np.testing.assert_allclose(nm.value, ref, rtol=1e-12)
    np.testing.assert_allclose(micron.value, ref, rtol=1e-12)
    assert transient.spectrum(2 * u.day, 6000 * u.AA).shape == ()
    assert transient.spectrum([1, 2] * u.day, 6000 * u.AA).shape == (2,)
    # per-micron flux density converts like any Quantity: 1 erg/s/cm2/A = 1e4 erg/s/cm2/um (unit definition)
    assert nm.to_value(u.erg / (u.s * u.cm**2 * u.um))[0] == pytest.approx(ref[0] * 1e4, rel=1e-12)


def test_magnitudes_equal_the_kernels(transient):
    phases = np.array([1.0, 2.0, 4.0])
    ab = transient.magnitudes(phases * u.day, ["bessell-R", "twomass-J"])
    vega = transient.magnitudes(phases * 24 * u.hour, "bessell-R", system="Vega")
    kernel_ab, kernel_vega = transient.mag_ab(phases, ["bessell-R", "twomass-J"]), transient.mag_vega(phases, "bessell-R")
    assert ab["bessell-R"].unit == u.ABmag and vega["bessell-R"].unit == u.mag
    np.testing.assert_array_equal(ab["twomass-J"].value, kernel_ab["twomass-J"])
    np.testing.assert_allclose(vega["bessell-R"].value, kernel_vega["bessell-R"], rtol=1e-12)
    with pytest.raises(ForecastInputError, match="system"):
        transient.magnitudes(1 * u.day, "bessell-R", system="ST")


def test_photosphere_at_equals_state(transient):
    phases = np.array([0.7, 1.5, 5.0])
    st = transient.state(phases)
    q = transient.photosphere_at(phases * u.day)
    np.testing.assert_array_equal(q["temperature"].to_value(u.K), st.temperature_K)
    np.testing.assert_array_equal(q["radius"].to_value(u.cm), st.radius_cm)
    np.testing.assert_array_equal(q["luminosity"].to_value(u.erg / u.s), st.luminosity_erg_s)
    np.testing.assert_array_equal(q["age"].to_value(u.day), st.age_d)
    # speed of light: CODATA exact value via astropy.constants
    np.testing.assert_allclose(q["v_phot"].to_value(u.km / u.s), st.v_phot_c * const.c.to_value(u.km / u.s), rtol=1e-14)
    np.testing.assert_allclose(q["v_max"].to_value(u.km / u.s), st.v_max_c * const.c.to_value(u.km / u.s), rtol=1e-14)
    assert transient.photosphere_at(36 * u.hour)["temperature"].shape == ()


@pytest.mark.parametrize("call, name", [
    (lambda t: t.spectrum(2.0, 6000 * u.AA), "phase"),
    (lambda t: t.spectrum(2 * u.day, 6000.0), "wavelength"),
    (lambda t: t.spectrum(2 * u.day, 6000 * u.s), "wavelength"),
    (lambda t: t.magnitudes(2 * u.kg, "bessell-R"), "phase"),
    (lambda t: t.photosphere_at(3 * u.AA), "phase"),
])
def test_unit_errors_are_one_line_naming_the_parameter(transient, call, name):
    with pytest.raises(ForecastInputError) as err:
        call(transient)
    msg = str(err.value)
    assert msg.startswith(f"{name}:") and "\n" not in msg


# ---------------------------------------------------------------- blackbody, sky, airmass, tellurics

def test_blackbody_intensity_matches_astropy():
    from astropy.modeling.physical_models import BlackBody

    from kncast.forecast import blackbody_intensity

    lam = [350.0, 700.0, 2200.0] * u.nm
    ours = blackbody_intensity(lam, 3000 * u.K)
    # independent implementation: astropy.modeling's BlackBody, scaled to per-Angstrom units
    theirs = BlackBody(3000 * u.K, scale=1.0 * u.erg / (u.cm**2 * u.s * u.AA * u.sr))(lam)
    np.testing.assert_allclose(ours.to_value(theirs.unit), theirs.value, rtol=1e-10)
    both = blackbody_intensity(5000 * u.AA, [3000, 5000] * u.K)
    assert both.shape == (2,)
    with pytest.raises(ForecastInputError, match="temperature"):
        blackbody_intensity(5000 * u.AA, 3000 * u.m)


def test_airmass_at_equals_kernel():
    from kncast.forecast import airmass_at
    from kncast.forecast.airmass import airmass_from_altitude

    alt = np.array([90.0, 60.0, 30.0, 10.0])
    np.testing.assert_array_equal(airmass_at(alt * u.deg), airmass_from_altitude(alt))
    np.testing.assert_allclose(airmass_at(np.radians(alt) * u.rad), airmass_from_altitude(alt), rtol=1e-12)
    # plane-parallel atmosphere: X = sec z within 1% down to z = 60 deg (common practice)
    z = np.radians(90.0 - alt[:3])
    np.testing.assert_allclose(airmass_at(alt[:3] * u.deg), 1.0 / np.cos(z), rtol=1e-2)


def test_sky_brightness_equals_kernel():
    from kncast.forecast import Atmosphere, sky_brightness
    from kncast.forecast.airmass import zenith_from_airmass
    from kncast.forecast.skybright import MoonGeometry, sky_photons

    lam = np.array([4000.0, 5500.0, 8000.0])
    atm = Atmosphere(dark_sky_offset_mag=0.3)
    moon = MoonGeometry(0.7, 40.0, 30.0)
    kernel = sky_photons(lam, zenith_from_airmass(1.4), float(atm.k_mag(5500.0)), moon, 0.3)
    ours = sky_brightness(lam / 10 * u.nm, airmass=1.4, moon=moon_geometry(0.7, 40 * u.deg, 30 * u.deg),
                          atmosphere=atm)
    np.testing.assert_allclose(ours.to_value(u.photon / (u.s * u.cm**2 * u.AA * u.arcsec**2)), kernel, rtol=1e-12)


def test_moon_geometry_converts_angles():
    g = moon_geometry(0.5, np.pi / 2 * u.rad, 1800 * u.arcmin)
    assert g.sep_deg == pytest.approx(90.0) and g.altitude_deg == pytest.approx(30.0) and g.illumination == 0.5


def test_telluric_transmission_equals_kernel():
    from kncast.forecast import telluric_transmission

    model = TelluricModel.load()
    lam = np.array([6870.0, 7600.0, 9400.0, 5000.0])
    np.testing.assert_array_equal(telluric_transmission(lam * u.AA, 1.5, 0.5 * u.cm, model),
                                  model.transmission(lam, 1.5, 5.0))


def test_observing_conditions_converts_and_defaults():
    from kncast.forecast import Atmosphere

    c = observing_conditions(airmass=1.3, seeing=1.5 / 60 * u.arcmin, pwv=0.4 * u.cm)
    assert c.seeing_arcsec == pytest.approx(1.5) and c.pwv_mm == pytest.approx(4.0) and c.airmass == 1.3
    atm = Atmosphere(seeing_arcsec=0.6, pwv_mm=1.2)
    d = observing_conditions(atmosphere=atm)
    assert (d.seeing_arcsec, d.pwv_mm, d.atmosphere) == (0.6, 1.2, atm)
    with pytest.raises(ForecastInputError, match="^seeing:"):
        observing_conditions(seeing=0.8)


# ---------------------------------------------------------------- features, S/N, exposure time

def test_features_at_equals_forecast_features(transient, telescope):
    from kncast.forecast import forecast_features

    setup = telescope.instruments[0].default_setup
    tell = TelluricModel.load()
    ours = features_at(transient, [24, 72] * u.hour, setups=[setup], tellurics=tell, airmass=1.3, pwv=0.4 * u.cm)
    kernel = forecast_features(transient, np.array([1.0, 3.0]), setups=[setup], tellurics=tell, airmass=1.3,
                               pwv_mm=4.0)
    np.testing.assert_allclose(ours.tau, kernel.tau, rtol=1e-12)
    np.testing.assert_allclose(ours.telluric_loss, kernel.telluric_loss, rtol=1e-12)
    assert ours.epoch_rows() == kernel.epoch_rows()


def _kernel_rates(transient, telescope, phase_d, cond, tell, wavelength_A=None, n_samples=2000):
    from kncast.forecast import exposure as ex

    inst = telescope.instruments[0]
    grid = ex.setup_grid(telescope, inst, inst.default_setup, n_samples, wavelength_A=wavelength_A)
    flux = transient.flux_flam(np.array([phase_d]), grid.wavelength_A)[0]
    return ex.rates(flux, grid, cond, tell.transmission(grid.wavelength_A, cond.airmass, cond.pwv_mm))


def test_snr_spectrum_equals_the_exposure_kernels(transient, telescope):
    from kncast.forecast import exposure as ex

    inst = telescope.instruments[0]
    cond = observing_conditions(airmass=1.25, moon=moon_geometry(0.4, 60 * u.deg, 25 * u.deg))
    tell = TelluricModel.load()
    spec = snr_spectrum(transient, 36 * u.hour, 0.5 * u.hour, telescope, inst, n_exp=2, conditions=cond,
                        tellurics=tell, n_samples=400)
    kernel = ex.expose(_kernel_rates(transient, telescope, 1.5, cond, tell, n_samples=400), 1800.0, 2)
    np.testing.assert_array_equal(spec.wavelength.to_value(u.AA), kernel.wavelength_A)
    np.testing.assert_allclose(spec.snr_per_resel, kernel.snr_per_resel, rtol=1e-12)
    np.testing.assert_allclose(spec.sky.to_value(u.electron), kernel.sky_e, rtol=1e-12)
    assert spec.exposure_time.to_value(u.s) == 1800.0 and spec.n_exp == 2
    where = [0.5, 0.81] * u.micron
    at = spec.at(where)
    idx = [np.argmin(abs(kernel.wavelength_A - w)) for w in where.to_value(u.AA)]
    np.testing.assert_allclose(at, kernel.snr_per_resel[idx], rtol=1e-12)


def test_snr_spectrum_at_given_wavelengths(transient, telescope):
    inst = telescope.instruments[0]
    on_grid = snr_spectrum(transient, 2 * u.day, 900 * u.s, telescope, inst, wavelength=[500, 800] * u.nm)
    np.testing.assert_allclose(on_grid.wavelength.to_value(u.AA), [5000.0, 8000.0], rtol=1e-12)
    with pytest.raises(ForecastInputError, match="^exposure_time:"):
        snr_spectrum(transient, 2 * u.day, 900.0, telescope, inst)
    with pytest.raises(ForecastInputError, match="^phase:"):
        snr_spectrum(transient, [1, 2] * u.day, 900 * u.s, telescope, inst)


def test_exposure_time_for_snr_equals_kernel_and_reaches_the_target(transient, telescope):
    from kncast.forecast import DEFAULT_MAX_EXPOSURE_S
    from kncast.forecast import exposure as ex

    inst = telescope.instruments[0]
    cond = observing_conditions(airmass=1.2)
    tell = TelluricModel.load()
    at = np.array([5000.0, 7500.0])
    t, n = exposure_time_for_snr(transient, 3 * u.day, 20, at / 1e4 * u.micron, telescope, inst, conditions=cond,
                                 tellurics=tell)
    kt, kn = ex.time_for_snr(_kernel_rates(transient, telescope, 3.0, cond, tell, at), 20, DEFAULT_MAX_EXPOSURE_S)
    np.testing.assert_allclose(t.to_value(u.s), kt, rtol=1e-12)
    np.testing.assert_array_equal(n, kn)
    one_t, one_n = exposure_time_for_snr(transient, 72 * u.hour, 20, 500 * u.nm, telescope, inst, conditions=cond,
                                         tellurics=tell, max_exposure=30 * u.min)
    assert one_t.to_value(u.s) == pytest.approx(kt[0], rel=1e-12) and isinstance(one_n, int)
    # that time, in that many exposures, gives the target S/N per resolution element there
    back = snr_spectrum(transient, 3 * u.day, one_t, telescope, inst, n_exp=one_n, conditions=cond, tellurics=tell,
                        wavelength=500 * u.nm)
    assert back.snr_per_resel[0] == pytest.approx(20.0, rel=1e-9)


def test_exposure_time_off_the_detector_is_an_error(transient, telescope):
    inst = telescope.instruments[0]
    gap = inst.default_setup.arms[0].gaps_A[0]
    with pytest.raises(ForecastInputError, match="^at = .* not on the detector"):
        exposure_time_for_snr(transient, 2 * u.day, 10, (gap[0] + gap[1]) / 2 * u.AA, telescope, inst)
    with pytest.raises(ForecastInputError, match="^max_exposure:"):
        exposure_time_for_snr(transient, 2 * u.day, 10, 5000 * u.AA, telescope, inst, max_exposure=1800)
