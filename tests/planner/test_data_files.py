"""Bundled sites and demo events load and validate; bad files give one-line errors."""
from __future__ import annotations

import pytest

from kncast.forecast.errors import DataFileError
from kncast.planner.errors import InputError, UnknownNameError
from kncast.planner.events.model import parse_dec, parse_ra, parse_time_utc
from kncast.planner.events.eventfile import load_event
from kncast.planner.sites import SiteRegistry, load_site

from conftest import DEMO


def test_at_least_eight_sites_in_both_hemispheres_and_all_longitudes():
    sites = list(SiteRegistry.load())
    assert len(sites) >= 8
    assert any(s.latitude_deg > 0 for s in sites) and any(s.latitude_deg < 0 for s in sites)
    lons = sorted(s.longitude_deg % 360 for s in sites)
    gaps = [b - a for a, b in zip(lons, lons[1:] + [lons[0] + 360])]
    assert max(gaps) < 120  # no longitude sector of a third of the globe left without a site


def test_demo_events_load():
    events = [load_event(p) for p in sorted(DEMO.glob("*.toml"))]
    assert len(events) >= 3
    decs = [e.dec_deg for e in events]
    assert min(decs) < 0 < max(decs)


def test_unknown_site_suggests_close_ids():
    reg = SiteRegistry.load()
    with pytest.raises(UnknownNameError, match="did you mean paranal"):
        reg.get("paranl")


@pytest.mark.parametrize("text,deg", [("10:42:30", 160.625), ("10h42m30s", 160.625), ("160.625", 160.625)])
def test_ra_formats(text, deg):
    assert parse_ra(text, "ra") == pytest.approx(deg)


@pytest.mark.parametrize("text,deg", [("-35:12:00", -35.2), ("-35d12m00s", -35.2), (12.5, 12.5)])
def test_dec_formats(text, deg):
    assert parse_dec(text, "dec") == pytest.approx(deg)


@pytest.mark.parametrize("bad", ["-1", "360", "abc"])
def test_bad_ra(bad):
    with pytest.raises(InputError):
        parse_ra(bad, "--ra")


def test_naive_time_refused_with_fix():
    with pytest.raises(InputError, match="2027-03-14T02:17:00Z"):
        parse_time_utc("2027-03-14T02:17:00", "--t0")


def test_offset_time_converted_to_utc():
    assert parse_time_utc("2027-03-14T04:17:00+02:00", "t0").isot.startswith("2027-03-14T02:17:00")


@pytest.mark.parametrize("content,match", [
    ("", "file is empty"),
    ("[site\nid=", "malformed TOML"),
    ("[other]\nx = 1\n", r"\[site\]: table missing"),
    ('[site]\nid="x"\nname="x"\nlatitude_deg=95\nlongitude_deg=0\nelevation_m=0\ntimezone="UTC"\nmin_altitude_deg=20\n',
     r"site.latitude_deg: value 95 out of range \(allowed: \[-90, 90\] deg\)"),
    ('[site]\nid="x"\nname="x"\nlatitude_deg=5\nlongitude_deg=0\nelevation_m=0\ntimezone="Mars/Olympus"\nmin_altitude_deg=20\n',
     "unknown time zone"),
])
def test_bad_site_files(tmp_path, content, match):
    path = tmp_path / "bad.toml"
    path.write_text(content)
    with pytest.raises(DataFileError, match=match) as info:
        load_site(path)
    assert "\n" not in str(info.value) and str(path) in str(info.value)


def test_binary_site_file(tmp_path):
    path = tmp_path / "bin.toml"
    path.write_bytes(b"\x00\xff\xfe binary")
    with pytest.raises(DataFileError, match="binary"):
        load_site(path)


def test_event_missing_distance(tmp_path):
    path = tmp_path / "ev.toml"
    path.write_text('[event]\nid="x"\nra=10\ndec=-5\nt0="2027-01-01T00:00:00Z"\n')
    with pytest.raises(DataFileError, match="event.distance_mpc"):
        load_event(path)


def test_event_negative_distance(tmp_path):
    path = tmp_path / "ev.toml"
    path.write_text('[event]\nid="x"\nra=10\ndec=-5\nt0="2027-01-01T00:00:00Z"\ndistance_mpc=-3\n')
    with pytest.raises(DataFileError, match=r"event.distance_mpc: value -3 out of range"):
        load_event(path)
