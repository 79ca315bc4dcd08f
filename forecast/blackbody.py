"""The Planck function in the units kncast uses inside its kernels.

Wavelengths in Angstrom, temperatures in K, results in cgs:
``planck_flam`` is the specific intensity B_lambda(T) in
erg s^-1 cm^-2 A^-1 sr^-1.  Everything broadcasts (numpy), and large
h c / (lambda k T) never overflows: the function is written with
exp(-x) / (1 - exp(-x)) so that the Wien tail underflows quietly to 0.
"""
from __future__ import annotations

import numpy as np
from astropy import constants as const

# CODATA 2018 via astropy.constants, converted once to cgs floats.
H_CGS = const.h.cgs.value            # erg s
C_CGS = const.c.cgs.value            # cm s^-1
K_CGS = const.k_B.cgs.value          # erg K^-1
SIGMA_SB_CGS = const.sigma_sb.cgs.value  # erg s^-1 cm^-2 K^-4
C_A_PER_S = C_CGS * 1e8              # speed of light in Angstrom s^-1

_HC_OVER_K_A = H_CGS * C_CGS / K_CGS * 1e8          # second radiation constant c2, in A K
# 2 h c^2 / lambda^5 with lambda in A, per cm of wavelength -> per A (1e-8): 2 h c^2 * 1e40 * 1e-8
_TWO_HC2_A = 2.0 * H_CGS * C_CGS**2 * 1e40 * 1e-8


def planck_flam(wavelength_A, temperature_K):
    """B_lambda(T) in erg s^-1 cm^-2 A^-1 sr^-1 (broadcasting wavelength against temperature)."""
    lam = np.asarray(wavelength_A, dtype=float)
    x = _HC_OVER_K_A / (lam * np.asarray(temperature_K, dtype=float))
    # exp(-x)/(-expm1(-x)) == 1/(exp(x) - 1), but with no overflow for large x
    return _TWO_HC2_A / lam**5 * (np.exp(-x) / -np.expm1(-x))


def blackbody_luminosity_density(wavelength_A, temperature_K, radius_cm):
    """L_lambda of a sphere radiating as a blackbody: 4 pi R^2 * pi B_lambda, erg s^-1 A^-1."""
    r = np.asarray(radius_cm, dtype=float)
    return 4.0 * np.pi**2 * r**2 * planck_flam(wavelength_A, temperature_K)


def stefan_boltzmann_luminosity(temperature_K, radius_cm):
    """L = 4 pi R^2 sigma T^4 in erg s^-1."""
    return 4.0 * np.pi * np.asarray(radius_cm, float) ** 2 * SIGMA_SB_CGS * np.asarray(temperature_K, float) ** 4


def wien_peak_A(temperature_K):
    """Wavelength of the B_lambda maximum, lambda_max = b / T, in Angstrom (b from astropy CODATA)."""
    return const.b_wien.to_value("Angstrom K") / np.asarray(temperature_K, float)


__all__ = ["planck_flam", "blackbody_luminosity_density", "stefan_boltzmann_luminosity", "wien_peak_A",
           "SIGMA_SB_CGS", "C_CGS", "C_A_PER_S"]
