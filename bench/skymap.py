"""Benchmark: coverage of an nside-256 HEALPix map (786,432 pixels) from 8 sites over 1 night.

Writes an invented localisation map (an elongated arc of probability plus a
second, weaker patch, with per-pixel distance columns) to a temporary FITS
file, then times reading it and computing the coverage.  Last line:
``RESULT seconds=<load + coverage>``.  Goal: under 3 s on a plain CPU.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

NSIDE = 256
N_SITES = 8
T0 = "2027-04-10T00:00:00Z"  # leaves the most dark time after t0 in night 1 over the 8 sites (66 h)


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


def main() -> int:
    from planner.skycoverage import compute_coverage
    from planner.events import parse_time_utc
    from planner.sites import SiteRegistry
    from planner.skymap import load_skymap

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
    samples = sum(n.samples for n in result.nights)
    print(f"map: nside {NSIDE}, {skymap.npix} pixels; {len(sites)} sites x 1 night, {samples} samples "
          f"(step {result.settings['step_min']:g} min), Moon rule 30 deg")
    for n in result.nights:
        print(f"  {n.site.id:14s} {n.night}  P_obs {n.observable_probability:.3f}  "
              f"weighted {n.weighted_hours:6.2f} h  area90 {n.area90_observable_deg2:8.1f} deg2")
    print(f"load {loaded - start:.3f} s, coverage {done - loaded:.3f} s")
    print(f"RESULT seconds={done - start:.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
