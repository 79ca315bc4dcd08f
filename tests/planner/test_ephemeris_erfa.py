"""The ERFA ephemeris and the UT1 reader give astropy's numbers, and the plan does not change with them.

* UT1 - UTC (:mod:`kncast.planner.visibility.eop`) against astropy's own Earth-orientation table
  (``astropy.utils.iers.IERS_Auto``, the table ``Time.ut1`` uses), at random and edge dates.
* :class:`kncast.planner.visibility.sky.Ephemeris` (ERFA routines called directly) against the
  astropy frames it replaces (``get_body`` then ``TETE``; ``ICRS -> TETE``;
  ``Time.sidereal_time("apparent", "greenwich")``), the code the plan ran before (kncast dc37ed9),
  reproduced in :func:`ephemeris_with_frames`.
* The demo's plan document built twice in the same test, with the ERFA ephemeris and with the
  frames one: every number agrees to 1e-6 relative and every string is equal, whatever the
  line list, instruments and plan rules are at the time.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from kncast.planner.visibility import sky


def ephemeris_with_frames(start_mjd, end_mjd, target_ra_deg, target_dec_deg, step_min=sky.GRID_STEP_MIN):
    """The Ephemeris from astropy's frames (the slow reference path)."""
    import astropy.units as u
    from astropy.coordinates import ICRS, TETE, get_body
    from astropy.time import Time

    n = int(np.ceil((end_mjd - start_mjd) * 1440.0 / step_min)) + 1
    mjd = start_mjd + np.arange(n) * step_min / 1440.0
    times = Time(mjd, format="mjd", scale="utc")
    frame = TETE(obstime=times)
    sun = get_body("sun", times).frame.transform_to(frame).cartesian
    moon = get_body("moon", times).frame.transform_to(frame).cartesian
    ra = np.atleast_1d(np.asarray(target_ra_deg, dtype=float))
    dec = np.atleast_1d(np.asarray(target_dec_deg, dtype=float))
    tgt = np.empty((ra.size, 3, n))
    for i in range(ra.size):
        xyz = ICRS(ra=ra[i] * u.deg, dec=dec[i] * u.deg).transform_to(frame).cartesian.xyz.value
        tgt[i] = xyz / np.linalg.norm(xyz, axis=0)
    sun_km = sun.xyz.to_value(u.km)
    gast = times.sidereal_time("apparent", "greenwich").deg
    return sky.Ephemeris(mjd=mjd, gast_deg=np.degrees(np.unwrap(np.radians(gast))),
                         sun_xyz=sun_km / np.linalg.norm(sun_km, axis=0), sun_dist_km=np.linalg.norm(sun_km, axis=0),
                         moon_xyz_km=moon.xyz.to_value(u.km), target_xyz=tgt)


def _angle_rad(a, b):
    """Angle between vectors with the component axis first."""
    return np.arctan2(np.linalg.norm(np.cross(a, b, axis=0), axis=0), np.sum(a * b, axis=0))


# --- UT1 - UTC ----------------------------------------------------------------------------
def test_ut1_minus_utc_is_astropys_table_value():
    from astropy.time import Time
    from astropy.utils import iers

    from kncast.planner.visibility import eop

    table = iers.IERS_Auto.open()  # astropy's default table (downloads off, kncast.planner._offline)
    rng = np.random.default_rng(18)
    end = float(table["MJD"][-1].value)
    mjd = np.concatenate([rng.uniform(41000.0, end + 400.0, 5000),   # before, inside and past the table
                          57203.0 + np.linspace(-1, 1, 41),          # across the 2015-06-30 leap second
                          [41684.0, end, end + 0.5]])
    t = Time(mjd, format="mjd", scale="utc")
    ours = eop.ut1_minus_utc(t.jd1, t.jd2)
    ref = table.ut1_utc(t.jd1, t.jd2).to_value("s")
    assert np.max(np.abs(ours - ref)) < 1e-12
    assert eop.table_end_mjd() == end


# --- the ephemeris --------------------------------------------------------------------------
SPANS = [61477.4, 45120.0, 57200.3, 60600.0]  # the demo's March 2027, 1982, across the 2015 leap second, 2024


@pytest.mark.parametrize("start", SPANS)
def test_erfa_ephemeris_matches_astropy_frames(start):
    ra, dec = [160.625, 12.0, 251.5], [-35.2, 81.0, -9.0]
    ours = sky.Ephemeris.build(start, start + 4.0, ra, dec)
    ref = ephemeris_with_frames(start, start + 4.0, ra, dec)
    np.testing.assert_array_equal(ours.mjd, ref.mjd)
    assert np.max(np.abs(ours.gast_deg - ref.gast_deg)) * 3600 < 1e-6  # micro-arcsec
    assert np.max(_angle_rad(ours.sun_xyz, ref.sun_xyz)) < 1e-10
    assert np.max(np.abs(ours.sun_dist_km / ref.sun_dist_km - 1)) < 1e-11
    assert np.max(_angle_rad(ours.moon_xyz_km, ref.moon_xyz_km)) < 1e-10
    assert np.max(np.abs(np.linalg.norm(ours.moon_xyz_km, axis=0) - np.linalg.norm(ref.moon_xyz_km, axis=0))) < 1e-3
    for k in range(len(ra)):
        assert np.max(_angle_rad(ours.target_xyz[k], ref.target_xyz[k])) < 1e-12


# --- the plan does not change ------------------------------------------------------------
def _differences(a, b, path="", out=None):
    """Every place where two JSON-like documents differ: numbers beyond 1e-6 relative, anything else unequal."""
    out = [] if out is None else out
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            out.append(f"{path}: keys {sorted(a.keys() ^ b.keys())}")
        for k in a.keys() & b.keys():
            _differences(a[k], b[k], f"{path}/{k}", out)
    elif isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        if len(a) != len(b):
            out.append(f"{path}: length {len(a)} != {len(b)}")
        for k, (x, y) in enumerate(zip(a, b)):
            _differences(x, y, f"{path}[{k}]", out)
    elif (isinstance(a, (int, float)) and isinstance(b, (int, float))
          and not isinstance(a, bool) and not isinstance(b, bool)):
        if not (a == b or (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-6, abs_tol=0.0)):
            out.append(f"{path}: {a!r} != {b!r}")
    elif a != b:
        out.append(f"{path}: {a!r} != {b!r}")
    return out


def test_demo_plan_is_the_same_with_the_frames_ephemeris(monkeypatch, demo_event_path):
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.output import to_jsonable
    from kncast.planner.plan.core import build_plan
    from kncast.planner.plan.folder import document
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load()
    event = load_event(demo_event_path)

    def plan_doc():
        plan = build_plan(event, registry.select(None), nights=10, registry=registry)
        return to_jsonable(document(plan, {}))

    fast = plan_doc()
    monkeypatch.setattr(sky.Ephemeris, "build", classmethod(
        lambda cls, start, end, ra, dec, step_min=sky.GRID_STEP_MIN: ephemeris_with_frames(start, end, ra, dec, step_min)))
    slow = plan_doc()
    assert sum(1 for n in fast["nights"] if n["epoch"]) > 20  # the comparison covers planned nights
    assert _differences(fast, slow) == []
