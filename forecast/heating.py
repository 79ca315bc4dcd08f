"""Radioactive r-process heating, its thermalization, and Arnett diffusion.

* Specific heating rate (Korobkin et al. 2012, MNRAS 426, 1940, eq. 4):
  eps(t) = eps0 [1/2 - (1/pi) arctan((t - t0)/sigma)]^alpha / 0.5 with
  eps0 = 2e18 erg g^-1 s^-1 (their value *includes* a thermalization of 0.5,
  hence the division), t0 = 1.3 s, sigma = 0.11 s, alpha = 1.3.  The total
  (unthermalized) rate at 1 day is about 2e10 erg g^-1 s^-1.
* Thermalization efficiency (Barnes et al. 2016, ApJ 829, 110, eq. 36 and
  Table 1): eps_th(t) = 0.36 [exp(-a t) + ln(1 + 2 b t^d) / (2 b t^d)],
  t in days, (a, b, d) tabulated on a grid of ejecta mass and velocity and
  interpolated bilinearly in (log10 M, v), held at the edge values outside.
* Diffusion (Arnett 1982, ApJ 253, 785), one-zone form:
  L(t) = exp(-u) int_0^u L_in(u') exp(u') du',  u = (t / t_d)^2,
  t_d = sqrt(2 kappa M / (beta c v)), beta = 13.8.

Numerical method for the diffusion integral (see :func:`arnett_luminosity`):
a log-spaced time grid (plus the requested epochs), L_in interpolated
linearly in u inside each interval and the exponential integrated exactly
there; the interval contributions are summed with ``logaddexp.accumulate``
so exp(u) never overflows.  The part before the first grid time (heating
there is the power law eps ~ t^-alpha) is integrated analytically.
Second-order accurate in the grid spacing; ``tests/test_photosphere_heating.py``
checks convergence.
"""
from __future__ import annotations

import numpy as np
from astropy import constants as const

from kncast.forecast.references import ARNETT_1982, BARNES_2016, KOROBKIN_2012

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (KOROBKIN_2012, BARNES_2016, ARNETT_1982)

DAY_S = 86400.0
MSUN_G = const.M_sun.cgs.value
C_CGS = const.c.cgs.value

# Korobkin et al. 2012, eq. 4 and Table/text values
KOROBKIN_EPS0 = 2e18      # erg g^-1 s^-1, for a thermalization of 0.5
KOROBKIN_T0_S = 1.3
KOROBKIN_SIGMA_S = 0.11
KOROBKIN_ALPHA = 1.3

ARNETT_BETA = 13.8         # Arnett 1982, geometric factor of the diffusion time

# Barnes et al. 2016, Table 1 (from memory; the same numbers appear in published kilonova codes):
# rows velocity 0.1, 0.2, 0.3 c; columns mass 1e-3, 5e-3, 1e-2, 5e-2 Msun
BARNES_MASS_MSUN = np.array([1e-3, 5e-3, 1e-2, 5e-2])
BARNES_VELOCITY_C = np.array([0.1, 0.2, 0.3])
BARNES_A = np.array([[2.01, 0.81, 0.56, 0.27], [4.52, 1.90, 1.31, 0.55], [8.16, 3.20, 2.19, 0.95]])
BARNES_B = np.array([[0.28, 0.19, 0.17, 0.10], [0.62, 0.28, 0.21, 0.13], [1.19, 0.45, 0.31, 0.15]])
BARNES_D = np.array([[1.12, 0.86, 0.74, 0.60], [1.39, 1.21, 1.13, 0.90], [1.52, 1.39, 1.32, 1.13]])


def heating_rate_erg_g_s(time_s):
    """Total r-process specific heating rate (before thermalization), erg g^-1 s^-1."""
    t = np.asarray(time_s, dtype=float)
    core = 0.5 - np.arctan((t - KOROBKIN_T0_S) / KOROBKIN_SIGMA_S) / np.pi
    return KOROBKIN_EPS0 / 0.5 * core**KOROBKIN_ALPHA


def barnes_coefficients(mass_msun: float, velocity_c: float) -> tuple[float, float, float]:
    """(a, b, d) of Barnes et al. 2016, bilinear in (log10 M, v), clamped to the table edges."""
    lm = np.clip(np.log10(mass_msun), np.log10(BARNES_MASS_MSUN[0]), np.log10(BARNES_MASS_MSUN[-1]))
    v = float(np.clip(velocity_c, BARNES_VELOCITY_C[0], BARNES_VELOCITY_C[-1]))
    lx = np.log10(BARNES_MASS_MSUN)
    i = int(np.clip(np.searchsorted(lx, lm) - 1, 0, len(lx) - 2))
    j = int(np.clip(np.searchsorted(BARNES_VELOCITY_C, v) - 1, 0, len(BARNES_VELOCITY_C) - 2))
    fx = (lm - lx[i]) / (lx[i + 1] - lx[i])
    fy = (v - BARNES_VELOCITY_C[j]) / (BARNES_VELOCITY_C[j + 1] - BARNES_VELOCITY_C[j])

    def bilinear(tab):
        return float((1 - fy) * ((1 - fx) * tab[j, i] + fx * tab[j, i + 1])
                     + fy * ((1 - fx) * tab[j + 1, i] + fx * tab[j + 1, i + 1]))

    return bilinear(BARNES_A), bilinear(BARNES_B), bilinear(BARNES_D)


def thermalization_efficiency(time_d, a: float, b: float, d: float):
    """Barnes et al. 2016 eq. 36: fraction of the heating deposited in the ejecta, t in days."""
    t = np.asarray(time_d, dtype=float)
    x = 2.0 * b * t**d
    # ln(1 + x)/x -> 1 as x -> 0 (log1p keeps it exact)
    ratio = np.where(x > 1e-12, np.log1p(x) / np.where(x > 1e-12, x, 1.0), 1.0)
    return 0.36 * (np.exp(-a * t) + ratio)


def diffusion_time_s(mass_msun: float, velocity_c: float, opacity_cm2_g: float) -> float:
    """Arnett (1982) diffusion time t_d = sqrt(2 kappa M / (beta c v)), seconds."""
    return float(np.sqrt(2.0 * opacity_cm2_g * mass_msun * MSUN_G / (ARNETT_BETA * C_CGS * velocity_c * C_CGS)))


def input_luminosity_erg_s(time_d, mass_msun: float, velocity_c: float):
    """Thermalized radioactive power of a component, M eps(t) eps_th(t), erg s^-1."""
    a, b, d = barnes_coefficients(mass_msun, velocity_c)
    t = np.asarray(time_d, float)
    return mass_msun * MSUN_G * heating_rate_erg_g_s(t * DAY_S) * thermalization_efficiency(t, a, b, d)


def arnett_luminosity(time_d, mass_msun: float, velocity_c: float, opacity_cm2_g: float,
                      points_per_decade: int = 400, t_start_d: float = 1e-3):
    """Bolometric luminosity (erg s^-1) of one ejecta component at rest-frame ages ``time_d`` > 0."""
    td_d = diffusion_time_s(mass_msun, velocity_c, opacity_cm2_g) / DAY_S
    return diffuse(time_d, td_d, lambda t: input_luminosity_erg_s(t, mass_msun, velocity_c),
                   head_index=KOROBKIN_ALPHA, points_per_decade=points_per_decade, t_start_d=t_start_d)


def diffuse(time_d, diffusion_time_d: float, input_erg_s, head_index: float = KOROBKIN_ALPHA,
            points_per_decade: int = 400, t_start_d: float = 1e-3):
    """Arnett's diffusion of a deposited power ``input_erg_s(t_d)`` (vectorized callable), erg s^-1.

    L(t) = exp(-u) int_0^u L_in exp(u') du', u = (t / t_d)^2, on a log grid
    from ``t_start_d`` with ``points_per_decade`` points, merged with the
    requested ages (no interpolation at the output times).  Before the
    first grid time the input is taken as the power law t^-head_index
    (head_index < 2), integrated analytically.
    """
    t_out = np.asarray(time_d, dtype=float)
    flat = t_out.ravel()
    t_lo = min(t_start_d, flat.min() if flat.size else t_start_d)
    t_hi = max(flat.max() if flat.size else 1.0, t_lo * 10)
    n = max(int(np.ceil(np.log10(t_hi / t_lo) * points_per_decade)) + 1, 2)
    grid, index = np.unique(np.concatenate([np.geomspace(t_lo, t_hi, n), flat]), return_inverse=True)
    index = index[n:]

    u = (grid / diffusion_time_d) ** 2
    lin = np.broadcast_to(np.asarray(input_erg_s(grid), dtype=float), grid.shape)
    # interval contributions c_k = int_{u_{k-1}}^{u_k} L_in(u') exp(u' - u_k) du', L_in linear in u,
    # exact for the exponential; a Taylor series where the interval is short (no cancellation)
    du = np.diff(u)
    la, lb = lin[:-1], lin[1:]
    slope = (lb - la) / du
    exact = lb - la * np.exp(-du) + slope * np.expm1(-du)
    series = du * (la + lb) / 2 - du**2 * (la / 3 + lb / 6) + du**3 * (la / 8 + lb / 24)
    contrib = np.where(du < 1e-2, series, exact)
    # before grid[0]: L_in ~ t^-n ~ u^(-n/2), int_0^u0 L_in du' = L_in(u0) u0 / (1 - n/2), exp(u') ~ 1 (u0 << 1)
    head = lin[0] * u[0] / (1.0 - head_index / 2.0)
    terms = np.concatenate([[head], contrib])
    with np.errstate(divide="ignore"):
        log_terms = np.log(np.maximum(terms, 0.0)) + u
    log_l = np.logaddexp.accumulate(log_terms) - u
    return np.exp(log_l)[index].reshape(t_out.shape)


__all__ = ["heating_rate_erg_g_s", "barnes_coefficients", "thermalization_efficiency", "diffusion_time_s",
           "input_luminosity_erg_s", "arnett_luminosity", "diffuse"]
