"""Atmospheric differential refraction (ADR) and the slit-angle advice it implies.

Refractive index of moist air, Filippenko (1982, PASP 94, 715), eqs. 1-3, with
sigma = 1 / lambda in micron^-1, pressure P and water-vapour partial pressure f
in mm Hg, temperature T in C:

    eq. 1  (n_s - 1) 1e6 = 64.328 + 29498.1 / (146 - sigma^2) + 255.4 / (41 - sigma^2)
           (dry air at 15 C and 760 mm Hg: Edlen's 1953 dispersion formula,
           J. Opt. Soc. Am. 43, 339; Edlen's 1966 revision, Metrologia 2, 71, has
           different coefficients and is not what Filippenko used);
    eq. 2  (n_TP - 1) = (n_s - 1) P [1 + (1.049 - 0.0157 T) 1e-6 P] / [720.883 (1 + 0.003661 T)];
    eq. 3  water vapour lowers (n - 1) 1e6 by (0.0624 - 0.000680 sigma^2) f / (1 + 0.003661 T).

The differential refraction of wavelength lambda relative to lambda_ref at
zenith distance z (plane-parallel atmosphere, as in Filippenko 1982):

    Delta R = 206265 [n(lambda) - n(lambda_ref)] tan z   arcsec,

positive when lambda's image sits higher (towards the zenith) than the
reference's: blue light is refracted more.  The tan z law leaves out the
tan^3 z term of a curved atmosphere (ERFA's refco puts it at -0.1% tan^2 z of
the tan z term: -0.5% at airmass 2.5); beyond zenith distance 75 deg it
overestimates (common practice).

Wavelengths are vacuum Angstrom, as everywhere in kncast: Edlen's sigma is the
vacuum wavenumber, so no conversion is needed.  Reading them as air
wavelengths instead would change the ADR by < 0.003 arcsec at airmass 2
across 3000-10000 A.  Pressures are taken in hPa (1 mm Hg = 1.33322 hPa).

Typical site conditions (:func:`typical_conditions`, common practice): the
pressure from the site's elevation (barometric formula of
:mod:`kncast.forecast.extinction_atm`), the temperature of the standard
atmosphere (15 C at sea level, lapse rate 6.5 K/km, ISO 2533) and relative
humidity 50% with the saturation pressure of the Magnus formula
e_s = 6.112 hPa exp(17.62 T / (243.12 C + T)) (coefficients of the WMO guide
to meteorological instruments, from memory).  The ADR scales as roughly
P / T(K): a night 10 K warmer than the standard atmosphere lowers it by about
3.5%; the water term changes it by < 0.5% for f below 10 hPa.

Slit advice (common practice): a slit not at the parallactic angle loses
light unevenly along the spectrum once the ADR across the setup exceeds about
half the slit width (:data:`SLIT_ADR_FRACTION`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.errors import check_range
from kncast.forecast.extinction_atm import pressure_from_elevation_hpa
from kncast.forecast.references import EDLEN_1953, FILIPPENKO_1982

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (FILIPPENKO_1982, EDLEN_1953)

__all__ = ["AirConditions", "typical_conditions", "saturation_vapour_pressure_hpa", "refractive_index_minus_one",
           "differential_refraction_arcsec", "slit_advice", "SLIT_ADR_FRACTION", "ADVICE_PARALLACTIC"]

HPA_PER_MMHG = 1.01325e3 / 760.0  # 1 mm Hg = 101325 Pa / 760 (definition)
ARCSEC_PER_RAD = np.degrees(1.0) * 3600.0
SEA_LEVEL_TEMPERATURE_C = 15.0   # standard atmosphere (ISO 2533)
LAPSE_RATE_K_PER_M = 0.0065      # standard atmosphere (ISO 2533)
TYPICAL_RELATIVE_HUMIDITY = 0.5  # common practice
SLIT_ADR_FRACTION = 0.5          # ADR above this fraction of the slit width: align the slit (common practice)
ADVICE_PARALLACTIC = "set the slit at the parallactic angle"
ADVICE_FREE = "any slit angle: ADR below {fraction:g} of the slit width"

_T_COEFF = 0.003661  # thermal expansion of air per C (Filippenko eqs. 2-3)


@dataclass(frozen=True)
class AirConditions:
    """Air at the telescope: pressure (hPa), temperature (C), water-vapour partial pressure (hPa)."""

    pressure_hpa: float
    temperature_C: float
    water_vapour_hpa: float


def saturation_vapour_pressure_hpa(temperature_C):
    """Saturation vapour pressure over water (hPa) at ``temperature_C`` (C), Magnus formula (see module doc)."""
    t = np.asarray(temperature_C, dtype=float)
    return 6.112 * np.exp(17.62 * t / (243.12 + t))


def typical_conditions(elevation_m, relative_humidity: float = TYPICAL_RELATIVE_HUMIDITY) -> AirConditions:
    """Night-time air at a site of ``elevation_m`` (m) when nothing is measured (common practice, module doc)."""
    check_range("relative humidity", relative_humidity, 0.0, 1.0)
    temperature = SEA_LEVEL_TEMPERATURE_C - LAPSE_RATE_K_PER_M * np.asarray(elevation_m, dtype=float)
    vapour = relative_humidity * saturation_vapour_pressure_hpa(temperature)
    return AirConditions(_plain(pressure_from_elevation_hpa(elevation_m)), _plain(temperature), _plain(vapour))


def _plain(a):
    """A float for a 0-d result, else the array."""
    return float(a) if np.ndim(a) == 0 else np.asarray(a)


def refractive_index_minus_one(wavelength_A, pressure_hpa, temperature_C, water_vapour_hpa):
    """n - 1 of moist air at vacuum ``wavelength_A`` (A), Filippenko (1982) eqs. 1-3; inputs broadcast."""
    lam = np.asarray(check_range("wavelength", wavelength_A, 2000.0, 25000.0, unit=" A"), dtype=float)
    p_mmhg = np.asarray(check_range("pressure", pressure_hpa, 0.0, 1100.0, unit=" hPa"), dtype=float) / HPA_PER_MMHG
    t = np.asarray(check_range("temperature", temperature_C, -60.0, 50.0, unit=" C"), dtype=float)
    f_mmhg = np.asarray(check_range("water vapour pressure", water_vapour_hpa, 0.0, 100.0, unit=" hPa"),
                        dtype=float) / HPA_PER_MMHG
    s2 = (1e4 / lam) ** 2
    dry_standard = 64.328 + 29498.1 / (146.0 - s2) + 255.4 / (41.0 - s2)            # eq. 1, x 1e6
    density = p_mmhg * (1.0 + (1.049 - 0.0157 * t) * 1e-6 * p_mmhg) / (720.883 * (1.0 + _T_COEFF * t))  # eq. 2
    water = (0.0624 - 0.000680 * s2) * f_mmhg / (1.0 + _T_COEFF * t)                # eq. 3, x 1e6
    return (dry_standard * density - water) * 1e-6


def differential_refraction_arcsec(wavelength_A, reference_A, zenith_deg, pressure_hpa, temperature_C,
                                   water_vapour_hpa):
    """Refraction at ``wavelength_A`` minus that at ``reference_A`` (vacuum A), arcsec, at ``zenith_deg``.

    206265 [n(lambda) - n(ref)] tan z (Filippenko 1982); positive = displaced towards the zenith.
    All inputs broadcast; zenith distances outside [0, 90) deg give NaN.  For an airmass X use
    :func:`kncast.forecast.airmass.zenith_from_airmass` (Filippenko's table is in sec z = X).
    """
    dn = (refractive_index_minus_one(wavelength_A, pressure_hpa, temperature_C, water_vapour_hpa)
          - refractive_index_minus_one(reference_A, pressure_hpa, temperature_C, water_vapour_hpa))
    z = np.asarray(zenith_deg, dtype=float)
    with np.errstate(invalid="ignore"):
        tan_z = np.where((z >= 0.0) & (z < 90.0), np.tan(np.radians(z)), np.nan)
    out = ARCSEC_PER_RAD * dn * tan_z
    return out if np.ndim(out) else float(out)


def slit_advice(adr_arcsec, slit_width_arcsec, fraction: float = SLIT_ADR_FRACTION):
    """Advice words for a slit: :data:`ADVICE_PARALLACTIC` when |ADR| across the setup (arcsec) exceeds
    ``fraction`` of ``slit_width_arcsec`` (arcsec), else that the slit angle is free (common practice).

    Vectorized: array inputs give an array of strings.  NaN ADR (target below the horizon) counts as small.
    """
    width = np.asarray(check_range("slit width", slit_width_arcsec, 0.0, low_open=True, unit=" arcsec"), dtype=float)
    check_range("ADR fraction of the slit width", fraction, 0.0, 10.0, low_open=True)
    with np.errstate(invalid="ignore"):
        align = np.abs(np.asarray(adr_arcsec, dtype=float)) > fraction * width
    out = np.where(align, ADVICE_PARALLACTIC, ADVICE_FREE.format(fraction=fraction))
    return out if out.ndim else str(out)
