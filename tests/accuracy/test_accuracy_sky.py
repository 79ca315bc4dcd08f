"""Sky geometry and twilight against outside references.

* Dusk and dawn: skyfield's almanac (independent library: JPL DE421 ephemeris,
  its own Earth-rotation code; UT1 from the same IERS table) with
  ``almanac.dark_twilight_day`` and ``find_discrete``.
* Target and Moon altitudes: astropy's ``AltAz`` frame (full transformation
  chain with no refraction), not our interpolated tables.
* Moon illuminated fraction: skyfield's ``almanac.fraction_illuminated``.
* Airmass: the published Kasten & Young (1989) formula, Hardie (1962), sec z.
"""
from __future__ import annotations

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_body
from astropy.time import Time

from kncast.forecast.airmass import airmass_kasten_young
from kncast.planner.visibility import sky
from kncast.planner._offline import skyfield_ephemeris, skyfield_timescale
from kncast.planner.events.model import Event
from kncast.planner.sites import SiteRegistry
from kncast.planner.visibility.core import compute_visibility

TWILIGHT_TOL_S = 30.0  # the tolerance for dusk/dawn against skyfield
ALTITUDE_TOL_ARCSEC = 5.0  # the tolerance for altitudes against astropy
# skyfield's dark_twilight_day codes: 0 dark, 1 astronomical, 2 nautical, 3 civil twilight, 4 day
TWILIGHT_CODE = {"civil": 3, "nautical": 2, "astronomical": 1}

CASES = [  # (site id, t0, twilight)
    ("paranal", "2027-03-14T12:00:00", "nautical"),
    ("la-palma", "2027-06-18T12:00:00", "astronomical"),
    ("maunakea", "2027-01-10T20:00:00", "civil"),
    ("mount-john", "2026-12-20T00:00:00", "nautical"),
    ("hanle", "2027-04-02T06:00:00", "astronomical"),
]


@pytest.fixture(scope="module")
def registry():
    return SiteRegistry.load()


def _location(site):
    return EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg, site.elevation_m * u.m)


def _skyfield_twilight(site, start_mjd, end_mjd, twilight):
    """(dusk, dawn) MJD lists from skyfield's almanac for the named twilight."""
    from skyfield import almanac
    from skyfield.api import wgs84

    ts, eph = skyfield_timescale(), skyfield_ephemeris()
    topos = wgs84.latlon(site.latitude_deg, site.longitude_deg, elevation_m=site.elevation_m)
    t0, t1 = (ts.from_astropy(Time(m, format="mjd", scale="utc")) for m in (start_mjd, end_mjd))
    times, codes = almanac.find_discrete(t0, t1, almanac.dark_twilight_day(eph, topos))
    mjd = Time(times.tt, format="jd", scale="tt").utc.mjd
    c = TWILIGHT_CODE[twilight]
    prev = np.concatenate([[codes[0] + (1 if codes[0] < 4 else -1)], codes[:-1]])
    dusk = mjd[(prev >= c) & (codes < c)]
    dawn = mjd[(prev < c) & (codes >= c)]
    return dusk, dawn


@pytest.mark.parametrize("site_id,t0,twilight", CASES)
def test_dusk_dawn_against_skyfield_almanac(registry, site_id, t0, twilight):
    site = registry.get(site_id)
    ev = Event("acc", 100.0, 0.0, Time(t0, scale="utc"), distance_mpc=50.0)
    res = compute_visibility(ev, [site], nights=3, twilight=twilight)
    ours_dusk = np.array([n.dusk.mjd for n in res.nights])
    ours_dawn = np.array([n.dawn.mjd for n in res.nights])
    b = res.night_bounds_mjd[0]
    sf_dusk, sf_dawn = _skyfield_twilight(site, b[0], b[-1], twilight)
    assert sf_dusk.size == 3 and sf_dawn.size == 3
    assert np.abs(ours_dusk - sf_dusk).max() * 86400 < TWILIGHT_TOL_S
    assert np.abs(ours_dawn - sf_dawn).max() * 86400 < TWILIGHT_TOL_S


def test_target_altitude_against_astropy_altaz(registry):
    rng = np.random.default_rng(7)
    ra, dec = rng.uniform(0, 360, 4), rng.uniform(-80, 80, 4)
    start = Time("2027-05-01T00:00:00", scale="utc").mjd
    eph = sky.Ephemeris.build(start, start + 3.0, ra, dec)
    mjd = start + rng.uniform(0, 3.0, 40)  # random instants between the tabulated grid points
    for site in list(registry)[:4]:
        frame = AltAz(obstime=Time(mjd, format="mjd", scale="utc"), location=_location(site), pressure=0 * u.hPa)
        arrays = sky.SiteArrays.of([site])
        for k in range(ra.size):
            ours, _ = sky.target_altaz_deg(eph, arrays, mjd, k)
            ref = SkyCoord(ra[k] * u.deg, dec[k] * u.deg).transform_to(frame).alt.deg
            assert np.abs(ours[0] - ref).max() * 3600 < ALTITUDE_TOL_ARCSEC


def test_moon_altitude_against_astropy_altaz(registry):
    start = Time("2027-08-10T00:00:00", scale="utc").mjd
    eph = sky.Ephemeris.build(start, start + 2.0, [0.0], [0.0])
    mjd = start + np.linspace(0.013, 1.97, 37)
    for site in list(registry)[:3]:
        t = Time(mjd, format="mjd", scale="utc")
        loc = _location(site)
        ref = get_body("moon", t, loc).transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa)).alt.deg
        _, ours = sky.moon_topocentric(eph, sky.SiteArrays.of([site]), mjd)
        assert np.abs(ours[0] - ref).max() * 3600 < ALTITUDE_TOL_ARCSEC


def test_moon_illumination_against_skyfield():
    from skyfield import almanac

    start = Time("2027-03-10T00:00:00", scale="utc").mjd
    eph = sky.Ephemeris.build(start, start + 20.0, [0.0], [0.0])
    mjd = start + np.linspace(0.1, 19.9, 25)
    ours, _ = sky.moon_illumination(eph, mjd)
    ts = skyfield_timescale()
    ref = almanac.fraction_illuminated(skyfield_ephemeris(), "moon", ts.from_astropy(Time(mjd, format="mjd")))
    assert np.abs(ours - ref).max() < 0.002


# --- airmass ---------------------------------------------------------------------------
def _kasten_young_published(z_deg: float) -> float:
    # Kasten & Young (1989), Applied Optics 28, 4735, eq. (3): X = 1 / [cos z + a (b - z)^-c]
    # with a = 0.50572, b = 96.07995 deg, c = 1.6364 (constants as printed in the paper)
    return 1.0 / (math.cos(math.radians(z_deg)) + 0.50572 * (96.07995 - z_deg) ** -1.6364)


def _hardie(z_deg: float) -> float:
    # Hardie (1962), in Astronomical Techniques (Hiltner, ed.), p. 180: polynomial in (sec z - 1)
    s = 1.0 / math.cos(math.radians(z_deg)) - 1.0
    return 1.0 + s - 0.0018167 * s - 0.002875 * s ** 2 - 0.0008083 * s ** 3


@pytest.mark.parametrize("z", [60.0, 75.0, 80.0])
def test_airmass_matches_published_kasten_young(z):
    assert float(airmass_kasten_young(z)) == pytest.approx(_kasten_young_published(z), rel=1e-12)


@pytest.mark.parametrize("z,tol", [(60.0, 0.002), (75.0, 0.005)])
def test_airmass_agrees_with_hardie_1962(z, tol):
    # two independent published fits agree to a few thousandths well above the horizon
    assert float(airmass_kasten_young(z)) == pytest.approx(_hardie(z), abs=tol)


@pytest.mark.parametrize("z", [0.0, 10.0, 20.0, 30.0])
def test_airmass_near_zenith_is_sec_z(z):
    # plane-parallel atmosphere: X = sec z near the zenith (common practice)
    assert float(airmass_kasten_young(z)) == pytest.approx(1.0 / math.cos(math.radians(z)), abs=1e-3)
