"""Benchmark: coverage of an nside-256 HEALPix map (786,432 pixels) from 8 sites over 1 night.

Writes an invented localisation map (an elongated arc of probability plus a
second, weaker patch, with per-pixel distance columns) to a temporary FITS
file, then times reading it and computing the coverage.  Goal: under 3 s on
a plain CPU.

Baseline, measured in the same run: astropy's own ``ICRS -> AltAz``
transform (pressure 0, i.e. geometric altitudes, as kncast) of all pixels,
one sample time and site at a time.  It is slow, so it runs on BASE_SAMPLES
of the coverage's sample times (spread over the list, each with its own
site; one more, untimed, as a warm-up) and its time is scaled to the full
number of samples; the output says so.  It computes altitudes only (no Moon
rule, no sums over pixels), so it is a lower bound for doing the coverage
with astropy, while kncast's figure includes reading the map and all of
the coverage.  Agreement: at the same sample times, the altitudes from the
kernel's own zenith vectors (``kncast.planner.visibility.skycoverage`` internals, float32
as in the kernel) and astropy's differ by at most ALT_TOL_ARCSEC over the
pixels with |altitude| <= 80 deg (the kernel neglects annual aberration,
< 21 arcsec; float32 rounding grows near the zenith and nadir only).

Last line: ``RESULT seconds=<load + coverage> baseline_seconds=<scaled astropy> speedup=<baseline/ours>
max_alt_diff_arcsec=...``.

``--full``: a full-resolution alert, nside 1024 (12.6 M pixels) x 8 sites x FULL_NIGHTS nights with the
Moon rule, as ``kncast coverage`` runs it (load, coverage, the map summary).  The map is written by a
child process, so the printed peak resident memory (``ru_maxrss``) is kncast's.  Goal: under
FULL_GOAL_S seconds and FULL_GOAL_MIB MiB.  Agreement: the closed-form count against the
sample-by-sample kernel (``_accumulate_direct``) on every FULL_CHECK_STEP-th group of 256 NESTED
pixels (whole parents, so the coarse-to-fine path runs), all sites and nights: per site/night
probabilities within 1e-6.  The machine's load average is printed before and after (the coverage runs
on ``COVERAGE_THREADS`` threads: a busy machine slows it).  Last line: ``RESULT seconds=... peak_mib=...
max_prob_diff=...``.

Measured on the 2-core development machine (issue 19): 26-31 s and 1546 MiB before (whole-map arrays
kept per pixel, the full credible-region sort, parents refined child by child on one thread); 6.2-6.9 s
and 447-456 MiB after (8.7 s and 408 MiB with COVERAGE_THREADS = 1), with max_prob_diff 1.4e-17.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from _report import finish

NSIDE = 256
N_SITES = 8
BASE_SAMPLES = 4  # sample times of the astropy baseline, scaled to all samples
ALT_TOL_ARCSEC = 30.0  # agreement required of kncast's altitudes with astropy's (|alt| <= 80 deg)
T0 = "2027-04-10T00:00:00Z"  # leaves the most dark time after t0 in night 1 over the 8 sites (66 h)
FULL_NSIDE, FULL_NIGHTS, FULL_GOAL_S, FULL_GOAL_MIB, FULL_CHECK_STEP = 1024, 7, 15.0, 600.0, 16


def invented_map(nside: int):
    """Probability, DISTMU, DISTSIGMA, DISTNORM on the NESTED grid: an arc of von Mises-Fisher blobs."""
    from astropy_healpix import healpix_to_xyz

    xyz = np.stack(healpix_to_xyz(np.arange(12 * nside * nside), nside, order="nested"))
    prob = np.zeros(xyz.shape[1])
    for ra, dec, kappa, w in [(140, -20, 900, 1.0), (147, -27, 700, 1.0), (152, -35, 500, 0.8), (300, 40, 300, 0.3)]:
        c = np.array([np.cos(np.radians(dec)) * np.cos(np.radians(ra)), np.cos(np.radians(dec)) * np.sin(np.radians(ra)),
                      np.sin(np.radians(dec))])
        prob += w * np.exp(kappa * (c @ xyz - 1.0))
    prob /= prob.sum()
    mu = 90.0 + 20.0 * xyz[2]
    sigma = np.full_like(mu, 25.0)
    return prob, mu, sigma, np.full_like(mu, 1e-4)


def write_map(path: Path, nside: int) -> None:
    from astropy.io import fits

    prob, mu, sigma, norm = invented_map(nside)
    cols = [fits.Column(name=n, format="D", array=a) for n, a in
            (("PROB", prob), ("DISTMU", mu), ("DISTSIGMA", sigma), ("DISTNORM", norm))]
    hdu = fits.BinTableHDU.from_columns(cols)
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NESTED", "NSIDE": nside, "COORDSYS": "C",
                       "INDXSCHM": "IMPLICIT"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)


def astropy_baseline(skymap, sites, t0, result):
    """(seconds scaled to all samples, max |altitude difference| arcsec, samples used) of astropy vs the kernel."""
    import astropy.units as u
    from astropy.coordinates import AltAz, CartesianRepresentation, EarthLocation, ICRS
    from astropy.time import Time

    from kncast.planner.events.model import Event
    from kncast.planner.visibility.skycoverage import dot_rows, frame_vectors, sample_dark_time
    from kncast.planner.visibility.core import compute_visibility

    # the coverage's own sample times and zenith vectors, as compute_coverage builds them
    ra, dec = skymap.peak_radec_deg()
    vis = compute_visibility(Event(id="map-peak", ra_deg=ra, dec_deg=dec, t0=t0, source=skymap.path), sites,
                             nights=1, twilight="nautical", min_moon_sep_deg=30.0)
    cols, _ = sample_dark_time(vis, result.settings["step_min"])
    zenith = frame_vectors(vis, cols)[0]
    pick = np.linspace(0, cols.mjd.size - 1, BASE_SAMPLES + 1).round().astype(int)
    pixels = ICRS(CartesianRepresentation(skymap.xyz))
    pix32 = skymap.xyz.astype(np.float32)
    elapsed, worst = 0.0, 0.0
    for k, s in enumerate(pick):
        site = vis.sites[cols.site[s]]
        frame = AltAz(obstime=Time(cols.mjd[s], format="mjd", scale="utc"), pressure=0 * u.hPa,
                      location=EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg,
                                                           site.elevation_m * u.m))
        start = time.perf_counter()
        alt = pixels.transform_to(frame).alt.deg
        if k:  # the first sample is the warm-up
            elapsed += time.perf_counter() - start
        sin_alt = dot_rows(zenith[:, s].astype(np.float32)[None, :], pix32)[0].astype(float)
        ours = np.degrees(np.arcsin(np.clip(sin_alt, -1.0, 1.0)))
        mid = np.abs(alt) <= 80.0
        worst = max(worst, float(np.max(np.abs(ours - alt)[mid])) * 3600.0)
    return elapsed / BASE_SAMPLES * cols.mjd.size, worst, BASE_SAMPLES, int(cols.mjd.size)


def main() -> int:
    from kncast.planner.visibility.skycoverage import compute_coverage
    from kncast.planner.events.model import parse_time_utc
    from kncast.planner.sites import SiteRegistry
    from kncast.planner.events.skymap import load_skymap

    sites = SiteRegistry.load().select()[:N_SITES]
    t0 = parse_time_utc(T0, "--t0")
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench-map.fits"
        write_map(path, NSIDE)
        compute_coverage(load_skymap(path), sites[:1], t0, nights=1)  # warm-up: imports, IERS tables
        start = time.perf_counter()
        skymap = load_skymap(path)
        loaded = time.perf_counter()
        result = compute_coverage(skymap, sites, t0, nights=1, min_moon_sep_deg=30.0, pixel_flags=False)
        done = time.perf_counter()
        base, alt_diff, n_base, n_all = astropy_baseline(skymap, sites, t0, result)
    samples = sum(n.samples for n in result.nights)
    print(f"map: nside {NSIDE}, {skymap.npix} pixels; {len(sites)} sites x 1 night, {samples} samples "
          f"(step {result.settings['step_min']:g} min), Moon rule 30 deg")
    for n in result.nights:
        print(f"  {n.site.id:14s} {n.night}  P_obs {n.observable_probability:.3f}  "
              f"weighted {n.weighted_hours:6.2f} h  area90 {n.area90_observable_deg2:8.1f} deg2")
    print(f"load {loaded - start:.3f} s, coverage {done - loaded:.3f} s")
    ours = done - start
    print(f"baseline, astropy ICRS -> AltAz of all {skymap.npix} pixels (altitudes only): {n_base} of {n_all} "
          f"sample times in {base * n_base / n_all:.3f} s, scaled x{n_all / n_base:g} to {base:.2f} s")
    print(f"agreement at those samples: max |altitude difference| {alt_diff:.1f} arcsec over |alt| <= 80 deg "
          f"(tolerance {ALT_TOL_ARCSEC:g} arcsec)")
    ok = alt_diff <= ALT_TOL_ARCSEC
    return finish(ours, base, ok, "kncast's altitudes and astropy's differ by more than the tolerance",
                  f"max_alt_diff_arcsec={alt_diff:.1f}")


def full_run() -> int:
    """nside 1024 x 8 sites x FULL_NIGHTS nights: time, peak memory, agreement with the direct kernel."""
    import dataclasses
    import resource
    import subprocess

    from kncast.planner.events.model import parse_time_utc
    from kncast.planner.events.skymap import load_skymap
    from kncast.planner.sites import SiteRegistry
    from kncast.planner.visibility import skycoverage as cov

    import os

    sites = SiteRegistry.load().select()[:N_SITES]
    t0 = parse_time_utc(T0, "--t0")
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench-map.fits"
        subprocess.run([sys.executable, "-c", f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
                        f"import skymap; skymap.write_map(__import__('pathlib').Path({str(path)!r}), {FULL_NSIDE})"],
                       check=True)
        start = time.perf_counter()
        skymap = load_skymap(path)
        loaded = time.perf_counter()
        result = cov.compute_coverage(skymap, sites, t0, nights=FULL_NIGHTS, min_moon_sep_deg=30.0, pixel_flags=False)
        summary = skymap.summary()
        done = time.perf_counter()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    load_after = os.getloadavg()[0]
    print(f"map: nside {FULL_NSIDE}, {skymap.npix} pixels; {len(sites)} sites x {FULL_NIGHTS} nights, "
          f"{sum(n.samples for n in result.nights)} samples, Moon rule 30 deg; 90% area {summary['area90_deg2']} deg2")
    print(f"load {loaded - start:.2f} s, coverage + summary {done - loaded:.2f} s, peak {peak:.0f} MiB "
          f"(goal < {FULL_GOAL_S:g} s, < {FULL_GOAL_MIB:g} MiB); {cov.COVERAGE_THREADS} threads, machine load "
          f"average {load_before:.2f} before, {load_after:.2f} after")
    kids = 4 ** cov.HIER_DEPTH
    sub = (np.arange(0, skymap.npix // kids, FULL_CHECK_STEP)[:, None] * kids + np.arange(kids)).ravel()
    part = dataclasses.replace(skymap, xyz=skymap.xyz[:, sub], prob=skymap.prob[sub], level=skymap.level[sub],
                               ipix=skymap.ipix[sub], distmu_mpc=None, distsigma_mpc=None, distnorm_per_mpc2=None)
    assert cov._hier_level(part) is not None, "the check must run the coarse-to-fine path"
    runs = []
    for kernel in (cov._accumulate, cov._accumulate_direct):
        saved, cov._accumulate = cov._accumulate, kernel
        try:
            t = time.perf_counter()
            runs.append((cov.compute_coverage(part, sites, t0, nights=FULL_NIGHTS, min_moon_sep_deg=30.0,
                                              pixel_flags=False), time.perf_counter() - t))
        finally:
            cov._accumulate = saved
    diff = max(abs(a.observable_probability - b.observable_probability) for a, b in zip(runs[0][0].nights, runs[1][0].nights))
    print(f"agreement on every {FULL_CHECK_STEP}th parent ({sub.size} pixels): coarse to fine {runs[0][1]:.2f} s, "
          f"sample by sample {runs[1][1]:.2f} s, max |P_obs difference| {diff:.2e} (tolerance 1e-6)")
    ok = diff <= 1e-6
    if not ok:
        print("DISAGREEMENT: the closed-form count and the direct kernel differ", file=sys.stderr)
    print(f"RESULT seconds={done - start:.2f} peak_mib={peak:.0f} max_prob_diff={diff:.2e}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(full_run() if "--full" in sys.argv[1:] else main())
