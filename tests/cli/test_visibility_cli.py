"""``kncast visibility``: JSON schema of the issue, terminal tables, plot, and the error contract."""
from __future__ import annotations

import datetime as dt
import json
import re

import pytest

EVENT = ["--ra", "10:42:30", "--dec", "-35:12:00", "--t0", "2027-03-14T02:17:00Z"]
ISO_Z = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$")

# key lists exactly as written in the visibility issue
TOP_KEYS = {"kncast", "kind", "event", "nights"}
NIGHT_KEYS = {"site", "night", "dusk_utc", "dawn_utc", "note", "windows"}
WINDOW_KEYS = {"start_utc", "end_utc", "hours", "best_airmass", "best_utc", "moon_illumination", "moon_sep_deg",
               "phase_start_d", "phase_end_d"}


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    from kncast.planner.cli import main

    path = tmp_path_factory.mktemp("vis") / "v.json"
    assert main(["visibility", *EVENT, "--distance-mpc", "120", "--sites", "paranal,hanle,maunakea",
                 "--nights", "3", "--json", str(path)]) == 0
    return json.loads(path.read_text())


def test_json_keys_as_in_the_issue(doc):
    assert TOP_KEYS <= set(doc) and doc["kind"] == "visibility"
    assert len(doc["nights"]) == 9  # 3 sites x 3 nights
    for n in doc["nights"]:
        assert NIGHT_KEYS <= set(n)
        for w in n["windows"]:
            assert WINDOW_KEYS <= set(w)


def test_json_times_are_iso_utc_with_z(doc):
    for n in doc["nights"]:
        re.fullmatch(r"\d{4}-\d\d-\d\d", n["night"])
        for key in ("dusk_utc", "dawn_utc"):
            assert n[key] is None or ISO_Z.match(n[key])
        for w in n["windows"]:
            assert all(ISO_Z.match(w[k]) for k in ("start_utc", "end_utc", "best_utc"))


def test_json_values_consistent(doc):
    assert doc["event"]["t0_utc"] == "2027-03-14T02:17:00Z"
    for n in doc["nights"]:
        assert (n["note"] != "") or n["windows"]  # every night without a window says why
        for w in n["windows"]:
            assert w["start_utc"] < w["end_utc"] and w["hours"] > 0
            assert 0 <= w["phase_start_d"] < w["phase_end_d"] and w["best_airmass"] >= 1.0
            assert 0 <= w["moon_illumination"] <= 1 and 0 <= w["moon_sep_deg"] <= 180
            assert w["start_utc"] <= w["best_utc"] <= w["end_utc"]
            assert w["hours"] == pytest.approx((w["phase_end_d"] - w["phase_start_d"]) * 24, abs=1e-3)


def test_terminal_table_and_plot(run_cli, tmp_path, demo_event_path):
    plot = tmp_path / "campaign.png"
    status, out, err = run_cli("visibility", "--event", demo_event_path, "--sites", "paranal,siding-spring",
                               "--nights", "2", "--min-moon-sep", "30", "--max-airmass", "2.5", "--plot", plot)
    assert status == 0, err
    assert "paranal" in out and "siding-spring" in out and "best X" in out
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("dec", [["--dec", "-35:12:00"], ["--dec=-35:12:00"], ["--dec", "-35d12m00s"],
                                 ["--dec", "-35.2"]])
def test_negative_sexagesimal_declination_is_a_value(run_cli, dec):
    status, out, err = run_cli("visibility", "--ra", "160.625", *dec, "--t0", "2027-03-14T02:17:00Z",
                               "--sites", "pachon", "--nights", "1", "--json", "-")
    assert status == 0, err
    assert json.loads(out)["event"]["dec_deg"] == pytest.approx(-35.2)


def test_json_to_stdout(run_cli):
    status, out, _ = run_cli("visibility", *EVENT, "--sites", "pachon", "--nights", "1", "--json", "-")
    assert status == 0 and json.loads(out)["nights"][0]["site"] == "pachon"


def test_settings_record_the_first_night(run_cli):
    args = ("visibility", *EVENT, "--sites", "pachon", "--nights", "1", "--json", "-")
    status, out, _ = run_cli(*args)
    assert status == 0 and json.loads(out)["settings"]["start_date"] is None  # the night of t0
    first = json.loads(out)["nights"][0]["night"]
    later = (dt.date.fromisoformat(first) + dt.timedelta(days=2)).isoformat()
    status, out, _ = run_cli(*args, "--start", later)
    doc = json.loads(out)
    assert status == 0 and doc["settings"]["start_date"] == later and doc["nights"][0]["night"] == later


# --- the error contract: status 2, one line naming the option or file, no output file left ---
def _binary(tmp_path):
    p = tmp_path / "event.toml"
    p.write_bytes(b"\x00\x01\x02\xff\xfe binary")
    return p


def _empty(tmp_path):
    p = tmp_path / "empty.toml"
    p.write_text("  \n")
    return p


def _bad_site_dir(tmp_path):
    d = tmp_path / "sites"
    d.mkdir()
    (d / "broken.toml").write_text('[site]\nid = "broken"\nname = "x"\nlatitude_deg = 95\nlongitude_deg = 0\n'
                                   'elevation_m = 0\ntimezone = "UTC"\nmin_altitude_deg = 20\n')
    return d


def _malformed_site_dir(tmp_path):
    d = tmp_path / "sites2"
    d.mkdir()
    (d / "broken.toml").write_text('[site\nid = "broken"\n')
    return d


BAD = {
    "ra out of range": (lambda tp: ["--ra", "400", "--dec", "-30", "--t0", "2027-03-14T02:17:00Z"], "--ra"),
    "ra unreadable": (lambda tp: ["--ra", "ten", "--dec", "-30", "--t0", "2027-03-14T02:17:00Z"], "--ra"),
    "dec out of range": (lambda tp: ["--ra", "150", "--dec", "-95", "--t0", "2027-03-14T02:17:00Z"], "--dec"),
    "t0 unreadable": (lambda tp: ["--ra", "150", "--dec", "-30", "--t0", "yesterday"], "--t0"),
    "t0 without zone": (lambda tp: ["--ra", "150", "--dec", "-30", "--t0", "2027-03-14T02:17:00"], "--t0"),
    "nights zero": (lambda tp: [*EVENT, "--nights", "0"], "--nights"),
    "nights negative": (lambda tp: [*EVENT, "--nights", "-2"], "--nights"),
    "max airmass below 1": (lambda tp: [*EVENT, "--max-airmass", "0.5"], "--max-airmass"),
    "moon sep not a number": (lambda tp: [*EVENT, "--min-moon-sep", "far"], "--min-moon-sep"),
    "unknown site": (lambda tp: [*EVENT, "--sites", "paranl"], "paranal"),  # suggestion shown
    "site value out of range": (lambda tp: [*EVENT, "--sites-dir", _bad_site_dir(tp)], "latitude_deg"),
    "malformed site file": (lambda tp: [*EVENT, "--sites-dir", _malformed_site_dir(tp)], "broken.toml"),
    "binary event file": (lambda tp: ["--event", _binary(tp)], "binary"),
    "missing event file": (lambda tp: ["--event", tp / "nope.toml"], "nope.toml"),
    "empty event file": (lambda tp: ["--event", _empty(tp)], "empty"),
    "missing sites folder": (lambda tp: [*EVENT, "--sites-dir", tp / "no-such-dir"], "--sites-dir"),
    "event and coordinates": (lambda tp: ["--event", tp / "x.toml", *EVENT], "--event"),
    "bad plot suffix": (lambda tp: [*EVENT, "--plot", tp / "chart.gif"], "--plot"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_input_exit_2_one_line_no_output(case, run_cli, tmp_path):
    args, named = BAD[case]
    out_json, out_png = tmp_path / "out.json", tmp_path / "out.png"
    extra = ["--json", out_json] + ([] if case == "bad plot suffix" else ["--plot", out_png])
    status, out, err = run_cli("visibility", *args(tmp_path), *extra)
    assert status == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and named in lines[0] and "Traceback" not in err
    assert not out_json.exists() and not out_png.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]  # no temporary leftovers


def test_unknown_site_suggests_closest(run_cli):
    status, _, err = run_cli("visibility", *EVENT, "--sites", "paranl")
    assert status == 2 and "did you mean paranal" in err


def test_internal_error_one_line_and_debug_traceback(run_cli, monkeypatch, tmp_path):
    import kncast.planner.visibility.core

    def broken(*a, **k):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr(kncast.planner.visibility.core, "compute_visibility", broken)
    out_json = tmp_path / "out.json"
    status, _, err = run_cli("visibility", *EVENT, "--json", out_json)
    assert status == 1 and len(err.strip().splitlines()) == 1
    assert "internal error" in err and "--debug" in err and not out_json.exists()
    with pytest.raises(RuntimeError, match="simulated failure"):
        run_cli("visibility", "--debug", *EVENT, "--json", out_json)
    assert not out_json.exists()
