"""Parallactic angle against outside references.

* astroplan's ``Observer.parallactic_angle`` (reference library; Meeus 1998 eq. 14.1 with astropy's
  sidereal time).  astroplan takes the target's right ascension as given, so it is handed the place of
  date: the apparent place (``TETE``, with apparent sidereal time) and, as a second and more independent
  path, the mean place of date (``FK5`` with equinox = date, IAU 1976 precession, mean sidereal time,
  no nutation or aberration).  Given plain ICRS coordinates astroplan is off by the precession since
  J2000 (more than 1 deg near the zenith in 2027), which is why it is not compared that way.
* The definition itself: q is the position angle, north through east, of the zenith seen from the
  target; astropy's ``AltAz`` frame gives the point straight above the target.
* Hand values of Meeus' formula and its sign convention.
"""
from __future__ import annotations

import numpy as np
import pytest

import kncast.planner  # noqa: F401  (offline IERS set-up before astropy/astroplan time transforms)
from kncast.planner.visibility.parallactic import (parallactic_angle_deg, parallactic_angle_ephemeris_deg,
                                                   parallactic_angle_from_hour_angle_deg)
from kncast.planner.visibility.sky import Ephemeris, SiteArrays

TOL_DEG = 0.1  # the tolerance against astroplan
MIN_ALTITUDE_DEG = 5.0
MAX_ALTITUDE_DEG = 85.0  # q is ill-conditioned next to the zenith
LATITUDES = np.array([-45.0, -30.2, 0.5, 19.8, 52.0])
LONGITUDES = np.array([170.5, -70.7, 30.0, -155.5, 10.0])
TARGETS = [(150.0, -20.0), (45.0, 60.0), (280.0, 5.0)]  # (ra, dec) ICRS deg; dec 60 passes north of the zenith
START_UTC = "2027-03-14T00:00:00"


def _wrap(a):
    return (np.asarray(a) + 180.0) % 360.0 - 180.0


@pytest.fixture(scope="module")
def grid():
    from astropy.time import Time

    t0 = Time(START_UTC, scale="utc")
    mjd = t0.mjd + np.arange(0.0, 1.0, 1.0 / 72.0)  # every 20 minutes: all hour angles
    return mjd, Time(mjd, format="mjd", scale="utc")


def _observer(lat, lon):
    import astropy.units as u
    from astroplan import Observer
    from astropy.coordinates import EarthLocation

    return Observer(location=EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, 0.0 * u.m))


def _usable(obs, coord, times):
    from astropy.coordinates import AltAz

    alt = coord.transform_to(AltAz(obstime=times, location=obs.location)).alt.deg
    return (alt > MIN_ALTITUDE_DEG) & (alt < MAX_ALTITUDE_DEG)


@pytest.mark.parametrize("ra, dec", TARGETS)
def test_against_astroplan_sites_by_times(grid, ra, dec):
    import astropy.units as u
    from astropy.coordinates import FK5, TETE, SkyCoord

    mjd, times = grid
    ours = parallactic_angle_deg(mjd, LATITUDES[:, None], LONGITUDES[:, None], ra, dec)  # (n_sites, n_times)
    assert ours.shape == (LATITUDES.size, mjd.size)
    target = SkyCoord(ra * u.deg, dec * u.deg)
    apparent = SkyCoord(target.transform_to(TETE(obstime=times)))
    mean_of_date = SkyCoord(target.transform_to(FK5(equinox=times)))
    checked = 0
    for i, (lat, lon) in enumerate(zip(LATITUDES, LONGITUDES)):
        obs = _observer(lat, lon)
        ok = _usable(obs, target, times)
        for coord, kind in ((apparent, "apparent"), (mean_of_date, "mean")):
            ref = obs.parallactic_angle(times, coord, kind=kind).deg
            assert np.abs(_wrap(ours[i] - ref))[ok].max(initial=0.0) < TOL_DEG, (lat, kind)
        # on each side of the meridian, and the sign follows the hour angle
        h = _wrap(obs.local_sidereal_time(times, kind="apparent").deg - apparent.ra.deg)
        assert np.all(np.sign(ours[i][ok & (np.abs(h) > 1) & (np.abs(ours[i]) < 179)]) ==
                      np.sign(h[ok & (np.abs(h) > 1) & (np.abs(ours[i]) < 179)]))
        checked += ok.sum()
    assert checked > 50


def test_ephemeris_path_agrees(grid):
    import astropy.units as u
    from astropy.coordinates import TETE, SkyCoord

    mjd, times = grid
    ra, dec = TARGETS[0]
    eph = Ephemeris.build(mjd[0] - 0.05, mjd[-1] + 0.05, ra, dec)
    sites = SiteArrays(LATITUDES[:, None], LONGITUDES[:, None], np.zeros((LATITUDES.size, 1)))
    from_eph = parallactic_angle_ephemeris_deg(eph, sites, mjd)
    direct = parallactic_angle_deg(mjd, LATITUDES[:, None], LONGITUDES[:, None], ra, dec)
    apparent = SkyCoord(SkyCoord(ra * u.deg, dec * u.deg).transform_to(TETE(obstime=times)))
    for i, (lat, lon) in enumerate(zip(LATITUDES, LONGITUDES)):
        obs = _observer(lat, lon)
        ok = _usable(obs, SkyCoord(ra * u.deg, dec * u.deg), times)
        ref = obs.parallactic_angle(times, apparent, kind="apparent").deg
        assert np.abs(_wrap(from_eph[i] - ref))[ok].max() < TOL_DEG
        assert np.abs(_wrap(from_eph[i] - direct[i]))[ok].max() < 0.01  # interpolated tables vs ERFA


def test_definition_position_angle_of_the_zenith():
    # q = position angle (north through east, true equator of date) of the zenith seen from the target:
    # the point 0.2 deg straight above the target in astropy's AltAz frame lies on that great circle.
    import astropy.units as u
    from astropy.coordinates import TETE, AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    lat, lon = -30.2, -70.7
    t = Time(START_UTC, scale="utc")
    frame = AltAz(obstime=t, location=EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, 0.0 * u.m))
    alt, az = np.meshgrid([15.0, 40.0, 65.0], [10.0, 80.0, 170.0, 200.0, 275.0, 350.0])
    star = SkyCoord(alt=alt.ravel() * u.deg, az=az.ravel() * u.deg, frame=frame)
    above = SkyCoord(alt=(alt.ravel() + 0.2) * u.deg, az=az.ravel() * u.deg, frame=frame)
    of_date = TETE(obstime=t)
    expected = star.transform_to(of_date).position_angle(above.transform_to(of_date)).deg
    icrs = star.icrs
    ours = parallactic_angle_deg(t.mjd, lat, lon, icrs.ra.deg, icrs.dec.deg)
    assert np.abs(_wrap(ours - expected)).max() < TOL_DEG
    # east of the meridian (azimuth 0-180 deg, sin H < 0) q < 0, at any latitude: q has the sign of sin H
    assert np.all((ours < 0) == (az.ravel() < 180.0))


def test_meeus_formula_hand_values_and_sign_convention():
    # phi = 30, dec = 0, H = +-30 deg: tan q = sin 30 / tan 30 = cos 30 -> q = +-40.8934 deg (Meeus eq. 14.1)
    q = parallactic_angle_from_hour_angle_deg(np.array([30.0, -30.0]), 30.0, 0.0)
    np.testing.assert_allclose(q, [40.8934, -40.8934], atol=1e-4)
    # on the meridian: q = 0 south of the zenith, 180 north of it, in either hemisphere
    assert parallactic_angle_from_hour_angle_deg(0.0, 30.0, 10.0) == 0.0
    assert abs(parallactic_angle_from_hour_angle_deg(0.0, 30.0, 50.0)) == 180.0
    assert parallactic_angle_from_hour_angle_deg(0.0, -30.0, -50.0) == 0.0
    assert abs(parallactic_angle_from_hour_angle_deg(0.0, -30.0, 10.0)) == 180.0
    # on the equator a target on the celestial equator rises and sets vertically: q = -90 east, +90 west
    np.testing.assert_allclose(parallactic_angle_from_hour_angle_deg([-45.0, 45.0], 0.0, 0.0), [-90.0, 90.0])
