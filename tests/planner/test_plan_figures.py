"""Which figures a plan folder gets, and when the figure workers are used.

* ``--figures chosen`` (default): S/N spectra for the most often chosen setups only (at most
  MAX_SNR_FIGURES); ``--figures all``: one for every setup with a measured epoch.
* The worker pool is used only when two workers finish sooner than one by more than the pool's
  own cost (longest-job-first schedule of the estimated drawing times).
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from kncast.planner.plan import folder


@pytest.fixture(scope="module")
def demo_plan():
    from kncast.planner.commands.demo import demo_event_path
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load()
    return build_plan(load_event(demo_event_path()), registry.select(None), nights=4, registry=registry)


def test_default_snr_figures_are_the_most_often_chosen_setups(demo_plan):
    chosen = [p.choice.setup for p in demo_plan.useful()]
    setups = folder.snr_figure_setups(demo_plan)
    assert 0 < len(setups) <= folder.MAX_SNR_FIGURES
    assert set(setups) <= set(chosen)
    counts = [chosen.count(s) for s in setups]
    assert counts == sorted(counts, reverse=True)
    assert min(counts) >= max((chosen.count(s) for s in set(chosen) - set(setups)), default=0)


def test_all_snr_figures_cover_every_setup_with_a_measured_epoch(demo_plan):
    measured = {o.setup for p in demo_plan.nights for o in p.outcomes if o.significance is not None}
    setups = folder.snr_figure_setups(demo_plan, "all")
    assert set(setups) == measured | {p.choice.setup for p in demo_plan.useful()}
    assert len(setups) > folder.MAX_SNR_FIGURES
    for sid in setups:  # a never-chosen setup is shown on its most significant night
        night, outcome, _why = folder.snr_epoch(demo_plan, sid)
        assert outcome.setup == sid and night.window is not None
        if sid not in {p.choice.setup for p in demo_plan.useful()}:
            best = max(o.significance for p in demo_plan.nights for o in p.outcomes
                       if o.setup == sid and o.significance is not None)
            assert outcome.significance == best
    with pytest.raises(ValueError, match="chosen, all"):
        folder.snr_figure_setups(demo_plan, "some")


def test_figure_jobs_follow_the_figure_set(demo_plan):
    kinds = lambda which: [j[1] for j in folder.figure_jobs(demo_plan, which) if j[0] == "snr"]  # noqa: E731
    assert kinds("chosen") == folder.snr_figure_setups(demo_plan)
    assert kinds("all") == folder.snr_figure_setups(demo_plan, "all")
    assert all(cost > 0 for *_, cost in folder.figure_jobs(demo_plan))


@pytest.mark.parametrize("costs,workers,expected", [
    ([], 2, False),                      # nothing to draw
    ([0.3], 2, False),                   # one figure: a second worker cannot help
    ([0.2, 0.2, 0.2], 1, False),         # one core
    ([0.01, 0.01], 2, False),            # saving 0.01 s is less than the pool costs
    ([0.25] * 10 + [0.15, 0.2], 2, True),  # the demo's figure set: about half the time saved
])
def test_pool_only_when_it_pays(costs, workers, expected):
    assert folder.use_pool(costs, workers) is expected


def test_plan_command_draws_every_setup_with_figures_all(tmp_path, run_cli, demo_event_path):
    out = tmp_path / "plan"
    status, _, err = run_cli("plan", "--event", demo_event_path, "--sites", "paranal", "--nights", "2",
                             "--figures", "all", "--out", out)
    assert status == 0, err
    doc = json.loads((out / "plan.json").read_text())
    snr = sorted(f for f in doc["files"]["figures"] if f.startswith("figures/snr-") and f != "figures/snr-campaign.png")
    measured = {s["setup"] for n in doc["nights"] for s in n["setups"] if s["significance"] is not None}
    assert len(snr) == len(measured) > 1
    assert all((out / f).stat().st_size > 0 for f in snr)
    status, _, err = run_cli("plan", "--event", demo_event_path, "--figures", "every", "--out", tmp_path / "x")
    assert status == 2 and "--figures" in err and not (tmp_path / "x").exists()


def test_significance_grid_holds_each_nights_outcomes(demo_plan):
    # the campaign significance chart: every measured (setup, night) in its cell, the chosen one marked,
    # nothing else filled
    setups, nights, sig, chosen = folder.significance_matrix(demo_plan)
    filled = 0
    for p in demo_plan.nights:
        for o in p.outcomes:
            if o.significance is None:
                continue
            r, c = setups.index(o.setup), nights.index(p.record.night)
            assert sig[r, c] == o.significance and chosen[r, c] == (o is p.choice)
            filled += 1
    assert filled == int(np.isfinite(sig).sum()) > 0
    assert chosen.sum() == sum(p.choice is not None and p.choice.significance is not None for p in demo_plan.nights)


def test_feature_maps_follow_the_figure_set(demo_plan):
    # default: one campaign feature map; --figures all: also one map per day with a chosen spectrum
    days = sorted({int(p.phase_d) for p in demo_plan.useful()})
    jobs = lambda which: [(k, a) for k, a, _ in folder.figure_jobs(demo_plan, which) if k.startswith("spectrum")]  # noqa: E731
    assert jobs("chosen") == [("spectrum-campaign", None)]
    assert jobs("all") == [("spectrum-campaign", None)] + [("spectrum", d) for d in days]
    assert folder.figure_path("spectrum", 3) == "figures/spectrum-day03.png"
    assert folder.figure_path("snr", "a/b c") == "figures/snr-a_b_c.png"


def test_block_fluxes_in_one_evaluation_equal_one_evaluation_per_block(demo_plan):
    # the blocks' reference-trough fluxes (one batched evaluation of the source) against the source
    # evaluated alone at each block's epoch and trough, as the blocks were computed before
    from kncast.planner.plan import blocks

    chosen = [(p, o) for p in demo_plan.nights for o in getattr(p, "choices", []) or []]
    fluxes = blocks._reference_fluxes(demo_plan, chosen)
    checked = 0
    for (p, o), flux in zip(chosen, fluxes):
        rec = blocks._reference_record(o)
        if rec is None:
            assert flux is None
            continue
        alone = demo_plan.transient.flux_flam(np.array([p.phase_d]), np.array([rec["measured_A"]]))[0, 0]
        assert flux == pytest.approx(float(alone), rel=1e-12)
        checked += 1
    assert checked > 10


def test_blocks_evaluated_together_equal_each_block_evaluated_alone(demo_plan):
    # every block's geometry (one sky evaluation for all blocks), exposure figures (one per setup) and
    # telluric-standard time against the same quantities evaluated for that block alone, as they were before
    from kncast.forecast import exposure
    from kncast.forecast.airmass import airmass_from_altitude
    from kncast.forecast.detect import bin_width_A, significance, snr_per_bin
    from kncast.planner.observation import batched_conditions
    from kncast.planner.plan import blocks
    from kncast.planner.visibility import sky

    refs = {r.id: r for r in demo_plan.setup_refs}
    eph = demo_plan.visibility.ephemeris

    def airmass_alone(site, mjd):
        alt, _ = sky.target_altaz_deg(eph, sky.SiteArrays.of([site]), np.asarray(mjd, dtype=float))
        alt = np.ravel(alt)
        with np.errstate(invalid="ignore"):
            return np.where(alt > 0, airmass_from_altitude(np.clip(alt, 1e-3, 90.0)), np.inf)

    planned = blocks.plan_blocks(demo_plan)
    chosen = [(p, o) for p in demo_plan.nights for o in getattr(p, "choices", []) or []]
    fluxes = dict(zip(map(id, (o for _, o in chosen)), blocks._reference_fluxes(demo_plan, chosen)))  # tested above
    measured = 0
    for b in planned:
        p, o = b.night, b.outcome
        mid = 0.5 * (b.start_mjd + b.end_mjd)
        assert b.airmass == [round(float(x), 3) for x in airmass_alone(p.site, [b.start_mjd, mid, b.end_mjd])]
        times = np.arange(b.end_mjd, p.window.end.utc.mjd + blocks.STEP_D, blocks.STEP_D)
        far = np.flatnonzero(np.abs(airmass_alone(p.site, times) - b.airmass[1]) > blocks.STANDARD_DAIRMASS)
        assert b.standard_latest_mjd == (times[far[0]] if far.size else min(times[-1], p.window.end.utc.mjd))
        rec = blocks._reference_record(o)
        if rec is None:
            assert b.snr_bin is None
            continue
        ref, lam = refs[o.setup], np.array([rec["measured_A"]])
        cond = batched_conditions([p.window], demo_plan.atmospheres[p.site.id])
        flux = np.array([[fluxes[id(o)]]])
        r = exposure.rates(flux, exposure.setup_grid(ref.telescope, ref.instrument, ref.setup, wavelength_A=lam),
                           cond, demo_plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm))
        res = exposure.expose(r, b.on_source_s, b.n_exp)
        alone = float(np.ravel(snr_per_bin(res.snr_per_pixel, r.dispersion_A_per_pix,
                                           bin_width_A(lam, demo_plan.settings["bin_kms"])))[0])
        assert b.snr_bin == pytest.approx(alone, rel=1e-12)
        assert b.significance == pytest.approx(float(significance(rec["depth"] or 0.0, alone, rec["n_bins"] or 0.0)),
                                               rel=1e-12)
        measured += 1
    assert measured > 10


def test_figures_already_drawn_are_kept_in_report_order_and_not_drawn_again(demo_plan, tmp_path, monkeypatch):
    # the figure process draws the campaign chart from the visibility alone, before the plan arrives
    (tmp_path / "figures").mkdir()
    early = folder.campaign_chart_of(demo_plan.visibility, tmp_path)
    drawn_png = (tmp_path / early["path"]).read_bytes()

    def never(*_args):
        raise AssertionError("drawn again")

    monkeypatch.setitem(folder.FIGURES, "campaign", never)
    monkeypatch.setattr(folder, "use_pool", lambda costs, workers: False)  # in this process: the patch holds
    with folder.start_figures(demo_plan, tmp_path, drawn={("campaign", None): early}) as run:
        results = run.finish()
    assert [r["path"] for r in results] == run.paths and results[0] == early
    assert (tmp_path / early["path"]).read_bytes() == drawn_png


def test_build_plan_tells_when_the_visibility_and_the_choices_are_final():
    from kncast.planner.commands.demo import demo_event_path
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load()
    told = []

    def ready(part, value):
        # what each part is when told: the windows, then the plan with every choice and no ensemble yet
        nights = value.nights if part == "choices" else []
        told.append((part, value, [p.choice for p in nights], [p.ensemble for p in nights]))

    plan = build_plan(load_event(demo_event_path()), registry.select(["paranal", "pachon"]), nights=2,
                      registry=registry, draws=20, ready=ready)
    assert [t[0] for t in told] == ["visibility", "choices"]
    assert told[0][1] is plan.visibility
    assert told[1][1] is plan and told[1][2] == [p.choice for p in plan.nights]
    assert all(e is None for e in told[1][3]) and any(p.ensemble for p in plan.nights)
