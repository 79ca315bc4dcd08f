"""Luminosity distance <-> redshift with ``astropy.cosmology`` (Planck 2018 by default:
Planck Collaboration 2020, A&A 641, A6, as astropy's ``Planck18``)."""
from __future__ import annotations

import astropy.units as u
from astropy.cosmology import Planck18, z_at_value

from kncast.forecast.errors import ForecastInputError
from kncast.forecast.references import PLANCK_2018

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (PLANCK_2018,)

MPC_CM = (1 * u.Mpc).to_value(u.cm)
DISTANCE_RANGE_MPC = (0.0, 1e5)  # (low, high]: luminosity distance, Mpc
# (low, high]: every allowed redshift has an allowed distance: Planck18 gives D_L(9.5) = 99,999.95 Mpc
# (computed with astropy.cosmology), D_L(10) = 106,000 Mpc would be out of range.
REDSHIFT_RANGE = (0.0, 9.5)
HUBBLE_LAW_BELOW_Z = 1e-6  # below this the redshift is d H0 / c (relative error ~ z, common practice)


def distance_range_text() -> str:
    return f"({DISTANCE_RANGE_MPC[0]:g}, {DISTANCE_RANGE_MPC[1]:g}] Mpc"


def redshift_range_text() -> str:
    return f"({REDSHIFT_RANGE[0]:g}, {REDSHIFT_RANGE[1]:g}]"


def redshift_for_distance(distance_mpc: float, cosmology=Planck18) -> float:
    """Redshift whose luminosity distance is ``distance_mpc`` (Mpc, in DISTANCE_RANGE_MPC, (0, 1e5])."""
    d = float(distance_mpc)
    if not DISTANCE_RANGE_MPC[0] < d <= DISTANCE_RANGE_MPC[1]:
        raise ForecastInputError(f"distance_mpc = {d:g}: allowed {distance_range_text()}")
    near = float(cosmology.luminosity_distance(HUBBLE_LAW_BELOW_Z).to_value(u.Mpc))
    if d <= near:
        return HUBBLE_LAW_BELOW_Z * d / near
    z = z_at_value(cosmology.luminosity_distance, d * u.Mpc, zmin=HUBBLE_LAW_BELOW_Z, zmax=REDSHIFT_RANGE[1] + 5)
    return float(getattr(z, "value", z))


def distance_for_redshift(redshift: float, cosmology=Planck18) -> float:
    """Luminosity distance in Mpc at redshift ``redshift`` (in REDSHIFT_RANGE, (0, 9.5])."""
    z = float(redshift)
    if not REDSHIFT_RANGE[0] < z <= REDSHIFT_RANGE[1]:
        raise ForecastInputError(f"redshift = {z:g}: allowed {redshift_range_text()}")
    return float(cosmology.luminosity_distance(z).to_value(u.Mpc))


__all__ = ["MPC_CM", "DISTANCE_RANGE_MPC", "REDSHIFT_RANGE", "redshift_for_distance", "distance_for_redshift"]
