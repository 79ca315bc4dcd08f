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


def _outcome(setup, n_clear, snr, target=10.0, n_strong=6, t_need=1000.0, nexp=1):
    o = SetupOutcome(setup=setup, aperture_m=4.0, n_strong=n_strong, strong=[f"f{i}" for i in range(n_strong)],
                     clear=[f"f{i}" for i in range(n_clear)])
    if n_clear:
        o.feature, o.species, o.trough_obs_A, o.tau_sobolev = "f0", "Sr II", 9000.0, 5.0
    if snr is not None:
        o.snr, o.reaches_target = snr, snr >= target
        o.time_for_target_s, o.nexp, o.exposure_s = t_need, nexp, t_need / nexp
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


def test_score_is_clear_features_times_snr_when_the_target_is_reached():
    assert score(_outcome("a", 5, 23.0)) == pytest.approx(115.0)
    assert score(_outcome("b", 5, 9.9)) == 0.0          # below the target: not eligible
    assert score(_outcome("c", 0, None)) == 0.0


def test_choice_takes_the_highest_score_and_says_why():
    n = _night(outcomes=[_outcome("wide", 5, 23.0, t_need=2400, nexp=2), _outcome("deep", 2, 50.0),
                         _outcome("faint", 6, 8.0)])
    choose(n, 10.0, 900.0)
    assert n.status == "observe" and n.choice.setup == "wide"  # 5 x 23 = 115 beats 2 x 50 = 100
    assert n.reason == ("wide covers 5 of 6 strong features clear of telluric bands and reaches S/N 23 at the "
                        "Sr II trough (9000 A) in 3.0 h; S/N 10 needs 2 x 1200 s")


def test_ties_go_to_the_shorter_exposure():
    n = _night(outcomes=[_outcome("slow", 2, 30.0, t_need=3000), _outcome("fast", 3, 20.0, t_need=1000)])
    choose(n, 10.0, 900.0)
    assert n.choice.setup == "fast"


@pytest.mark.parametrize("outcomes, hours, status, words", [
    ([_outcome("a", 0, None, n_strong=0)], 3.0, "no-strong", "no feature is expected to be strong"),
    ([_outcome("a", 0, None), _outcome("b", 0, None)], 3.0, "hidden", "only hidden features"),
    ([_outcome("a", 3, 4.2), _outcome("b", 1, 7.5)], 3.0, "too-faint", "at best S/N 7.5 (target 10) with b"),
    ([], 3.0, "no-spectrograph", "no spectrograph setup known"),
    ([_outcome("a", 3, None)], 0.0, "too-short", "shorter than the 15 min overhead"),
])
def test_nights_without_a_useful_setup_say_why(outcomes, hours, status, words):
    n = _night(outcomes=outcomes, hours=hours)
    choose(n, 10.0, 900.0)
    assert n.choice is None and n.status == status
    assert n.reason.startswith("nothing useful") and words in n.reason


def test_campaign_summary_last_useful_and_too_faint():
    target = 10.0
    nights = []
    for day, snr in enumerate([30.0, 12.0, 8.0, 5.0]):  # one setup fading below the target on day 2
        n = _night(day=day, phase=day + 0.5, outcomes=[_outcome("s1/t/i", 3, snr)])
        choose(n, target, 900.0)
        nights.append(n)
    plan = Plan(event=None, sites=[SimpleNamespace(id="s1")], settings={"snr_target": target, "setups": ["s1/t/i"]},
                visibility=None, transient=None, nights=nights)
    c = campaign_summary(plan)
    assert c["useful_nights"] == 2
    assert c["last_useful"] == {"site": "s1", "night": "2027-03-15", "phase_d": 1.5, "setup": "s1/t/i"}
    assert c["sites"][0]["useful_phases_d"] == [0.5, 1.5]
    s = c["setups"][0]
    assert s["last_reaches_target_phase_d"] == 1.5 and s["too_faint_from_phase_d"] == 2.5
    assert s["too_faint_from_night"] == "2027-03-16" and s["note"] == "too faint from day 2.50 on"
