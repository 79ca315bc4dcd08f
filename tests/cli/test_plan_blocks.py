"""``kncast plan``: observing blocks per telescope, restrictions, exports and the 80-column summary (issue 13)."""
from __future__ import annotations

import datetime as dt
import json
import re
from pathlib import Path

import pytest

from conftest import DEMO, ROOT

SOUTH = DEMO / "kn-demo-south.toml"


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    """A 3-night plan of the southern demo event with an iCalendar export."""
    from kncast.planner.cli import main

    tmp = tmp_path_factory.mktemp("blocks")
    out, ics = tmp / "plan", tmp / "blocks.ics"
    status = main(["plan", "--event", str(SOUTH), "--nights", "3", "--out", str(out), "--ics", str(ics),
                   "--json", str(tmp / "plan.json")])
    assert status == 0
    return json.loads((out / "plan.json").read_text()), out, ics


def test_every_block_carries_the_contract_keys(planned):
    doc = planned[0]
    assert doc["blocks"], "the demo event must give planned blocks"
    keys = {"site", "telescope", "setup", "start_utc", "end_utc", "n_exp", "exp_s", "snr", "airmass",
            "altitude_deg", "parallactic_angle_deg", "adr_arcsec", "ra_hms", "dec_dms", "detected"}
    for b in doc["blocks"]:
        assert keys <= set(b)
        assert len(b["airmass"]) == len(b["altitude_deg"]) == len(b["parallactic_angle_deg"]) == 3
        assert b["start_utc"] < b["end_utc"]
        assert b["setup"].startswith(b["telescope"] + "/")


def test_blocks_sit_inside_their_windows_and_hold_the_exposures(planned):
    doc = planned[0]
    nights = {(n["site"], n["night"]): n for n in doc["nights"]}
    overhead = doc["settings"]["overhead_s"]
    for b in doc["blocks"]:
        ep = nights[(b["site"], b["night"])]["epoch"]
        assert ep["window_start_utc"] <= b["start_utc"] and b["end_utc"] <= ep["window_end_utc"]
        start = dt.datetime.fromisoformat(b["start_utc"].replace("Z", "+00:00"))
        end = dt.datetime.fromisoformat(b["end_utc"].replace("Z", "+00:00"))
        length = (end - start).total_seconds()
        on_source = b["n_exp"] * b["exp_s"]
        assert length <= on_source + overhead + 2.0          # overhead + exposures, rounded to the second
        assert b["exp_s"] <= 1800.0 + 1e-6                   # single exposures within the cap


def test_a_block_reaches_the_target_significance_it_was_planned_for(planned):
    doc = planned[0]
    sigma = doc["settings"]["sigma"]
    done = [b for b in doc["blocks"] if b["kind"] == "detection" and b["significance"] is not None]
    assert done
    for b in done:  # the exposures are the time to sigma on the reference trough, unless the block is capped
        assert b["significance"] == pytest.approx(sigma, rel=0.02) or b["significance"] > sigma


def test_ra_and_dec_in_sexagesimal(planned):
    # hand conversion: RA 160.625 deg = 10h42m30.00s, Dec -35.2 deg = -35d12m00.0s (the demo event file)
    b = planned[0]["blocks"][0]
    assert b["ra_hms"].startswith("10:42:30") and b["dec_dms"].startswith("-35:12:00")


def test_ics_round_trips_the_blocks(planned):
    # RFC 5545, parsed with the icalendar library (independent of our writer's formatting)
    from icalendar import Calendar

    doc, _out, ics = planned
    cal = Calendar.from_ical(ics.read_bytes())
    events = [c for c in cal.walk() if c.name == "VEVENT"]
    assert len(events) == len(doc["blocks"])
    for e, b in zip(events, doc["blocks"]):
        assert e.decoded("dtstart").strftime("%Y-%m-%dT%H:%M:%SZ") == b["start_utc"]
        assert e.decoded("dtend").strftime("%Y-%m-%dT%H:%M:%SZ") == b["end_utc"]
        assert b["telescope"] in str(e.get("summary"))


def test_blocks_text_has_one_line_per_block(planned):
    doc, out, _ics = planned
    lines = [ln for ln in (out / "blocks.txt").read_text().splitlines() if not ln.startswith("#")]
    assert len(lines) == len(doc["blocks"])
    for ln, b in zip(lines, doc["blocks"]):
        assert b["ra_hms"] in ln and b["setup"] in ln and b["start_utc"][11:16] in ln


def test_setups_option_restricts_the_choice(run_cli, tmp_path):
    keep = "sutherland/t10m/fibre-optical"
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    ids = [r.id for r in all_setups(SiteRegistry.load([]))]
    keep = next(i for i in ids if i.startswith("sutherland/"))
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--setups", keep, "--out", tmp_path / "p")
    assert status == 0, err
    doc = json.loads((tmp_path / "p" / "plan.json").read_text())
    assert doc["settings"]["setups"] == [keep]
    assert {s["setup"] for n in doc["nights"] for s in n["setups"]} <= {keep}


def test_a_site_with_two_telescopes_gets_two_rows(run_cli, tmp_path):
    # a copy of a bundled site with its telescope repeated under another id: two telescopes at one site
    import tomllib

    src = next(p for p in sorted((ROOT / "sites").glob("*.toml")) if "[[telescope]]" in p.read_text()
               and "southern" not in p.name)
    text = src.read_text()
    site_id = tomllib.loads(text)["site"]["id"]
    tel = text[text.index("[[telescope]]"):]
    first_id = tomllib.loads(text)["telescope"][0]["id"]
    twin = re.sub(rf'(\bid\s*=\s*"){re.escape(first_id)}"', r'\1twin"', tel, count=1)
    twin = re.sub(r'(\bname\s*=\s*")([^"]*)"', r'\1\2 (twin)"', twin, count=1)
    folder = tmp_path / "sites"
    folder.mkdir()
    (folder / "two.toml").write_text(text.replace(f'id = "{site_id}"', 'id = "two-telescopes"', 1) + "\n" + twin)
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "3", "--sites-dir", folder,
                             "--sites", "two-telescopes", "--out", tmp_path / "p")
    assert status == 0, err
    doc = json.loads((tmp_path / "p" / "plan.json").read_text())
    per_night = {}
    for b in doc["blocks"]:
        per_night.setdefault(b["night"], set()).add(b["telescope"])
    assert per_night and any(len(t) == 2 for t in per_night.values())


def test_night_rules_work_in_plan(run_cli, tmp_path):
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--start", "2027-03-17",
                             "--max-airmass", "1.5", "--min-moon-sep", "30", "--out", tmp_path / "p")
    assert status == 0, err
    doc = json.loads((tmp_path / "p" / "plan.json").read_text())
    assert {n["night"] for n in doc["nights"]} == {"2027-03-17", "2027-03-18"}
    for b in doc["blocks"]:
        assert all(x is None or x <= 1.5 + 1e-3 for x in b["airmass"])


def test_the_summary_fits_80_columns(run_cli, tmp_path, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    status, out, err = run_cli("plan", "--event", SOUTH, "--nights", "3", "--out", tmp_path / "p")
    assert status == 0, err
    assert out.strip()
    assert max(len(line) for line in out.splitlines()) <= 80
    assert "…" not in out                                  # no header or cell cut to an ellipsis


@pytest.mark.parametrize("extra, named", [
    (["--setups", "nowhere/t1/none"], "unknown setup"),
    (["--start", "2031-01-01"], "--start"),
])
def test_bad_plan_options_exit_2_and_write_nothing(run_cli, tmp_path, extra, named):
    out = tmp_path / "p"
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", *extra, "--out", out)
    assert status == 2 and named in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_ics_to_a_folder_is_refused_before_any_work(run_cli, tmp_path):
    out = tmp_path / "p"
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--ics", tmp_path, "--out", out)
    assert status == 2 and "--ics" in err and not out.exists()


def test_anchor_rescales_the_model_and_a_replan_keeps_the_previous_plan(run_cli, tmp_path):
    out = tmp_path / "p"
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--out", out)
    assert status == 0, err
    first = json.loads((out / "plan.json").read_text())
    # the model's own R magnitude at day 1.03, made 1 mag fainter: the luminosity scale must be 10^-0.4
    # (AB magnitudes, Oke & Gunn 1983; one band, so the closed-form least-squares scale)
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.source import transient_for_event

    event = load_event(SOUTH)
    phase = 1.0298611111111111
    mag = float(transient_for_event(event).mag_ab([phase], ["bessell-R"])["bessell-R"][0]) + 1.0
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--out", out,
                             "--anchor", f"bessell-R={mag!r}@2027-03-15T03:00:00Z")
    assert status == 0, err
    doc = json.loads((out / "plan.json").read_text())
    fit = doc["model"]["anchoring"]
    assert fit["luminosity_scale"] == pytest.approx(10 ** -0.4, rel=1e-6) and not fit["temperature_fitted"]
    assert json.loads((out / "plan.previous.json").read_text())["blocks"] == first["blocks"]
    assert "changes" in doc and "since the previous plan" in doc["changes"]["summary"]
    assert "What changed" in (out / "report.md").read_text()


@pytest.mark.parametrize("anchor, named", [
    ("bessell-R20.5@2027-03-15T03:00:00Z", "--anchor"),
    ("bessell-R=20.5@2027-03-15", "--anchor"),
    ("nosuchband=20.5@2027-03-15T03:00:00Z", "--anchor"),
])
def test_bad_anchor_exits_2_and_writes_nothing(run_cli, tmp_path, anchor, named):
    out = tmp_path / "p"
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "2", "--anchor", anchor, "--out", out)
    assert status == 2 and named in err and len(err.strip().splitlines()) == 1 and not out.exists()
