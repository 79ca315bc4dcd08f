"""Re-anchoring the photosphere to measured AB magnitudes (kncast.forecast.anchor): the scaling is exact for
every model, the fit recovers an inverse-square distance change and an imposed colour temperature, and bad
anchors are refused with one line naming the parameter."""
from __future__ import annotations

import json

import astropy.units as u
import numpy as np
import pytest
import speclite.filters
from astropy.modeling.physical_models import BlackBody

from kncast.forecast.anchor import (COLOUR_EPOCH_D, Anchor, ScaledPhotosphere, anchor_transient, has_colour,
                                    parse_anchors)
from kncast.forecast.blackbody import SIGMA_SB_CGS
from kncast.forecast.errors import ForecastInputError, ParameterError
from kncast.forecast.photosphere import EjectaComponent, HeatingPhotosphere, PowerLawPhotosphere, build_model
from kncast.forecast.source import Transient

BANDS = ("bessell-B", "bessell-V", "bessell-R", "bessell-I", "twomass-J", "twomass-H", "twomass-Ks")
PHASES = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 14.0])
D_MPC = 40.0


def _models():
    return [build_model({"name": "powerlaw"}), build_model({"name": "heating"}),
            HeatingPhotosphere((EjectaComponent("a", 0.01, 0.3, 0.5, 4000.0),
                                EjectaComponent("b", 0.02, 0.2, 3.0, 2700.0),
                                EjectaComponent("c", 0.05, 0.1, 10.0, 2000.0)))]


MODEL_IDS = ["powerlaw", "heating", "heating3"]


def test_the_power_law_phases_cover_free_capped_and_floored_epochs():
    # the scaling tests below must see the heating cap and the floor at work (else they prove nothing there)
    model = PowerLawPhotosphere()
    _, _, lum, _ = model.components(PHASES)
    capped = np.isclose(lum[0], model.heating_luminosity(PHASES), rtol=1e-12)
    temp = model.temperature_ref_K * (PHASES / model.t_ref_d) ** -model.temperature_index
    assert capped.any() and (~capped).any()
    assert (temp < model.temperature_floor_K).any()


@pytest.mark.parametrize("model", _models(), ids=MODEL_IDS)
def test_luminosity_scale_shifts_every_magnitude_by_minus_2p5_log_s(model):
    # AB magnitude definition (Oke & Gunn 1983, ApJ 266, 713): m = -2.5 log10(flux integral / AB integral),
    # so multiplying F_lambda by s at fixed temperature shifts every band by exactly -2.5 log10 s
    s = 0.37
    plain = Transient(model, distance_mpc=D_MPC)
    scaled = Transient(ScaledPhotosphere(model, s), distance_mpc=D_MPC)
    a, b = plain.mag_ab(PHASES, BANDS), scaled.mag_ab(PHASES, BANDS)
    for band in BANDS:
        assert np.allclose(b[band] - a[band], -2.5 * np.log10(s), rtol=0, atol=1e-10), band
    wave = np.geomspace(3000.0, 25000.0, 50)
    assert np.allclose(scaled.flux_flam(PHASES, wave), s * plain.flux_flam(PHASES, wave), rtol=1e-10, atol=0)
    sa, sb = plain.state(PHASES), scaled.state(PHASES)
    assert np.allclose(sb.comp_luminosity_erg_s, s * sa.comp_luminosity_erg_s, rtol=1e-12)
    assert np.allclose(sb.comp_temperature_K, sa.comp_temperature_K, rtol=1e-12)


@pytest.mark.parametrize("model", _models(), ids=MODEL_IDS)
def test_temperature_scale_keeps_blackbodies_and_the_matter(model):
    # Stefan-Boltzmann law L = 4 pi R^2 sigma T^4 per component (sigma: CODATA 2018 via astropy) with
    # L' = s L and T' = f T; line-forming velocity, outer velocity and ejecta mass are untouched
    s, f = 1.8, 0.8
    sa = Transient(model, distance_mpc=D_MPC).state(PHASES)
    sb = Transient(ScaledPhotosphere(model, s, f), distance_mpc=D_MPC).state(PHASES)
    assert np.allclose(sb.comp_temperature_K, f * sa.comp_temperature_K, rtol=1e-12)
    assert np.allclose(sb.temperature_K, f * sa.temperature_K, rtol=1e-12)
    assert np.allclose(sb.luminosity_erg_s, s * sa.luminosity_erg_s, rtol=1e-12)
    sb_lum = 4 * np.pi * sb.comp_radius_cm**2 * SIGMA_SB_CGS * sb.comp_temperature_K**4
    assert np.allclose(sb_lum, sb.comp_luminosity_erg_s, rtol=1e-10)
    assert np.array_equal(sb.comp_v_line_c, sa.comp_v_line_c) and np.array_equal(sb.v_max_c, sa.v_max_c)
    assert np.allclose(sb.v_line_c, sa.v_line_c, rtol=1e-12)  # same weights L_i / L (all L_i times s)
    scaled = ScaledPhotosphere(model, s, f)
    assert scaled.ejecta_mass_msun == model.ejecta_mass_msun and scaled.name == model.name
    assert scaled.component_names == model.component_names
    assert scaled.parameters()["anchor"] == {"luminosity_scale": s, "temperature_scale": f}


def _anchors_from(transient, per_epoch_bands):
    """(band, mag, phase) at each of PHASES[:6] for the bands chosen per epoch index."""
    # one call for all epochs: the heating model's diffusion grid includes the requested ages, so its
    # luminosity at an age moves by ~1e-7 with the other ages asked for (kncast.forecast.heating.diffuse)
    mags = transient.mag_ab(PHASES[:6], BANDS)
    return [(b, float(mags[b][i]), float(phase)) for i, phase in enumerate(PHASES[:6]) for b in per_epoch_bands(i)]


ONE_BAND = (lambda i: (BANDS[i % len(BANDS)],))
ALL_BANDS = (lambda i: BANDS)


@pytest.mark.parametrize("bands", [ONE_BAND, ALL_BANDS], ids=["one band per epoch", "all bands per epoch"])
@pytest.mark.parametrize("model", _models()[:2], ids=MODEL_IDS[:2])
def test_anchoring_to_the_same_model_at_1p3_d_recovers_the_inverse_square_scale(model, bands):
    # inverse-square law: at the same redshift, the source at 1.3 D gives (1/1.3)^2 = 1/1.69 of the flux,
    # at every wavelength and epoch; the issue asks for the scale within 1% (measured: ~1e-15)
    near = Transient(model, distance_mpc=D_MPC)
    far = Transient(model, distance_mpc=1.3 * D_MPC, redshift=near.redshift)
    fit = anchor_transient(near, _anchors_from(far, bands))
    assert fit.luminosity_scale == pytest.approx(1.0 / 1.3**2, rel=0.01)
    assert fit.luminosity_scale == pytest.approx(1.0 / 1.3**2, rel=1e-9)
    assert fit.temperature_fitted is (bands is ALL_BANDS)
    assert fit.temperature_scale == pytest.approx(1.0, rel=1e-9)
    assert fit.rms_mag < 1e-8 and fit.at_bound == ()
    assert fit.delta_mag == pytest.approx(5.0 * np.log10(1.3), rel=1e-9)  # 2.5 log10(1.69)


@pytest.mark.parametrize("model", _models()[:2], ids=MODEL_IDS[:2])
def test_anchoring_with_the_redshift_of_each_distance_stays_within_one_percent(model):
    # the test with each distance's own Planck18 redshift (z = 0.009 vs 0.012): besides the
    # inverse-square law (1/1.69), the (1 + z) dimming, bandpass shift and time dilation differ by ~0.3%,
    # which the scale absorbs; the 1% holds (measured: 0.13-0.27%)
    near = Transient(model, distance_mpc=D_MPC)
    far = Transient(model, distance_mpc=1.3 * D_MPC)
    assert far.redshift > near.redshift * 1.25
    for bands in (ONE_BAND, ALL_BANDS):
        fit = anchor_transient(near, _anchors_from(far, bands))
        assert fit.luminosity_scale == pytest.approx(1.0 / 1.3**2, rel=0.01)
        assert fit.rms_mag < 0.01


def _independent_magnitudes(base, s, f, bands, phases):
    """AB magnitudes of base's components at T' = f T, R' = R sqrt(s) / f^2, computed independently:
    Planck law from astropy.modeling's BlackBody and the filter integral from speclite's own
    get_ab_magnitude (not kncast.forecast.blackbody / photometry); F_lambda as in kncast.forecast.source,
    pi B_lambda(lambda / (1 + z)) (R / D_L)^2 / (1 + z)."""
    st = base.state(phases)
    z, dist = base.redshift, base.luminosity_distance_cm
    lam = np.linspace(2500.0, 30000.0, 30000) * u.AA
    flam = u.erg / (u.cm**2 * u.s * u.AA)
    out = []
    for i, band in enumerate(bands):
        flux = np.zeros(lam.size) * flam
        for k in range(st.comp_temperature_K.shape[0]):
            bb = BlackBody(temperature=f * st.comp_temperature_K[k, i] * u.K, scale=1.0 * flam / u.sr)
            radius = st.comp_radius_cm[k, i] * np.sqrt(s) / f**2
            flux = flux + (np.pi * u.sr * bb(lam / (1 + z)) * (radius / dist) ** 2 / (1 + z)).to(flam)
        out.append(float(speclite.filters.load_filter(band).get_ab_magnitude(flux, lam)))
    return out


@pytest.mark.parametrize("model", _models()[:2], ids=MODEL_IDS[:2])
def test_two_bands_at_one_epoch_recover_an_imposed_temperature_factor(model):
    # truth: the model with L x 0.6 and T x 0.85, its magnitudes computed by an independent library
    # (astropy BlackBody + speclite, see _independent_magnitudes); V and J at 2.0 d, R 2.4 h later, I at 4 d
    base = Transient(model, distance_mpc=D_MPC)
    bands, phases = ["bessell-V", "twomass-J", "bessell-R", "bessell-I"], np.array([2.0, 2.0, 2.1, 4.0])
    mags = _independent_magnitudes(base, 0.6, 0.85, bands, phases)
    fit = anchor_transient(base, list(zip(bands, mags, phases)))
    assert fit.temperature_fitted
    # speclite's filter curves against kncast's resampled ones differ by < 1e-3 mag (measured 8e-4)
    assert fit.temperature_scale == pytest.approx(0.85, rel=1e-3)
    assert fit.luminosity_scale == pytest.approx(0.6, rel=1e-3)
    assert fit.rms_mag < 2e-3 and np.all(np.abs(fit.residual_mag) < 2e-3)
    # without the colour fit the temperature error leaves residuals far above the photometric accuracy
    lum_only = anchor_transient(base, list(zip(bands, mags, phases)), fit_temperature=False)
    assert lum_only.temperature_scale == 1.0 and lum_only.rms_mag > 0.05


def test_fit_summary_matches_the_returned_transient_and_serializes():
    model = PowerLawPhotosphere()
    near = Transient(model, distance_mpc=D_MPC, ebv_mw=0.1)
    rows = [("bessell-V", 19.0, 1.2), ("twomass-J", 18.6, 1.25), ("bessell-I", 19.9, 3.0)]
    fit = anchor_transient(near, rows)
    again = [float(fit.transient.mag_ab([p], (b,))[b][0]) for b, _, p in rows]
    assert np.allclose(fit.model_mag, again, rtol=0, atol=1e-12)
    assert np.allclose(fit.residual_mag, [m for _, m, _ in rows] - fit.model_mag, atol=1e-12)
    assert fit.rms_mag == pytest.approx(float(np.sqrt(np.mean(fit.residual_mag**2))))
    assert fit.n_anchors == 3 and fit.anchors[0] == Anchor("bessell-V", 19.0, 1.2)
    prior = [float(near.mag_ab([p], (b,))[b][0]) for b, _, p in rows]
    assert np.allclose(fit.prior_mag, prior, atol=1e-12)
    tr = fit.transient
    assert (tr.distance_mpc, tr.redshift, tr.ebv_mw, tr.ebv_host) == (near.distance_mpc, near.redshift, 0.1, 0.0)
    doc = json.loads(json.dumps(fit.to_dict()))
    assert doc["n_anchors"] == 3 and len(doc["anchors"]) == 3 and doc["temperature_fitted"] is True
    assert set(doc["anchors"][0]) == {"band", "phase_d", "mag_ab", "prior_mag_ab", "model_mag_ab", "residual_mag"}


def test_re_anchoring_an_anchored_transient_combines_the_scales():
    # the second fit is relative to the first; the photosphere is not wrapped twice
    model = PowerLawPhotosphere()
    near = Transient(model, distance_mpc=D_MPC)
    first = anchor_transient(near, _anchors_from(Transient(model, distance_mpc=1.3 * D_MPC, redshift=near.redshift),
                                                 ONE_BAND))
    second = anchor_transient(first.transient, _anchors_from(
        Transient(model, distance_mpc=2.0 * D_MPC, redshift=near.redshift), ONE_BAND))
    # inverse-square law: from 1.3 D to 2 D is (1.3 / 2)^2; overall (1 / 2)^2
    assert second.luminosity_scale == pytest.approx((1.3 / 2.0) ** 2, rel=1e-9)
    ph = second.transient.photosphere
    assert ph.base is model and ph.luminosity_scale == pytest.approx(0.25, rel=1e-9)


def test_anchors_accept_quantities_and_colour_needs_two_bands_within_the_window():
    rows = parse_anchors([("bessell-V", 19.0 * u.ABmag, 36 * u.hour), Anchor("bessell-R", 18.8, 1.5)])
    assert rows[0] == Anchor("bessell-V", 19.0, 1.5)
    assert has_colour(rows)
    assert not has_colour(parse_anchors([("bessell-V", 19.0, 1.0), ("bessell-V", 19.1, 1.1)]))
    assert not has_colour(parse_anchors([("bessell-V", 19.0, 1.0), ("bessell-R", 19.1, 1.0 + 2 * COLOUR_EPOCH_D)]))


BAD_ANCHORS = [
    ([], "empty"),
    ("bessell-V=19@1", "expected a list"),
    ([("bessell-V", 19.0)], "anchors 1 of 1: expected (band, mag_ab, phase)"),
    ([("bessell-V", 19.0, 1.0), ("johnson-Q", 19.0, 1.0)], "anchors 2 of 2: band 'johnson-Q' unknown"),
    ([(7, 19.0, 1.0)], "band 7 unknown"),
    ([("bessell-V", float("nan"), 1.0)], "mag_ab = nan: allowed [0, 40] AB mag"),
    ([("bessell-V", float("inf"), 1.0)], "mag_ab = inf"),
    ([("bessell-V", -0.5, 1.0)], "mag_ab = -0.5"),
    ([("bessell-V", 40.5, 1.0)], "mag_ab = 40.5"),
    ([("bessell-V", "19", 1.0)], "mag_ab = '19': expected a number"),
    ([("bessell-V", 19.0, 0.0)], "phase = 0 d: allowed (0, inf) d"),
    ([("bessell-V", 19.0, -2.0)], "phase = -2 d"),
    ([("bessell-V", 19.0, float("nan"))], "phase = nan d"),
    ([("bessell-V", 19.0, 3 * u.m)], "phase unit m is not d"),
]


@pytest.mark.parametrize("anchors, expected", BAD_ANCHORS, ids=[m for _, m in BAD_ANCHORS])
def test_bad_anchors_give_one_line_naming_the_parameter(anchors, expected):
    near = Transient(PowerLawPhotosphere(), distance_mpc=D_MPC)
    with pytest.raises(ParameterError) as err:
        anchor_transient(near, anchors)
    text = str(err.value)
    assert expected in text and "\n" not in text and text.startswith("anchors")
    assert isinstance(err.value, ForecastInputError) and err.value.parameter == "anchors"
    shown = err.value.renamed({"anchors": "--anchor"})
    assert shown.startswith("--anchor") and "{" not in shown


def test_other_refusals_are_one_line():
    near = Transient(PowerLawPhotosphere(), distance_mpc=D_MPC)
    with pytest.raises(ParameterError, match=r"^fit_temperature: needs two different bands") as err:
        anchor_transient(near, [("bessell-V", 19.0, 1.0), ("bessell-R", 19.0, 3.0)], fit_temperature=True)
    assert "\n" not in str(err.value)
    with pytest.raises(ParameterError, match=r"^transient: expected a kncast.forecast.Transient"):
        anchor_transient(PowerLawPhotosphere(), [("bessell-V", 19.0, 1.0)])
    with pytest.raises(ParameterError, match=r"^luminosity_scale 0: allowed"):
        ScaledPhotosphere(PowerLawPhotosphere(), 0)
    with pytest.raises(ParameterError, match=r"^temperature_scale nan: allowed"):
        ScaledPhotosphere(PowerLawPhotosphere(), 1.0, float("nan"))


def test_a_scale_beyond_its_bound_is_reported():
    # more than 10 mag fainter than the model: the scale stops at its bound (1e-4, i.e. 10 mag) and says so
    near = Transient(PowerLawPhotosphere(), distance_mpc=D_MPC)
    assert float(near.mag_ab([1.0], ("bessell-V",))["bessell-V"][0]) < 30.0
    fit = anchor_transient(near, [("bessell-V", 40.0, 1.0)])
    assert fit.at_bound == ("luminosity_scale",) and fit.luminosity_scale == pytest.approx(1e-4)
