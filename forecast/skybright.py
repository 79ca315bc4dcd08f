"""Night-sky surface brightness: dark sky by band plus scattered moonlight.

Dark sky (mag/arcsec^2, Vega system, zenith, solar minimum): Benn & Ellison
(1998, La Palma Technical Note 115; in short in New Astronomy Reviews 42, 503) U 22.0, B 22.7, V 21.9, R 21.0, I 20.0;
near-IR J 16.0, H 14.0, K 13.0 (common practice; OH lines and, in K, thermal
emission).  Each band value is converted to AB with the offsets of Blanton &
Roweis (2007, AJ 133, 734; U..I) and near-IR offsets J +0.91, H +1.39, K +1.85
(from memory), placed at the band's effective wavelength, and **interpolated
linearly in AB mag against log(lambda)** between band centres (constant beyond
the end bands).  AB mag -> f_nu (Oke & Gunn 1983) -> photons s^-1 cm^-2 A^-1 arcsec^-2.

Moonlight: Krisciunas & Schaefer (1991, PASP 103, 1033), term by term:
  eq. (1)  B[nL] = 34.08 exp(20.7233 - 0.92104 V)           (V in mag/arcsec^2)
  eq. (2)  B_dark(Z) = B_zen 10^(-0.4 k (X(Z) - 1)) X(Z)
  eq. (3)  X(Z) = (1 - 0.96 sin^2 Z)^-1/2
  eq. (8)  I* = 10^(-0.4 (m_moon + 16.57))                   (footcandles)
  eq. (9)  m_moon = -12.73 + 0.026 |alpha| + 4e-9 alpha^4    (alpha: phase angle, deg)
  eq. (21) f(rho) = 10^5.36 (1.06 + cos^2 rho) + 10^(6.15 - rho/40)   (rho >= 10 deg)
           f(rho) = 6.2e7 rho^-2 for rho < 10 deg (small-angle form, from memory)
  eq. (15) B_moon = f(rho) I* 10^(-0.4 k X(Z_moon)) [1 - 10^(-0.4 k X(Z))]
The V-band moonlight is spread in wavelength with a 5800 K blackbody (solar-type)
times a colour term for the bluer scattered light: the Rayleigh and Mie parts
of f(rho) are weighted by (lambda / 5500 A)^-4 and (lambda / 5500 A)^-1.3
respectively (common practice), normalised at 5500 A to the K&S V brightness.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from kncast.forecast.errors import DataFileError, ForecastInputError, check_range
from kncast.forecast.references import BENN_ELLISON_1998, BLANTON_ROWEIS_2007, KRISCIUNAS_SCHAEFER_1991, OKE_GUNN_1983

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (BENN_ELLISON_1998, BLANTON_ROWEIS_2007, KRISCIUNAS_SCHAEFER_1991, OKE_GUNN_1983)

# band: (effective wavelength A, dark-sky Vega mag/arcsec^2, AB - Vega)
DARK_SKY_BANDS = {
    "U": (3600.0, 22.0, 0.79),   # Benn & Ellison 1998; Blanton & Roweis 2007
    "B": (4380.0, 22.7, -0.09),
    "V": (5450.0, 21.9, 0.02),
    "R": (6410.0, 21.0, 0.21),
    "I": (7980.0, 20.0, 0.45),
    "J": (12500.0, 16.0, 0.91),  # common practice; AB offsets from memory
    "H": (16440.0, 14.0, 1.39),
    "K": (21900.0, 13.0, 1.85),
}
H_CGS = 6.62607015e-27    # erg s (CODATA 2018, exact)
C_CGS = 2.99792458e10     # cm s^-1 (exact)
K_CGS = 1.380649e-16      # erg K^-1 (exact)
REFERENCE_A = 5500.0      # wavelength at which V-band moonlight is normalised
SOLAR_T_K = 5800.0


def ab_to_photons(mag_ab, wavelength_A):
    """Photon flux density (photons s^-1 cm^-2 A^-1 [per arcsec^2]) for AB magnitude(s) at ``wavelength_A``.

    f_nu = 10^(-0.4 (m + 48.60)) erg s^-1 cm^-2 Hz^-1 (Oke & Gunn 1983);
    n_lambda = f_nu / (h lambda) per cm, x 1e-8 per A.
    """
    lam_cm = np.asarray(wavelength_A, dtype=float) * 1e-8
    fnu = 10.0 ** (-0.4 * (np.asarray(mag_ab, dtype=float) + 48.60))
    return fnu / (H_CGS * lam_cm) * 1e-8


def flam_to_photons(flam, wavelength_A):
    """Photons s^-1 cm^-2 A^-1 for F_lambda in erg s^-1 cm^-2 A^-1: F_lambda lambda / (h c)."""
    return np.asarray(flam, dtype=float) * (np.asarray(wavelength_A, dtype=float) * 1e-8) / (H_CGS * C_CGS)


def dark_sky_ab_mag(wavelength_A, offset_mag=0.0):
    """Zenith dark-sky AB mag/arcsec^2 interpolated in log(lambda) between band centres."""
    lam = np.array([v[0] for v in DARK_SKY_BANDS.values()])
    ab = np.array([v[1] + v[2] for v in DARK_SKY_BANDS.values()])
    return np.interp(np.log(np.asarray(wavelength_A, dtype=float)), np.log(lam), ab) + offset_mag


# --- Krisciunas & Schaefer (1991) ---------------------------------------------------------

def nanolambert_from_vmag(v_mag_arcsec2):
    """K&S eq. (1): surface brightness in nanoLamberts from V mag/arcsec^2."""
    return 34.08 * np.exp(20.7233 - 0.92104 * np.asarray(v_mag_arcsec2, dtype=float))


def vmag_from_nanolambert(b_nl):
    """Inverse of K&S eq. (1): V mag/arcsec^2 from nanoLamberts."""
    return (20.7233 - np.log(np.asarray(b_nl, dtype=float) / 34.08)) / 0.92104


def ks_airmass(zenith_deg):
    """K&S eq. (3): X(Z) = (1 - 0.96 sin^2 Z)^-1/2 (for the scattering path, finite at the horizon)."""
    s = np.sin(np.radians(np.asarray(zenith_deg, dtype=float)))
    return 1.0 / np.sqrt(1.0 - 0.96 * s * s)


def moon_magnitude(phase_angle_deg):
    """K&S eq. (9): apparent V magnitude of the Moon at phase angle alpha (0 = full)."""
    a = np.abs(np.asarray(phase_angle_deg, dtype=float))
    return -12.73 + 0.026 * a + 4e-9 * a ** 4


def moon_illuminance(phase_angle_deg):
    """K&S eq. (8): illuminance I* of the Moon (footcandles) outside the atmosphere."""
    return 10.0 ** (-0.4 * (moon_magnitude(phase_angle_deg) + 16.57))


def scattering_rayleigh(rho_deg):
    """Rayleigh part of K&S eq. (21): 10^5.36 (1.06 + cos^2 rho)."""
    c = np.cos(np.radians(np.asarray(rho_deg, dtype=float)))
    return 10.0 ** 5.36 * (1.06 + c * c)


def scattering_mie(rho_deg):
    """Mie part of K&S eq. (21): 10^(6.15 - rho/40); below 10 deg the 6.2e7 rho^-2 form (from memory)."""
    rho = np.asarray(rho_deg, dtype=float)
    with np.errstate(divide="ignore"):
        small = 6.2e7 / np.maximum(rho, 1e-3) ** 2 - scattering_rayleigh(rho)
    return np.where(rho >= 10.0, 10.0 ** (6.15 - rho / 40.0), small)


def scattering_function(rho_deg):
    """K&S eq. (21) f(rho) = Rayleigh + Mie parts."""
    return scattering_rayleigh(rho_deg) + scattering_mie(rho_deg)


def moon_brightness_nl(phase_angle_deg, moon_sep_deg, moon_zenith_deg, sky_zenith_deg, k_v):
    """K&S eq. (15): scattered moonlight (nanoLamberts); zero when the Moon is below the horizon."""
    i_star = moon_illuminance(phase_angle_deg)
    b = (scattering_function(moon_sep_deg) * i_star * 10.0 ** (-0.4 * k_v * ks_airmass(moon_zenith_deg))
         * (1.0 - 10.0 ** (-0.4 * k_v * ks_airmass(sky_zenith_deg))))
    return np.where(np.asarray(moon_zenith_deg) < 90.0, b, 0.0)


def dark_brightness_nl(sky_zenith_deg, k_v, v_zenith_mag=21.9):
    """K&S eq. (2): dark-sky brightness (nL) at zenith distance Z from the zenith value."""
    x = ks_airmass(sky_zenith_deg)
    return nanolambert_from_vmag(v_zenith_mag) * 10.0 ** (-0.4 * k_v * (x - 1.0)) * x


def sky_v_mag(phase_angle_deg, moon_sep_deg, moon_zenith_deg, sky_zenith_deg, k_v, v_zenith_mag=21.9):
    """Total V sky brightness (mag/arcsec^2): dark sky (eq. 2) plus moonlight (eq. 15), via eq. (1)."""
    return vmag_from_nanolambert(dark_brightness_nl(sky_zenith_deg, k_v, v_zenith_mag)
                                 + moon_brightness_nl(phase_angle_deg, moon_sep_deg, moon_zenith_deg, sky_zenith_deg, k_v))


def phase_angle_from_illumination(fraction):
    """Moon phase angle (deg, 0 = full) from the illuminated fraction F = (1 + cos alpha) / 2."""
    f = np.clip(np.asarray(fraction, dtype=float), 0.0, 1.0)
    return np.degrees(np.arccos(2.0 * f - 1.0))


# --- spectra -------------------------------------------------------------------------------

def _planck_shape(wavelength_A, temperature_K):
    lam = np.asarray(wavelength_A, dtype=float) * 1e-8
    return lam ** -5 / np.expm1(H_CGS * C_CGS / (lam * K_CGS * temperature_K))


def moonlight_photons(wavelength_A, v_moon_mag, moon_sep_deg):
    """Moonlit-sky photon surface brightness (photons s^-1 cm^-2 A^-1 arcsec^-2).

    ``v_moon_mag`` is the V mag/arcsec^2 of the scattered moonlight alone; the
    spectrum is a 5800 K blackbody times the Rayleigh/Mie colour term (module doc).
    """
    lam = np.asarray(wavelength_A, dtype=float)
    ray, mie = scattering_rayleigh(moon_sep_deg), scattering_mie(moon_sep_deg)
    x = lam / REFERENCE_A
    colour = (ray * x ** -4 + mie * x ** -1.3) / (ray + mie)
    flam_shape = _planck_shape(lam, SOLAR_T_K) / _planck_shape(REFERENCE_A, SOLAR_T_K) * colour
    ref_flam = ab_to_photons(v_moon_mag + DARK_SKY_BANDS["V"][2], REFERENCE_A) * H_CGS * C_CGS / (REFERENCE_A * 1e-8)
    return flam_to_photons(ref_flam * flam_shape, lam)


@dataclass(frozen=True)
class MoonGeometry:
    """Moon state for the sky model: illuminated fraction, target separation and Moon altitude (deg).

    Each field is a float or an array (one value per epoch, say); arrays broadcast with each
    other and with the sky zenith distance and wavelength grid given to :func:`sky_photons`.
    """

    illumination: float = 0.0
    sep_deg: float = 180.0
    altitude_deg: float = -90.0

    def __post_init__(self):
        check_range("moon illumination", self.illumination, 0.0, 1.0)
        check_range("moon separation", self.sep_deg, 0.0, 180.0, unit=" deg")
        check_range("moon altitude", self.altitude_deg, -90.0, 90.0, unit=" deg")


def sky_photons(wavelength_A, sky_zenith_deg, k_v, moon: MoonGeometry | None = None, dark_offset_mag=0.0):
    """Model sky photon surface brightness (photons s^-1 cm^-2 A^-1 arcsec^-2) at the target position.

    Dark sky: band values scaled from zenith with K&S eq. (2) (same factor at every wavelength);
    plus moonlight from K&S eq. (15) spread with :func:`moonlight_photons`, where the Moon is
    above the horizon and lit (elsewhere the dark sky alone).  ``wavelength_A``, ``sky_zenith_deg``,
    ``k_v``, ``dark_offset_mag`` and the fields of ``moon`` broadcast (e.g. an epoch axis).
    """
    check_range("sky zenith distance", sky_zenith_deg, 0.0, 90.0, high_open=True, unit=" deg")
    x = ks_airmass(sky_zenith_deg)
    dark_factor = 10.0 ** (-0.4 * np.asarray(k_v, dtype=float) * (x - 1.0)) * x
    dark = ab_to_photons(dark_sky_ab_mag(wavelength_A, dark_offset_mag), wavelength_A) * dark_factor
    if moon is None:
        return dark
    illum = np.asarray(moon.illumination, dtype=float)
    sep = np.asarray(moon.sep_deg, dtype=float)
    alt = np.asarray(moon.altitude_deg, dtype=float)
    lit = (alt > 0.0) & (illum > 0.0)
    b_moon = moon_brightness_nl(phase_angle_from_illumination(illum), sep, 90.0 - alt, sky_zenith_deg, k_v)
    # where the Moon is down or new, a placeholder 1 nL keeps the magnitude finite; its light is masked out
    moon_ph = moonlight_photons(wavelength_A, vmag_from_nanolambert(np.where(lit, b_moon, 1.0)), sep)
    return dark + np.where(lit, moon_ph, 0.0)


# --- user sky file -------------------------------------------------------------------------

@dataclass(frozen=True)
class SkySpectrum:
    """A user sky spectrum: vacuum wavelength (A) and F_lambda per arcsec^2 (erg s^-1 cm^-2 A^-1 arcsec^-2)."""

    wavelength_A: np.ndarray
    flam_arcsec2: np.ndarray
    source: str = ""

    def photons(self, wavelength_A):
        """Photon surface brightness on ``wavelength_A`` (linear interpolation); error outside the file's range."""
        lam = np.asarray(wavelength_A, dtype=float)
        lo, hi = self.wavelength_A[0], self.wavelength_A[-1]
        if lam.size and (lam.min() < lo or lam.max() > hi):
            raise ForecastInputError(f"{self.source}: sky spectrum covers {lo:g}-{hi:g} A but "
                                     f"{lam.min():g}-{lam.max():g} A is needed")
        return flam_to_photons(np.interp(lam, self.wavelength_A, self.flam_arcsec2), lam)


def load_sky_spectrum(path) -> SkySpectrum:
    """Read a two-column text file: wavelength_A (vacuum, increasing) and F_lambda per arcsec^2.

    Lines starting with '#' and blank lines are ignored; columns split on
    whitespace or commas.  At least 2 rows, finite values, wavelengths strictly
    increasing in [1000, 60000] A, brightness >= 0 and < 1e-10.
    """
    from kncast.forecast.datafiles import MAX_TABLE_BYTES, decode_text, read_nonempty_bytes

    path = Path(path)
    text = decode_text(read_nonempty_bytes(path, "a sky spectrum file", MAX_TABLE_BYTES), path, "a sky spectrum")
    rows = []
    for n, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        parts = s.replace(",", " ").split()
        try:
            vals = [float(p) for p in parts]
        except ValueError:
            raise DataFileError(path, f"line {n}", f"expected two numbers, got {s[:40]!r}") from None
        if len(vals) != 2 or not all(np.isfinite(vals)):
            raise DataFileError(path, f"line {n}", f"expected two finite numbers, got {s[:40]!r}",
                                "wavelength_A flam_per_arcsec2")
        rows.append(vals)
    if len(rows) < 2:
        raise DataFileError(path, "", f"{len(rows)} data rows, need at least 2", "wavelength_A flam_per_arcsec2")
    arr = np.array(rows)
    lam, flam = arr[:, 0], arr[:, 1]
    if np.any(np.diff(lam) <= 0):
        raise DataFileError(path, "wavelength_A", "must increase strictly")
    if lam[0] < 1000.0 or lam[-1] > 60000.0:
        raise DataFileError(path, "wavelength_A", "out of range", "[1000, 60000] A")
    if np.any(flam < 0) or np.any(flam >= 1e-10):
        bad = flam[(flam < 0) | (flam >= 1e-10)][0]
        raise DataFileError(path, "flam_per_arcsec2", f"value {bad:g} out of range", "[0, 1e-10) erg s^-1 cm^-2 A^-1 arcsec^-2")
    return SkySpectrum(lam, flam, str(path))
