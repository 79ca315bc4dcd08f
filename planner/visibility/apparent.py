"""Apparent geocentric Sun, Moon and target positions and Greenwich apparent sidereal time, with ERFA.

The same chain of ERFA routines that astropy's frames run (``get_body`` with the built-in
ephemeris, then ``GCRS -> TETE``; ``ICRS -> GCRS -> TETE``; ``Time.sidereal_time("apparent")``),
called directly on whole arrays of times, so the numbers agree with astropy's to < 1e-10 rad
(``tests/planner/test_ephemeris_erfa.py``; the rounding of ERFA's own series is ~1e-11 rad for the
Moon) at a small fraction of the cost:

* Earth: ``epv00`` (barycentric and heliocentric, TDB); Sun = Earth barycentric - heliocentric;
  Moon = ``moon98`` geocentric + Earth barycentric (ERFA's series, astropy's "builtin" ephemeris);
* light time: the body is taken at t - d / c, iterated until d / c changes by < 1e-8 s
  (:func:`_light_time_s`); the Sun then moves on its tangent over those 8.3 min, the Moon is
  evaluated again at its emission time;
* ``apcs`` astrometry for a geocentric observer, light deflection by the Sun (``ld``, the
  Sun-to-body direction for a body at a finite distance) and annual aberration (``ab``);
* true equator and equinox of date: the IAU 2006/2000A bias-precession-nutation matrix (``pnm06a``);
* sidereal time: ``gst06a`` (IAU 2006/2000A, from UT1 and TT), as astropy's
  ``sidereal_time("apparent", "greenwich")`` (which adds no TIO locator for Greenwich);
  UT1 from :mod:`kncast.planner.visibility.eop`.

Time scales (UTC -> TAI -> TT -> TDB) are astropy ``Time`` conversions, which need no
Earth-orientation table.  Distances in au, angles in radians, times as two-part Julian dates.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

AU_M = 149_597_870_700.0  # IAU 2012 Resolution B2 (exact)
C_M_S = 299_792_458.0  # exact (SI)
LIGHT_TIME_TOL_S = 1e-8  # as astropy's get_body


@dataclass(frozen=True)
class Apparent:
    """Apparent places in the true-equator-of-date frame on the given UTC times.

    ``sun_au``/``moon_au`` are geocentric cartesian vectors (n, 3) in au; ``targets`` unit vectors
    (n_targets, n, 3); ``gast_rad`` the Greenwich apparent sidereal time, radians in [0, 2 pi).
    """

    sun_au: np.ndarray
    moon_au: np.ndarray
    targets: np.ndarray
    gast_rad: np.ndarray


def _light_time_s(pv, earth_au: np.ndarray) -> np.ndarray:
    """Light time (s) from a body with barycentric ``pv`` (au, au/d) to an observer at ``earth_au``:
    d / c with d taken at t - d / c, iterated until it changes by < 1e-8 s (as astropy's ``get_body``).

    The body moves on its tangent over the light time (8.3 min for the Sun, 1.3 s for the Moon): the
    distance is then off by < 1 m for the Sun and ~1 cm for the Moon, the light time by < 1e-8 s.
    """
    change, light_time_s = np.inf, np.zeros(earth_au.shape[0])
    while change > LIGHT_TIME_TOL_S:  # a few iterations, each vectorized over all times
        p = pv["p"] - pv["v"] * (light_time_s / 86400.0)[:, None]
        new = np.linalg.norm(p - earth_au, axis=-1) * AU_M / C_M_S
        change, light_time_s = float(np.max(np.abs(new - light_time_s))), new
    return light_time_s


def _gcrs_direction(p_au: np.ndarray, astrom, dist_au=None) -> np.ndarray:
    """Proper direction (unit vectors, n x 3) in the GCRS of barycentric directions ``p_au``.

    ``dist_au`` (observer-to-body distance) given: light deflection uses the Sun-to-body
    direction of a body at that distance (astropy's ``atciqz``); otherwise a distant source.
    """
    import erfa

    pco = p_au / np.linalg.norm(p_au, axis=-1, keepdims=True)
    if dist_au is None:
        q = pco
    else:
        sundist, q = erfa.pn(astrom["em"][..., None] * astrom["eh"] + dist_au[..., None] * pco)
        q = np.where(sundist[..., None] > 1.0e-10, q, pco)
    pnat = erfa.ld(1.0, pco, q, astrom["eh"], astrom["em"], 1e-6)
    return erfa.rxp(astrom["bpn"], erfa.ab(pnat, astrom["v"], astrom["em"], astrom["bm1"]))


def compute(mjd_utc, target_ra_deg, target_dec_deg) -> Apparent:
    """Sun, Moon and targets (true equator and equinox of date) and GAST at UTC MJDs ``mjd_utc``."""
    import erfa
    from astropy.time import Time

    from kncast.planner.visibility.eop import ut1_minus_utc

    time = Time(np.asarray(mjd_utc, dtype=float), format="mjd", scale="utc")
    time.delta_ut1_utc = ut1_minus_utc(time.jd1, time.jd2)
    tt, ut1, tdb = time.tt, time.ut1, time.tdb
    helio, bary = erfa.epv00(tdb.jd1, tdb.jd2)  # Earth: heliocentric and barycentric, au and au/d
    observer = np.zeros(time.shape, dtype=erfa.dt_pv)  # the geocentre: no offset, no velocity
    astrom = erfa.apcs(tt.jd1, tt.jd2, observer, bary, helio["p"])
    rbpn = erfa.pnm06a(tt.jd1, tt.jd2)

    def apparent(p_bary):
        p = p_bary - astrom["eb"]
        dist = np.linalg.norm(p, axis=-1)
        return erfa.rxp(rbpn, _gcrs_direction(p, astrom, dist)) * dist[..., None]

    sun_pv = erfa.pvmpv(bary, helio)  # the Sun moves < 1 m off its tangent in 8.3 min (< 1e-11 rad)
    lt_d = _light_time_s(sun_pv, bary["p"]) / 86400.0
    sun = apparent(sun_pv["p"] - sun_pv["v"] * lt_d[:, None])
    # the Moon is evaluated again at its emission time (its path curves by ~1 cm in 1.3 s)
    lt_d = _light_time_s(erfa.pvppv(erfa.moon98(tdb.jd1, tdb.jd2), bary), bary["p"]) / 86400.0
    moon = apparent(erfa.pvppv(erfa.moon98(tdb.jd1, tdb.jd2 - lt_d), erfa.epv00(tdb.jd1, tdb.jd2 - lt_d)[1])["p"])
    ra = np.radians(np.atleast_1d(np.asarray(target_ra_deg, dtype=float)))
    dec = np.radians(np.atleast_1d(np.asarray(target_dec_deg, dtype=float)))
    targets = np.stack([erfa.rxp(rbpn, _gcrs_direction(np.broadcast_to(erfa.s2c(a, d), bary["p"].shape), astrom))
                        for a, d in zip(ra, dec)])  # loop over targets only; each is vectorized over times
    gast = erfa.gst06(ut1.jd1, ut1.jd2, tt.jd1, tt.jd2, rbpn)  # = gst06a, reusing the NPB matrix
    return Apparent(sun_au=sun, moon_au=moon, targets=targets, gast_rad=gast)
