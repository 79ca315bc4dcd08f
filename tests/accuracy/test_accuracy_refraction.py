"""Atmospheric differential refraction against outside references.

* Filippenko (1982, PASP 94, 715), Table 1: ADR relative to 5000 A for a ~2 km site
  (P = 600 mm Hg, T = 7 C, f = 8 mm Hg) versus sec z.  Values read from a public
  reproduction of the table (secondary copy, printed to 0.01 arcsec), not from the paper.
* astropy's ``AltAz`` frame with pressure, temperature, relative humidity and ``obswl``
  (ERFA's ``refco``/``atioq``: an independent refractivity formula and the A tan z + B tan^3 z
  model): the apparent-altitude difference of one star at two wavelengths.
* The IAU standard refractive index of standard air (Birch & Downs form, Morton 2000,
  ApJS 130, 403, eq. 3) in kncast.forecast.airvac.
* Scaling laws of the formula itself (tan z, blue grows, reference gives zero).
"""
from __future__ import annotations

import numpy as np
import pytest

import kncast.planner  # noqa: F401  (offline astropy/IERS set-up before any AltAz transform)
from kncast.forecast.airvac import refractive_index_air
from kncast.forecast.errors import ForecastInputError
from kncast.forecast.extinction_atm import pressure_from_elevation_hpa
from kncast.forecast.refraction import (ADVICE_PARALLACTIC, HPA_PER_MMHG, SLIT_ADR_FRACTION,
                                        differential_refraction_arcsec, refractive_index_minus_one,
                                        saturation_vapour_pressure_hpa, slit_advice, typical_conditions)

# Filippenko (1982) Table 1 conditions, as published (f = 8 mm Hg is slightly above saturation at 7 C)
TABLE_P_HPA, TABLE_T_C, TABLE_F_HPA = 600.0 * HPA_PER_MMHG, 7.0, 8.0 * HPA_PER_MMHG
TABLE_REF_A = 5000.0
TABLE_TOL_ARCSEC = 0.05  # the tolerance
ROUNDING_ARCSEC = 0.006  # the table is printed to 0.01 arcsec: half a unit plus float margin

# Filippenko (1982) Table 1, secondary public reproduction: sec z -> ADR (arcsec) at the wavelengths.
# Omitted: that copy's rows printed as 2.00 and 2.05 (a row label is missing between 1.90 and 2.10, so
# their airmasses are uncertain) and its 1.30 / 8000 A entry (-0.66 between -0.50 and -0.59: a misprint).
TABLE_BLUE_A = (3000.0, 3500.0, 4000.0, 4500.0, 5500.0, 6000.0, 6500.0)
TABLE_BLUE = {
    1.05: (0.68, 0.38, 0.20, 0.08, -0.06, -0.11, -0.14),
    1.20: (1.40, 0.80, 0.42, 0.17, -0.13, -0.22, -0.30),
    1.50: (2.37, 1.34, 0.71, 0.29, -0.21, -0.37, -0.50),
    1.80: (3.17, 1.80, 0.95, 0.39, -0.29, -0.50, -0.67),
    2.10: (3.91, 2.22, 1.18, 0.48, -0.35, -0.62, -0.82),
    2.40: (4.62, 2.62, 1.39, 0.57, -0.42, -0.73, -0.97),
}
TABLE_RED_A = (7000.0, 7500.0, 8000.0, 8500.0, 9000.0, 9500.0, 10000.0)
TABLE_RED = {
    1.05: (-0.17, -0.19, -0.21, -0.23, -0.24, -0.25, -0.26),
    1.20: (-0.35, -0.40, -0.44, -0.47, -0.50, -0.52, -0.54),
    1.40: (-0.52, -0.59, -0.65, -0.69, -0.73, -0.77, -0.79),
    1.50: (-0.60, -0.68, -0.74, -0.79, -0.84, -0.87, -0.91),
}


def _table_cases():
    for table, waves in ((TABLE_BLUE, TABLE_BLUE_A), (TABLE_RED, TABLE_RED_A)):
        for sec_z, row in table.items():
            yield sec_z, np.array(waves), np.array(row)


@pytest.mark.parametrize("sec_z, waves, published", list(_table_cases()))
def test_filippenko_table_1(sec_z, waves, published):
    zenith = np.degrees(np.arccos(1.0 / sec_z))  # the table's airmass is sec z
    ours = differential_refraction_arcsec(waves, TABLE_REF_A, zenith, TABLE_P_HPA, TABLE_T_C, TABLE_F_HPA)
    err = np.abs(ours - published)
    assert err.max() <= TABLE_TOL_ARCSEC, (sec_z, err)
    assert err.max() <= ROUNDING_ARCSEC, (sec_z, err)  # eqs. 1-3 reproduce the printed digits


def test_standard_air_matches_the_iau_standard():
    # Morton (2000) eq. 3 (Birch & Downs 1994) at 15 C, 101325 Pa, dry: Edlen's 1953 coefficients give
    # n - 1 lower by 2e-5 to 8e-5 of itself (CO2 450 vs 300 ppm and the 1994 re-fit); the dispersion
    # 3500-10000 A agrees within 0.5%.
    waves = np.linspace(3500.0, 10000.0, 27)
    ours = refractive_index_minus_one(waves, 1013.25, 15.0, 0.0)
    iau = refractive_index_air(waves) - 1.0
    assert np.abs(ours / iau - 1.0).max() < 1e-4
    assert abs((ours[0] - ours[-1]) / (iau[0] - iau[-1]) - 1.0) < 5e-3


# ------------------------------------------------------------------ astropy / ERFA
# Tolerance 3% of the ADR, from the budget of known model differences (measured maximum 2.4%, at sea
# level, relative humidity 0.8, sec z 2.5, 3500 A):
#   refco's refractivity disperses 1.1% less than Edlen's between 3500 and 5000 A (dry), and its
#   water term has no dispersion (another 0.3-0.5% in humid air);
#   its tan^3 z term lowers the ADR by 0.1% tan^2 z (0.5% at sec z 2.5) and (1 - beta) by 0.1%;
#   astropy refracts at the observed zenith distance, 0.2% smaller tan z at sec z 2.5.
ERFA_REL_TOL = 0.03
CONDITIONS = [  # (pressure hPa, temperature C, relative humidity)
    (800.0, 7.0, 0.0),
    (780.0, 10.0, 0.5),
    (620.0, 0.0, 0.3),
    (1013.25, 15.0, 0.8),
]
ALTITUDES_DEG = np.array([70.0, 56.4, 41.8, 30.0, 23.6])  # sec z 1.06 to 2.5
ERFA_WAVES_A = (3500.0, 4000.0, 6000.0, 8000.0, 10000.0)


@pytest.fixture(scope="module")
def stars():
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    loc = EarthLocation.from_geodetic(-70.0 * u.deg, -30.0 * u.deg, 2200.0 * u.m)
    t = Time("2027-03-14T04:00:00", scale="utc")
    frame = AltAz(obstime=t, location=loc)
    icrs = SkyCoord(AltAz(alt=ALTITUDES_DEG * u.deg, az=np.full(ALTITUDES_DEG.size, 100.0) * u.deg,
                          obstime=t, location=loc)).icrs
    zenith = 90.0 - icrs.transform_to(frame).alt.deg  # geometric (no refraction)
    return icrs, loc, t, zenith


def _apparent_alt_deg(icrs, loc, t, pressure_hpa, temperature_C, rh, wavelength_A):
    import astropy.units as u
    from astropy.coordinates import AltAz

    frame = AltAz(obstime=t, location=loc, pressure=pressure_hpa * u.hPa, temperature=temperature_C * u.deg_C,
                  relative_humidity=rh, obswl=wavelength_A * 1e-4 * u.micron)
    return icrs.transform_to(frame).alt.deg


@pytest.mark.parametrize("pressure, temperature, rh", CONDITIONS)
def test_adr_against_astropy_altaz(stars, pressure, temperature, rh):
    icrs, loc, t, zenith = stars
    vapour = rh * saturation_vapour_pressure_hpa(temperature)  # ERFA's own saturation formula differs by < 0.5%
    ref_alt = _apparent_alt_deg(icrs, loc, t, pressure, temperature, rh, TABLE_REF_A)
    for wave in ERFA_WAVES_A:
        erfa_adr = (_apparent_alt_deg(icrs, loc, t, pressure, temperature, rh, wave) - ref_alt) * 3600.0
        ours = differential_refraction_arcsec(wave, TABLE_REF_A, zenith, pressure, temperature, vapour)
        assert np.all(np.sign(ours) == np.sign(erfa_adr)), wave
        rel = np.abs(ours - erfa_adr) / np.abs(erfa_adr)
        assert rel.max() < ERFA_REL_TOL, (wave, rel)


# ------------------------------------------------------------------ scaling laws of the formula
def test_adr_scales_as_tan_z_and_vanishes_at_the_zenith_and_reference():
    z = np.array([0.0, 20.0, 45.0, 60.0, 70.0])
    adr = differential_refraction_arcsec(4000.0, 6000.0, z, 780.0, 10.0, 5.0)
    assert adr[0] == 0.0
    np.testing.assert_allclose(adr[1:] / np.tan(np.radians(z[1:])), adr[2] / np.tan(np.radians(45.0)), rtol=1e-12)
    assert differential_refraction_arcsec(6000.0, 6000.0, 45.0, 780.0, 10.0, 5.0) == 0.0
    assert np.isnan(differential_refraction_arcsec(4000.0, 6000.0, 95.0, 780.0, 10.0, 5.0))


def test_adr_grows_to_the_blue_and_is_antisymmetric_and_additive():
    waves = np.linspace(3200.0, 10000.0, 69)
    adr = differential_refraction_arcsec(waves, 5000.0, 50.0, 780.0, 10.0, 5.0)
    assert np.all(np.diff(adr) < 0)  # bluer light is refracted more
    assert np.all(np.diff(np.diff(adr)) > 0)  # and the dispersion steepens to the blue
    args = (50.0, 780.0, 10.0, 5.0)
    ab = differential_refraction_arcsec(3500.0, 7000.0, *args)
    assert ab > 0 and ab == pytest.approx(-differential_refraction_arcsec(7000.0, 3500.0, *args), rel=1e-12)
    assert ab == pytest.approx(differential_refraction_arcsec(3500.0, 5000.0, *args)
                               + differential_refraction_arcsec(5000.0, 7000.0, *args), rel=1e-12)


def test_adr_follows_the_air_density():
    # Filippenko eq. 2: n - 1 nearly proportional to P / (1 + 0.003661 T).  Eq. 3: water vapour lowers
    # n - 1 at every wavelength but less in the blue (its -0.000680 sigma^2 term), so the ADR grows a little.
    base = differential_refraction_arcsec(3500.0, 9000.0, 60.0, 800.0, 10.0, 0.0)
    assert differential_refraction_arcsec(3500.0, 9000.0, 60.0, 600.0, 10.0, 0.0) / base == pytest.approx(0.75,
                                                                                                        rel=2e-4)
    warm = differential_refraction_arcsec(3500.0, 9000.0, 60.0, 800.0, 20.0, 0.0) / base
    assert warm == pytest.approx((1 + 0.003661 * 10.0) / (1 + 0.003661 * 20.0), rel=1e-4)
    wet = differential_refraction_arcsec(3500.0, 9000.0, 60.0, 800.0, 10.0, 10.0) / base
    assert 1.0 < wet < 1.005
    assert np.all(refractive_index_minus_one([3500.0, 9000.0], 800.0, 10.0, 10.0)
                  < refractive_index_minus_one([3500.0, 9000.0], 800.0, 10.0, 0.0))


# ------------------------------------------------------------------ site defaults and advice
def test_typical_conditions_follow_the_standard_atmosphere():
    sea = typical_conditions(0.0)
    assert (sea.pressure_hpa, sea.temperature_C) == (1013.25, 15.0)  # ISO 2533 sea level
    high = typical_conditions(np.array([2000.0, 4200.0]))
    np.testing.assert_allclose(high.pressure_hpa, pressure_from_elevation_hpa([2000.0, 4200.0]))
    np.testing.assert_allclose(high.temperature_C, [2.0, -12.3])  # lapse rate 6.5 K/km (ISO 2533)
    np.testing.assert_allclose(high.water_vapour_hpa, 0.5 * saturation_vapour_pressure_hpa([2.0, -12.3]))
    # saturation pressure of water at 20 C: 23.39 hPa (CRC Handbook of Chemistry and Physics; from memory)
    assert saturation_vapour_pressure_hpa(20.0) == pytest.approx(23.39, rel=5e-3)


def test_slit_advice_threshold_is_half_the_slit_width():
    assert SLIT_ADR_FRACTION == 0.5  # common practice
    assert slit_advice(0.51, 1.0) == ADVICE_PARALLACTIC
    assert slit_advice(-0.6, 1.0) == ADVICE_PARALLACTIC  # the sign of the ADR does not matter
    assert slit_advice(0.49, 1.0) != ADVICE_PARALLACTIC and "0.5" in slit_advice(0.49, 1.0)
    assert slit_advice(0.3, 1.0, fraction=0.25) == ADVICE_PARALLACTIC
    words = slit_advice(np.array([0.2, 0.8, np.nan]), np.array([1.0, 1.0, 1.0]))
    assert list(words == ADVICE_PARALLACTIC) == [False, True, False]
    with pytest.raises(ForecastInputError, match="slit width"):
        slit_advice(0.5, 0.0)


def test_bad_inputs_name_the_parameter():
    with pytest.raises(ForecastInputError, match="wavelength"):
        refractive_index_minus_one(500.0, 780.0, 10.0, 5.0)
    with pytest.raises(ForecastInputError, match="pressure"):
        refractive_index_minus_one(5000.0, -1.0, 10.0, 5.0)
