"""Parallactic angle of a target for sites x times, in plain numpy.

Meeus (1998, Astronomical Algorithms, 2nd ed., eq. 14.1):

    tan q = sin H / (tan phi cos dec - sin dec cos H),

H the hour angle, phi the site latitude, dec the declination; evaluated with
atan2 (numerator and denominator as written), so q lies in (-180, 180] deg.

Sign convention: q is the position angle of the zenith seen from the target,
counted from north through east, so it has the sign of sin H: negative east of
the meridian (rising), positive west of it (setting).  On the meridian q = 0
for a target south of the zenith and |q| = 180 for one north of it, at any
latitude (Meeus: "q = 0 on the meridian" for the usual southern culmination
of a northern site).  At the zenith q is undefined.

The hour angle needs the target's place of date.  :func:`parallactic_angle_deg`
takes ICRS coordinates and makes them CIRS (apparent) places with ERFA's
``atci13`` (IAU 2006/2000A precession-nutation, Capitaine & Wallace 2006,
A&A 450, 855, plus annual aberration and light deflection), with the Earth
rotation angle from UT1 (bundled IERS table) as the matching sidereal angle.
Polar motion and diurnal aberration (< 1 arcsec) are left out.
:func:`parallactic_angle_ephemeris_deg` uses an :class:`~kncast.planner.visibility.sky.Ephemeris`
instead: its apparent (true equator and equinox of date) target positions and
Greenwich apparent sidereal time (Wallace & Capitaine 2006, A&A 459, 981).
"""
from __future__ import annotations

import erfa
import numpy as np

from kncast.forecast.references import ASTROPY_2022, CAPITAINE_WALLACE_2006, WALLACE_CAPITAINE_2006
from kncast.planner.visibility.sky import _on_grid, radec_deg

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (CAPITAINE_WALLACE_2006, WALLACE_CAPITAINE_2006, ASTROPY_2022)

__all__ = ["parallactic_angle_from_hour_angle_deg", "parallactic_angle_deg", "parallactic_angle_ephemeris_deg"]

PLACE_STEP_DAYS = 0.25  # interpolation step of a single target's place of date


def parallactic_angle_from_hour_angle_deg(hour_angle_deg, lat_deg, dec_deg):
    """Meeus eq. 14.1: parallactic angle (deg, (-180, 180]) from hour angle, latitude, declination (deg)."""
    h, phi, dec = np.radians(hour_angle_deg), np.radians(lat_deg), np.radians(dec_deg)
    q = np.degrees(np.arctan2(np.sin(h), np.tan(phi) * np.cos(dec) - np.sin(dec) * np.cos(h)))
    return q if np.ndim(q) else float(q)


def parallactic_angle_deg(mjd, site_lat_deg, site_lon_deg, ra_deg, dec_deg):
    """Parallactic angle (deg) of ICRS (``ra_deg``, ``dec_deg``) at UTC ``mjd`` from sites at
    ``site_lat_deg``, ``site_lon_deg`` (deg, east positive).

    Inputs broadcast: times of shape (n,) with site columns of shape (n_sites, 1) give (n_sites, n).
    The time-dependent work is done once over the times, not per site; for one target the place of
    date is computed every :data:`PLACE_STEP_DAYS` and interpolated (it moves < 0.01 arcsec in that step
    beyond a straight line).
    """
    from astropy.time import Time

    from kncast.planner._offline import warn_if_beyond_iers

    mjd = np.asarray(mjd, dtype=float)
    warn_if_beyond_iers(float(np.max(mjd)))
    ut1 = Time(mjd, format="mjd", scale="utc").ut1
    era_deg = np.degrees(erfa.era00(ut1.jd1, ut1.jd2))
    if np.ndim(ra_deg) == 0 and np.ndim(dec_deg) == 0 and mjd.size > 3:
        grid = np.arange(mjd.min(), mjd.max() + PLACE_STEP_DAYS, PLACE_STEP_DAYS)
        ra_g, dec_g = _place_of_date_deg(grid, np.full(grid.size, float(ra_deg)), np.full(grid.size, float(dec_deg)))
        ra_t, dec_t = np.interp(mjd, grid, np.unwrap(ra_g, period=360.0)), np.interp(mjd, grid, dec_g)
    else:
        m, ra, dec = np.broadcast_arrays(mjd, np.asarray(ra_deg, dtype=float), np.asarray(dec_deg, dtype=float))
        ra_t, dec_t = _place_of_date_deg(m, ra, dec)
    hour_angle = era_deg + np.asarray(site_lon_deg, dtype=float) - ra_t
    return parallactic_angle_from_hour_angle_deg(hour_angle, site_lat_deg, dec_t)


def _place_of_date_deg(mjd, ra_deg, dec_deg):
    """CIRS (ra, dec) in deg of ICRS places at UTC ``mjd`` (ERFA atci13: precession-nutation, aberration)."""
    from astropy.time import Time

    tt = Time(mjd, format="mjd", scale="utc").tt
    zeros = np.zeros_like(ra_deg)
    ri, di, _ = erfa.atci13(np.radians(ra_deg), np.radians(dec_deg), zeros, zeros, zeros, zeros, tt.jd1, tt.jd2)
    return np.degrees(ri), np.degrees(di)


def parallactic_angle_ephemeris_deg(eph, sites, mjd, index: int = 0):
    """Parallactic angle (deg) of target ``index`` of ``eph`` (an Ephemeris) for ``sites`` (SiteArrays)
    x times ``mjd`` (UTC), from the ephemeris' apparent places and sidereal time (as target_altaz_deg)."""
    mjd = _on_grid(sites, mjd)
    ra, dec = radec_deg(eph.target(mjd, index))
    return parallactic_angle_from_hour_angle_deg(eph.gast(mjd) + sites.lon_deg - ra, sites.lat_deg, dec)
