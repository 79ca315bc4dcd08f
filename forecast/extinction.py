"""Interstellar extinction: the Fitzpatrick (1999, PASP 111, 63) law with R_V = 3.1.

The curve comes from ``dust_extinction.parameter_averages.F99``, which
returns A(lambda)/A(V) and is defined for 0.3 <= x <= 10 micron^-1
(1000 A to 33 333 A).  Outside that range kncast does not call it:

* redward of 33 333 A the near-infrared power law A ~ lambda^-1.84 is
  continued from the edge value (the slope of the diffuse ISM near-IR
  extinction, Fitzpatrick & Massa 2009; from memory);
* blueward of 1000 A the edge value is held constant (a kilonova emits
  next to nothing there and hydrogen absorbs it anyway).

``transmission(wavelength_A, ebv)`` is the fraction of light that gets
through, 10^(-0.4 A_lambda), with A_lambda = R_V E(B-V) A(lambda)/A(V).
"""
from __future__ import annotations

import functools

import numpy as np

from kncast.forecast.errors import check_range
from kncast.forecast.references import FITZPATRICK_1999, FITZPATRICK_MASSA_2009

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (FITZPATRICK_1999, FITZPATRICK_MASSA_2009)

R_V = 3.1
X_MIN_PER_MICRON, X_MAX_PER_MICRON = 0.3, 10.0  # F99 validity in dust_extinction
IR_POWER_LAW_INDEX = 1.84  # Fitzpatrick & Massa 2009 near-IR slope (from memory)
CACHED_GRIDS, CACHED_GRID_SIZE = 64, 65536  # wavelength grids (of at most that many points) whose curve is kept


@functools.lru_cache(maxsize=1)
def _f99():
    from dust_extinction.parameter_averages import F99

    return F99(Rv=R_V)


def a_lambda_over_a_v(wavelength_A):
    """A(lambda)/A(V) of F99 (R_V = 3.1) at vacuum wavelengths in Angstrom, any shape.

    A plan asks for the same wavelength grids many times, and each evaluation of the law builds its
    model anew (~1.5 ms): results are kept per grid (the exact values, by the grid's bytes)."""
    lam = np.ascontiguousarray(wavelength_A, dtype=float)
    if lam.size > CACHED_GRID_SIZE:
        return _ratio(lam)
    return _cached_ratio(lam.shape, lam.tobytes()).copy()


@functools.lru_cache(maxsize=CACHED_GRIDS)
def _cached_ratio(shape: tuple, grid_bytes: bytes) -> np.ndarray:
    return _ratio(np.frombuffer(grid_bytes, dtype=float).reshape(shape))


def _ratio(lam: np.ndarray) -> np.ndarray:
    x = 1e4 / lam  # micron^-1
    xc = np.clip(x, X_MIN_PER_MICRON, X_MAX_PER_MICRON)
    flat = xc.ravel()
    # evaluate the law once per distinct clipped wavenumber (grids repeat a lot), in its valid range only
    uniq, inverse = np.unique(flat, return_inverse=True)
    ratio = np.asarray(_f99().evaluate(uniq, R_V), dtype=float)[inverse].reshape(x.shape)
    red = x < X_MIN_PER_MICRON
    if np.any(red):
        ratio = np.where(red, ratio * (x / X_MIN_PER_MICRON) ** IR_POWER_LAW_INDEX, ratio)
    return ratio


def extinction_mag(wavelength_A, ebv):
    """A_lambda in magnitudes for colour excess ``ebv`` = E(B-V) (mag, >= 0)."""
    check_range("ebv", ebv, 0.0, 10.0, unit=" mag")
    return R_V * float(ebv) * a_lambda_over_a_v(wavelength_A)


def transmission(wavelength_A, ebv):
    """Fraction of flux transmitted, 10^(-0.4 A_lambda); exactly 1 for ebv = 0."""
    if float(ebv) == 0.0:
        return np.ones(np.shape(wavelength_A))
    return 10.0 ** (-0.4 * extinction_mag(wavelength_A, ebv))


__all__ = ["R_V", "a_lambda_over_a_v", "extinction_mag", "transmission"]
