"""Atmospheric extinction coefficient k(lambda) in mag per airmass.

k = k_Rayleigh + k_aerosol + k_ozone, each from an optical depth tau via
k = 2.5 log10(e) tau = 1.0857 tau.

* Rayleigh: Hansen & Travis (1974, Space Sci. Rev. 16, 527), eq. (2.30), for
  standard sea-level pressure (1013.25 hPa), lambda in micron:
      tau_R = 0.008569 lambda^-4 (1 + 0.0113 lambda^-2 + 0.00013 lambda^-4),
  scaled by P / P0.  Without a measured pressure the site's pressure comes from
  the barometric formula P = P0 exp(-h / H) with H = 8 km (common practice).
* Aerosol: power law k_aer = k0 (lambda / 5500 A)^-alpha (Angstrom law);
  defaults k0 = 0.03 mag/airmass, alpha = 1.3 for a dry high site (common practice).
* Ozone: column N (Dobson units, 1 DU = 2.687e16 molecule cm^-2) times the
  absorption cross-section.  The Chappuis band is approximated by a Gaussian
  in wavenumber peaking at 5.1e-21 cm^2 near 602 nm, with half-widths chosen
  to give about 1.6e-21 cm^2 at 500 nm and 0.9e-21 cm^2 at 700 nm; the Huggins
  band rise below 360 nm as log10 sigma = -18.4 - (lambda_nm - 300) / 20
  (room-temperature laboratory values as recalled from memory, e.g. the
  compilations of Burrows et al. 1999, JQSRT 61, 509; good to ~20%).

Site overrides come from the optional ``[atmosphere]`` table of a site file
(schema: :data:`ATMOSPHERE_FIELDS`; validated by :func:`atmosphere_from_table`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.datafiles import check_keys, field
from kncast.forecast.errors import DataFileError, check_range
from kncast.forecast.references import BURROWS_1999, HANSEN_TRAVIS_1974

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (HANSEN_TRAVIS_1974, BURROWS_1999)

P0_HPA = 1013.25          # standard sea-level pressure (ISO 2533)
SCALE_HEIGHT_M = 8000.0   # barometric scale height (common practice)
MAG_PER_TAU = 2.5 / np.log(10.0)
DOBSON_CM2 = 2.6867e16    # molecules cm^-2 per Dobson unit (Loschmidt number x 10 micron)

# Chappuis band, Gaussian in wavenumber (cm^-1): centre, peak, blue and red FWHM (from memory, see module doc)
_CHAPPUIS_CENTRE, _CHAPPUIS_PEAK = 1e7 / 602.0, 5.1e-21
_CHAPPUIS_FWHM_BLUE, _CHAPPUIS_FWHM_RED = 5230.0, 2950.0

# [atmosphere] table: key -> (low, high, unit, meaning)
ATMOSPHERE_FIELDS = {
    "pressure_hpa": (300.0, 1100.0, "hPa", "mean site pressure (default: barometric formula from elevation)"),
    "aerosol_k5500": (0.0, 1.0, "mag/airmass", "aerosol extinction at 5500 A"),
    "aerosol_exponent": (0.0, 4.0, "", "Angstrom exponent alpha"),
    "ozone_du": (100.0, 600.0, "DU", "ozone column"),
    "seeing_arcsec": (0.2, 5.0, "arcsec", "median zenith seeing FWHM at 5000 A"),
    "pwv_mm": (0.0, 30.0, "mm", "median precipitable water vapour"),
    "dark_sky_offset_mag": (-3.0, 3.0, "mag/arcsec^2", "added to every dark-sky band value (negative = brighter)"),
}


@dataclass(frozen=True)
class Atmosphere:
    """Extinction parameters for one site; see module docstring for the model."""

    pressure_hpa: float = P0_HPA
    aerosol_k5500: float = 0.03
    aerosol_exponent: float = 1.3
    ozone_du: float = 300.0
    seeing_arcsec: float = 0.8
    pwv_mm: float = 2.5
    dark_sky_offset_mag: float = 0.0
    source: str = "defaults (common practice)"

    def k_mag(self, wavelength_A):
        """Total extinction coefficient (mag/airmass) at vacuum ``wavelength_A``."""
        return extinction_k_mag(wavelength_A, self.pressure_hpa, self.aerosol_k5500,
                                self.aerosol_exponent, self.ozone_du)


def pressure_from_elevation_hpa(elevation_m):
    """Barometric estimate P0 exp(-h / 8 km) in hPa (common practice)."""
    return P0_HPA * np.exp(-np.asarray(elevation_m, dtype=float) / SCALE_HEIGHT_M)


def rayleigh_tau(wavelength_A, pressure_hpa=P0_HPA):
    """Rayleigh optical depth, Hansen & Travis (1974) eq. (2.30), scaled by pressure."""
    lam = np.asarray(wavelength_A, dtype=float) * 1e-4  # micron
    inv2 = lam ** -2
    return 0.008569 * inv2 ** 2 * (1.0 + 0.0113 * inv2 + 0.00013 * inv2 ** 2) * (pressure_hpa / P0_HPA)


def aerosol_k_mag(wavelength_A, k5500=0.03, exponent=1.3):
    """Aerosol extinction k0 (lambda / 5500 A)^-alpha in mag/airmass (Angstrom power law)."""
    return k5500 * (np.asarray(wavelength_A, dtype=float) / 5500.0) ** (-exponent)


def ozone_cross_section_cm2(wavelength_A):
    """Approximate O3 absorption cross-section (cm^2 per molecule): Chappuis + Huggins (module doc)."""
    lam = np.asarray(wavelength_A, dtype=float)
    nu = 1e8 / lam  # cm^-1
    width = np.where(nu > _CHAPPUIS_CENTRE, _CHAPPUIS_FWHM_BLUE, _CHAPPUIS_FWHM_RED)
    chappuis = _CHAPPUIS_PEAK * np.exp(-4.0 * np.log(2.0) * ((nu - _CHAPPUIS_CENTRE) / width) ** 2)
    huggins = np.where(lam < 3600.0, 10.0 ** (-18.4 - (lam / 10.0 - 300.0) / 20.0), 0.0)
    return chappuis + huggins


def ozone_k_mag(wavelength_A, ozone_du=300.0):
    """Ozone extinction (mag/airmass) for a column of ``ozone_du`` Dobson units."""
    return MAG_PER_TAU * ozone_du * DOBSON_CM2 * ozone_cross_section_cm2(wavelength_A)


def extinction_k_mag(wavelength_A, pressure_hpa=P0_HPA, aerosol_k5500=0.03, aerosol_exponent=1.3, ozone_du=300.0):
    """Total extinction coefficient k(lambda), mag per airmass, at vacuum ``wavelength_A``."""
    check_range("wavelength_A", wavelength_A, 1000.0, 60000.0, unit=" A")
    return (MAG_PER_TAU * rayleigh_tau(wavelength_A, pressure_hpa)
            + aerosol_k_mag(wavelength_A, aerosol_k5500, aerosol_exponent)
            + ozone_k_mag(wavelength_A, ozone_du))


def transmission(wavelength_A, airmass, k_mag=None):
    """Atmospheric transmission 10^(-0.4 k X); ``k_mag`` defaults to the sea-level standard model."""
    k = extinction_k_mag(wavelength_A) if k_mag is None else np.asarray(k_mag, dtype=float)
    return 10.0 ** (-0.4 * k * np.asarray(airmass, dtype=float))


def atmosphere_from_table(tab: dict, elevation_m: float, path="[atmosphere]") -> Atmosphere:
    """Validated :class:`Atmosphere` from a site's raw ``[atmosphere]`` dict (may be empty)."""
    if not isinstance(tab, dict):
        raise DataFileError(path, "atmosphere", "expected a table")
    check_keys(tab, (*ATMOSPHERE_FIELDS, "source"), path, "atmosphere")  # names the closest key
    defaults = Atmosphere()
    values = {}
    for key, (low, high, unit, _meaning) in ATMOSPHERE_FIELDS.items():
        default = float(pressure_from_elevation_hpa(elevation_m)) if key == "pressure_hpa" else getattr(defaults, key)
        values[key] = field(tab, key, path, prefix="atmosphere", default=default, low=low, high=high, unit=unit)
    src = field(tab, "source", path, prefix="atmosphere", kind=str, default="") if "source" in tab else \
        "defaults (common practice); pressure from elevation"
    return Atmosphere(**values, source=src)


def atmosphere_for_site(site) -> Atmosphere:
    """:class:`Atmosphere` of a planner Site-like object (``atmosphere`` dict, ``elevation_m``, ``source``)."""
    return atmosphere_from_table(getattr(site, "atmosphere", {}) or {}, site.elevation_m,
                                 getattr(site, "source", "") or "[atmosphere]")
