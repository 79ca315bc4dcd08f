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


def planck_sum_flam(wavelength_A, temperature_K, weight):
    """sum_k weight[k, i] * B_lambda(T[k, i]) on a wavelength vector: shape (n_epoch, n_wave).

    ``temperature_K`` and ``weight`` are (n_comp, n_epoch); the result is in
    erg s^-1 cm^-2 A^-1 sr^-1 times the unit of ``weight``.  Same function
    as :func:`planck_flam`, computed in place with one exponential per
    point (1 - exp(-x) loses accuracy only for x < 1e-2, where expm1 is used).
    """
    lam = np.asarray(wavelength_A, dtype=float).ravel()
    temp = np.atleast_2d(np.asarray(temperature_K, dtype=float))
    w = np.atleast_2d(np.asarray(weight, dtype=float))
    inv_lam = 1.0 / lam
    shape = (temp.shape[1], lam.size)
    out = np.zeros(shape)
    x, e = np.empty(shape), np.empty(shape)  # work buffers, reused for every component
    for k in range(temp.shape[0]):  # components: a handful, each a whole (epoch, wave) grid
        np.multiply.outer(-_HC_OVER_K_A / temp[k], inv_lam, out=x)  # -x
        small = x > -1e-2
        fix = -np.expm1(x[small]) if small.any() else None
        np.exp(x, out=e)
        np.subtract(1.0, e, out=x)  # 1 - exp(-x), exact enough for x >= 1e-2
        if fix is not None:
            x[small] = fix
        np.divide(e, x, out=e)
        e *= w[k][:, None]
        out += e
    out *= _TWO_HC2_A * inv_lam**5
    return out


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


def blackbody_intensity(wavelength, temperature):
    """B_lambda(T) as a Quantity in erg s^-1 cm^-2 A^-1 sr^-1, for Quantity ``wavelength`` and ``temperature``.

    The two broadcast against each other (e.g. ``temperature[:, None]`` against a wavelength grid).
    """
    import astropy.units as u

    from kncast.forecast.errors import check_range
    from kncast.forecast.units import FLAM, value_in

    lam_A = value_in(wavelength, u.AA, "wavelength")
    temp_K = value_in(temperature, u.K, "temperature")
    check_range("wavelength", lam_A, 0.0, None, low_open=True, unit=" A")
    check_range("temperature", temp_K, 0.0, None, low_open=True, unit=" K")
    return planck_flam(lam_A, temp_K) * FLAM / u.sr


__all__ = ["blackbody_intensity", "planck_flam", "planck_sum_flam", "blackbody_luminosity_density", "stefan_boltzmann_luminosity", "wien_peak_A",
           "SIGMA_SB_CGS", "C_CGS", "C_A_PER_S"]
