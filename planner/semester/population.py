"""The simulated mergers and the expected counts of a semester.

* Sky: isotropic, RA uniform in [0, 360) deg and sin(dec) uniform in [-1, 1].
* Distance: uniform in comoving volume out to the horizon, a luminosity distance: the comoving
  volume V_c(z) of astropy's Planck18 cosmology (Planck Collaboration 2020, A&A 641, A6) is tabulated
  on a fine redshift grid up to z(horizon) and inverted, V_c = u V_c(z_h) with u uniform in [0, 1].
* Time: uniform over the date range.
* Expected number of mergers the gravitational-wave network detects:
  N = rate x V_c(horizon) x duration x duty cycle (a hard horizon; the (1 + z) time dilation of the
  source-frame rate, < 7 % inside 300 Mpc, is neglected and named in the cautions).
* Semester scatter: the rate is drawn log-uniform over its interval (a choice for an interval that
  spans two decades), the number of detected mergers is Poisson, each merger's useful epochs are
  drawn from the simulated per-event distribution.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

YEAR_D = 365.25  # Julian year, days (IAU)
Z_GRID = 4096    # redshift samples of the comoving-volume table


@dataclass
class Population:
    """Simulated mergers, arrays (n,): position (deg), luminosity distance (Mpc), redshift, t0 (MJD UTC),
    index of the model realisation."""

    ra_deg: np.ndarray
    dec_deg: np.ndarray
    distance_mpc: np.ndarray
    redshift: np.ndarray
    t0_mjd: np.ndarray
    model: np.ndarray

    def __len__(self) -> int:
        return self.ra_deg.size

    def chunk(self, lo: int, hi: int) -> "Population":
        return Population(*(getattr(self, f)[lo:hi] for f in self.__dataclass_fields__))


def comoving_volume_gpc3(distance_mpc: float, cosmology=None) -> float:
    """Comoving volume (Gpc^3) inside luminosity distance ``distance_mpc`` (astropy, Planck18 by default)."""
    from astropy.cosmology import Planck18

    from kncast.forecast.distance import redshift_for_distance

    cosmo = cosmology or Planck18
    z = redshift_for_distance(distance_mpc, cosmo)
    return float(cosmo.comoving_volume(z).to_value("Gpc3"))


def draw_distances(rng, n: int, horizon_mpc: float, cosmology=None):
    """(luminosity distance Mpc, redshift) of ``n`` draws uniform in comoving volume inside ``horizon_mpc``."""
    from astropy.cosmology import Planck18

    from kncast.forecast.distance import redshift_for_distance

    cosmo = cosmology or Planck18
    z_h = redshift_for_distance(horizon_mpc, cosmo)
    z = np.linspace(0.0, z_h, Z_GRID)
    vol = cosmo.comoving_volume(z).to_value("Gpc3")
    zs = np.interp(rng.uniform(0.0, 1.0, n) * vol[-1], vol, z)
    d_l = np.interp(zs, z, cosmo.luminosity_distance(z).to_value("Mpc"))
    return np.maximum(d_l, 1e-3), np.maximum(zs, 1e-9)


def draw_population(rng, n: int, horizon_mpc: float, start_mjd: float, end_mjd: float, n_models: int) -> Population:
    """``n`` mergers: isotropic, uniform in comoving volume and in time, each with a model realisation."""
    ra = rng.uniform(0.0, 360.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
    d, z = draw_distances(rng, n, horizon_mpc)
    t0 = rng.uniform(start_mjd, end_mjd, n)
    return Population(ra, dec, d, z, t0, rng.integers(0, n_models, n))


def expected_mergers(rate_gpc3_yr: float, horizon_mpc: float, duration_d: float, duty: float) -> float:
    """Mean number of mergers detected: rate x V_c(horizon) x duration x duty cycle."""
    return float(rate_gpc3_yr) * comoving_volume_gpc3(horizon_mpc) * float(duration_d) / YEAR_D * float(duty)


def semester_counts(rng, rate_lo: float, rate_hi: float, mean_per_rate: float, epochs_per_event: np.ndarray,
                    draws: int = 20_000) -> dict:
    """Monte Carlo of one semester: rate log-uniform in [rate_lo, rate_hi] (a single value when equal),
    Poisson mergers of mean rate x ``mean_per_rate``, each with useful epochs drawn from
    ``epochs_per_event`` (one value per simulated merger).  Returns arrays ``mergers``, ``events``
    (mergers with at least one useful epoch) and ``useful_epochs``, one value per semester draw."""
    rate = np.exp(rng.uniform(np.log(rate_lo), np.log(rate_hi), draws)) if rate_hi > rate_lo \
        else np.full(draws, float(rate_lo))
    n = rng.poisson(rate * mean_per_rate)
    total = int(n.sum())
    pick = rng.integers(0, epochs_per_event.size, total) if epochs_per_event.size else np.zeros(total, int)
    per = epochs_per_event[pick] if epochs_per_event.size else np.zeros(total)
    owner = np.repeat(np.arange(draws), n)
    epochs = np.bincount(owner, weights=per, minlength=draws)
    events = np.bincount(owner, weights=(per > 0).astype(float), minlength=draws)
    return {"rate": rate, "mergers": n.astype(float), "events": events, "useful_epochs": epochs}


def summary(values: np.ndarray) -> dict:
    """Median, 5th and 95th percentiles and mean of ``values``."""
    p05, med, p95 = np.percentile(values, [5, 50, 95])
    return {"median": float(med), "p05": float(p05), "p95": float(p95), "mean": float(np.mean(values))}
