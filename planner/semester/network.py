"""Every simulated merger planned against the site network, a chunk of mergers at a time.

Per chunk (arrays events x sites x time samples, no loop over events):

1. the target's apparent place (true equator and equinox of date at t0, one astropy call for the chunk)
   and the Sun from a table over the whole date range (:class:`kncast.planner.visibility.sky.Ephemeris`);
2. on samples every ``STEP_MIN`` minutes from t0 over ``nights`` local nights (a night runs from local
   noon to local noon, the first one in progress at t0): dark (Sun below the twilight altitude) and
   target above the site's limit (its horizon profile where it has one, at most ``max_airmass``);
3. per site and night: the hours available (dark and up; at most ``max_hours``, minus the overhead) and
   the best airmass, the epoch at the best-airmass time;
4. the significance of every diagnostic feature in every setup of the site for that time
   (:func:`kncast.planner.semester.table.significance`); a site-night is a useful epoch when one
   feature reaches ``sigma`` in one setup, and the setup detecting most features (ties: the higher
   significance) is the one credited.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

STEP_MIN = 15.0  # time sampling of the nights, minutes (hours per night to +-0.25 h; common practice for planning)


@dataclass
class NetworkSettings:
    """What the network needs to plan a merger: rules of the night and of the detection."""

    site_lat: np.ndarray          # (S,) deg
    site_lon: np.ndarray          # (S,) deg east
    site_min_alt: np.ndarray      # (S,) deg
    horizons: list                # (S,) Horizon or None
    site_cols: list               # per site: table columns of its setups
    nights: int
    twilight_deg: float
    max_airmass: float | None
    max_hours: float
    overhead_s: float
    sigma: float


def target_of_date(ra_deg, dec_deg, t0_mjd):
    """Apparent (ra, dec) deg in the true equator and equinox of date at ``t0_mjd``, one call for all."""
    import astropy.units as u
    from astropy.coordinates import ICRS, TETE
    from astropy.time import Time

    c = ICRS(ra=np.asarray(ra_deg) * u.deg, dec=np.asarray(dec_deg) * u.deg)
    tete = c.transform_to(TETE(obstime=Time(np.asarray(t0_mjd), format="mjd", scale="utc")))
    return tete.ra.deg, tete.dec.deg


def plan_chunk(pop, eph, table, ns: NetworkSettings) -> dict:
    """Useful epochs of the mergers of ``pop`` (a Population chunk): per event x site x night the usable
    seconds, phase, best airmass and the credited table column (-1: not useful)."""
    from kncast.planner.visibility.sky import radec_deg

    n_t = int(np.ceil((ns.nights + 1) * 1440.0 / STEP_MIN))
    offset_d = (np.arange(n_t) + 0.5) * STEP_MIN / 1440.0
    mjd = pop.t0_mjd[:, None] + offset_d                                                # (E, T)
    ra, dec = target_of_date(pop.ra_deg, pop.dec_deg, pop.t0_mjd)
    sun_ra, sun_dec = radec_deg(eph.sun(mjd))
    lst = eph.gast(mjd)[None] + ns.site_lon[:, None, None]                              # (S, E, T)
    lat = np.radians(ns.site_lat)[:, None, None]
    sin_sun = _sin_alt(lat, lst - sun_ra, np.radians(sun_dec))
    ha = lst - ra[:, None]
    sin_alt = _sin_alt(lat, ha, np.radians(dec)[:, None])
    ok = (sin_sun < np.sin(np.radians(ns.twilight_deg))) & (sin_alt >= np.sin(np.radians(ns.site_min_alt))[:, None, None])
    for s, h in enumerate(ns.horizons):  # a loop over sites only, for those with a horizon profile
        if h is not None:
            ok[s] &= sin_alt[s] >= np.sin(np.radians(h.min_altitude_deg(_azimuth(lat[s], ha[s], dec[:, None]))))
    if ns.max_airmass is not None:
        from kncast.forecast.airmass import airmass_from_altitude

        ok &= airmass_from_altitude(np.degrees(np.arcsin(np.clip(sin_alt, -1, 1)))) <= ns.max_airmass
    return _per_night(pop, table, ns, offset_d, ok, sin_alt)


def _sin_alt(lat_rad, ha_deg, dec_rad):
    """Sine of the geometric altitude (textbook spherical astronomy)."""
    return np.sin(lat_rad) * np.sin(dec_rad) + np.cos(lat_rad) * np.cos(dec_rad) * np.cos(np.radians(ha_deg))


def _azimuth(lat_rad, ha_deg, dec_deg):
    from kncast.planner.visibility.sky import altaz_deg

    return altaz_deg(np.degrees(lat_rad), ha_deg, 0.0, dec_deg)[1]


def night_bounds(t0_mjd, lon_deg, nights: int, n_t: int):
    """Sample index where each local night starts (nights from local noon to local noon, the first in
    progress at t0), shape (S, E, nights + 1): 0, then the local noons after t0."""
    noon0 = np.floor(t0_mjd[None, :] + lon_deg[:, None] / 360.0 - 0.5) + 0.5 - lon_deg[:, None] / 360.0
    k = np.arange(1, nights + 1)
    first = np.ceil(((noon0[..., None] + k) - t0_mjd[None, :, None]) * 1440.0 / STEP_MIN - 0.5).astype(int)
    return np.concatenate([np.zeros(noon0.shape + (1,), int), np.clip(first, 0, n_t)], axis=-1)


def _per_night(pop, table, ns, offset_d, ok, sin_alt) -> dict:
    """Hours, epoch and best airmass of every site and night (segment reductions, no loop over nights)."""
    from kncast.forecast.airmass import airmass_from_altitude

    n_s, n_e, n_t = ok.shape
    bounds = night_bounds(pop.t0_mjd, ns.site_lon, ns.nights, n_t)                   # (S, E, N + 1)
    starts = np.minimum((np.arange(n_s * n_e).reshape(n_s, n_e, 1) * n_t + bounds).ravel(), ok.size - 1)
    flat_ok = ok.ravel()
    seg = lambda ufunc, v: ufunc.reduceat(v, starts).reshape(n_s, n_e, -1)[..., :ns.nights]  # noqa: E731
    empty = (np.diff(bounds, axis=-1) <= 0)
    count = np.where(empty, 0, seg(np.add, flat_ok.astype(np.int32)))
    t_sum = np.where(empty, 0.0, seg(np.add, np.where(ok, offset_d, 0.0).ravel()))
    top = np.where(empty, -2.0, seg(np.maximum, np.where(ok, sin_alt, -2.0).ravel()))
    hours = np.moveaxis(count * STEP_MIN / 60.0, 0, 1)                                    # (E, S, N)
    phase = np.moveaxis(np.where(count > 0, t_sum / np.maximum(count, 1), 0.0), 0, 1)
    alt = np.degrees(np.arcsin(np.clip(np.moveaxis(top, 0, 1), -1.0, 1.0)))
    airmass = np.where(hours > 0, airmass_from_altitude(np.clip(alt, 1.0, 90.0)), np.inf)
    return _detect(pop, table, ns, hours, phase, airmass)


def _detect(pop, table, ns, hours, phase, airmass) -> dict:
    from kncast.planner.semester.table import significance

    n_e, n_s, _ = hours.shape
    usable_s = np.clip(np.minimum(hours, ns.max_hours) * 3600.0 - ns.overhead_s, 0.0, None)
    scale = ((table.ref_distance_mpc / pop.distance_mpc) ** 2 * (1 + table.ref_redshift) / (1 + pop.redshift))[:, None, None]
    credited = np.full((n_e, n_s, ns.nights), -1)
    best_sig = np.zeros((n_e, n_s, ns.nights))
    for s, cols in enumerate(ns.site_cols):  # a loop over sites only
        if not cols:
            continue
        seen = usable_s[:, s] > 0
        p, a = table.node(phase[:, s], np.where(np.isfinite(airmass[:, s]), airmass[:, s], table.airmass[-1]))
        k = np.broadcast_to(pop.model[:, None], p.shape)
        sig = significance(table, k, p, a, cols, np.broadcast_to(scale[:, 0], p.shape), np.maximum(usable_s[:, s], 1.0))
        sig = np.where(seen[..., None, None], sig, 0.0)                                    # (E, N, F, C)
        n_det = (sig >= ns.sigma).sum(axis=-2)
        top = sig.max(axis=-2)
        rank = n_det * 1e6 + np.minimum(top, 1e6 - 1)
        j = rank.argmax(axis=-1)
        useful = n_det.max(axis=-1) > 0
        credited[:, s] = np.where(useful, np.asarray(cols)[j], -1)
        best_sig[:, s] = top.max(axis=-1)
    return {"hours": hours, "usable_s": usable_s, "phase_d": phase, "airmass": airmass, "credited": credited,
            "best_significance": best_sig}
