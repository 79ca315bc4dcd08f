"""Ensembles of the source (kncast.planner.plan.ensemble): distance draws, [model] ranges, percentiles."""
from __future__ import annotations

import numpy as np
import pytest

from conftest import DEMO

SOUTH = DEMO / "kn-demo-south.toml"


@pytest.fixture(scope="module")
def south():
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.source import transient_for_event

    event = load_event(SOUTH)
    return event, transient_for_event(event)


def test_distance_draws_are_truncated_normal(south):
    from kncast.planner.draws import draw_distances

    rng = np.random.default_rng(3)
    d = draw_distances(50.0, 40.0, 20000, rng)
    assert d.min() > 0.0                                         # truncated at D > 0
    # a normal truncated at 0 has a mean above its location (scipy.stats.truncnorm, reference library)
    from scipy.stats import truncnorm

    expected = truncnorm.mean((1e-3 - 50.0) / 40.0, np.inf, loc=50.0, scale=40.0)
    assert d.mean() == pytest.approx(expected, rel=0.02)


@pytest.mark.parametrize("distance, sigma", [(50.0, 40.0), (40.0, 8.0), (0.5, 3.0), (300.0, 1.0), (0.0005, 1.0)])
def test_distance_draws_equal_scipy_truncnorm_draws(distance, sigma):
    # Reference library: scipy.stats.truncnorm.rvs (inverse CDF of the same uniforms) with the same seed;
    # both sides of the truncation point (a < 0 and a >= 0)
    from scipy.stats import truncnorm

    from kncast.planner.draws import draw_distances

    ours = draw_distances(distance, sigma, 5000, np.random.default_rng(11))
    ref = truncnorm.rvs((1e-3 - distance) / sigma, np.inf, loc=distance, scale=sigma, size=5000,
                        random_state=np.random.default_rng(11))
    np.testing.assert_allclose(ours, ref, rtol=1e-12)


def test_distance_quantiles_keep_their_digits_near_both_ends():
    # 1 - Phi(x) = (1 - q) Phi(-a) for the normal truncated to [a, inf): the upper tail from its own
    # probability (reference library: scipy.special.ndtri, ndtr), to 1e-12 even as q -> 1, where the
    # log-space form of truncnorm loses digits; and the lower end is a itself
    from scipy.special import ndtr, ndtri

    from kncast.planner.draws import _truncated_normal_ppf

    q = np.array([0.0, 1e-9, 0.25, 0.5, 0.9, 1 - 1e-9, 1 - 1e-12, np.nextafter(1.0, 0.0)])
    for a in (-0.01, -1.3, -5.0, -20.0):
        exact = np.where(q < 0.5, ndtri(ndtr(a) + q * ndtr(-a)), -ndtri((1.0 - q) * ndtr(-a)))
        np.testing.assert_allclose(_truncated_normal_ppf(q, a), exact, rtol=1e-12)
        assert _truncated_normal_ppf(np.array([0.0]), a)[0] == pytest.approx(a, rel=1e-12)


def test_distance_only_magnitude_percentiles_are_the_distance_modulus_of_the_distance_percentiles(south):
    # m(D') = m(D) + 5 log10(D'/D) (inverse-square law, AB magnitudes: Oke & Gunn 1983); percentiles of
    # order statistics commute with this monotonic map
    from kncast.planner.draws import magnitude_draws, percentiles, source_draws

    event, transient = south
    phases = [1.0, 3.0]
    draws = magnitude_draws(event, transient, phases, ["bessell-R"], 400, seed=11)
    distances, _nodes, _of, ranges = source_draws(event, transient, 400, seed=11)
    assert not ranges
    m0 = transient.mag_ab(phases, ["bessell-R"])["bessell-R"]
    pd = percentiles(distances)
    for i in range(2):
        pm = percentiles(draws["bessell-R"][:, i])
        for key in ("p16", "p50", "p84"):
            assert pm[key] == pytest.approx(m0[i] + 5.0 * np.log10(pd[key] / transient.distance_mpc), abs=1e-9)


def test_model_ranges_are_drawn_uniform_in_log_from_latin_nodes():
    from kncast.planner.draws import latin_nodes

    nodes = latin_nodes({("mass_msun",): (0.01, 0.1)}, 16, np.random.default_rng(5))
    x = np.log10([n[("mass_msun",)] for n in nodes])
    assert np.all((x >= -2.0) & (x <= -1.0))
    # Latin hypercube: exactly one node in each of the 16 equal strata of log10(M) (McKay et al. 1979, from memory)
    assert sorted(np.floor((x + 2.0) * 16).astype(int)) == list(range(16))


def test_a_range_in_the_model_table_gives_its_geometric_mean_as_the_central_model(tmp_path):
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.source import transient_for_event

    text = SOUTH.read_text().split("\n[model]\n")[0] + "\n" + '[model]\nname = "powerlaw"\nmass_msun = [0.02, 0.08]\n'
    path = tmp_path / "ranged.toml"
    path.write_text(text)
    t = transient_for_event(load_event(path))
    assert t.ejecta_mass_msun == pytest.approx(0.04)            # sqrt(0.02 x 0.08), hand computed


def test_plan_nights_carry_percentiles_and_the_useful_fraction(south):
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    event, _ = south
    reg = SiteRegistry.load([])
    sites = [reg.get(i) for i in ("paranal", "sutherland")]
    a = build_plan(event, sites, nights=2, registry=reg, draws=60, seed=7)
    b = build_plan(event, sites, nights=2, registry=reg, draws=60, seed=7)
    planned = [p for p in a.nights if p.ensemble]
    assert planned
    for p, q in zip(a.nights, b.nights):                        # same seed: identical numbers
        assert p.ensemble == q.ensemble
    for p in planned:
        assert 0.0 <= p.ensemble["useful_fraction"] <= 1.0
        if p.choice is not None and p.ensemble["significance"]:
            s = p.ensemble["significance"]
            assert s["p16"] <= s["p50"] <= s["p84"]
            assert "draws" in p.reason


def test_zero_draws_is_refused(run_cli, tmp_path):
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "1", "--draws", "0", "--out", tmp_path / "p")
    assert status == 2 and "--draws" in err and not (tmp_path / "p").exists()


def test_exposure_ranges_bracket_the_central_time(run_cli, tmp_path):
    import json

    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    setup = next(r.id for r in all_setups(SiteRegistry.load([])) if r.id.startswith("paranal/"))
    out = tmp_path / "e.json"
    status, _, err = run_cli("exposure", "--event", SOUTH, "--setup", setup, "--phase", "2", "--snr", "10",
                             "--at", "8000", "--airmass", "1.2", "--moon-illumination", "0", "--moon-sep", "90",
                             "--draws", "100", "--json", out)
    assert status == 0, err
    doc = json.loads(out.read_text())
    r = doc["time_for_target_range_s"]
    assert doc["draws"] == 100 and r["p16"] <= r["p50"] <= r["p84"]
    # a farther draw needs more time, a nearer one less: the central distance's time lies inside the range
    assert r["p16"] < doc["time_for_target_s"] < r["p84"]


def test_draws_measured_in_chunks_equal_all_draws_at_once(monkeypatch):
    # kncast.planner.measure.DRAW_CHUNK_VALUES bounds the arrays of the draws' detection; chunks of a few
    # draws give exactly the percentiles of one chunk holding them all
    from kncast.planner import measure
    from kncast.planner.commands.demo import demo_event_path
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    reg = SiteRegistry.load()
    sites = reg.select(["paranal", "pachon"])

    def ensembles():
        plan = build_plan(load_event(demo_event_path()), sites, nights=2, registry=reg, draws=37, seed=4)
        return [p.ensemble for p in plan.nights if p.ensemble]

    monkeypatch.setattr(measure, "DRAW_CHUNK_VALUES", 10**12)
    whole = ensembles()
    monkeypatch.setattr(measure, "DRAW_CHUNK_VALUES", 1)  # one draw per chunk
    assert whole and ensembles() == whole
