"""Light through a slit or fibre for a seeing-limited point source.

Seeing FWHM at wavelength lambda and airmass X (Kolmogorov turbulence,
common practice):  FWHM = FWHM_zenith,5000A * X^0.6 * (lambda / 5000 A)^-0.2.

PSFs are circular, centred on the slit:
* Gaussian: through a slit of width w and an extraction length L along it the
  fraction separates, erf(sqrt(ln 2) w / FWHM) * erf(sqrt(ln 2) L / FWHM)
  (76.1% for w = FWHM, long L; common practice).  Fibre of diameter d:
  1 - 2^(-(d / FWHM)^2).
* Moffat I ~ (1 + r^2 / a^2)^-beta with FWHM = 2 a sqrt(2^(1/beta) - 1)
  (Moffat 1969, A&A 3, 455); beta = 4.765 matches Kolmogorov seeing (Trujillo
  et al. 2001, MNRAS 328, 977).  Fibre: 1 - (1 + (d/2)^2 / a^2)^(1 - beta);
  rectangle: closed form across the slit (incomplete beta function), Gauss-Legendre
  along it, tabulated over (w/FWHM, L/FWHM) on a logarithmic grid and interpolated
  (the fraction is smooth in both).  For the default beta the table is read from
  ``data/moffat_slit.ecsv`` (written by ``data/make_moffat_slit.py`` with this module's
  :func:`moffat_rectangle`; the tests recompute it); another beta is tabulated when asked.

The error function is the standard library's (``math.erf``, element by element): scipy.special,
whose import costs ~0.1 s, is loaded only to tabulate another beta.

The extraction aperture along the slit is ``extraction_fwhm`` x FWHM (default 2,
common practice) rounded up to whole pixels; that sets the number of spatial
pixels whose sky and detector noise enter the CCD equation.
"""
from __future__ import annotations

import functools
import math
from pathlib import Path

import numpy as np

from kncast.forecast.errors import check_range
from kncast.forecast.references import MOFFAT_1969, TRUJILLO_2001

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (MOFFAT_1969, TRUJILLO_2001)

SEEING_REFERENCE_A = 5000.0
MOFFAT_BETA = 4.765
MOFFAT_GRID = (0.01, 20.0, 72)  # half width and half length of the tabulated rectangles: geomspace, in FWHM
MOFFAT_TABLE_PATH = Path(__file__).resolve().parent / "data" / "moffat_slit.ecsv"
PROFILES = ("gaussian", "moffat")
_SQRT_LN2 = np.sqrt(np.log(2.0))
_ERF = np.frompyfunc(math.erf, 1, 1)


def erf(x):
    """The error function of ``x`` (any shape), element by element with ``math.erf``."""
    return np.asarray(_ERF(np.asarray(x, dtype=float)), dtype=float)


def seeing_fwhm_arcsec(seeing_arcsec, airmass, wavelength_A):
    """Delivered FWHM (arcsec): zenith seeing at 5000 A scaled by X^0.6 and lambda^-0.2."""
    check_range("seeing", seeing_arcsec, 0.0, 10.0, low_open=True, unit=" arcsec")
    check_range("airmass", airmass, 1.0, 40.0)
    return (np.asarray(seeing_arcsec, dtype=float) * np.asarray(airmass, dtype=float) ** 0.6
            * (np.asarray(wavelength_A, dtype=float) / SEEING_REFERENCE_A) ** -0.2)


def gaussian_slit_fraction(width_arcsec, fwhm_arcsec):
    """Fraction of a centred Gaussian PSF passing a band of full width ``width_arcsec`` (1-d)."""
    return erf(_SQRT_LN2 * np.asarray(width_arcsec, dtype=float) / np.asarray(fwhm_arcsec, dtype=float))


def moffat_alpha(fwhm_arcsec, beta=MOFFAT_BETA):
    """Moffat core width a for a given FWHM: FWHM = 2 a sqrt(2^(1/beta) - 1)."""
    return np.asarray(fwhm_arcsec, dtype=float) / (2.0 * np.sqrt(2.0 ** (1.0 / beta) - 1.0))


def fibre_fraction(diameter_arcsec, fwhm_arcsec, profile="gaussian", beta=MOFFAT_BETA):
    """Fraction of a centred PSF inside a circular aperture of diameter ``diameter_arcsec``."""
    d = np.asarray(diameter_arcsec, dtype=float)
    fw = np.asarray(fwhm_arcsec, dtype=float)
    if profile == "gaussian":
        return 1.0 - 2.0 ** (-(d / fw) ** 2)
    a = moffat_alpha(fw, beta)
    return 1.0 - (1.0 + (0.5 * d / a) ** 2) ** (1.0 - beta)


def moffat_rectangle(half_w, half_l, beta, n=64):
    """Moffat flux fraction in |x| < half_w, |y| < half_l (units of FWHM).

    The x integral is closed form: with s^2 = a^2 + y^2,
    int_0^h (1 + (x^2 + y^2) / a^2)^-beta dx = (s/a)^(-2 beta) s B(z; 1/2, beta - 1/2) / 2,
    z = h^2 / (h^2 + s^2) (incomplete beta function); the y integral is Gauss-Legendre
    in phi with y = a tan(phi), which keeps the integrand smooth.
    """
    from scipy.special import beta as beta_fn, betainc

    a = moffat_alpha(1.0, beta)
    hw = np.asarray(half_w, dtype=float)[..., None]
    hl = np.asarray(half_l, dtype=float)[..., None]
    xg, wg = np.polynomial.legendre.leggauss(n)
    phi_max = np.arctan(hl / a)
    phi = 0.5 * phi_max * (xg + 1.0)
    y = a * np.tan(phi)
    s2 = a * a + y * y
    inner = (s2 / (a * a)) ** (-beta) * np.sqrt(s2) * betainc(0.5, beta - 0.5, hw * hw / (hw * hw + s2)) \
        * beta_fn(0.5, beta - 0.5)  # = 2 x the half-range x integral
    dy = a / np.cos(phi) ** 2
    integral = np.sum(inner * dy * wg, axis=-1) * 0.5 * phi_max[..., 0]
    return 2.0 * (beta - 1.0) / (np.pi * a * a) * integral


def slit_fraction(width_arcsec, length_arcsec, fwhm_arcsec, profile="gaussian", beta=MOFFAT_BETA):
    """Fraction of a centred PSF through slit width x extraction length (arcsec); arrays broadcast."""
    if profile not in PROFILES:
        raise ValueError(f"profile {profile!r}: allowed {' | '.join(PROFILES)}")
    w = np.asarray(width_arcsec, dtype=float)
    length = np.asarray(length_arcsec, dtype=float)
    fw = np.asarray(fwhm_arcsec, dtype=float)
    if profile == "gaussian":
        return gaussian_slit_fraction(w, fw) * gaussian_slit_fraction(length, fw)
    return _moffat_table(beta)(0.5 * w / fw, 0.5 * length / fw)


def moffat_grid() -> np.ndarray:
    """The half widths (and half lengths) of the tabulated rectangles, in FWHM (MOFFAT_GRID)."""
    return np.geomspace(*MOFFAT_GRID)


def _read_moffat_table(path: Path = MOFFAT_TABLE_PATH) -> np.ndarray:
    """The fractions of ``moffat_slit.ecsv`` as (half width, half length) on :func:`moffat_grid`."""
    from kncast.forecast.datafiles import read_ecsv
    from kncast.forecast.errors import DataFileError

    t = read_ecsv(path, "the Moffat slit table (data/make_moffat_slit.py)",
                  ("half_width_fwhm", "half_length_fwhm", "fraction"))
    u = moffat_grid()
    hw, hl = np.meshgrid(u, u, indexing="ij")
    if (len(t) != u.size**2 or t.meta.get("beta") != MOFFAT_BETA
            or not np.allclose(t["half_width_fwhm"], hw.ravel(), rtol=1e-12)
            or not np.allclose(t["half_length_fwhm"], hl.ravel(), rtol=1e-12)):
        raise DataFileError(path, "", "not the table of MOFFAT_BETA on MOFFAT_GRID", "run data/make_moffat_slit.py")
    return np.asarray(t["fraction"], dtype=float).reshape(u.size, u.size)


@functools.lru_cache(maxsize=4)
def _moffat_table(beta):
    """Interpolator of the Moffat rectangle fraction over (half width, half length) in FWHM units."""
    u = moffat_grid()
    table = _read_moffat_table() if beta == MOFFAT_BETA else moffat_rectangle(u[:, None], u[None, :], beta)
    log_u = np.log(u)

    def frac(half_w, half_l):
        hw, hl = np.broadcast_arrays(np.asarray(half_w, float), np.asarray(half_l, float))
        return bilinear(log_u, log_u, table, np.log(np.clip(hw, u[0], u[-1])), np.log(np.clip(hl, u[0], u[-1])))

    return frac


def bilinear(x_grid, y_grid, table, x, y):
    """Bilinear interpolation of ``table[i, j]`` (on increasing ``x_grid[i]``, ``y_grid[j]``) at points
    ``x``, ``y`` inside the grid (any equal shapes): what scipy's RegularGridInterpolator does with
    method="linear" (tested against it), without importing scipy.interpolate (~0.3 s)."""
    i = np.clip(np.searchsorted(x_grid, x, side="right") - 1, 0, x_grid.size - 2)
    j = np.clip(np.searchsorted(y_grid, y, side="right") - 1, 0, y_grid.size - 2)
    tx = (x - x_grid[i]) / (x_grid[i + 1] - x_grid[i])
    ty = (y - y_grid[j]) / (y_grid[j + 1] - y_grid[j])
    return ((1 - tx) * (1 - ty) * table[i, j] + tx * (1 - ty) * table[i + 1, j]
            + (1 - tx) * ty * table[i, j + 1] + tx * ty * table[i + 1, j + 1])


def extraction_pixels(fwhm_arcsec, pixel_scale_arcsec, extraction_fwhm=2.0, binning=1):
    """Whole number of (binned) spatial pixels covering ``extraction_fwhm`` x FWHM along the slit."""
    check_range("extraction aperture", extraction_fwhm, 0.5, 10.0, unit=" FWHM")
    return np.maximum(1.0, np.ceil(extraction_fwhm * np.asarray(fwhm_arcsec, dtype=float)
                                   / (pixel_scale_arcsec * binning)))
