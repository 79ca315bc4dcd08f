"""The plan's own logic on hand-built cases: observing block, score, choice, reasons, campaign summary.

These are kncast's definitions (docs/commands/plan.md, sections "How each night is planned" and "The score"),
checked on inputs small enough to work out by hand; no physics is involved.
"""
from __future__ import annotations

import datetime as dt
from types import SimpleNamespace

import pytest
from astropy.time import Time

from kncast.planner.plan.core import NightPlan, Plan, SetupOutcome, block_centre_mjd, campaign_summary, choose, score

MJD0 = 61480.0


def _window(start_h, end_h, best_h, airmass=1.2):
    t = lambda h: Time(MJD0 + h / 24.0, format="mjd", scale="utc")  # noqa: E731
    return SimpleNamespace(start=t(start_h), end=t(end_h), best_time=t(best_h), hours=end_h - start_h,
                           best_airmass=airmass)


def _night(site="s1", day=0, hours=3.0, outcomes=(), phase=1.0):
    w = _window(0.0, hours + 0.25, 1.0)
    rec = SimpleNamespace(site=SimpleNamespace(id=site), night=dt.date(2027, 3, 14) + dt.timedelta(days=day),
                          windows=[w], note="")
    return NightPlan(record=rec, window_index=0, phase_d=phase, hours_available=hours, outcomes=list(outcomes))


SIGMA = 5.0
SETTINGS = {"sigma": SIGMA}


def _outcome(setup, n_detected, significance, n_targets=6, t_need=1000.0, nexp=1, seen=True):
    """A setup measuring ``n_targets`` diagnostic features, ``n_detected`` of them at >= SIGMA; its best
    trough (the Sr II 10039 A one at 9000 A in the red arm) at ``significance``."""
    o = SetupOutcome(setup=setup, aperture_m=4.0, targets=[f"f{i}" for i in range(n_targets)],
                     detected=[f"f{i}" for i in range(n_detected)])
    if seen and n_targets:
        o.feature, o.species, o.words, o.trough_obs_A, o.arm = "f0", "Sr II", "Sr II 10039 A", 9000.0, "red"
        o.significance, o.snr_bin, o.depth = significance, 3.0, 0.5
        if t_need is not None:
            o.time_to_sigma_s, o.nexp, o.exposure_s = t_need, nexp, t_need / nexp
    return o


@pytest.mark.parametrize("start, end, best, max_h, centre", [
    (0.0, 2.0, 0.5, 4.0, 1.0),    # window shorter than the block: its middle
    (0.0, 6.0, 0.0, 4.0, 2.0),    # best airmass at the start: block [0, 4]
    (0.0, 6.0, 6.0, 4.0, 4.0),    # best airmass at the end: block [2, 6]
    (0.0, 10.0, 5.0, 4.0, 5.0),   # room on both sides: centred on the best time
])
def test_observing_block_centre(start, end, best, max_h, centre):
    got_h = (block_centre_mjd(_window(start, end, best), max_h) - MJD0) * 24.0
    assert got_h == pytest.approx(centre, abs=1e-6)


def test_score_is_the_number_of_features_detected():
    assert score(_outcome("a", 5, 23.0)) == 5.0
    assert score(_outcome("b", 0, 4.9)) == 0.0          # below the target significance: not eligible
    assert score(_outcome("c", 0, None, n_targets=0)) == 0.0


def test_choice_detects_the_most_features_and_names_the_feature():
    n = _night(outcomes=[_outcome("wide", 3, 12.0, t_need=2400, nexp=2), _outcome("deep", 2, 50.0),
                         _outcome("faint", 0, 4.0)])
    choose(n, SETTINGS, 900.0)
    assert n.status == "observe" and n.choice.setup == "wide"  # 3 features detected beat 2, however deep
    assert n.detected == ["f0", "f1", "f2"]
    assert n.reason == ("wide: Sr II 10039 A trough at 9000 A (red arm): 12.0 sigma in 3.0 h; 5 sigma needs "
                        "2 x 1200 s; 3 of 6 diagnostic features at >= 5 sigma")


def test_ties_go_to_the_setup_reaching_sigma_soonest():
    n = _night(outcomes=[_outcome("slow", 2, 30.0, t_need=3000), _outcome("fast", 2, 20.0, t_need=1000)])
    choose(n, SETTINGS, 900.0)
    assert n.choice.setup == "fast"


@pytest.mark.parametrize("outcomes, hours, status, words", [
    ([_outcome("a", 0, None, n_targets=0)], 3.0, "no-targets", "no diagnostic feature is expected to be deep"),
    ([_outcome("a", 0, None, seen=False), _outcome("b", 0, None, seen=False)], 3.0, "hidden",
     "only hidden features"),
    ([_outcome("a", 0, 4.2), _outcome("b", 0, 3.1)], 3.0, "too-faint", "at best 4.2 sigma (target 5) with a"),
    ([], 3.0, "no-spectrograph", "no spectrograph setup known"),
    ([_outcome("a", 3, None)], 0.0, "too-short", "shorter than the 15 min overhead"),
])
def test_nights_without_a_useful_setup_say_why(outcomes, hours, status, words):
    n = _night(outcomes=outcomes, hours=hours)
    choose(n, SETTINGS, 900.0)
    assert n.choice is None and n.status == status
    assert n.reason.startswith("nothing useful") and words in n.reason


def test_campaign_summary_last_useful_and_too_faint():
    nights = []
    for day, sig in enumerate([30.0, 12.0, 4.0, 2.0]):  # one setup fading below the target on day 2
        n = _night(day=day, phase=day + 0.5, outcomes=[_outcome("s1/t/i", 3 if sig >= SIGMA else 0, sig)])
        choose(n, SETTINGS, 900.0)
        nights.append(n)
    plan = Plan(event=None, sites=[SimpleNamespace(id="s1")], settings={"sigma": SIGMA, "setups": ["s1/t/i"]},
                visibility=None, transient=None, nights=nights)
    c = campaign_summary(plan)
    assert c["useful_nights"] == 2
    assert c["last_useful"] == {"site": "s1", "night": "2027-03-15", "phase_d": 1.5, "setup": "s1/t/i"}
    assert c["sites"][0]["useful_phases_d"] == [0.5, 1.5]
    s = c["setups"][0]
    assert s["last_reaches_target_phase_d"] == 1.5 and s["too_faint_from_phase_d"] == 2.5
    assert s["too_faint_from_night"] == "2027-03-16" and s["note"] == "detects nothing from day 2.50 on"
