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


def _same_records(many, one):
    """Every night and window of two VisibilityResults equal: notes exactly, times and values to 1e-6."""
    assert len(many.nights) == len(one.nights)
    for a, b in zip(many.nights, one.nights):
        assert (a.site.id, a.night, a.note) == (b.site.id, b.night, b.note)
        for x, y in ((a.dusk_mjd, b.dusk_mjd), (a.dawn_mjd, b.dawn_mjd), (a.dark_hours, b.dark_hours)):
            assert x == pytest.approx(y, abs=1e-6, nan_ok=True)
        assert len(a.windows) == len(b.windows)
        for wa, wb in zip(a.windows, b.windows):
            for name in ("start_mjd", "end_mjd", "hours", "best_airmass", "best_mjd", "best_altitude_deg",
                         "moon_illumination", "moon_phase_angle_deg", "moon_sep_deg", "moon_altitude_deg",
                         "phase_start_d", "phase_end_d"):
                assert getattr(wa, name) == pytest.approx(getattr(wb, name), abs=1e-6), name
            assert wa.summary() == wb.summary()


@pytest.mark.parametrize("chunk", [None, 1])
def test_many_targets_in_one_pass_equal_one_at_a_time(registry, monkeypatch, chunk):
    # Internal consistency (no outside source: the same rules evaluated two ways): all targets of an
    # event in one pass, (target, site) rows x times, equal one compute_visibility call per target;
    # a horizon profile (la-palma), the Moon and airmass rules and several nights included, and
    # with ``chunk`` = 1 every target in its own group of the many-target pass.
    from kncast.planner.visibility import core

    if chunk is not None:
        monkeypatch.setattr(core, "MAX_CHUNK_SAMPLES", chunk)
    event = event_with(("a", 150.3, -31.1), ("b", 151.4, -22.8), ("c", 157.85, -12.4), ("d", 142.8, -38.3),
                       ("e", 200.0, 60.0), ("f", 10.0, 5.0))
    sites = registry.select(["paranal", "la-palma", "sutherland", "mount-john"])
    rules = {"nights": 3, "min_moon_sep_deg": 25.0, "max_airmass": 2.5}
    many = core.compute_visibility_many(event, sites, **rules)
    assert [r.target_index for r in many] == list(range(6))
    for k, result in enumerate(many):
        one = core.compute_visibility(event, sites, target_index=k, ephemeris=many[0].ephemeris, **rules)
        _same_records(result, one)
    assert sum(len(n.windows) for r in many for n in r.nights) > 10  # the comparison covers real windows
    sub = core.compute_visibility_many(event, sites, targets=[4, 1], ephemeris=many[0].ephemeris, **rules)
    assert [r.target_index for r in sub] == [4, 1]
    _same_records(sub[0], many[4])
    _same_records(sub[1], many[1])


def test_window_times_are_astropy_times_of_the_mjds(registry):
    event = load_event(DEMO / "kn-demo-candidates.toml")
    night = next(n for n in compute_visibility(event, registry.select(["paranal"]), nights=2).nights if n.windows)
    w = night.windows[0]
    for t, mjd in ((w.start, w.start_mjd), (w.end, w.end_mjd), (w.best_time, w.best_mjd),
                   (night.dusk, night.dusk_mjd), (night.dawn, night.dawn_mjd)):
        assert t.scale == "utc" and t.mjd == mjd
    ranked = rank_candidates(event, registry.select(["paranal"]), nights=2)[1].ranking[0]
    assert ranked.best_time.mjd == ranked.best_mjd


def test_many_targets_bad_indices(registry):
    from kncast.planner.errors import ParameterError
    from kncast.planner.visibility.core import compute_visibility_many

    event = load_event(DEMO / "kn-demo-candidates.toml")
    with pytest.raises(ParameterError, match="targets"):
        compute_visibility_many(event, registry.select(["paranal"]), targets=[4])
    with pytest.raises(ParameterError, match="targets"):
        compute_visibility_many(event, registry.select(["paranal"]), targets=[])
