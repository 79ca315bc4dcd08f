"""Ranking several candidate positions per site and night."""
from __future__ import annotations

import pytest

from kncast.planner.visibility.candidates import rank_candidates
from kncast.planner.events.model import Candidate, Event, parse_time_utc
from kncast.planner.events.eventfile import load_event
from kncast.planner.sites import SiteRegistry
from kncast.planner.visibility.core import compute_visibility

from conftest import DEMO

T0 = parse_time_utc("2027-04-10T03:00:00Z", "t0")


@pytest.fixture(scope="module")
def registry():
    return SiteRegistry.load()


def event_with(*cands):
    return Event(id="cands", ra_deg=cands[0][1], dec_deg=cands[0][2], t0=T0, distance_mpc=100.0,
                 candidates=tuple(Candidate(*c) for c in cands))


def test_demo_candidates_ranked_for_every_site_and_night(registry):
    event = load_event(DEMO / "kn-demo-candidates.toml")
    sites = registry.select(["paranal", "la-palma"])
    ranked = rank_candidates(event, sites, nights=2)
    assert [(r.site.id, r.night.isoformat()) for r in ranked] == [
        (n.site.id, n.night.isoformat()) for n in compute_visibility(event, sites, nights=2).nights]
    for night in ranked:
        assert sorted(r.rank for r in night.ranking) == [1, 2, 3, 4]
        assert {r.candidate.id for r in night.ranking} == {"cand-a", "cand-b", "cand-c", "cand-d"}
        hours = [round(r.hours, 1) for r in night.ranking]
        assert hours == sorted(hours, reverse=True)
        assert all(r.note for r in night.ranking if not r.observable)
        doc = night.summary()
        assert set(doc) == {"site", "night", "dusk_utc", "dawn_utc", "candidates"}


def test_hours_are_those_of_the_visibility_windows(registry):
    event = load_event(DEMO / "kn-demo-candidates.toml")
    sites = registry.select(["sutherland"])
    ranked = rank_candidates(event, sites, nights=1, min_moon_sep_deg=20.0)
    for entry in ranked[0].ranking:
        vis = compute_visibility(event, sites, nights=1, min_moon_sep_deg=20.0, target_index=entry.index)
        assert entry.hours == pytest.approx(sum(w.hours for w in vis.nights[0].windows), abs=1e-9)


def test_hemisphere_decides(registry):
    # Textbook spherical astronomy: a star's highest altitude is 90 - |latitude - declination|.
    # From Paranal (-24.6 deg) a Dec +60 star culminates at 5.4 deg (< the 20 deg limit) while a
    # Dec -80 star stays between 14.6 and 34.6 deg, so it is above the limit part of the time.
    # From La Palma (+28.8 deg) the Dec -80 star never rises and the Dec +60 star is up.
    event = event_with(("north", 200.0, 60.0), ("south", 200.0, -80.0))
    paranal, la_palma = registry.select(["paranal", "la-palma"])
    south_night = rank_candidates(event, [paranal], nights=2)[1]
    assert [r.candidate.id for r in south_night.ranking] == ["south", "north"]
    assert south_night.ranking[1].hours == 0 and "never rises above 20" in south_night.ranking[1].note
    assert south_night.first.candidate.id == "south"
    north_night = rank_candidates(event, [la_palma], nights=2)[1]
    assert north_night.first.candidate.id == "north" and not north_night.ranking[1].observable


def test_equal_hours_then_best_airmass(registry):
    # Mount John, latitude -44.0 deg: Dec -70 and Dec -80 are both circumpolar and never below
    # 24 deg (|lat| - (90 - |dec|)), so both are observable all dark night; Dec -70 culminates
    # higher (64 deg vs 54 deg: 90 - |lat - dec|), hence a lower airmass (textbook geometry).
    event = event_with(("low", 190.0, -80.0), ("high", 190.0, -70.0))  # RA 190: culminates near local midnight in April
    site = registry.select(["mount-john"])
    night = rank_candidates(event, site, nights=2)[1]
    a, b = night.ranking
    assert a.hours == pytest.approx(b.hours, abs=0.05)
    assert [a.candidate.id, b.candidate.id] == ["high", "low"] and a.best_airmass < b.best_airmass


def test_single_position_event_ranks_itself(registry):
    event = load_event(DEMO / "kn-demo-south.toml")
    night = rank_candidates(event, registry.select(["paranal"]), nights=1)[0]
    assert len(night.ranking) == 1 and night.ranking[0].candidate.id == event.id


def test_visibility_command_candidates_table_and_json(tmp_path, run_cli):
    import json

    out_json = tmp_path / "v.json"
    status, out, err = run_cli("visibility", "--event", DEMO / "kn-demo-candidates.toml", "--sites", "paranal",
                               "--nights", "2", "--candidates", "--json", out_json)
    assert status == 0, err
    assert "Candidates ranked" in out and "cand-a" in out
    doc = json.loads(out_json.read_text())
    assert len(doc["candidates"]) == len(doc["nights"]) == 2
    first = doc["candidates"][1]["candidates"][0]
    assert {"rank", "id", "hours", "best_airmass", "best_utc", "moon_sep_deg", "note"} <= set(first)
    status, out, err = run_cli("visibility", "--event", DEMO / "kn-demo-candidates.toml", "--sites", "paranal",
                               "--nights", "1", "--json", out_json)
    assert status == 0 and "candidates" not in json.loads(out_json.read_text())
