"""Relative optical airmass as a function of zenith distance.

Kasten & Young (1989), Applied Optics 28, 4735, eq. (3):
    X = 1 / [cos z + 0.50572 (96.07995 deg - z)^-1.6364]
valid down to the horizon (X ~ 38 at z = 90 deg).  The fit gives 0.9998 at the
zenith, where the relative airmass is 1 by definition; we return at least 1.  Used by the planner for
window airmass and by the exposure model for extinction and seeing.
"""
from __future__ import annotations

import functools

import numpy as np

from kncast.forecast.references import KASTEN_YOUNG_1989

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (KASTEN_YOUNG_1989,)

_A, _B, _C = 0.50572, 96.07995, 1.6364


def airmass_kasten_young(zenith_deg):
    """Airmass for zenith distance ``zenith_deg`` (degrees, array-like); NaN below the horizon."""
    z = np.asarray(zenith_deg, dtype=float)
    return np.where((z >= 0) & (z <= 90.0), np.maximum(_fit(z), 1.0), np.nan)


def _fit(z):
    """Kasten & Young's formula as published (0.9998 at the zenith)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return 1.0 / (np.cos(np.radians(z)) + _A * (_B - z) ** (-_C))


def airmass_from_altitude(altitude_deg):
    """Airmass for altitude ``altitude_deg`` above the horizon (degrees)."""
    return airmass_kasten_young(90.0 - np.asarray(altitude_deg, dtype=float))


@functools.lru_cache(maxsize=1)
def _inverse_table():
    """Zenith distances every 0.001 deg and their airmass (strictly increasing), for inversion."""
    grid = np.linspace(0.0, 90.0, 90001)
    return grid, _fit(grid)


def zenith_from_airmass(airmass):
    """Invert Kasten & Young numerically: zenith distance (deg) for airmass >= 1."""
    x = np.atleast_1d(np.asarray(airmass, dtype=float))
    grid, table = _inverse_table()
    z = np.where(x <= 1.0, 0.0, np.interp(x, table, grid, left=0.0, right=90.0))
    z = np.where(x < 1.0, np.nan, z)
    return z if np.ndim(airmass) else float(z[0])
