"""Interstellar extinction: the Fitzpatrick (1999, PASP 111, 63) law with R_V = 3.1.

A(lambda)/A(V) is the F99 recipe, evaluated with numpy, for 0.3 <= x <= 10 micron^-1
(1000 A to 33 333 A):

* ultraviolet (x >= 1/0.27 micron^-1): the Fitzpatrick & Massa (1990, ApJS 72, 163) form
  E(x-V)/E(B-V) = C1 + C2 x + C3 D(x; x0, gamma) + C4 F(x), with F99's R_V = 3.1 coefficients
  (F99 section 4: C2 = -0.824 + 4.717/R_V, C1 = 2.030 - 3.007 C2, C3 = 3.23, C4 = 0.41,
  x0 = 4.596, gamma = 0.99), and A/A(V) = 1 + E(x-V)/E(B-V)/R_V;
* optical and infrared: a natural cubic spline in x through zero at x = 0, the F99 anchor points
  at 26 500, 12 200, 6000, 5470, 4670 and 4110 A and the ultraviolet curve at 2700 and 2600 A.

The anchor values are those of ``dust_extinction.parameter_averages.F99`` (version 1.7), whose
curve the tests compare with ours at 1e-12; the library itself is not imported at run time, as
its import (astropy.modeling, scipy.interpolate, ~0.25 s) would cost more than every evaluation
of a plan.  Outside the law's range kncast continues it:

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
X_MIN_PER_MICRON, X_MAX_PER_MICRON = 0.3, 10.0  # F99's range (as dust_extinction defines it)
IR_POWER_LAW_INDEX = 1.84  # Fitzpatrick & Massa 2009 near-IR slope (from memory)


# F99 (R_V = 3.1): Fitzpatrick & Massa (1990) ultraviolet parameters, F99 section 4
UV_C3, UV_C4, UV_X0, UV_GAMMA = 3.23, 0.41, 4.596, 0.99
UV_C2 = -0.824 + 4.717 / R_V
UV_C1 = 2.030 - 3.007 * UV_C2
FUV_X = 5.9  # micron^-1: the far-UV curvature term starts here
UV_EDGE_X = 1e4 / 2700.0  # micron^-1: ultraviolet formula at and above, spline below
UV_ANCHOR_A = (2700.0, 2600.0)  # the spline's ultraviolet anchors, from the UV formula
OPTIR_ANCHOR_A = (26500.0, 12200.0, 6000.0, 5470.0, 4670.0, 4110.0)
# A(lambda)/E(B-V) at the optical/IR anchors (dust_extinction F99: the infrared pair scales with R_V/3.1)
OPTIR_ANCHOR_A_EBV = (0.265 * R_V / 3.1, 0.829 * R_V / 3.1, -0.426 + 1.0044 * R_V, -0.050 + 1.0016 * R_V,
                      0.701 + 1.0016 * R_V, 1.208 + 1.0032 * R_V - 0.00033 * R_V**2)


def _fm90_a_over_av(x: np.ndarray) -> np.ndarray:
    """A(x)/A(V) of the ultraviolet form at wavenumbers ``x`` (micron^-1)."""
    x2 = x * x
    e = UV_C1 + UV_C2 * x + UV_C3 * x2 / ((x2 - UV_X0**2) ** 2 + x2 * UV_GAMMA**2)
    y = np.where(x >= FUV_X, x - FUV_X, 0.0)
    e = e + UV_C4 * (0.5392 * y**2 + 0.05644 * y**3)
    return 1.0 + e / R_V


@functools.lru_cache(maxsize=1)
def _spline():
    """Knots (micron^-1), values and second derivatives of the natural cubic spline of F99."""
    knots = np.concatenate([[0.0], 1e4 / np.array(OPTIR_ANCHOR_A), 1e4 / np.array(UV_ANCHOR_A)])
    values = np.concatenate([[0.0], np.array(OPTIR_ANCHOR_A_EBV) / R_V, _fm90_a_over_av(knots[-2:])])
    h = np.diff(knots)
    slope = np.diff(values) / h
    n = knots.size
    inner = np.arange(1, n - 1)
    system = np.zeros((n, n))
    system[0, 0] = system[-1, -1] = 1.0  # natural: zero curvature at both ends
    system[inner, inner - 1] = h[:-1]
    system[inner, inner] = 2.0 * (h[:-1] + h[1:])
    system[inner, inner + 1] = h[1:]
    rhs = np.concatenate([[0.0], 6.0 * np.diff(slope), [0.0]])
    return knots, values, np.linalg.solve(system, rhs)


def _spline_a_over_av(x: np.ndarray) -> np.ndarray:
    """A(x)/A(V) of the optical/IR spline at wavenumbers ``x`` (micron^-1)."""
    knots, values, curv = _spline()
    i = np.clip(np.searchsorted(knots, x, side="right") - 1, 0, knots.size - 2)
    h = knots[i + 1] - knots[i]
    t = x - knots[i]
    slope = (values[i + 1] - values[i]) / h - h * (2.0 * curv[i] + curv[i + 1]) / 6.0
    return values[i] + t * (slope + t * (0.5 * curv[i] + t * (curv[i + 1] - curv[i]) / (6.0 * h)))


def _f99_a_over_av(x: np.ndarray) -> np.ndarray:
    """A(x)/A(V) of F99 at wavenumbers ``x`` in [0.3, 10] micron^-1."""
    return np.where(x >= UV_EDGE_X, _fm90_a_over_av(x), _spline_a_over_av(x))


def a_lambda_over_a_v(wavelength_A):
    """A(lambda)/A(V) of F99 (R_V = 3.1) at vacuum wavelengths in Angstrom, any shape."""
    lam = np.asarray(wavelength_A, dtype=float)
    x = 1e4 / lam  # micron^-1
    ratio = _f99_a_over_av(np.clip(x, X_MIN_PER_MICRON, X_MAX_PER_MICRON))
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
