"""Sky geometry on whole grids of sites x times, in plain numpy.

The expensive, site-independent part is computed once: apparent geocentric
Sun, Moon and target positions (true equator and equinox of date) and
Greenwich apparent sidereal time, all tabulated on a coarse time grid
(:class:`Ephemeris`) by the ERFA routines astropy's frames use
(:mod:`kncast.planner.visibility.apparent`).  Any later time is served by interpolation
(linear on a 30-minute grid errs by < 1 arcsec for the Moon, far less for
the Sun and targets), so window
edges can be refined by root finding without calling astropy again.

Altitudes are geometric (no refraction), as astropy's ``AltAz`` with zero
pressure; the Moon is made topocentric with the site's geocentric vector.
Angles in degrees, times as MJD (UTC) floats in the kernels.

Positions and sidereal time are astropy's (Astropy Collaboration 2022, ApJ 935,
167), evaluated by ERFA; the apparent sidereal time is the IAU 2006/2000A one of
Wallace & Capitaine (2006, A&A 459, 981).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.references import ASTROPY_2022, WALLACE_CAPITAINE_2006

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (ASTROPY_2022, WALLACE_CAPITAINE_2006)

EARTH_EQUATORIAL_RADIUS_KM = 6378.137  # WGS84
EARTH_FLATTENING = 1 / 298.257223563  # WGS84
GRID_STEP_MIN = 30.0
AU_KM = 149_597_870.7  # IAU 2012 Resolution B2 (exact)


@dataclass(frozen=True)
class Ephemeris:
    """Geocentric apparent positions tabulated on ``mjd`` (UTC), for interpolation.

    ``targets_*`` have shape (n_targets, n_grid); Sun/Moon vectors are unit or km
    cartesian in the true-equator-of-date frame, shape (3, n_grid).
    """

    mjd: np.ndarray
    gast_deg: np.ndarray  # unwrapped Greenwich apparent sidereal time
    sun_xyz: np.ndarray  # unit vector
    sun_dist_km: np.ndarray
    moon_xyz_km: np.ndarray
    target_xyz: np.ndarray  # unit vectors, (n_targets, 3, n_grid)

    @classmethod
    def build(cls, start_mjd: float, end_mjd: float, target_ra_deg, target_dec_deg,
              step_min: float = GRID_STEP_MIN) -> "Ephemeris":
        """Tabulate Sun, Moon and targets from ``start_mjd`` to ``end_mjd`` (UTC), every ``step_min`` minutes.

        Positions come from :func:`kncast.planner.visibility.apparent.compute` (ERFA, the chain
        astropy's frames use, without building frames).
        """
        from kncast.planner._offline import warn_if_beyond_iers
        from kncast.planner.visibility.apparent import compute

        n = int(np.ceil((end_mjd - start_mjd) * 1440.0 / step_min)) + 1
        mjd = start_mjd + np.arange(n) * step_min / 1440.0
        warn_if_beyond_iers(mjd[-1])
        app = compute(mjd, target_ra_deg, target_dec_deg)
        sun_km = app.sun_au.T * AU_KM
        tgt = np.moveaxis(app.targets, -1, 1)  # (n_targets, 3, n_grid)
        return cls(mjd=mjd, gast_deg=np.degrees(np.unwrap(app.gast_rad)),
                   sun_xyz=_unit(sun_km), sun_dist_km=np.linalg.norm(sun_km, axis=0),
                   moon_xyz_km=app.moon_au.T * AU_KM, target_xyz=tgt / np.linalg.norm(tgt, axis=1, keepdims=True))

    # --- interpolation -------------------------------------------------
    def _interp(self, table: np.ndarray, mjd) -> np.ndarray:
        """Linear interpolation of the last axis of ``table`` at ``mjd`` (any shape)."""
        mjd = np.asarray(mjd, dtype=float)
        idx = np.clip(np.searchsorted(self.mjd, mjd) - 1, 0, self.mjd.size - 2)
        w = (mjd - self.mjd[idx]) / (self.mjd[idx + 1] - self.mjd[idx])
        return table[..., idx] * (1 - w) + table[..., idx + 1] * w

    def gast(self, mjd) -> np.ndarray:
        return self._interp(self.gast_deg, mjd)

    def sun(self, mjd) -> np.ndarray:
        """Sun unit vectors, shape (3, *mjd.shape)."""
        return _unit(self._interp(self.sun_xyz, mjd))

    def moon_km(self, mjd) -> np.ndarray:
        """Geocentric Moon vector in km, shape (3, *mjd.shape)."""
        return self._interp(self.moon_xyz_km, mjd)

    def target(self, mjd, index=0) -> np.ndarray:
        """Target unit vectors, shape (3, *mjd.shape); ``index`` one target, or an integer array of
        target indices broadcasting against ``mjd`` (one target per element: many targets in one call)."""
        if np.ndim(index) == 0:
            return _unit(self._interp(self.target_xyz[index], mjd))
        mjd = np.asarray(mjd, dtype=float)
        index = np.broadcast_to(index, np.broadcast_shapes(np.shape(index), mjd.shape))
        mjd = np.broadcast_to(mjd, index.shape)
        idx = np.clip(np.searchsorted(self.mjd, mjd) - 1, 0, self.mjd.size - 2)
        w = (mjd - self.mjd[idx]) / (self.mjd[idx + 1] - self.mjd[idx])
        # the same arithmetic as _interp, element by element: (*shape, 3), component axis then moved first
        v = self.target_xyz[index, :, idx] * (1 - w)[..., None] + self.target_xyz[index, :, idx + 1] * w[..., None]
        return _unit(np.moveaxis(v, -1, 0))


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=0, keepdims=True)


def radec_deg(xyz: np.ndarray):
    """(ra, dec) in degrees of cartesian vectors with the component axis first."""
    x, y, z = xyz
    return np.degrees(np.arctan2(y, x)) % 360.0, np.degrees(np.arctan2(z, np.hypot(x, y)))


def altaz_deg(lat_deg, lst_deg, ra_deg, dec_deg, azimuth: bool = True):
    """Geometric altitude and azimuth (N=0, E=90), degrees; inputs broadcast together.  ``azimuth``
    False: the altitude alone (and None)."""
    lat, ha, dec = np.radians(lat_deg), np.radians(lst_deg - ra_deg), np.radians(dec_deg)
    sin_lat, cos_lat, sin_dec, cos_dec, cos_ha = np.sin(lat), np.cos(lat), np.sin(dec), np.cos(dec), np.cos(ha)
    sin_alt = sin_lat * sin_dec + cos_lat * cos_dec * cos_ha
    alt = np.degrees(np.arcsin(np.clip(sin_alt, -1.0, 1.0)))
    if not azimuth:
        return alt, None
    az = np.degrees(np.arctan2(-cos_dec * np.sin(ha), sin_dec * cos_lat - cos_dec * sin_lat * cos_ha)) % 360.0
    return alt, az


def site_vector_km(lat_deg, elevation_m, lst_deg) -> np.ndarray:
    """Geocentric site position (km) in the true-equator-of-date frame, WGS84 ellipsoid."""
    lat = np.radians(lat_deg)
    e2 = EARTH_FLATTENING * (2 - EARTH_FLATTENING)
    n = EARTH_EQUATORIAL_RADIUS_KM / np.sqrt(1 - e2 * np.sin(lat) ** 2)
    h = np.asarray(elevation_m) / 1000.0
    rho_cos, z = (n + h) * np.cos(lat), (n * (1 - e2) + h) * np.sin(lat)
    lst = np.radians(lst_deg)
    return np.stack(np.broadcast_arrays(rho_cos * np.cos(lst), rho_cos * np.sin(lst), z * np.ones_like(lst)))


@dataclass(frozen=True)
class SiteArrays:
    """Site coordinates as column arrays (n_sites, 1) so they broadcast against times."""

    lat_deg: np.ndarray
    lon_deg: np.ndarray
    elevation_m: np.ndarray

    @classmethod
    def of(cls, sites) -> "SiteArrays":
        col = lambda attr: np.array([getattr(s, attr) for s in sites], dtype=float)[:, None]  # noqa: E731
        return cls(col("latitude_deg"), col("longitude_deg"), col("elevation_m"))


def _on_grid(sites: SiteArrays, mjd) -> np.ndarray:
    """``mjd`` broadcast to the full (n_sites, ...) grid shape."""
    mjd = np.asarray(mjd, dtype=float)
    return np.broadcast_to(mjd, np.broadcast_shapes(mjd.shape, sites.lat_deg.shape))


def sun_altitude_deg(eph: Ephemeris, sites: SiteArrays, mjd) -> np.ndarray:
    """Geometric Sun altitude (deg) for sites x times; ``mjd`` broadcasts against (n_sites, 1)."""
    mjd = _on_grid(sites, mjd)
    ra, dec = radec_deg(eph.sun(mjd))
    return altaz_deg(sites.lat_deg, eph.gast(mjd) + sites.lon_deg, ra, dec)[0]


def target_altaz_deg(eph: Ephemeris, sites: SiteArrays, mjd, index=0):
    """Target (altitude, azimuth) in degrees for sites x times; ``index`` one target or an index array
    broadcasting against the grid (see :meth:`Ephemeris.target`)."""
    mjd = _on_grid(sites, mjd)
    ra, dec = radec_deg(eph.target(mjd, index))
    return altaz_deg(sites.lat_deg, eph.gast(mjd) + sites.lon_deg, ra, dec)


def moon_topocentric(eph: Ephemeris, sites: SiteArrays, mjd):
    """Topocentric Moon unit vectors (3, ...) and altitude (deg) for sites x times."""
    mjd = _on_grid(sites, mjd)
    lst = eph.gast(mjd) + sites.lon_deg
    topo = eph.moon_km(mjd) - site_vector_km(sites.lat_deg, sites.elevation_m, lst)
    unit = _unit(topo)
    ra, dec = radec_deg(unit)
    return unit, altaz_deg(sites.lat_deg, lst, ra, dec)[0]


def moon_illumination(eph: Ephemeris, mjd):
    """Illuminated fraction of the Moon's disc and its phase angle (deg, 0 = full), geocentric."""
    moon = eph.moon_km(mjd)
    sun = eph.sun(mjd) * eph._interp(eph.sun_dist_km, mjd)
    d_moon, d_sun = np.linalg.norm(moon, axis=0), np.linalg.norm(sun, axis=0)
    cos_elong = np.sum(moon * sun, axis=0) / (d_moon * d_sun)
    elong = np.arccos(np.clip(cos_elong, -1, 1))
    phase = np.arctan2(d_sun * np.sin(elong), d_moon - d_sun * np.cos(elong))
    return (1 + np.cos(phase)) / 2, np.degrees(phase)


def separation_deg(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Angle (deg) between unit vectors with the component axis first."""
    cross = np.linalg.norm(np.cross(a, b, axis=0), axis=0)
    return np.degrees(np.arctan2(cross, np.sum(a * b, axis=0)))
