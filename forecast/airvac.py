"""Air <-> vacuum wavelength conversion with the IAU standard.

The IAU standard (Morton 2000, ApJS 130, 403, eq. 3: the Birch & Downs 1994
form of Edlen's formula for dry air at 15 C, 101 325 Pa, 450 ppm CO2) gives
the refractive index of air as a function of the vacuum wavenumber
s = 10^4 / lambda_vac [micron^-1]:

    n - 1 = 8.34254e-5 + 2.406147e-2 / (130 - s^2) + 1.5998e-4 / (38.9 - s^2)

and lambda_air = lambda_vac / n.  By convention (Morton 2000) wavelengths
below 2000 A are always quoted in vacuum, so both functions leave them
unchanged.  kncast keeps every wavelength in vacuum internally; these
functions are used at the edges (reading air-wavelength tables, labelling).
"""
from __future__ import annotations

import numpy as np

from kncast.forecast.errors import check_range
from kncast.forecast.references import BIRCH_DOWNS_1994, MORTON_2000

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (MORTON_2000, BIRCH_DOWNS_1994)

__all__ = ["air_to_vac", "vac_to_air", "refractive_index_air"]

#: Below this wavelength (A) the convention is to quote vacuum wavelengths (Morton 2000).
AIR_CONVENTION_MIN_A = 2000.0


def refractive_index_air(wavelength_vac_A):
    """Refractive index n of standard air at vacuum wavelength(s) ``wavelength_vac_A`` (A)."""
    s2 = (1e4 / np.asarray(wavelength_vac_A, dtype=float)) ** 2
    return 1.0 + 8.34254e-5 + 2.406147e-2 / (130.0 - s2) + 1.5998e-4 / (38.9 - s2)


def vac_to_air(wavelength_A):
    """Air wavelength(s) in A for vacuum wavelength(s) ``wavelength_A`` (A); vectorized."""
    lam = np.asarray(check_range("vacuum wavelength", wavelength_A, 0.0, low_open=True, unit=" A"), dtype=float)
    out = np.where(lam >= AIR_CONVENTION_MIN_A, lam / refractive_index_air(np.maximum(lam, AIR_CONVENTION_MIN_A)), lam)
    return out if out.ndim else float(out)


def air_to_vac(wavelength_A, iterations: int = 4):
    """Vacuum wavelength(s) in A for air wavelength(s) ``wavelength_A`` (A); vectorized.

    The IAU formula gives n as a function of the vacuum wavelength, so the
    inverse is found by fixed-point iteration lambda_vac = lambda_air * n(lambda_vac);
    n - 1 ~ 3e-4 makes each step gain about 3.5 decimal digits, so four
    steps reach machine precision.
    """
    lam_air = np.asarray(check_range("air wavelength", wavelength_A, 0.0, low_open=True, unit=" A"), dtype=float)
    lam = np.maximum(lam_air, AIR_CONVENTION_MIN_A)
    vac = lam.copy()
    for _ in range(iterations):  # fixed-point steps, not a loop over samples
        vac = lam * refractive_index_air(vac)
    out = np.where(lam_air >= AIR_CONVENTION_MIN_A, vac, lam_air)
    return out if out.ndim else float(out)
