"""Observing windows: where every observing rule holds at once.

Each rule is a continuous margin in degrees, positive where it holds:

* Sun:      twilight altitude - Sun altitude
* altitude: target altitude - max(site limit, horizon profile at the target's
            azimuth, altitude of ``max_airmass``)
* Moon:     topocentric Moon-target separation - ``min_moon_sep_deg``
* t0:       (t - t0) expressed as 360 deg per day, so nothing counts before t0

A window is a maximal interval where the smallest margin is positive; its
edges come from the shared root finder (:mod:`kncast.planner.visibility.rootfind`).  Nights
without a window get a one-line reason from :func:`night_notes`.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from kncast.forecast.airmass import zenith_from_airmass
from kncast.planner.visibility import sky

T0_MARGIN_DEG_PER_DAY = 360.0


@dataclass(frozen=True)
class Rules:
    """The observing rules for one run.  Per-site values are arrays (n_sites,)."""

    twilight_deg: float
    min_altitude_deg: np.ndarray  # site pointing limit (or the --min-altitude override)
    horizons: tuple  # kncast.planner.sites.Horizon | None per site
    max_airmass: float | None
    min_moon_sep_deg: float | None
    t0_mjd: float

    @functools.cached_property
    def airmass_altitude_deg(self) -> float:
        """Lowest altitude (deg) allowed by ``max_airmass`` (Kasten & Young), -90 if unset."""
        if self.max_airmass is None:
            return -90.0
        return 90.0 - float(zenith_from_airmass(self.max_airmass))


class Sky:
    """Sky quantities for (target, site, time) triples from one Ephemeris.

    A *row* is one (target, site) pair: row ``k * n_sites + i`` is target ``targets[k]`` (an index
    into the Ephemeris targets; default ``[target_index]``) seen from site ``i``, so with one
    target the rows are the sites.  ``rows`` index these pairs; ``mjd`` has the same shape (or
    broadcasts: rows (n_rows, 1) against a time grid (n_grid,)).
    """

    def __init__(self, eph: sky.Ephemeris, sites, target_index: int = 0, targets=None):
        self.eph, self.sites = eph, list(sites)
        self.targets = np.atleast_1d(np.asarray(targets if targets is not None else [target_index], dtype=int))
        self.target_index = int(self.targets[0])
        self.site_arrays = sky.SiteArrays.of(self.sites)
        n_sites = len(self.sites)
        self.site_of = np.tile(np.arange(n_sites), self.targets.size)  # row -> site index
        self.target_of = np.repeat(self.targets, n_sites)  # row -> Ephemeris target index

    @property
    def n_rows(self) -> int:
        return self.site_of.size

    def _sites_at(self, rows) -> sky.SiteArrays:
        a, i = self.site_arrays, self.site_of[rows]
        return sky.SiteArrays(a.lat_deg[i, 0], a.lon_deg[i, 0], a.elevation_m[i, 0])

    def _targets_at(self, rows):
        """Ephemeris target index per row: one int when every row has the same target."""
        return self.target_index if self.targets.size == 1 else self.target_of[rows]

    def sun_altitude_deg(self, mjd, rows):
        return sky.sun_altitude_deg(self.eph, self._sites_at(rows), mjd)

    def target_altaz_deg(self, mjd, rows):
        return sky.target_altaz_deg(self.eph, self._sites_at(rows), mjd, self._targets_at(rows))

    def moon(self, mjd, rows):
        """(Moon-target separation deg, Moon altitude deg) at the given pairs."""
        unit, alt = sky.moon_topocentric(self.eph, self._sites_at(rows), mjd)
        mjd_b = np.broadcast_to(mjd, alt.shape)
        index = self._targets_at(rows)
        if np.ndim(index):
            index = np.broadcast_to(index, alt.shape)
        return sky.separation_deg(unit, self.eph.target(mjd_b, index)), alt

    # --- every row on one time grid: targets x sites x times by broadcasting ------------------
    def _grid_targets(self, grid) -> np.ndarray:
        """Target unit vectors (3, n_targets, 1, n_grid): each target's direction once per time."""
        grid = np.asarray(grid, dtype=float)
        return self.eph.target(grid[None, :], self.targets[:, None])[:, :, None, :]

    def grid_altaz_deg(self, grid, azimuth_sites=None):
        """Target (altitude, azimuth) deg of every row at every ``grid`` time, each (n_rows, n_grid).

        ``azimuth_sites`` (bool per site): azimuths only for those sites' rows (NaN in the others;
        None when no site is marked); default: every site.
        """
        a = self.site_arrays
        ra, dec = sky.radec_deg(self._grid_targets(grid))  # (n_targets, 1, n_grid)
        lst = self.eph.gast(grid) + a.lon_deg  # (n_sites, n_grid)
        if azimuth_sites is None:
            return tuple(x.reshape(self.n_rows, -1) for x in sky.altaz_deg(a.lat_deg, lst, ra, dec))
        alt = sky.altaz_deg(a.lat_deg, lst, ra, dec, azimuth=False)[0].reshape(self.n_rows, -1)
        some = np.flatnonzero(azimuth_sites)
        if some.size == 0:
            return alt, None
        az = np.full((self.targets.size, len(self.sites), lst.shape[-1]), np.nan)
        az[:, some] = sky.altaz_deg(a.lat_deg[some], lst[some], ra, dec)[1]
        return alt, az.reshape(self.n_rows, -1)

    def grid_moon_sep_deg(self, grid) -> np.ndarray:
        """Moon-target separation (deg) of every row at every ``grid`` time, (n_rows, n_grid): the
        topocentric Moon once per site and time."""
        unit, _ = sky.moon_topocentric(self.eph, self.site_arrays, grid)  # (3, n_sites, n_grid)
        return sky.separation_deg(unit[:, None], self._grid_targets(grid)).reshape(self.n_rows, -1)


def altitude_floor_deg(rules: Rules, rows, azimuth_deg) -> np.ndarray:
    """Lowest allowed target altitude (deg) at the given site rows and azimuths (read only at sites
    with a horizon profile; may be None when there are none)."""
    rows = np.asarray(rows)
    floor = np.maximum(rules.min_altitude_deg[rows], rules.airmass_altitude_deg)
    floor = np.broadcast_to(floor, np.broadcast_shapes(floor.shape, np.shape(azimuth_deg))).copy()
    for i, hz in enumerate(rules.horizons):  # loop over sites that have a horizon profile
        if hz is not None:
            here = np.broadcast_to(rows == i, floor.shape)
            floor[here] = np.maximum(floor[here], hz.min_altitude_deg(np.broadcast_to(azimuth_deg, floor.shape)[here]))
    return floor


def margins(skyq: Sky, rules: Rules, mjd, rows) -> dict[str, np.ndarray]:
    """Every rule's margin (deg, positive = rule holds) at the given (row, time) pairs."""
    alt, az = skyq.target_altaz_deg(mjd, rows)
    sep = skyq.moon(mjd, rows)[0] if rules.min_moon_sep_deg is not None else None
    return _margins(rules, skyq.site_of[np.asarray(rows)], mjd, alt, az,
                    rules.twilight_deg - skyq.sun_altitude_deg(mjd, rows), sep)


def grid_margins(skyq: Sky, rules: Rules, grid, sun) -> dict[str, np.ndarray]:
    """:func:`margins` of every row at every ``grid`` time, (n_rows, n_grid), by broadcasting
    targets x sites x times; ``sun`` (n_sites, n_grid) is the twilight margin of the sites there."""
    alt, az = skyq.grid_altaz_deg(grid, [h is not None for h in rules.horizons])  # azimuths for horizon profiles
    sep = skyq.grid_moon_sep_deg(grid) if rules.min_moon_sep_deg is not None else None
    return _margins(rules, skyq.site_of[:, None], grid, alt, az, np.tile(sun, (skyq.targets.size, 1)), sep)


def _margins(rules: Rules, site_rows, mjd, alt, az, sun, moon_sep) -> dict[str, np.ndarray]:
    out = {
        "sun": sun,
        "site_limit": alt - rules.min_altitude_deg[site_rows],
        "altitude": alt - altitude_floor_deg(rules, site_rows, az),
        "t0": np.broadcast_to((np.asarray(mjd) - rules.t0_mjd) * T0_MARGIN_DEG_PER_DAY, alt.shape),
    }
    if moon_sep is not None:
        out["moon"] = moon_sep - rules.min_moon_sep_deg
    return out


def combined_margin(m: dict[str, np.ndarray]) -> np.ndarray:
    """The margin of all rules together: the smallest one."""
    keys = ["sun", "altitude", "t0"] + (["moon"] if "moon" in m else [])
    return functools.reduce(np.minimum, [m[k] for k in keys])  # pairwise: no stacked copy of the margins


def window_margin_fn(skyq: Sky, rules: Rules):
    """``fn(mjd, rows)`` for the root finder: the combined margin."""
    return lambda mjd, rows: combined_margin(margins(skyq, rules, mjd, rows))


def split_at_bounds(rows, start, end, bounds):
    """Cut intervals at night bounds; returns (rows, night index, start, end), empty pieces dropped."""
    lo, hi = bounds[rows, :-1], bounds[rows, 1:]
    s = np.maximum(start[:, None], lo)
    e = np.minimum(end[:, None], hi)
    keep = e > s
    r, n = np.nonzero(keep)
    order = np.lexsort((s[r, n], rows[r]))
    r, n = r[order], n[order]
    return rows[r], n, s[r, n], e[r, n]


def night_notes(m: dict[str, np.ndarray], edges, rules: Rules, twilight: str, site_of=None):
    """Why each night holds no window, from margins sampled on a grid.

    ``m`` holds margins of shape (n_rows, n_grid); ``edges`` (n_rows, n_nights + 1) the grid
    index of the first sample of each night and, last, the index after the last night's final
    sample (:func:`night_edges`); ``site_of`` the site index of each row (:attr:`Sky.site_of`;
    default: the rows are the sites).  Returns a (n_rows, n_nights) array of reasons (checked in
    order, first one wins).
    """
    edges = np.asarray(edges)
    n_rows, n_nights = edges.shape[0], edges.shape[1] - 1
    site = np.arange(n_rows) if site_of is None else np.asarray(site_of)
    counts = np.zeros((n_rows, m["sun"].shape[1] + 1), dtype=np.int32)

    def anywhere(mask):  # a sample of each night where ``mask`` holds: counted by cumulative sums
        np.cumsum(mask, axis=1, out=counts[:, 1:])
        return np.diff(np.take_along_axis(counts, edges, axis=1), axis=1) > 0

    dark = m["sun"] > 0
    up_limit = m["site_limit"] > 0
    up = m["altitude"] > 0
    after = m["t0"] > 0
    moon_ok = m["moon"] > 0 if "moon" in m else np.ones_like(dark)
    limit = rules.min_altitude_deg
    checks = [
        (~anywhere(dark), lambda i: f"no {twilight} darkness (Sun stays above {rules.twilight_deg:g} deg)"),
        (~anywhere(dark & after), lambda i: "whole night before t0"),
        (~anywhere(up_limit), lambda i: f"target never rises above {limit[site[i]]:g} deg"),
        (~anywhere(up_limit & dark), lambda i: "target only up in daylight or twilight"),
        (~anywhere(up & dark), lambda i: _floor_reason(rules, site[i])),
        (~anywhere(up & dark & after), lambda i: "target up in darkness only before t0"),
        (~anywhere(up & dark & after & moon_ok),
         lambda i: f"Moon closer than {rules.min_moon_sep_deg:g} deg whenever the target is up in darkness"),
    ]
    notes = np.full((n_rows, n_nights), "no window longer than a few minutes", dtype=object)
    decided = np.zeros((n_rows, n_nights), dtype=bool)
    for fails, reason in checks:
        new = fails & ~decided
        for i, j in zip(*np.nonzero(new)):  # one message per failing night
            notes[i, j] = reason(i)
        decided |= new
    return notes


def night_edges(grid_mjd, bounds) -> np.ndarray:
    """Grid index of the first sample at or after each night bound: (n_sites, n_nights + 1) for
    ``bounds`` (n_sites, n_nights + 1) MJD; night j holds samples edges[j] to edges[j + 1] - 1."""
    bounds = np.asarray(bounds)
    return np.searchsorted(grid_mjd, bounds.ravel(), side="left").reshape(bounds.shape)


def _floor_reason(rules: Rules, i: int) -> str:
    parts = []
    if rules.horizons[i] is not None:
        parts.append("the horizon profile")
    if rules.max_airmass is not None:
        parts.append(f"airmass {rules.max_airmass:g}")
    return f"target in darkness only below {' / '.join(parts) or 'the altitude limit'}"
