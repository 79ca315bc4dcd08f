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
    """Sky quantities for (site, time) pairs from one Ephemeris.

    ``rows`` index into the site list; ``mjd`` has the same shape (or
    broadcasts: rows (n_sites, 1) against a time grid (n_grid,)).
    """

    def __init__(self, eph: sky.Ephemeris, sites, target_index: int = 0):
        self.eph, self.sites, self.target_index = eph, list(sites), target_index
        self.site_arrays = sky.SiteArrays.of(self.sites)

    def _sites_at(self, rows) -> sky.SiteArrays:
        a = self.site_arrays
        return sky.SiteArrays(a.lat_deg[rows, 0], a.lon_deg[rows, 0], a.elevation_m[rows, 0])

    def sun_altitude_deg(self, mjd, rows):
        return sky.sun_altitude_deg(self.eph, self._sites_at(rows), mjd)

    def target_altaz_deg(self, mjd, rows):
        return sky.target_altaz_deg(self.eph, self._sites_at(rows), mjd, self.target_index)

    def moon(self, mjd, rows):
        """(Moon-target separation deg, Moon altitude deg) at the given pairs."""
        unit, alt = sky.moon_topocentric(self.eph, self._sites_at(rows), mjd)
        mjd_b = np.broadcast_to(mjd, alt.shape)
        return sky.separation_deg(unit, self.eph.target(mjd_b, self.target_index)), alt


def altitude_floor_deg(rules: Rules, rows, azimuth_deg) -> np.ndarray:
    """Lowest allowed target altitude (deg) at the given site rows and azimuths."""
    rows = np.asarray(rows)
    floor = np.maximum(rules.min_altitude_deg[rows], rules.airmass_altitude_deg)
    floor = np.broadcast_to(floor, np.broadcast_shapes(floor.shape, np.shape(azimuth_deg))).copy()
    for i, hz in enumerate(rules.horizons):  # loop over sites that have a horizon profile
        if hz is not None:
            here = np.broadcast_to(rows == i, floor.shape)
            floor[here] = np.maximum(floor[here], hz.min_altitude_deg(np.broadcast_to(azimuth_deg, floor.shape)[here]))
    return floor


def margins(skyq: Sky, rules: Rules, mjd, rows) -> dict[str, np.ndarray]:
    """Every rule's margin (deg, positive = rule holds) at the given (site, time) pairs."""
    alt, az = skyq.target_altaz_deg(mjd, rows)
    out = {
        "sun": rules.twilight_deg - skyq.sun_altitude_deg(mjd, rows),
        "site_limit": alt - rules.min_altitude_deg[np.asarray(rows)],
        "altitude": alt - altitude_floor_deg(rules, rows, az),
        "t0": np.broadcast_to((np.asarray(mjd) - rules.t0_mjd) * T0_MARGIN_DEG_PER_DAY, alt.shape),
    }
    if rules.min_moon_sep_deg is not None:
        out["moon"] = skyq.moon(mjd, rows)[0] - rules.min_moon_sep_deg
    return out


def combined_margin(m: dict[str, np.ndarray]) -> np.ndarray:
    """The margin of all rules together: the smallest one."""
    keys = ["sun", "altitude", "t0"] + (["moon"] if "moon" in m else [])
    return np.minimum.reduce([m[k] for k in keys])


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


def night_notes(m: dict[str, np.ndarray], night_of, rules: Rules, twilight: str, n_nights: int):
    """Why each night holds no window, from margins sampled on a grid.

    ``m`` holds margins of shape (n_sites, n_grid); ``night_of`` (n_sites, n_grid)
    the night index of every sample (-1 outside all nights).  Returns a
    (n_sites, n_nights) array of reasons (checked in order, first one wins).
    """
    n_sites = night_of.shape[0]
    label = np.where(night_of >= 0, np.arange(n_sites)[:, None] * n_nights + night_of, n_sites * n_nights)
    size = n_sites * n_nights + 1

    def anywhere(mask):
        return np.bincount(label.ravel(), weights=mask.ravel().astype(float), minlength=size)[:-1].reshape(
            n_sites, n_nights) > 0

    dark = m["sun"] > 0
    up_limit = m["site_limit"] > 0
    up = m["altitude"] > 0
    after = m["t0"] > 0
    moon_ok = m["moon"] > 0 if "moon" in m else np.ones_like(dark)
    limit = rules.min_altitude_deg
    checks = [
        (~anywhere(dark), lambda i: f"no {twilight} darkness (Sun stays above {rules.twilight_deg:g} deg)"),
        (~anywhere(dark & after), lambda i: "whole night before t0"),
        (~anywhere(up_limit), lambda i: f"target never rises above {limit[i]:g} deg"),
        (~anywhere(up_limit & dark), lambda i: "target only up in daylight or twilight"),
        (~anywhere(up & dark), lambda i: _floor_reason(rules, i)),
        (~anywhere(up & dark & after), lambda i: "target up in darkness only before t0"),
        (~anywhere(up & dark & after & moon_ok),
         lambda i: f"Moon closer than {rules.min_moon_sep_deg:g} deg whenever the target is up in darkness"),
    ]
    notes = np.full((n_sites, n_nights), "no window longer than a few minutes", dtype=object)
    decided = np.zeros((n_sites, n_nights), dtype=bool)
    for fails, reason in checks:
        new = fails & ~decided
        for i, j in zip(*np.nonzero(new)):  # one message per failing night
            notes[i, j] = reason(i)
        decided |= new
    return notes


def _floor_reason(rules: Rules, i: int) -> str:
    parts = []
    if rules.horizons[i] is not None:
        parts.append("the horizon profile")
    if rules.max_airmass is not None:
        parts.append(f"airmass {rules.max_airmass:g}")
    return f"target in darkness only below {' / '.join(parts) or 'the altitude limit'}"
