"""Telluric absorption bands: transmission and band-weighted losses.

The bands live in ``forecast/data/telluric_bands.ecsv`` (vacuum Angstrom,
provenance per row; schema in docs/formats.md, section "Telluric bands").  Each band is a box:
transmission ``T = exp(-tau)`` inside [min_A, max_A] and 1 outside;
overlapping bands multiply (optical depths add).  A band of depth ``d`` at
airmass 1 and 2.5 mm of precipitable water has ``tau0 = -ln(1 - d)`` and

    tau = tau0 * X**p                    (scaling "airmass", O2)
    tau = tau0 * (X * pwv_mm / 2.5)**p   (scaling "airmass_pwv", H2O)

with ``p = 1`` for weak (unsaturated) bands and ``p = 0.5`` for saturated
ones, the square-root regime of the curve of growth (common practice).
Box bands keep every integral exact and cheap: losses over any window are
read off a piecewise-linear cumulative curve, vectorized over any shape.
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path

import numpy as np

from kncast.forecast.defaults import CORRECTABLE_TRANSMISSION  # noqa: F401  (re-exported)
from kncast.forecast.errors import DataFileError, check_range
from kncast.forecast.references import BESSELL_1999, GORDON_2022, MORTON_2000, TOKUNAGA_SIMONS_VACCA_2002

# Provenance of the bundled bands (the 'source' column of telluric_bands.ecsv), as data.
REFERENCES = (BESSELL_1999, TOKUNAGA_SIMONS_VACCA_2002, MORTON_2000, GORDON_2022)

__all__ = ["TelluricModel", "default_bands_path", "REFERENCE_PWV_MM", "CORRECTABLE_TRANSMISSION"]

REFERENCE_PWV_MM = 2.5  # precipitable water of the tabulated depths, mm
POINT_WIDTH_A = 1e-3    # a zero-width window is evaluated over this width, A
_COLUMNS = ("id", "species", "min_A", "max_A", "depth", "scaling", "power", "source")
_SCALINGS = ("airmass", "airmass_pwv")


def default_bands_path() -> Path:
    return Path(str(resources.files("kncast.forecast.data") / "telluric_bands.ecsv"))


class TelluricModel:
    """Box-band model of the atmosphere's absorption (vacuum Angstrom)."""

    def __init__(self, bands, source: str = ""):
        self.bands = bands
        self.source = source
        self._lo = np.asarray(bands["min_A"], dtype=float)
        self._hi = np.asarray(bands["max_A"], dtype=float)
        self._tau0 = -np.log1p(-np.asarray(bands["depth"], dtype=float))
        self._power = np.asarray(bands["power"], dtype=float)
        self._water = np.asarray(bands["scaling"]) == "airmass_pwv"

    @classmethod
    def load(cls, path=None) -> "TelluricModel":
        """Read and validate a band table (default: the bundled one)."""
        path = Path(path) if path is not None else default_bands_path()
        return cls(_read_bands(path), str(path))

    # ------------------------------------------------------------ physics

    def band_tau(self, airmass=1.0, pwv_mm=REFERENCE_PWV_MM) -> np.ndarray:
        """Optical depth of every band, shape ``broadcast(airmass, pwv_mm).shape + (n_bands,)``."""
        x = np.asarray(check_range("airmass", airmass, 1.0, 40.0), dtype=float)[..., None]
        w = np.asarray(check_range("pwv_mm", pwv_mm, 0.0, 50.0, unit=" mm"), dtype=float)[..., None]
        amount = np.where(self._water, x * w / REFERENCE_PWV_MM, x)
        return self._tau0 * amount ** self._power

    def transmission(self, wavelength_A, airmass=1.0, pwv_mm=REFERENCE_PWV_MM) -> np.ndarray:
        """Transmission (0..1) at vacuum ``wavelength_A``; broadcasts wavelength with airmass and pwv."""
        w = np.asarray(wavelength_A, dtype=float)[..., None]
        inside = (w >= self._lo) & (w < self._hi)
        tau = np.sum(np.where(inside, self.band_tau(airmass, pwv_mm), 0.0), axis=-1)
        return np.exp(-tau)

    def absorbed_A(self, lo_A, hi_A, airmass=1.0, pwv_mm=REFERENCE_PWV_MM, covered_A=None) -> np.ndarray:
        """Integral of (1 - T) over [lo_A, hi_A] (intersected with ``covered_A``), in Angstrom.

        ``covered_A``: optional (n, 2) sorted disjoint intervals; only wavelengths
        inside them count (e.g. a setup's detector coverage).  Vectorized over any
        broadcastable shapes of lo_A, hi_A, airmass and pwv_mm.
        """
        return self._integral_A(lo_A, hi_A, airmass, pwv_mm, covered_A, lambda t: 1.0 - t)

    def loss_fraction(self, lo_A, hi_A, airmass=1.0, pwv_mm=REFERENCE_PWV_MM) -> np.ndarray:
        """Transmission-weighted fraction of [lo_A, hi_A] lost: mean of (1 - T) over the window.

        A zero-width window (lo == hi) gives 1 - T at that wavelength.
        """
        lo, hi = _window(lo_A, hi_A)
        return self.absorbed_A(lo, hi, airmass, pwv_mm) / (hi - lo)

    def opaque_and_correctable(self, lo_A, hi_A, airmass=1.0, pwv_mm=REFERENCE_PWV_MM, covered_A=None,
                               threshold=CORRECTABLE_TRANSMISSION):
        """(opaque, correctable) fractions of each window [lo_A, hi_A]: the parts (on ``covered_A``, if
        given) where the transmission T is below ``threshold`` (lost: too little light to divide out),
        and where a band absorbs but T >= ``threshold`` (divided out with a telluric standard; common
        practice).  The rest of the window is clear of bands or off the detector."""
        lo, hi = _window(lo_A, hi_A)
        check_range("telluric threshold", threshold, 0.0, 1.0)
        width = hi - lo
        opaque = self._integral_A(lo, hi, airmass, pwv_mm, covered_A, lambda t: (t < threshold).astype(float))
        banded = self._integral_A(lo, hi, airmass, pwv_mm, covered_A, lambda t: (t < 1.0).astype(float))
        return opaque / width, np.clip(banded - opaque, 0.0, None) / width

    def _integral_A(self, lo_A, hi_A, airmass, pwv_mm, covered_A, weight) -> np.ndarray:
        """Integral over [lo_A, hi_A] (on ``covered_A``) of ``weight(T)``, T piecewise constant between
        band edges, in Angstrom."""
        lo, hi = np.asarray(lo_A, dtype=float), np.asarray(hi_A, dtype=float)
        edges = [self._lo, self._hi]
        if covered_A is not None:
            covered_A = np.asarray(covered_A, dtype=float).reshape(-1, 2)
            edges.append(covered_A.ravel())
        x = np.unique(np.concatenate(edges))
        if x.size < 2:
            return np.zeros(np.broadcast_shapes(lo.shape, hi.shape, np.shape(airmass), np.shape(pwv_mm)))
        mid = 0.5 * (x[:-1] + x[1:])
        member = ((mid[:, None] >= self._lo) & (mid[:, None] < self._hi)).astype(float)  # (segments, bands)
        tau = self.band_tau(airmass, pwv_mm) @ member.T                                     # S + (segments,)
        slope = weight(np.exp(-tau))
        if covered_A is not None:
            slope = slope * _inside_any(mid, covered_A)
        cum = np.concatenate([np.zeros(slope.shape[:-1] + (1,)), np.cumsum(slope * np.diff(x), axis=-1)], axis=-1)
        return _piecewise(x, cum, slope, hi) - _piecewise(x, cum, slope, lo)


# ---------------------------------------------------------------- helpers


def _window(lo_A, hi_A):
    """Validated (lo, hi) arrays; zero-width windows widened to POINT_WIDTH_A about the point."""
    lo, hi = np.broadcast_arrays(np.asarray(lo_A, dtype=float), np.asarray(hi_A, dtype=float))
    check_range("window lower edge (A)", lo, 0.0, low_open=True)
    check_range("window width hi - lo (A)", hi - lo, 0.0)
    point = hi - lo <= 0.0
    return np.where(point, lo - 0.5 * POINT_WIDTH_A, lo), np.where(point, hi + 0.5 * POINT_WIDTH_A, hi)


def _inside_any(wavelength_A, intervals) -> np.ndarray:
    """1.0 where the wavelength lies inside one of the sorted disjoint (n, 2) intervals."""
    k = np.searchsorted(intervals[:, 0], wavelength_A, side="right") - 1
    ok = k >= 0
    return (ok & (wavelength_A < intervals[np.maximum(k, 0), 1])).astype(float)


def _piecewise(x, cum, slope, q):
    """Evaluate the piecewise-linear cumulative curve (knots x, values cum[..., P]) at q."""
    idx = np.clip(np.searchsorted(x, q, side="right") - 1, 0, x.size - 2)
    dq = np.clip(q, x[0], x[-1]) - x[idx]
    if cum.ndim == 1:
        return cum[idx] + dq * slope[idx]
    shape = np.broadcast_shapes(cum.shape[:-1], np.shape(q))
    idx_b = np.broadcast_to(idx, shape)[..., None]
    c = np.take_along_axis(np.broadcast_to(cum, shape + cum.shape[-1:]), idx_b, axis=-1)[..., 0]
    s = np.take_along_axis(np.broadcast_to(slope, shape + slope.shape[-1:]), idx_b, axis=-1)[..., 0]
    return c + dq * s


def _read_bands(path: Path):
    """Read the ECSV band table and validate every row."""
    from kncast.forecast.datafiles import read_ecsv

    t = read_ecsv(path, "an ECSV telluric band table", _COLUMNS)
    if len(t) == 0:
        raise DataFileError(path, "", "no bands", "at least one row")
    seen = set()
    for i, row in enumerate(t):
        where = f"row {i + 1} ({row['id']})"
        _check(path, f"{where}.id", str(row["id"]).strip() != "", row["id"], "a non-empty id")
        if row["id"] in seen:
            raise DataFileError(path, f"{where}.id", f"duplicate id {row['id']!r}")
        seen.add(row["id"])
        lo, hi = _num(path, f"{where}.min_A", row["min_A"]), _num(path, f"{where}.max_A", row["max_A"])
        _check(path, f"{where}.min_A", 2500 <= lo, lo, "[2500, 30000] A (vacuum)")
        _check(path, f"{where}.max_A", lo < hi <= 30000, hi, f"({lo:g}, 30000] A (vacuum)")
        d = _num(path, f"{where}.depth", row["depth"])
        _check(path, f"{where}.depth", 0 <= d < 1, d, "[0, 1)")
        _check(path, f"{where}.scaling", row["scaling"] in _SCALINGS, row["scaling"], " | ".join(_SCALINGS))
        p = _num(path, f"{where}.power", row["power"])
        _check(path, f"{where}.power", 0 < p <= 2, p, "(0, 2]")
        _check(path, f"{where}.source", str(row["source"]).strip() != "", row["source"], "a non-empty provenance")
    return t


def _num(path, key, value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise DataFileError(path, key, f"expected a number, got {value!r}") from None
    if not np.isfinite(v):
        raise DataFileError(path, key, f"expected a finite number, got {value!r}")
    return v


def _check(path, key, ok, value, allowed) -> None:
    if not ok:
        raise DataFileError(path, key, f"value {value!r} not allowed", allowed)
