"""HEALPix sky maps: reading, validation, orderings, multi-order tables and coverage with known answers.

Every map here is generated inside the test (small nside) in a temporary folder.
"""
from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pytest
from astropy.io import fits

from kncast.forecast.errors import DataFileError
from kncast.planner.events.model import Event, parse_time_utc
from kncast.planner.sites import Site, SiteRegistry
from kncast.planner.events.skymap import SkymapWarning, load_skymap, truncated_power_moments

T0 = parse_time_utc("2027-04-10T03:00:00Z", "t0")


# --- writing test maps -----------------------------------------------------------
def write_flat(path, prob, nside, ordering="NESTED", columns=None, **header):
    cols = [fits.Column(name="PROB", format="D", array=np.asarray(prob, float))]
    cols += [fits.Column(name=k, format="D", array=np.asarray(v, float)) for k, v in (columns or {}).items()]
    hdu = fits.BinTableHDU.from_columns(cols)
    keys = {"PIXTYPE": "HEALPIX", "ORDERING": ordering, "NSIDE": nside, "COORDSYS": "C", "INDXSCHM": "IMPLICIT"}
    keys.update(header)
    for k, v in keys.items():
        if v is None:
            hdu.header.remove(k, ignore_missing=True)
        else:
            hdu.header[k] = v
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=True)
    return path


def write_uniq(path, uniq, density_per_sr, columns=None, **header):
    cols = [fits.Column(name="UNIQ", format="K", array=np.asarray(uniq, np.int64)),
            fits.Column(name="PROBDENSITY", format="D", unit="sr-1", array=np.asarray(density_per_sr, float))]
    cols += [fits.Column(name=k, format="D", array=np.asarray(v, float)) for k, v in (columns or {}).items()]
    hdu = fits.BinTableHDU.from_columns(cols)
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NUNIQ", "COORDSYS": "C", **header})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=True)
    return path


def nested_xyz(nside):
    from astropy_healpix import healpix_to_xyz

    return np.stack(healpix_to_xyz(np.arange(12 * nside * nside), nside, order="nested"))


def cap_prob(nside, dec_max_deg=None, dec_min_deg=None):
    """Uniform probability over the pixels with centre Dec below dec_max (or above dec_min)."""
    z = nested_xyz(nside)[2]
    inside = np.ones_like(z, bool)
    if dec_max_deg is not None:
        inside &= z < math.sin(math.radians(dec_max_deg))
    if dec_min_deg is not None:
        inside &= z > math.sin(math.radians(dec_min_deg))
    p = inside.astype(float)
    return p / p.sum()


@pytest.fixture(scope="module")
def registry():
    return SiteRegistry.load()


# --- orderings -------------------------------------------------------------------
def test_ring_and_nested_files_agree_with_astropy_healpix(tmp_path):
    from astropy_healpix import lonlat_to_healpix
    from astropy_healpix.core import nested_to_ring
    import astropy.units as u

    nside = 32
    rng = np.random.default_rng(7)
    p_nested = rng.random(12 * nside * nside)
    p_nested /= p_nested.sum()
    p_ring = np.empty_like(p_nested)
    p_ring[nested_to_ring(np.arange(p_nested.size), nside)] = p_nested  # reference permutation
    a = load_skymap(write_flat(tmp_path / "n.fits", p_nested, nside, "NESTED"))
    b = load_skymap(write_flat(tmp_path / "r.fits", p_ring, nside, "RING"))
    assert np.array_equal(a.prob, b.prob) and np.allclose(a.xyz, b.xyz, atol=1e-15)
    # the pixel astropy-healpix finds for random positions holds the same value in both readings
    lon, lat = rng.uniform(0, 360, 200) * u.deg, np.degrees(np.arcsin(rng.uniform(-1, 1, 200))) * u.deg
    ring_idx = lonlat_to_healpix(lon, lat, nside, order="ring")
    nest_idx = lonlat_to_healpix(lon, lat, nside, order="nested")
    assert np.allclose(b.prob[nest_idx], p_ring[ring_idx] / p_ring.sum())


def test_pixel_centres_follow_the_healpix_paper(tmp_path):
    # Gorski et al. 2005 (ApJ 622, 759), eq. (4): polar-cap pixel centres of ring i lie at
    # z = 1 - i^2 / (3 Nside^2), phi = pi / (2 i) (j - 1/2); RING pixel 0 is i = j = 1.
    nside = 4
    p = np.zeros(12 * nside * nside)
    p[0] = 1.0
    m = load_skymap(write_flat(tmp_path / "r.fits", p, nside, "RING"))
    ra, dec = m.peak_radec_deg()
    assert ra == pytest.approx(45.0, abs=1e-9)
    assert dec == pytest.approx(math.degrees(math.asin(1 - 1 / (3 * nside ** 2))), abs=1e-9)


# --- normalisation and bad values ------------------------------------------------
def test_normalisation_quiet_warned_refused(tmp_path):
    nside = 16
    p = cap_prob(nside, dec_max_deg=-60)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        m = load_skymap(write_flat(tmp_path / "a.fits", p * (1 + 2e-5), nside))  # rounding: silent
    assert m.prob.sum() == pytest.approx(1.0, abs=1e-12) and m.renormalised_from is None
    with pytest.warns(SkymapWarning, match="renormalised"):
        m = load_skymap(write_flat(tmp_path / "b.fits", p * 1.005, nside))
    assert m.prob.sum() == pytest.approx(1.0, abs=1e-12) and m.renormalised_from == pytest.approx(1.005)
    with pytest.raises(DataFileError, match=r"sum to 0\.5, not 1"):
        load_skymap(write_flat(tmp_path / "c.fits", p * 0.5, nside))


@pytest.mark.parametrize("value, words", [(np.nan, "non-finite"), (np.inf, "non-finite"), (-1e-3, "negative")])
def test_bad_probabilities(tmp_path, value, words):
    p = cap_prob(16, dec_max_deg=-60)
    p[5] = value
    path = write_flat(tmp_path / "bad.fits", p, 16)
    with pytest.raises(DataFileError, match=words) as err:
        load_skymap(path)
    assert str(path) in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("header, rows, words", [
    (dict(ORDERING="SPIRAL"), 16, "ORDERING: value 'SPIRAL' not recognised"),
    (dict(ORDERING=None), 16, "ORDERING: header keyword missing"),
    (dict(NSIDE=8), 16, "NSIDE: value 8 needs 768 pixels"),
    (dict(NSIDE=None), 16, None),  # NSIDE inferred from the length: accepted
    (dict(COORDSYS="E"), 16, "COORDSYS"),
    (dict(PIXTYPE="CAR"), 16, "PIXTYPE"),
    (dict(INDXSCHM="EXPLICIT"), 16, "partial-sky"),
    (dict(NSIDE=3), 3, "not a power of 2"),
])
def test_bad_headers(tmp_path, header, rows, words):
    p = np.full(12 * rows * rows, 1.0 / (12 * rows * rows))
    path = write_flat(tmp_path / "h.fits", p, rows, **header)
    if words is None:
        assert load_skymap(path).npix == p.size
        return
    with pytest.raises(DataFileError) as err:
        load_skymap(path)
    assert words in str(err.value) and str(path) in str(err.value)


def test_corrupt_and_missing_files(tmp_path):
    good = write_flat(tmp_path / "good.fits", cap_prob(16, dec_max_deg=-60), 16)
    raw = good.read_bytes()
    (tmp_path / "trunc.fits").write_bytes(raw[: len(raw) // 2])
    (tmp_path / "junk.fits").write_bytes(b"not a fits file at all\n" * 200)
    (tmp_path / "empty.fits").write_bytes(b"")
    for name in ("trunc.fits", "junk.fits", "empty.fits"):
        with pytest.raises(DataFileError, match="not a readable FITS file") as err:
            load_skymap(tmp_path / name)
        assert str(tmp_path / name) in str(err.value) and "\n" not in str(err.value)
    with pytest.raises(DataFileError, match="file not found"):
        load_skymap(tmp_path / "absent.fits")
    fits.PrimaryHDU(np.zeros((4, 4))).writeto(tmp_path / "image.fits")
    with pytest.raises(DataFileError, match="no binary table"):
        load_skymap(tmp_path / "image.fits")


# --- multi-order tables ----------------------------------------------------------
def merged_uniq(p_nested, nside):
    """A multi-order tiling of a flat NESTED map: groups of 4 equal children become their parent."""
    level = int(math.log2(nside))
    groups = p_nested.reshape(-1, 4)
    equal = np.all(groups == groups[:, :1], axis=1)
    area = 4 * math.pi / (12 * nside * nside)
    parents = np.flatnonzero(equal)
    children = (np.flatnonzero(~equal)[:, None] * 4 + np.arange(4)).ravel()
    uniq = np.concatenate([4 * 4 ** (level - 1) + parents, 4 * 4 ** level + children])
    density = np.concatenate([groups[parents, 0] / area, p_nested[children] / area])
    return uniq, density


def test_uniq_table_equals_the_flat_map(tmp_path):
    nside = 32
    p = cap_prob(nside, dec_max_deg=-55)
    flat = load_skymap(write_flat(tmp_path / "flat.fits", p, nside))
    uniq, density = merged_uniq(p, nside)
    multi = load_skymap(write_uniq(tmp_path / "moc.fits", uniq, density))
    assert multi.npix < flat.npix and multi.ordering == "NUNIQ"
    assert np.allclose(multi.resample_nested(multi.density_per_sr, 5), flat.density_per_sr, rtol=1e-12)
    assert multi.credible_area_deg2(0.9) == pytest.approx(flat.credible_area_deg2(0.9), rel=0.02)
    # a single-level UNIQ table is the flat map pixel for pixel
    same = load_skymap(write_uniq(tmp_path / "one.fits", 4 * 4 ** 5 + np.arange(p.size),
                                  p / (4 * math.pi / p.size)))
    assert np.allclose(same.prob, flat.prob) and np.allclose(same.xyz, flat.xyz)


def test_uniq_overlap_gap_and_units(tmp_path):
    base = 4 * 4 ** 1 + np.arange(48)  # level 1: 48 pixels
    d = np.full(48, 1 / (4 * math.pi))
    with pytest.raises(DataFileError, match="overlap"):
        load_skymap(write_uniq(tmp_path / "o.fits", np.r_[base, 4 * 4 ** 2], np.r_[d, d[0]]))
    with pytest.raises(DataFileError, match="cover"):
        load_skymap(write_uniq(tmp_path / "g.fits", base[:-1], d[:-1] * 48 / 47))
    with pytest.raises(DataFileError, match="ORDERING"):
        load_skymap(write_uniq(tmp_path / "w.fits", base, d, ORDERING="NESTED"))


# --- distance columns ------------------------------------------------------------
def test_distance_moments_match_numerical_integration():
    from scipy.integrate import quad

    # independent reference: scipy's adaptive quadrature of r^k exp(-(r - mu)^2 / 2 sigma^2) on r > 0
    for mu, sigma in [(100.0, 10.0), (40.0, 35.0), (-20.0, 30.0)]:
        m = truncated_power_moments(np.array([mu]), np.array([sigma]), 4)
        for k in range(5):
            ref = quad(lambda r: r ** k * math.exp(-0.5 * ((r - mu) / sigma) ** 2), 0, mu + 40 * sigma + 400)[0]
            assert m[k][0] == pytest.approx(ref, rel=1e-8)


def test_distance_columns_give_map_distance(tmp_path):
    nside = 16
    p = cap_prob(nside, dec_max_deg=-60)
    n = p.size
    cols = {"DISTMU": np.full(n, 100.0), "DISTSIGMA": np.full(n, 10.0), "DISTNORM": np.full(n, 1e-4)}
    m = load_skymap(write_flat(tmp_path / "d.fits", p, nside, columns=cols))
    mean, std = m.distance_moments_mpc()
    # the r^2-weighted Gaussian: mean = I3 / I2, with I_k from numerical quadrature (scipy)
    from scipy.integrate import quad

    i2 = quad(lambda r: r ** 2 * math.exp(-0.5 * ((r - 100) / 10) ** 2), 0, 300)[0]
    i3 = quad(lambda r: r ** 3 * math.exp(-0.5 * ((r - 100) / 10) ** 2), 0, 300)[0]
    i4 = quad(lambda r: r ** 4 * math.exp(-0.5 * ((r - 100) / 10) ** 2), 0, 300)[0]
    assert mean == pytest.approx(i3 / i2, rel=1e-9) and std == pytest.approx(math.sqrt(i4 / i2 - (i3 / i2) ** 2), rel=1e-6)
    bad = dict(cols, DISTSIGMA=np.full(n, -1.0))
    with pytest.raises(DataFileError, match="DISTSIGMA"):
        load_skymap(write_flat(tmp_path / "e.fits", p, nside, columns=bad))


def test_distance_header_keywords_without_columns(tmp_path):
    # the all-sky distance keywords of a probability map's header (DISTMEAN, DISTSTD, Mpc) are read when the
    # map has no per-pixel distance columns
    nside = 8
    m = load_skymap(write_flat(tmp_path / "h.fits", cap_prob(nside, dec_max_deg=0), nside, DISTMEAN=95.0, DISTSTD=20.0))
    assert m.distmu_mpc is None and m.distance_moments_mpc() == (95.0, 20.0)


def test_galactic_map_is_turned_to_icrs(tmp_path):
    from astropy_healpix import lonlat_to_healpix
    import astropy.units as u

    nside = 64
    p = np.zeros(12 * nside * nside)
    p[lonlat_to_healpix(0 * u.deg, 89.9 * u.deg, nside, order="nested")] = 1.0  # Galactic north pole pixel
    m = load_skymap(write_flat(tmp_path / "g.fits", p, nside, COORDSYS="G"))
    ra, dec = m.peak_radec_deg()
    # North Galactic pole in ICRS: RA 192.8595, Dec +27.1283 (Hipparcos/ICRS definition, ESA 1997, vol. 1, sec. 1.5.3)
    assert abs(ra - 192.8595) * math.cos(math.radians(27.13)) < 1.0 and abs(dec - 27.1283) < 1.0


# --- coverage with known answers -------------------------------------------------
def test_south_polar_cap_seen_from_south_not_from_north(tmp_path, registry):
    from kncast.planner.visibility.skycoverage import compute_coverage

    nside = 32
    m = load_skymap(write_flat(tmp_path / "cap.fits", cap_prob(nside, dec_max_deg=-80), nside))
    sites = registry.select(["mount-john", "la-palma"])
    res = compute_coverage(m, sites, T0, nights=2)
    by = {(n.site.id, k % 2): n for k, n in enumerate(res.nights)}
    # Mount John, latitude -44.0 deg: a star at Dec <= -80 stays between 34 and 54 deg altitude
    # (|lat| -/+ (90 - |dec|), textbook spherical astronomy), above the 20 deg limit all night.
    south = by[("mount-john", 1)]
    assert south.observable_probability == pytest.approx(1.0, abs=1e-12)
    assert south.weighted_hours == pytest.approx(south.dark_hours, rel=1e-9) and south.dark_hours > 9
    assert south.area90_observable_deg2 == pytest.approx(m.credible_area_deg2(0.9), rel=1e-9)
    # La Palma, +28.8 deg: the highest altitude of Dec -80 is 90 - |28.8 + 80| < 0: never up.
    north = by[("la-palma", 1)]
    assert north.observable_probability == 0 and north.weighted_hours == 0 and north.area90_observable_deg2 == 0
    cap = m.prob > 0
    assert res.observable[cap, 1].all() and not res.observable[cap, 3].any()  # per-pixel flags agree


def test_polar_night_at_the_pole_is_a_declination_cut(tmp_path):
    from kncast.planner.visibility.skycoverage import compute_coverage

    # At the south pole the altitude of a star equals minus its declination, and in June the Sun
    # (declination +23.4 deg) stays 23 deg below the horizon: 24 h of nautical darkness
    # (textbook spherical astronomy).  With a 20 deg limit a uniform map is observable where
    # Dec < -20 deg: a fraction (1 - sin 20 deg) / 2 of the sphere, for 24 h.
    pole = Site(id="pole", name="test pole", latitude_deg=-90.0, longitude_deg=0.0, elevation_m=2800.0,
                timezone="UTC", min_altitude_deg=20.0)
    nside = 64
    m = load_skymap(write_flat(tmp_path / "u.fits", np.full(12 * nside ** 2, 1 / (12 * nside ** 2)), nside))
    res = compute_coverage(m, [pole], parse_time_utc("2027-06-20T00:00:00Z", "t0"), nights=2, step_min=30)
    night = res.nights[1]
    expected = (1 - math.sin(math.radians(20))) / 2
    assert night.dusk is None and night.dawn is None and night.dark_hours == pytest.approx(24.0, abs=1e-6)
    assert night.observable_probability == pytest.approx(expected, abs=0.004)  # pixel quantisation at nside 64
    assert night.weighted_hours == pytest.approx(24.0 * night.observable_probability, rel=1e-9)


@pytest.mark.parametrize("site_id, ra_deg, dec_deg, moon_sep", [
    ("paranal", 150.0, -25.0, None),  # well placed in April nights
    ("la-palma", 250.0, 40.0, None),  # rises in the north-east, behind La Palma's horizon ridge
    ("sutherland", 100.0, 4.3, 40.0),  # about 40 deg from the evening Moon: the Moon rule cuts the window
])
def test_single_pixel_hours_match_visibility_windows(tmp_path, registry, site_id, ra_deg, dec_deg, moon_sep):
    from astropy_healpix import lonlat_to_healpix
    import astropy.units as u

    from kncast.planner.visibility.skycoverage import compute_coverage
    from kncast.planner.visibility.core import compute_visibility

    nside = 64
    p = np.zeros(12 * nside * nside)
    p[lonlat_to_healpix(ra_deg * u.deg, dec_deg * u.deg, nside, order="nested")] = 1.0
    m = load_skymap(write_flat(tmp_path / "one.fits", p, nside))
    ra, dec = m.peak_radec_deg()
    sites = registry.select([site_id])
    res = compute_coverage(m, sites, T0, nights=2, min_moon_sep_deg=moon_sep, step_min=2.0)
    vis = compute_visibility(Event("pix", ra, dec, T0), sites, nights=2, min_moon_sep_deg=moon_sep)
    night = vis.nights[1]
    hours = sum(w.hours for w in night.windows)
    assert 0.3 < hours < night.dark_hours - 1.0  # the rules cut the dark night somewhere
    if moon_sep or sites[0].horizon is not None:  # ... and the horizon or Moon rule is among them
        bare = compute_visibility(Event("pix", ra, dec, T0), [dataclasses.replace(sites[0], horizon=None)], nights=2)
        assert sum(w.hours for w in bare.nights[1].windows) > hours + 0.3
    for cov, rec in zip(res.nights, vis.nights):
        hours = sum(w.hours for w in rec.windows)
        # midpoint sampling every 2 min misplaces each window edge by at most 1 min
        assert cov.weighted_hours == pytest.approx(hours, abs=2 * len(rec.windows) / 60 + 1e-9)
        assert cov.observable_probability == (1.0 if cov.weighted_hours > 0 else 0.0)


def test_altitudes_agree_with_astropy_altaz(tmp_path, registry):
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    from kncast.planner.visibility.skycoverage import frame_vectors, sample_dark_time
    from kncast.planner.visibility.core import compute_visibility

    site = registry.get("paranal")
    vis = compute_visibility(Event("x", 150.0, -25.0, T0), [site], nights=2)
    cols, _ = sample_dark_time(vis, 30.0)
    zen = frame_vectors(vis, cols)[0]
    rng = np.random.default_rng(3)
    ra, dec = rng.uniform(0, 360, 50), np.degrees(np.arcsin(rng.uniform(-1, 1, 50)))
    xyz = np.stack([np.cos(np.radians(dec)) * np.cos(np.radians(ra)),
                    np.cos(np.radians(dec)) * np.sin(np.radians(ra)), np.sin(np.radians(dec))])
    ours = np.degrees(np.arcsin(xyz.T @ zen))  # (50 stars, samples)
    # independent reference: astropy ICRS -> AltAz (no refraction: zero pressure)
    loc = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg, site.elevation_m * u.m)
    times = Time(cols.mjd, format="mjd", scale="utc")
    frame = AltAz(obstime=times[None, :], location=loc, pressure=0 * u.hPa)
    ref = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg).transform_to(frame).alt.deg
    # difference: annual aberration (constant of aberration 20.496 arcsec, IAU 1976 / Astronomical
    # Almanac) and diurnal aberration (0.32 arcsec at the equator), neglected by design: < 25 arcsec
    assert np.max(np.abs(ours - ref)) < 25.0 / 3600.0


def test_moon_direction_agrees_with_astropy_topocentric_moon(registry):
    import astropy.units as u
    from astropy.coordinates import EarthLocation, get_body
    from astropy.time import Time

    from kncast.planner.visibility.skycoverage import frame_vectors, sample_dark_time
    from kncast.planner.visibility.core import compute_visibility

    site = registry.get("sutherland")
    vis = compute_visibility(Event("x", 100.0, 5.0, T0), [site], nights=2)
    cols, _ = sample_dark_time(vis, 60.0)
    moon = frame_vectors(vis, cols)[3]
    # independent reference: astropy's topocentric apparent Moon (GCRS with the observer's position)
    loc = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg, site.elevation_m * u.m)
    times = Time(cols.mjd, format="mjd", scale="utc")
    ref = get_body("moon", times, location=loc).cartesian.xyz.value
    ref = ref / np.linalg.norm(ref, axis=0)
    sep_arcsec = np.degrees(np.arccos(np.clip(np.sum(moon * ref, axis=0), -1, 1))) * 3600
    # both are apparent directions of date taken back to the GCRS axes; the linear interpolation on
    # the 30-min ephemeris grid (< 1 arcsec for the Moon, see kncast.planner.visibility.sky) is the main difference
    assert np.max(sep_arcsec) < 5.0


def test_random_maps_keep_totals_in_range(tmp_path, registry):
    from kncast.planner.visibility.skycoverage import compute_coverage

    rng = np.random.default_rng(11)
    sites = registry.select(["paranal", "maunakea", "la-palma"])
    for trial in range(3):
        nside = 16
        p = rng.random(12 * nside * nside) ** 8  # lumpy
        m = load_skymap(write_flat(tmp_path / f"r{trial}.fits", p / p.sum(), nside))
        res = compute_coverage(m, sites, T0, nights=2, min_moon_sep_deg=float(rng.uniform(0, 60)))
        area90 = m.credible_area_deg2(0.9)
        for k, n in enumerate(res.nights):
            assert 0.0 <= n.observable_probability <= 1.0
            assert 0.0 <= n.weighted_hours <= n.dark_hours * n.observable_probability + 1e-9
            assert 0.0 <= n.area90_observable_deg2 <= area90 + 1e-9
            # the per-pixel flags reproduce the totals
            assert n.observable_probability == pytest.approx(float(m.prob[res.observable[:, k]].sum()), abs=1e-9)
        # resampling conserves probability (intensive density x pixel area)
        for level in (2, 4, 6):
            flat = m.resample_nested(m.density_per_sr, level)
            assert flat.sum() * 4 * math.pi / flat.size == pytest.approx(1.0, rel=1e-12)


# --- fast paths against the direct computation (issue 19) ------------------------
def _reference_credible_mask(m, level):
    """The direct computation: every pixel sorted by decreasing density (stable), cumulative probability before it."""
    order = np.argsort(-(m.prob / m.area_sr), kind="stable")
    p = m.prob[order]
    before = np.empty(m.npix)
    before[order] = np.cumsum(p) - p
    return before < level


def test_block_reader_equals_astropy_columns(tmp_path, monkeypatch):
    import gzip

    from kncast.planner.events import skymap as sm

    # reference: astropy.io.fits reading the same table (an independent library), row by row in file order
    monkeypatch.setattr(sm, "PIXEL_BLOCK", 1000)  # several blocks and a partial last one
    nside = 32
    rng = np.random.default_rng(5)
    p = rng.random(12 * nside * nside)
    cols = {"DISTMU": rng.uniform(50, 150, p.size), "DISTSIGMA": rng.uniform(5, 30, p.size),
            "DISTNORM": rng.uniform(0, 1e-4, p.size)}
    path = write_flat(tmp_path / "d.fits", p / p.sum(), nside, columns=cols)
    ref = fits.getdata(path, 1)
    m = load_skymap(path)
    assert np.array_equal(m.prob, ref["PROB"] / ref["PROB"].sum())
    for name, arr in (("DISTMU", m.distmu_mpc), ("DISTSIGMA", m.distsigma_mpc), ("DISTNORM", m.distnorm_per_mpc2)):
        assert arr.dtype == np.float32 and np.array_equal(arr, ref[name].astype(np.float32))
    # the distance moments come from the float64 columns: as the direct sum over all pixels at once
    mom = truncated_power_moments(ref["DISTMU"], ref["DISTSIGMA"], 4)
    w = m.prob / m.prob.sum()
    mean = float(np.sum(w * mom[3] / mom[2]))
    std = math.sqrt(float(np.sum(w * mom[4] / mom[2])) - mean ** 2)
    assert m.distance_moments_mpc() == pytest.approx((mean, std), rel=1e-12)
    # the same bytes gzip-compressed are read the same
    (tmp_path / "d.fits.gz").write_bytes(gzip.compress(path.read_bytes()))
    z = load_skymap(tmp_path / "d.fits.gz")
    assert np.array_equal(z.prob, m.prob) and np.array_equal(z.distmu_mpc, m.distmu_mpc)
    # a vector column (64 values per row, an older HEALPix layout) holds the pixels row after row
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="PROB", format="64D", array=(p / p.sum()).reshape(-1, 64))])
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NESTED", "NSIDE": nside, "INDXSCHM": "IMPLICIT"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "v.fits")
    assert np.array_equal(load_skymap(tmp_path / "v.fits").prob, m.prob)


def test_flat_map_keeps_no_per_pixel_arrays(tmp_path):
    from astropy_healpix import healpix_to_xyz

    nside = 16
    rng = np.random.default_rng(3)
    p = rng.random(12 * nside * nside)
    m = load_skymap(write_flat(tmp_path / "f.fits", p / p.sum(), nside))
    assert all(m.__dict__[k] is None for k in ("_xyz", "_level", "_ipix")) and m.implied_level == 4
    assert m.area_sr.strides == (0,)  # one broadcast value
    # built on request, equal to astropy-healpix's centres (the reference) and the NESTED indices
    assert np.array_equal(m.xyz, np.stack(healpix_to_xyz(np.arange(p.size), nside, order="nested")))
    assert np.array_equal(m.ipix, np.arange(p.size)) and np.all(m.level == 4) and m.max_level == 4
    # resampling without per-pixel arrays equals the general path on the same pixels given explicitly
    explicit = dataclasses.replace(m, xyz=m.xyz, level=m.level, ipix=m.ipix)
    assert explicit.implied_level is None
    for level in (2, 4, 6):
        assert np.allclose(m.resample_nested(m.density_per_sr, level),
                           explicit.resample_nested(explicit.density_per_sr, level), rtol=1e-13, atol=0)
    # HEALPix pixels all have the area 4 pi / Npix (Gorski et al. 2005, ApJ 622, 759, sec. 4)
    assert np.allclose(m.area_sr, 4 * math.pi / p.size, rtol=1e-15)
    # the peak found block by block is the first pixel of highest density, as np.argmax over the whole map
    k = int(np.argmax(m.density_per_sr))
    x, y, z = m.xyz[:, k]
    assert m.peak_radec_deg() == pytest.approx((math.degrees(math.atan2(y, x)) % 360.0, math.degrees(math.asin(z))),
                                               abs=1e-12)


@pytest.mark.parametrize("kind", ["lumpy", "plateaus", "sparse", "multi-order"])
@pytest.mark.parametrize("first_cut", ["histogram", "too high"])
def test_credible_region_prefix_equals_the_full_sort(tmp_path, monkeypatch, kind, first_cut):
    from kncast.planner.events.skymap import SkyMap

    if first_cut == "too high":  # the threshold is then lowered until its pixels hold the level
        monkeypatch.setattr(SkyMap, "_density_cut", lambda self, level: float(self.density_per_sr.max()))
    nside = 32
    rng = np.random.default_rng(17)
    if kind == "lumpy":
        p = rng.random(12 * nside * nside) ** 12
    elif kind == "plateaus":  # many equal densities: ties kept in index order, as the stable sort does
        p = rng.integers(1, 6, 12 * nside * nside).astype(float) ** 4
    else:
        p = np.where(rng.random(12 * nside * nside) < 0.01, rng.random(12 * nside * nside), 0.0)
    p /= p.sum()
    if kind == "multi-order":
        p = cap_prob(nside, dec_max_deg=-30) * (1 + (nested_xyz(nside)[0] > 0))
        p /= p.sum()
        m = load_skymap(write_uniq(tmp_path / "m.fits", *merged_uniq(p, nside)))
        assert m.implied_level is None and len(np.unique(m.level)) == 2
    else:
        m = load_skymap(write_flat(tmp_path / f"{kind}.fits", p, nside))
    for level in (0.1, 0.5, 0.9, 0.99, 1.0):
        ref = _reference_credible_mask(m, level)
        assert np.array_equal(m.credible_mask(level), ref)
        assert m.credible_area_deg2(level) == float(np.sum(m.area_sr[ref]) * (180 / math.pi) ** 2)


def test_density_at_a_coarser_order_is_the_mean_of_the_finer_densities(tmp_path):
    # flat map: probability inside each coarse pixel over its area (4 pi / npix sr, equal-area HEALPix
    # pixels: Gorski et al. 2005, ApJ 622, 759) equals the mean density of its children
    from astropy.io import fits

    from kncast.planner.events.skymap import load_skymap

    nside = 64
    prob = np.random.default_rng(2).random(12 * nside * nside)
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="PROB", format="D", array=prob / prob.sum())])
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NESTED", "NSIDE": nside, "INDXSCHM": "IMPLICIT"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "m.fits")
    skymap = load_skymap(tmp_path / "m.fits")
    for level in (3, 5, 6):
        np.testing.assert_allclose(skymap.density_at(level), skymap.resample_nested(skymap.density_per_sr, level),
                                   rtol=1e-12)
