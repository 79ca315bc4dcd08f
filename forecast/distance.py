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
DISTANCE_RANGE_MPC = (0.0, 1e5)
REDSHIFT_RANGE = (0.0, 10.0)


def redshift_for_distance(distance_mpc: float, cosmology=Planck18) -> float:
    """Redshift whose luminosity distance is ``distance_mpc`` (Mpc, in (0, 1e5])."""
    d = float(distance_mpc)
    if not DISTANCE_RANGE_MPC[0] < d <= DISTANCE_RANGE_MPC[1]:
        raise ForecastInputError(f"distance_mpc = {d:g}: allowed (0, 100000] Mpc")
    z = z_at_value(cosmology.luminosity_distance, d * u.Mpc, zmin=1e-9, zmax=REDSHIFT_RANGE[1] + 5)
    return float(getattr(z, "value", z))


def distance_for_redshift(redshift: float, cosmology=Planck18) -> float:
    """Luminosity distance in Mpc at redshift ``redshift`` (in (0, 10])."""
    z = float(redshift)
    if not REDSHIFT_RANGE[0] < z <= REDSHIFT_RANGE[1]:
        raise ForecastInputError(f"redshift = {z:g}: allowed (0, 10]")
    return float(cosmology.luminosity_distance(z).to_value(u.Mpc))


__all__ = ["MPC_CM", "redshift_for_distance", "distance_for_redshift"]
