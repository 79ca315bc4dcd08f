"""Benchmark: kncast's windows for 10 sites x 14 nights against astroplan's constraint machinery.

Both compute the same windows for one demo event: Sun below -12 deg
(nautical), target above each site's altitude limit, Moon at least
MOON_SEP_DEG away.  astroplan evaluates AtNightConstraint,
AltitudeConstraint and MoonSeparationConstraint on a 1-minute grid per
site; kncast samples all sites at once and root-finds the edges.  Horizon
profiles are dropped here because astroplan has no such constraint.

Last line: ``RESULT speedup=<astroplan_time/our_time> max_edge_diff_s=<largest edge difference>``.
Run: python bench/visibility.py
"""
from __future__ import annotations

import dataclasses
import statistics
import sys
import time
import warnings
from pathlib import Path

import kncast.planner  # noqa: F401  (first: configures astropy for offline use, so astroplan runs offline too)

import numpy as np

N_SITES, N_NIGHTS = 10, 14
MOON_SEP_DEG = 40.0
EVENT = Path(__file__).resolve().parents[1] / "demo_events" / "kn-demo-south.toml"


def ours(event, sites):
    from kncast.planner.visibility.core import compute_visibility

    return compute_visibility(event, sites, nights=N_NIGHTS, twilight="nautical", min_moon_sep_deg=MOON_SEP_DEG)


def astroplan_windows(event, sites, start_mjd, end_mjd):
    """Windows (site index, start mjd, end mjd) from astroplan on a 1-minute grid."""
    import astropy.units as u
    from astroplan import (AltitudeConstraint, AtNightConstraint, FixedTarget, MoonSeparationConstraint, Observer,
                           is_event_observable)
    from astropy.coordinates import EarthLocation
    from astropy.coordinates.errors import NonRotationTransformationWarning
    from astropy.time import Time

    target = FixedTarget(event.coord, name=event.id)
    n = int(np.floor((end_mjd - start_mjd) * 1440)) + 1
    mjd = start_mjd + np.arange(n) / 1440.0
    times = Time(mjd, format="mjd", scale="utc")
    out = []
    warnings.simplefilter("ignore", NonRotationTransformationWarning)  # astroplan's Moon separation, ~arcsec
    for i, s in enumerate(sites):  # astroplan works one observer at a time
        obs = Observer(location=EarthLocation.from_geodetic(s.longitude_deg * u.deg, s.latitude_deg * u.deg,
                                                            s.elevation_m * u.m), name=s.id)
        rules = [AtNightConstraint.twilight_nautical(), AltitudeConstraint(min=s.min_altitude_deg * u.deg),
                 MoonSeparationConstraint(min=MOON_SEP_DEG * u.deg)]
        ok = is_event_observable(rules, obs, target, times=times)[0]
        edges = np.diff(np.concatenate([[0], ok.astype(np.int8), [0]]))
        for a, b in zip(np.nonzero(edges == 1)[0], np.nonzero(edges == -1)[0] - 1):
            out.append((i, mjd[a], mjd[b]))
    return out


def edge_differences(result, theirs):
    """Largest |edge difference| (s) over matched windows, and counts of unmatched ones.

    astroplan's grid runs to the latest night end over all sites; its windows
    after a site's own last night are outside the comparison.
    """
    site_index = {s.id: i for i, s in enumerate(result.sites)}
    mine = [(site_index[n.site.id], w.start.mjd, w.end.mjd) for n, w in result.windows()]
    theirs = [(j, a, b) for j, a, b in theirs if a < result.night_bounds_mjd[j, -1]]
    diffs, unmatched = [], 0
    for i, s, e in mine:
        cands = [(a, b) for j, a, b in theirs if j == i and a <= e and b >= s]
        if not cands:
            unmatched += 1
            continue
        a, b = max(cands, key=lambda ab: min(ab[1], e) - max(ab[0], s))
        diffs += [abs(a - s) * 86400.0, abs(b - e) * 86400.0]
    lonely = sum(1 for j, a, b in theirs if not any(i == j and s <= b and e >= a for i, s, e in mine))
    return (max(diffs) if diffs else float("nan")), unmatched, lonely, len(mine), len(theirs)


def main() -> int:
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.sites import SiteRegistry

    event = load_event(EVENT)
    sites = [dataclasses.replace(s, horizon=None) for s in list(SiteRegistry.load())[:N_SITES]]
    if len(sites) < N_SITES:
        print(f"only {len(sites)} sites bundled", file=sys.stderr)
    ours(event, sites[:1])  # warm-up: loads IERS tables and ephemeris kernels once for both sides
    runs = []
    for _ in range(3):
        t = time.perf_counter()
        result = ours(event, sites)
        runs.append(time.perf_counter() - t)
    our_time = statistics.median(runs)
    start, end = result.t0_mjd, float(result.night_bounds_mjd.max())
    astroplan_windows(event, sites[:1], start, start + 0.05)  # warm-up of astroplan's code paths
    t = time.perf_counter()
    theirs = astroplan_windows(event, sites, start, end)
    their_time = time.perf_counter() - t
    max_diff, unmatched, lonely, n_mine, n_theirs = edge_differences(result, theirs)
    print(f"event {event.id}: {len(sites)} sites x {N_NIGHTS} nights, nautical twilight, "
          f"Moon separation >= {MOON_SEP_DEG:g} deg")
    print(f"kncast:    {our_time:.3f} s (median of 3; runs {', '.join(f'{r:.3f}' for r in runs)}), "
          f"{n_mine} windows")
    print(f"astroplan: {their_time:.3f} s (1-minute grid), {n_theirs} windows in the same nights")
    print(f"windows without a counterpart: kncast {unmatched}, astroplan {lonely}")
    print(f"RESULT speedup={their_time / our_time:.1f} max_edge_diff_s={max_diff:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
