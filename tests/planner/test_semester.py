"""The semester forecast's sampling, counts and kernels (kncast.planner.semester).

Outside sources: astropy's Planck18 cosmology (Planck Collaboration 2020, A&A 641, A6) for the comoving
volume, the flat-universe volume 4 pi D_M^3 / 3 (Hogg 1999, astro-ph/9905116, eq. 29) as an independent
formula, scipy's Kolmogorov-Smirnov test for the sky distribution, and kncast plan's own measurement
(kncast.planner.measure) and visibility windows (kncast.planner.visibility.core) for the vectorised kernels.
"""
from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from astropy import units as u
from astropy.cosmology import Planck18, z_at_value

from kncast.planner.semester import population


def _z(d_mpc):
    return float(z_at_value(Planck18.luminosity_distance, d_mpc * u.Mpc).value)


def test_uniform_in_volume_eighth_within_half_the_horizon():
    # Euclidean limit (common practice): a fraction (1/2)^3 = 1/8 of a uniform ball lies within half its radius
    rng = np.random.default_rng(3)
    n = 200_000
    d, _ = population.draw_distances(rng, n, 40.0)  # 40 Mpc: cosmological corrections ~ 1 %
    frac = np.mean(d < 20.0)
    sigma = np.sqrt(0.125 * 0.875 / n)  # binomial (Poisson) error of the fraction
    assert abs(frac - 0.125) < 4 * sigma + 0.002  # + the 40 Mpc cosmology (< 1.5 %, astropy Planck18)


def test_comoving_volume_matches_astropy_at_the_horizon():
    for horizon in (160.0, 1000.0):
        z_h = _z(horizon)
        ref = Planck18.comoving_volume(z_h).to_value(u.Gpc**3)  # astropy Planck18
        assert population.comoving_volume_gpc3(horizon) == pytest.approx(ref, rel=1e-6)
        # independent formula, flat universe: V_c = 4 pi D_M^3 / 3 (Hogg 1999, eq. 29)
        d_m = Planck18.comoving_transverse_distance(z_h).to_value(u.Gpc)
        assert population.comoving_volume_gpc3(horizon) == pytest.approx(4 * np.pi * d_m**3 / 3, rel=1e-6)


def test_distance_draws_follow_the_comoving_volume():
    # at 1000 Mpc cosmology matters: the fraction within 500 Mpc is V_c(500)/V_c(1000) from astropy, not 1/8
    rng = np.random.default_rng(4)
    n = 100_000
    d, z = population.draw_distances(rng, n, 1000.0)
    expect = (Planck18.comoving_volume(_z(500.0)) / Planck18.comoving_volume(_z(1000.0))).value
    assert abs(np.mean(d < 500.0) - expect) < 4 * np.sqrt(expect * (1 - expect) / n)
    assert abs(expect - 0.125) > 0.01  # the check can tell a Euclidean sampler apart
    k = np.argsort(d)[::5000]
    assert np.allclose(Planck18.luminosity_distance(z[k]).to_value(u.Mpc), d[k], rtol=1e-4)


def test_isotropic_sky():
    from scipy import stats

    rng = np.random.default_rng(5)
    pop = population.draw_population(rng, 20_000, 100.0, 61000.0, 61180.0, 4)
    s = np.sin(np.radians(pop.dec_deg))
    assert abs(s.mean()) < 4 / np.sqrt(3 * s.size)  # sin(dec) uniform in [-1, 1]: sigma 1/sqrt(3)
    # dec density ~ cos(dec): CDF (1 + sin dec) / 2 (Kolmogorov-Smirnov, scipy)
    assert stats.kstest(pop.dec_deg, lambda x: (1 + np.sin(np.radians(x))) / 2).pvalue > 1e-3
    assert stats.kstest(pop.ra_deg, stats.uniform(0, 360).cdf).pvalue > 1e-3
    assert stats.kstest(pop.t0_mjd, stats.uniform(61000.0, 180.0).cdf).pvalue > 1e-3


def test_expected_mergers_hand_case():
    # rate x V_c x duration x duty: 100 Gpc^-3 yr^-1, 200 Mpc, half a Julian year, duty 0.5
    v = Planck18.comoving_volume(_z(200.0)).to_value(u.Gpc**3)  # astropy Planck18, ~0.030 Gpc^3
    assert population.expected_mergers(100.0, 200.0, 182.625, 0.5) == pytest.approx(100.0 * v * 0.5 * 0.5, rel=1e-6)


def test_semester_counts_poisson_mean_and_interval():
    rng = np.random.default_rng(6)
    per = np.array([0.0, 2.0, 4.0])  # useful epochs of three simulated mergers: 1/3 give none
    mc = population.semester_counts(rng, 50.0, 50.0, 0.1, per, draws=40_000)
    assert mc["mergers"].mean() == pytest.approx(5.0, rel=0.02)          # Poisson mean rate x 0.1
    assert mc["useful_epochs"].mean() == pytest.approx(5.0 * 2.0, rel=0.03)
    assert mc["events"].mean() == pytest.approx(5.0 * 2 / 3, rel=0.03)
    # Poisson(5): 5th and 95th percentiles 2 and 9 (scipy.stats.poisson.ppf)
    from scipy import stats

    s = population.summary(mc["mergers"])
    assert (s["p05"], s["median"], s["p95"]) == (stats.poisson.ppf(0.05, 5), 5.0, stats.poisson.ppf(0.95, 5))


def _refs(site_ids):
    from kncast.planner.semester.run import Settings, setup_refs
    from kncast.planner.sites import SiteRegistry

    reg = SiteRegistry.load()
    return setup_refs(Settings(start=None, end=None, sites=reg.select(site_ids), registry=reg)), reg


def test_table_reproduces_the_plan_measurement():
    """The tabulated rates give back kncast.planner.measure's significance at the reference distance and time."""
    from kncast.forecast.features import forecast_features
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.semester import table as T

    refs, _ = _refs(["pachon"])
    phases, x = np.array([1.0, 2.5, 5.0]), np.array([1.1, 1.6, 2.6])
    tab = T.build_table([build_model({"name": "powerlaw"})], refs, phases, x, 120.0, 5.0, 1500.0, 0.1, 0.9)
    tr = Transient(build_model({"name": "powerlaw"}), distance_mpc=120.0)
    fc = forecast_features(tr, phases, setups=[r.setup for r in refs], tellurics=TelluricModel.load(),
                           airmass=1.6, setup_ids=[r.id for r in refs])
    scratch = {n: np.zeros_like(tab.weight) for n in ("weight", "source", "n_pix", "sky", "dark", "read_var", "ppb")}
    cols = list(range(len(refs)))
    m = T._site_rows(scratch, 0, tr, fc, refs, cols, phases, x, TelluricModel.load(), 5.0, 1500.0, 0.1, 0.9)
    p, a = np.meshgrid(np.arange(3), np.arange(3), indexing="ij")
    sig = T.significance(tab, np.zeros_like(p), p, a, cols, np.ones(p.shape), np.full(p.shape, T.TABLE_TIME_S))
    want = m.significance.reshape(3, 3, *m.significance.shape[1:])
    used = tab.weight[0] > 0
    assert used.any()
    assert np.allclose(sig[used], want[used], rtol=1e-9)
    # twice the distance: a quarter of the source rate, lower significance
    far = T.significance(tab, np.zeros_like(p), p, a, cols, np.full(p.shape, 0.25), np.full(p.shape, T.TABLE_TIME_S))
    assert np.all(far[used] < sig[used])


def test_network_hours_match_the_visibility_windows():
    """Hours dark and up per night of one merger agree with kncast visibility's windows (15-min sampling)."""
    from kncast.planner.events.eventfile import event_from_values
    from kncast.planner.semester import network
    from kncast.planner.semester.population import Population
    from kncast.planner.sites import SiteRegistry
    from kncast.planner.visibility.core import compute_visibility
    from kncast.planner.visibility.sky import Ephemeris

    site = SiteRegistry.load().get("pachon")
    from astropy.time import Time

    t0 = Time("2027-03-08T02:24:00", scale="utc").mjd
    ev = event_from_values("150.0", "-30.0", "2027-03-08T02:24:00Z", 100.0)
    vis = compute_visibility(ev, [site], nights=3, twilight="nautical")
    want = [sum(w.hours for w in rec.windows) for rec in vis.nights]
    pop = Population(np.array([150.0]), np.array([-30.0]), np.array([100.0]), np.array([0.02]), np.array([t0]),
                     np.array([0]))
    ns = network.NetworkSettings(np.array([site.latitude_deg]), np.array([site.longitude_deg]),
                                 np.array([site.min_altitude_deg]), [site.horizon], [[]], 3, -12.0, None, 4.0, 900.0, 5.0)
    eph = Ephemeris.build(t0 - 1, t0 + 6, [0.0], [0.0], step_min=360.0)
    n_t = int(np.ceil(4 * 1440.0 / network.STEP_MIN))
    captured = {}
    real = network._detect
    network._detect = lambda pop, table, ns, hours, phase, airmass: captured.update(hours=hours) or {}
    try:
        network.plan_chunk(pop, eph, None, ns)
    finally:
        network._detect = real
    got = captured["hours"][0, 0]
    assert n_t > 0 and len(want) == 3
    assert np.allclose(got, want, atol=0.3)  # 15-min samples: +-0.25 h at the window edges
