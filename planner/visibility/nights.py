"""Local nights at each site: which nights, their bounds, dusk and dawn.

A *night* is named by the local calendar date of its evening (site time
zone, daylight saving included) and spans local noon of that date to local
noon of the next.  Night 1 is the one in progress at t0 (the local time at
t0 minus 12 hours gives its date), so for t0 in the local morning it is a
night already over.  Dusk and dawn are the evening and morning crossings of
the twilight Sun altitude (geometric, no refraction): civil -6, nautical -12,
astronomical -18 deg.
"""
from __future__ import annotations

import datetime as dt

import numpy as np

from kncast.planner.errors import ParameterError

TWILIGHT_DEG = {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}
MJD_UNIX_EPOCH = 40587.0  # MJD of 1970-01-01T00:00 UTC


def twilight_altitude_deg(twilight: str) -> float:
    """Sun altitude (deg) that ends twilight of the named kind."""
    try:
        return TWILIGHT_DEG[twilight]
    except KeyError:
        raise ParameterError("twilight", twilight, ", ".join(TWILIGHT_DEG)) from None


def mjd_of(moment: dt.datetime) -> float:
    """MJD (UTC) of an aware datetime (leap seconds ignored, as in UTC MJD)."""
    return moment.timestamp() / 86400.0 + MJD_UNIX_EPOCH


def first_night_date(site, t0_mjd: float) -> dt.date:
    """Local evening date of the night in progress at ``t0_mjd`` at ``site``."""
    t0 = dt.datetime.fromtimestamp((t0_mjd - MJD_UNIX_EPOCH) * 86400.0, tz=site.tz)
    return (t0 - dt.timedelta(hours=12)).date()


def night_dates(site, t0_mjd: float, nights: int, start_date: dt.date | None = None) -> list[dt.date]:
    """The ``nights`` local evening dates from the night in progress at t0 (or from ``start_date``, a
    local evening date, when that is later)."""
    d0 = first_night_date(site, t0_mjd)
    if start_date is not None and start_date > d0:
        d0 = start_date
    return [d0 + dt.timedelta(days=i) for i in range(nights)]


def night_bounds_mjd(sites, t0_mjd: float, nights: int, start_date: dt.date | None = None):
    """Local-noon bounds of every night: (dates per site, bounds (n_sites, nights + 1) MJD); the first night
    is the one in progress at t0, or ``start_date`` (a local evening date) when that is later."""
    dates, bounds = [], np.empty((len(sites), nights + 1))
    for i, site in enumerate(sites):  # calendar arithmetic per site and night, not per time sample
        ds = night_dates(site, t0_mjd, nights, start_date)
        dates.append(ds)
        noons = [dt.datetime.combine(d, dt.time(12), tzinfo=site.tz) for d in ds]
        noons.append(dt.datetime.combine(ds[-1] + dt.timedelta(days=1), dt.time(12), tzinfo=site.tz))
        bounds[i] = [mjd_of(n) for n in noons]
    return dates, bounds


def dusk_dawn(dark_rows, dark_start, dark_end, open_start, open_end, bounds):
    """Dusk and dawn per night from the intervals where the Sun is below the twilight limit.

    ``dark_*`` are the intervals of :func:`kncast.planner.visibility.rootfind.positive_intervals`
    for the twilight margin; ``bounds`` (n_sites, n_nights + 1) the night bounds.
    Returns ``dusk, dawn`` (n_sites, n_nights) MJD, NaN where the night has
    no such crossing (Sun never that low, or already that low at local noon),
    and ``dark_h`` the hours below the limit within each night.
    """
    n_sites, n_nights = bounds.shape[0], bounds.shape[1] - 1
    dusk = np.full((n_sites, n_nights), np.nan)
    dawn = np.full((n_sites, n_nights), np.nan)
    dark_h = np.zeros((n_sites, n_nights))
    if dark_rows.size == 0:
        return dusk, dawn, dark_h
    lo, hi = bounds[dark_rows, :-1], bounds[dark_rows, 1:]  # (n_intervals, n_nights)
    s, e = dark_start[:, None], dark_end[:, None]
    overlap = np.clip(np.minimum(e, hi) - np.maximum(s, lo), 0.0, None) * 24.0
    np.add.at(dark_h, dark_rows, overlap)
    starts_in = (s > lo) & (s < hi) & ~open_start[:, None]
    ends_in = (e > lo) & (e < hi) & ~open_end[:, None]
    # the first dusk and the last dawn inside each night
    cand = np.where(starts_in, s, np.inf)
    first = np.full((n_sites, n_nights), np.inf)
    np.minimum.at(first, dark_rows, cand)
    cand = np.where(ends_in, e, -np.inf)
    latest = np.full((n_sites, n_nights), -np.inf)
    np.maximum.at(latest, dark_rows, cand)
    dusk = np.where(np.isfinite(first), first, np.nan)
    dawn = np.where(np.isfinite(latest), latest, np.nan)
    return dusk, dawn, dark_h
