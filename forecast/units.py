"""Units at the public boundary: astropy Quantity in and out, plain floats inside.

The kernels of :mod:`kncast.forecast` take plain numpy floats with the unit in
the parameter name (``wavelength_A``, ``phase_d``, ``pwv_mm``).  The public entry
points take :class:`astropy.units.Quantity` and convert once with
:func:`value_in`, which turns a wrong or missing unit into a one-line
:class:`~kncast.forecast.errors.ForecastInputError` naming the parameter.
"""
from __future__ import annotations

import astropy.units as u
import numpy as np

from kncast.forecast.errors import ForecastInputError

__all__ = ["FLAM", "PHOTON_FLUX_SB", "value_in"]

FLAM = u.erg / (u.s * u.cm**2 * u.AA)                            # F_lambda, the kernels' flux density
PHOTON_FLUX_SB = u.photon / (u.s * u.cm**2 * u.AA * u.arcsec**2)  # sky photon surface brightness

_EXAMPLES = {u.day: "2 * u.day", u.AA: "6000 * u.AA", u.Mpc: "40 * u.Mpc", u.K: "3000 * u.K", u.s: "900 * u.s",
             u.mm: "2.5 * u.mm", u.arcsec: "0.8 * u.arcsec", u.deg: "30 * u.deg"}


def value_in(value, unit, name: str):
    """``value`` (a Quantity, e.g. a length for ``unit`` = u.AA) as a plain float or float array in ``unit``.

    A plain number is refused (its unit would be a guess) unless ``unit`` is
    dimensionless.  Raises ForecastInputError naming ``name`` on a missing or
    incompatible unit.
    """
    unit = u.Unit(unit)
    if not isinstance(value, u.Quantity):
        if unit.physical_type == "dimensionless":
            return _plain(value, name)
        example = _EXAMPLES.get(unit, f"x * u.{unit.to_string()}")
        raise ForecastInputError(f"{name}: needs a Quantity in units of {unit.physical_type} "
                                 f"(e.g. {example}), got {_shown(value)}")
    try:
        out = value.to_value(unit)
    except u.UnitConversionError:
        raise ForecastInputError(f"{name}: unit {value.unit.to_string() or 'dimensionless'} is not a "
                                 f"{unit.physical_type} (allowed: any unit convertible to "
                                 f"{unit.to_string()})") from None
    return float(out) if np.ndim(out) == 0 else np.asarray(out, dtype=float)


def _plain(value, name: str):
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ForecastInputError(f"{name}: expected a number, got {_shown(value)}") from None
    return float(arr) if arr.ndim == 0 else arr


def _shown(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."
