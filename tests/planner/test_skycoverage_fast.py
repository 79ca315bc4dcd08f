"""The coarse-to-fine coverage equals the sample-by-sample kernel, and whole-map quantities are kept.

Reference: ``_accumulate_direct``, which tests every pixel at every sample (itself checked against
astropy's AltAz and the visibility windows in test_skymap.py).  Tolerance 1e-6 in probability (issue 19).
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy.io import fits

from kncast.planner.events.model import parse_time_utc
from kncast.planner.events.skymap import load_skymap
from kncast.planner.sites import SiteRegistry
from kncast.planner.visibility import skycoverage as cov

NSIDE = 256  # the coarse-to-fine path (nside >= 256); bench/skymap.py --full runs nside 1024


def _map(path, nside):
    from astropy_healpix import healpix_to_xyz

    xyz = np.stack(healpix_to_xyz(np.arange(12 * nside * nside), nside, order="nested"))
    prob = np.zeros(xyz.shape[1])
    for ra, dec, kappa, w in [(140, -20, 900, 1.0), (152, -35, 500, 0.8), (300, 40, 300, 0.3), (60, 75, 50, 0.2)]:
        c = np.array([np.cos(np.radians(dec)) * np.cos(np.radians(ra)),
                      np.cos(np.radians(dec)) * np.sin(np.radians(ra)), np.sin(np.radians(dec))])
        prob += w * np.exp(kappa * (c @ xyz - 1.0))
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="PROB", format="D", array=prob / prob.sum())])
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NESTED", "NSIDE": nside, "INDXSCHM": "IMPLICIT"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)
    return load_skymap(path)


def _run(monkeypatch, kernel, skymap, sites, **kw):
    with monkeypatch.context() as m:
        m.setattr(cov, "_accumulate", kernel)
        return cov.compute_coverage(skymap, sites, parse_time_utc("2027-04-10T00:00:00Z", "t0"), **kw)


@pytest.mark.parametrize("moon, airmass", [(None, 3.0), (30.0, None)])  # airmass 3: floor 19.5 deg, under the profile
def test_coarse_to_fine_equals_sample_by_sample(tmp_path, monkeypatch, moon, airmass):
    skymap = _map(tmp_path / "m.fits", NSIDE)
    assert cov._hier_level(skymap) == 8
    # la-palma carries a horizon profile in the bundled registry: the child-by-child profile test is exercised
    sites = [s for s in SiteRegistry.load().select() if s.id in ("la-palma", "paranal", "hanle")]
    assert any(s.horizon is not None for s in sites)
    kw = dict(nights=2, min_moon_sep_deg=moon, max_airmass=airmass)
    fast = _run(monkeypatch, cov._accumulate, skymap, sites, **kw)
    ref = _run(monkeypatch, cov._accumulate_direct, skymap, sites, **kw)
    lean = _run(monkeypatch, cov._accumulate, skymap, sites, pixel_flags=False, **kw)  # sums by parent
    assert np.mean(fast.observable != ref.observable) < 1e-4
    for a, b in [*zip(fast.nights, ref.nights), *zip(lean.nights, ref.nights)]:
        assert a.samples == b.samples
        assert a.observable_probability == pytest.approx(b.observable_probability, abs=1e-6)
        assert a.weighted_hours == pytest.approx(b.weighted_hours, abs=1e-6 * max(a.dark_hours, 1.0))
        assert a.area90_observable_deg2 == pytest.approx(b.area90_observable_deg2, abs=1e-3)


def test_parent_radius_bounds_every_child():
    from astropy_healpix import healpix_to_xyz

    # children of a NESTED pixel are contiguous (Gorski et al. 2005, ApJ 622, 759, sec. 4)
    xyz = np.stack(healpix_to_xyz(np.arange(12 * 64 * 64), 64, order="nested"))
    centre, radius = cov._parents(xyz, 16)
    ang = np.arccos(np.clip(np.einsum("jpk,jp->pk", xyz.reshape(3, -1, 16), centre), -1, 1))
    assert np.all(ang.max(axis=1) <= radius + 1e-12)
    # pixel radius ~ (pi/3)^0.5 / nside (HEALPix pixel size), parents of nside 16 here: about 2 deg
    assert 0.5 < np.degrees(radius.max()) < 4.0


def test_whole_parents_of_a_map_take_the_coarse_to_fine_path(tmp_path):
    import dataclasses

    skymap = _map(tmp_path / "m.fits", NSIDE)
    kids = 4 ** cov.HIER_DEPTH
    sub = (np.arange(0, skymap.npix // kids, 5)[:, None] * kids + np.arange(kids)).ravel()
    part = dataclasses.replace(skymap, xyz=skymap.xyz[:, sub], prob=skymap.prob[sub], level=skymap.level[sub],
                               ipix=skymap.ipix[sub])
    assert cov._hier_level(part) == 8
    odd = dataclasses.replace(part, ipix=part.ipix[::-1].copy())
    assert cov._hier_level(odd) is None


def test_whole_map_quantities_are_computed_once(tmp_path, monkeypatch):
    skymap = _map(tmp_path / "m.fits", 32)
    first = skymap.summary()
    calls = []
    monkeypatch.setattr(np, "argsort", lambda *a, **k: calls.append(1))
    assert skymap.summary() == first and skymap.credible_mask(0.9).sum() > 0 and not calls


def test_threads_and_explicit_pixels_give_the_same_totals(tmp_path, monkeypatch):
    import dataclasses

    skymap = _map(tmp_path / "m.fits", NSIDE)
    assert skymap.implied_level == 8  # a flat map: centres built block by block
    sites = [s for s in SiteRegistry.load().select() if s.id in ("la-palma", "paranal")]
    kw = dict(nights=1, min_moon_sep_deg=30.0, pixel_flags=False)
    runs = []
    for threads, m in [(1, skymap), (2, skymap),
                       (2, dataclasses.replace(skymap, xyz=skymap.xyz, level=skymap.level, ipix=skymap.ipix))]:
        monkeypatch.setattr(cov, "COVERAGE_THREADS", threads)
        runs.append(_run(monkeypatch, cov._accumulate, m, sites, **kw))
    assert runs[2].skymap.implied_level is None
    for a, b, c in zip(*(r.nights for r in runs)):  # blocks summed in the same order: equal to the last bit
        assert (a.observable_probability, a.weighted_hours, a.area90_observable_deg2) == \
               (b.observable_probability, b.weighted_hours, b.area90_observable_deg2) == \
               (c.observable_probability, c.weighted_hours, c.area90_observable_deg2)


def test_full_resolution_map_coarse_to_fine_equals_sample_by_sample(monkeypatch):
    """A synthetic nside-1024 map (12.6 M pixels, invented: blobs of probability), built in memory."""
    from astropy_healpix import healpix_to_xyz

    from kncast.planner.events.skymap import SkyMap

    nside, level = 1024, 10
    prob = np.empty(12 * nside * nside)
    for lo in range(0, prob.size, 1 << 20):
        xyz = np.stack(healpix_to_xyz(np.arange(lo, min(lo + (1 << 20), prob.size)), nside, order="nested"))
        part = 0.0
        for ra, dec, kappa, w in [(140, -20, 900, 1.0), (152, -35, 500, 0.8), (300, 40, 300, 0.3)]:
            c = np.array([np.cos(np.radians(dec)) * np.cos(np.radians(ra)),
                          np.cos(np.radians(dec)) * np.sin(np.radians(ra)), np.sin(np.radians(dec))])
            part = part + w * np.exp(kappa * (c @ xyz - 1.0))
        prob[lo:lo + xyz.shape[1]] = part
    prob /= prob.sum()
    skymap = SkyMap(path="synthetic", ordering="NESTED", coordsys="C", xyz=None, prob=prob, level=None, ipix=None,
                    flat_level=level)
    sites = [s for s in SiteRegistry.load().select() if s.id in ("la-palma", "paranal", "hanle")]
    kw = dict(nights=1, min_moon_sep_deg=30.0, pixel_flags=False)
    whole = _run(monkeypatch, cov._accumulate, skymap, sites, **kw)
    assert sum(n.observable_probability for n in whole.nights) > 0.5
    # every 64th parent (whole parents of 256 children): the coarse-to-fine path against the direct kernel
    kids = 4 ** cov.HIER_DEPTH
    sub = (np.arange(0, skymap.npix // kids, 64)[:, None] * kids + np.arange(kids)).ravel()
    part = SkyMap(path="synthetic", ordering="NESTED", coordsys="C", prob=prob[sub], level=np.full(sub.size, level),
                  ipix=sub, xyz=np.stack(healpix_to_xyz(sub, nside, order="nested")))
    assert cov._hier_level(part) == level
    fast = _run(monkeypatch, cov._accumulate, part, sites, **kw)
    ref = _run(monkeypatch, cov._accumulate_direct, part, sites, **kw)
    assert sum(n.observable_probability for n in ref.nights) > 1e-3
    for a, b in zip(fast.nights, ref.nights):
        assert a.observable_probability == pytest.approx(b.observable_probability, abs=1e-6)
        assert a.weighted_hours == pytest.approx(b.weighted_hours, abs=1e-6 * max(a.dark_hours, 1.0))
        assert a.area90_observable_deg2 == pytest.approx(b.area90_observable_deg2, abs=1e-3)


@pytest.mark.parametrize("kernel", ["_accumulate", "_accumulate_direct"])
def test_first_night_flags_are_those_columns_of_all_flags(tmp_path, monkeypatch, kernel):
    # the sky chart keeps only each site's first dark night: the same flags as keeping every night's
    skymap = _map(tmp_path / "m.fits", 64 if kernel == "_accumulate_direct" else NSIDE)
    sites = [s for s in SiteRegistry.load().select() if s.id in ("la-palma", "paranal", "hanle")]
    every = _run(monkeypatch, getattr(cov, kernel), skymap, sites, nights=3)
    first = _run(monkeypatch, getattr(cov, kernel), skymap, sites, nights=3, pixel_flags=cov.FIRST_NIGHTS)
    kept = sorted(cov.first_nights(every.nights).values())
    assert first.flag_nights == tuple(kept) and first.observable.shape == (skymap.npix, len(kept))
    for k in kept:
        assert np.array_equal(first.flags_of(k), every.observable[:, k])
    assert [n.observable_probability for n in first.nights] == [n.observable_probability for n in every.nights]
