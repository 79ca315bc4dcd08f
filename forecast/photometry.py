"""Synthetic AB and Vega magnitudes through the filter curves that ``speclite`` ships.

Band names are spelled as speclite spells them (``bessell-V``,
``sdss2010-r``, ``twomass-Ks``); the curves are read from speclite's package
data, so nothing is downloaded.  Photon-counting convention, as speclite:

    maggies = int F_lambda lambda R dlambda / int F_lambda^AB lambda R dlambda,
    F_lambda^AB = 3631 Jy * c / lambda^2,     m_AB = -2.5 log10(maggies)

(AB zero point 3631 Jy: Oke & Gunn 1983, ApJ 266, 713).  Each filter is
resampled linearly onto an even grid of ``POINTS_PER_BAND`` wavelengths, and
:class:`BandSet` turns the integrals into one matrix product, so a whole
(n_epoch, n_wave) grid of spectra becomes magnitudes at once.

Vega magnitudes use published zero-magnitude flux densities per band
(``forecast/data/vega_zero_points.toml``, provenance per row):
m_Vega = m_AB + 2.5 log10(f_nu,0 / 3631 Jy).
"""
from __future__ import annotations

import difflib
import functools
from importlib import resources

import numpy as np

from kncast.forecast.blackbody import C_A_PER_S
from kncast.forecast.defaults import DEFAULT_BANDS
from kncast.forecast.errors import ForecastInputError
from kncast.forecast.references import BESSELL_CASTELLI_PLEZ_1998, COHEN_WHEATON_MEGEATH_2003, OKE_GUNN_1983

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (OKE_GUNN_1983,)
# Provenance of the Vega zero points (forecast/data/vega_zero_points.toml, its 'source' per band).
VEGA_REFERENCES = (BESSELL_CASTELLI_PLEZ_1998, COHEN_WHEATON_MEGEATH_2003)

AB_ZERO_POINT_JY = 3631.0
_JY_CGS = 1e-23  # erg s^-1 cm^-2 Hz^-1
POINTS_PER_BAND = 200


@functools.lru_cache(maxsize=1)
def known_bands() -> tuple[str, ...]:
    """Every band name in speclite's bundled filter data."""
    folder = resources.files("speclite") / "data" / "filters"
    return tuple(sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".ecsv")))


@functools.lru_cache(maxsize=64)
def filter_curve(band: str) -> tuple[np.ndarray, np.ndarray]:
    """(wavelength_A, response) of one speclite filter, resampled evenly (read-only arrays)."""
    if band not in known_bands():
        close = difflib.get_close_matches(band, known_bands(), n=3, cutoff=0.5)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        raise ForecastInputError(f"band {band!r} unknown{hint} (allowed: speclite names such as "
                                 f"bessell-V, sdss2010-r, twomass-Ks)")
    lam, resp = _read_filter_file(band)
    grid = np.linspace(lam[0], lam[-1], POINTS_PER_BAND)
    out = np.interp(grid, lam, resp)
    grid.flags.writeable = out.flags.writeable = False
    return grid, out


def _read_filter_file(band: str) -> tuple[np.ndarray, np.ndarray]:
    """(wavelength_A, response) of speclite's ECSV file for ``band``, trimmed as speclite's
    ``load_filter`` trims it (one zero kept at each end).  Read with astropy's ECSV reader, without
    importing speclite itself (its import loads scipy.interpolate and scipy.integrate: ~0.4 s)."""
    import astropy.units as u
    from astropy.table import QTable

    table = QTable.read(str(resources.files("speclite") / "data" / "filters" / f"{band}.ecsv"), format="ascii.ecsv")
    lam = u.Quantity(table["wavelength"], u.AA).to_value(u.AA)
    resp = np.asarray(table["response"], dtype=float)
    nonzero = np.flatnonzero(resp)
    keep = slice(max(nonzero[0] - 1, 0), min(nonzero[-1] + 2, resp.size))
    return lam[keep], resp[keep]


def _trapezoid_weights(x: np.ndarray) -> np.ndarray:
    dx = np.diff(x)
    w = np.zeros_like(x)
    w[:-1] += dx / 2
    w[1:] += dx / 2
    return w


class BandSet:
    """Several filters stacked onto one wavelength vector for fast synthetic photometry.

    ``wavelength_A`` holds every filter's sampling points, concatenated;
    ``maggies(flam)`` takes F_lambda (erg s^-1 cm^-2 A^-1) on that vector,
    shape (..., n_points), and returns AB maggies of shape (..., n_bands).
    """

    def __init__(self, bands):
        self.bands = tuple(bands)
        if not self.bands:
            raise ForecastInputError("bands: empty list (allowed: one or more speclite band names)")
        curves = [filter_curve(b) for b in self.bands]
        self.wavelength_A = np.concatenate([c[0] for c in curves])
        n = sum(len(c[0]) for c in curves)
        self._weights = np.zeros((n, len(self.bands)))
        start = 0
        for j, (lam, resp) in enumerate(curves):
            w = _trapezoid_weights(lam) * lam * resp
            flam_ab = AB_ZERO_POINT_JY * _JY_CGS * C_A_PER_S / lam**2
            self._weights[start:start + len(lam), j] = w / np.sum(w * flam_ab)
            start += len(lam)

    def maggies(self, flam):
        return np.asarray(flam, dtype=float) @ self._weights

    def mag_ab(self, flam) -> np.ndarray:
        """AB magnitudes, shape (..., n_bands); +inf where the flux is zero."""
        m = self.maggies(flam)
        with np.errstate(divide="ignore"):
            return -2.5 * np.log10(np.where(m > 0, m, 0.0))


@functools.lru_cache(maxsize=16)
def band_set(bands: tuple[str, ...]) -> BandSet:
    """A cached :class:`BandSet` for a tuple of band names."""
    return BandSet(bands)


def mag_ab_from_spectrum(wavelength_A, flam, band: str) -> float:
    """AB magnitude of a tabulated spectrum (F_lambda, erg s^-1 cm^-2 A^-1) in one band.

    The spectrum is interpolated linearly onto the filter grid; it must
    cover the whole filter.
    """
    lam, _ = filter_curve(band)
    wavelength_A = np.asarray(wavelength_A, float)
    if wavelength_A.min() > lam[0] or wavelength_A.max() < lam[-1]:
        raise ForecastInputError(f"spectrum {wavelength_A.min():g}-{wavelength_A.max():g} A does not cover "
                                 f"band {band} ({lam[0]:g}-{lam[-1]:g} A)")
    f = np.interp(lam, wavelength_A, np.asarray(flam, float))
    return float(band_set((band,)).mag_ab(f)[0])


VEGA_ZERO_POINTS_FILE = resources.files("kncast.forecast.data") / "vega_zero_points.toml"


@functools.lru_cache(maxsize=1)
def vega_zero_points() -> dict[str, float]:
    """Zero-magnitude f_nu in Jy per band, from ``forecast/data/vega_zero_points.toml``."""
    return load_vega_zero_points(VEGA_ZERO_POINTS_FILE)


def load_vega_zero_points(path) -> dict[str, float]:
    """Read and validate a zero-point file: ``[[band]]`` rows with name, f_nu_jy and source."""
    from kncast.forecast.datafiles import field, read_toml
    from kncast.forecast.errors import DataFileError

    doc = read_toml(path)
    rows = doc.get("band")
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        raise DataFileError(path, "band", "expected one or more [[band]] tables")
    out = {}
    for i, row in enumerate(rows):
        name = field(row, "name", path, prefix=f"band[{i}]", kind=str)
        if name not in known_bands():
            raise DataFileError(path, f"band[{i}].name", f"{name!r} is not a speclite band")
        if name in out:
            raise DataFileError(path, f"band[{i}].name", f"{name!r} listed twice")
        out[name] = field(row, "f_nu_jy", path, prefix=f"band[{i}]", low=0, high=1e5, low_open=True, unit="Jy")
        field(row, "source", path, prefix=f"band[{i}]", kind=str)
    return out


def ab_minus_vega(band: str) -> float:
    """m_AB - m_Vega for a band with a tabulated Vega zero point."""
    zp = vega_zero_points()
    if band not in zp:
        raise ForecastInputError(f"band {band!r}: no Vega zero point (allowed: {', '.join(sorted(zp))})")
    return -2.5 * np.log10(zp[band] / AB_ZERO_POINT_JY)


__all__ = ["DEFAULT_BANDS", "BandSet", "band_set", "filter_curve", "known_bands", "mag_ab_from_spectrum",
           "vega_zero_points", "load_vega_zero_points", "ab_minus_vega"]
