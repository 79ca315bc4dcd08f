"""Luminosity distance <-> redshift for the Planck 2018 cosmology (Planck Collaboration 2020, A&A 641,
A6, the parameters of astropy's ``Planck18``), by a numpy integral: importing ``astropy.cosmology``
(with scipy.integrate, scipy.optimize and astropy.modeling) costs more than a second at start-up.

D_L(z) = (1 + z) (c / H0) int_0^z dz' / E(z') in a flat universe with
E(z)^2 = Om0 (1+z)^3 + Ogamma0 (1+z)^4 (1 + f_nu(z)) + Ode0 (Hogg 1999, astro-ph/9905116, eq. 15-16),
the neutrino density f_nu by the fitting formula of Komatsu et al. 2011, ApJS 192, 18, eq. 26 (as astropy
does), integrated by Gauss-Legendre quadrature; the inverse by Newton's method.  Another cosmology
(an astropy ``Cosmology`` passed as ``cosmology``) goes through astropy as before.
"""
from __future__ import annotations

import math

import numpy as np

from kncast.forecast.errors import ForecastInputError
from kncast.forecast.references import PLANCK_2018

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (PLANCK_2018,)

MPC_CM = 3.0856775814913673e24  # 1 Mpc in cm (IAU 2012 B2 au x 648000/pi pc), as astropy.units
DISTANCE_RANGE_MPC = (0.0, 1e5)  # (low, high]: luminosity distance, Mpc
# (low, high]: every allowed redshift has an allowed distance: Planck18 gives D_L(9.5) = 99,999.95 Mpc
# (computed with astropy.cosmology), D_L(10) = 106,000 Mpc would be out of range.
REDSHIFT_RANGE = (0.0, 9.5)
HUBBLE_LAW_BELOW_Z = 1e-6  # below this the redshift is d H0 / c (relative error ~ z, common practice)

# Planck 2018 (TT,TE,EE+lowE+lensing+BAO, Planck Collaboration 2020, A&A 641, A6, table 2), as astropy's Planck18
H0_KM_S_MPC = 67.66
OM0 = 0.30966
TCMB0_K = 2.7255
NEFF = 3.046
M_NU_EV = (0.0, 0.0, 0.06)
# CODATA 2018 (physics.nist.gov/constants): c, G, Stefan-Boltzmann, Boltzmann (eV/K)
C_KM_S = 299792.458
G_SI = 6.67430e-11
SIGMA_SB_SI = 5.670374419e-8
K_B_EV_K = 8.617333262e-5
# Komatsu et al. 2011, ApJS 192, 18, eq. 26: f(y) ~ (1 + (k y)^p)^(1/p); 7/8 (4/11)^(4/3) per species
NU_K, NU_P = 0.3173, 1.83
NU_FERMI_DIRAC = 7.0 / 8.0 * (4.0 / 11.0) ** (4.0 / 3.0)
GL_NODES = 96  # Gauss-Legendre points: 1/E(z) is smooth, error < 1e-12 up to z = 15
NEWTON_RTOL = 1e-12


def _planck18():
    """(c/H0 in Mpc, Om0, Ogamma0, Ode0, neutrino y per massive species, massless species, Neff per species)."""
    h0_si = H0_KM_S_MPC * 1e3 / (MPC_CM / 100.0)
    rho_crit = 3.0 * h0_si ** 2 / (8.0 * math.pi * G_SI)  # kg m^-3
    ogamma0 = 4.0 * SIGMA_SB_SI / (C_KM_S * 1e3) ** 3 * TCMB0_K ** 4 / rho_crit
    tnu0 = (4.0 / 11.0) ** (1.0 / 3.0) * TCMB0_K
    massive = np.array([m for m in M_NU_EV if m > 0]) / (K_B_EV_K * tnu0)
    n_massless = sum(1 for m in M_NU_EV if m <= 0)
    per = NEFF / len(M_NU_EV)
    onu0 = ogamma0 * _nu_density(0.0, massive, n_massless, per)
    return C_KM_S / H0_KM_S_MPC, OM0, ogamma0, 1.0 - OM0 - ogamma0 - float(onu0), massive, n_massless, per


def _nu_density(z, nu_y, n_massless, per):
    """Neutrino density relative to photons at redshift ``z`` (array)."""
    y = nu_y / (1.0 + np.expand_dims(z, -1))
    return NU_FERMI_DIRAC * per * (((1.0 + (NU_K * y) ** NU_P) ** (1.0 / NU_P)).sum(-1) + n_massless)


_P18 = _planck18()
_X, _W = np.polynomial.legendre.leggauss(GL_NODES)


def _inv_e(z):
    _, om0, og0, ode0, nu_y, n0, per = _P18
    zp1 = 1.0 + z
    return 1.0 / np.sqrt(om0 * zp1 ** 3 + og0 * zp1 ** 4 * (1.0 + _nu_density(z, nu_y, n0, per)) + ode0)


def _planck18_distance(z: float) -> float:
    """Luminosity distance (Mpc) at redshift z >= 0, Planck18."""
    nodes = 0.5 * z * (_X + 1.0)
    return float((1.0 + z) * _P18[0] * 0.5 * z * np.dot(_W, _inv_e(nodes)))


def _planck18_redshift(d: float) -> float:
    """Redshift of luminosity distance ``d`` Mpc (Planck18): Newton on D_L(z) - d, kept inside a bracket."""
    lo, hi = 0.0, REDSHIFT_RANGE[1] + 5.0
    z = d / _P18[0]
    for _ in range(60):
        f = _planck18_distance(z) - d
        if f > 0:
            hi = min(hi, z)
        else:
            lo = max(lo, z)
        slope = _planck18_distance(z) / (1.0 + z) + (1.0 + z) * _P18[0] * float(_inv_e(np.float64(z)))
        step = z - f / slope
        z_new = step if lo < step < hi else 0.5 * (lo + hi)
        if abs(z_new - z) <= NEWTON_RTOL * z_new:
            return z_new
        z = z_new
    return z


def distance_range_text() -> str:
    return f"({DISTANCE_RANGE_MPC[0]:g}, {DISTANCE_RANGE_MPC[1]:g}] Mpc"


def redshift_range_text() -> str:
    return f"({REDSHIFT_RANGE[0]:g}, {REDSHIFT_RANGE[1]:g}]"


def redshift_for_distance(distance_mpc: float, cosmology=None) -> float:
    """Redshift whose luminosity distance is ``distance_mpc`` (Mpc, in DISTANCE_RANGE_MPC, (0, 1e5]).

    ``cosmology``: None for Planck18 (numpy), else an astropy ``Cosmology``.
    """
    d = float(distance_mpc)
    if not DISTANCE_RANGE_MPC[0] < d <= DISTANCE_RANGE_MPC[1]:
        raise ForecastInputError(f"distance_mpc = {d:g}: allowed {distance_range_text()}")
    near = _luminosity_distance(HUBBLE_LAW_BELOW_Z, cosmology)
    if d <= near:
        return HUBBLE_LAW_BELOW_Z * d / near
    if cosmology is None:
        return _planck18_redshift(d)
    import astropy.units as u
    from astropy.cosmology import z_at_value

    z = z_at_value(cosmology.luminosity_distance, d * u.Mpc, zmin=HUBBLE_LAW_BELOW_Z, zmax=REDSHIFT_RANGE[1] + 5)
    return float(getattr(z, "value", z))


def distance_for_redshift(redshift: float, cosmology=None) -> float:
    """Luminosity distance in Mpc at redshift ``redshift`` (in REDSHIFT_RANGE, (0, 9.5]).

    ``cosmology``: None for Planck18 (numpy), else an astropy ``Cosmology``.
    """
    z = float(redshift)
    if not REDSHIFT_RANGE[0] < z <= REDSHIFT_RANGE[1]:
        raise ForecastInputError(f"redshift = {z:g}: allowed {redshift_range_text()}")
    return _luminosity_distance(z, cosmology)


def _luminosity_distance(z: float, cosmology) -> float:
    if cosmology is None:
        return _planck18_distance(z)
    import astropy.units as u

    return float(cosmology.luminosity_distance(z).to_value(u.Mpc))


__all__ = ["MPC_CM", "DISTANCE_RANGE_MPC", "REDSHIFT_RANGE", "redshift_for_distance", "distance_for_redshift"]
