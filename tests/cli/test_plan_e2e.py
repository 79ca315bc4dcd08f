"""End-to-end checks of ``kncast plan`` / ``kncast demo`` on the bundled demo events.

Every output file is produced and readable; plan.json validates against its
JSON Schema (kncast.planner.plan.schema, checked with the independent ``jsonschema``
library); the numbers agree with the per-issue commands (visibility,
lightcurve, lines, exposure) run separately on the same inputs; hard events
say plainly that nothing useful can be done; bad input ends with exit
status 2 and leaves no output folder behind.
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_events"
SOUTH = DEMO / "kn-demo-south.toml"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2
FILES = ("plan.json", "windows.ecsv", "features.ecsv", "exposures.ecsv", "report.md", "report.html")


def _main(*args):
    from kncast.planner.cli import main

    try:
        return main([str(a) for a in args])
    except SystemExit as exc:  # argparse usage errors
        return exc.code


def _json_of(tmp: Path, name: str, *args) -> dict:
    path = tmp / f"{name}.json"
    assert _main(*args, "--json", path) == 0, args
    return json.loads(path.read_text())


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The folder written by ``kncast demo --out DIR`` and its plan.json."""
    out = tmp_path_factory.mktemp("e2e") / "demo"
    assert _main("demo", "--out", out) == 0
    return out, json.loads((out / "plan.json").read_text())


@pytest.fixture(scope="module")
def scratch(tmp_path_factory):
    return tmp_path_factory.mktemp("commands")


# ------------------------------------------------------------------ files
def test_every_output_file_is_written_and_readable(demo):
    from astropy.table import Table

    from kncast.planner.plan.folder import EXPOSURE_COLUMNS, FEATURE_COLUMNS, WINDOW_COLUMNS

    out, doc = demo
    for name in FILES:
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    for name, columns in (("windows", WINDOW_COLUMNS), ("features", FEATURE_COLUMNS),
                          ("exposures", EXPOSURE_COLUMNS)):
        t = Table.read(out / f"{name}.ecsv", format="ascii.ecsv")
        assert list(t.colnames) == list(columns) and len(t) > 0, name
    assert str(Table.read(out / "windows.ecsv")["hours"].unit) == "h"
    figures = doc["files"]["figures"]
    assert any("campaign" in f for f in figures) and any("lightcurve" in f for f in figures)
    assert any("spectrum" in f for f in figures) and any(f.startswith("figures/snr-") for f in figures)
    for rel in figures:
        assert (out / rel).read_bytes()[:8] == PNG_SIGNATURE, rel
    md = (out / "report.md").read_text()
    for heading in ("## Summary", "## Night by night", "## Technical justification", "### References",
                    "### Assumptions", "## Cautions"):
        assert heading in md
    for rel in figures:
        assert f"]({rel})" in md
    assert not list(out.parent.glob(".demo.*")), "temporary folders left behind"


def test_demo_prints_where_the_report_is(tmp_path, run_cli):
    out = tmp_path / "d"
    status, stdout, _ = run_cli("demo", "--out", out, "--nights", "2")
    assert status == 0
    assert f"Report: {out / 'report.html'}" in stdout
    assert "model estimates" in stdout and "take precedence" in stdout


def test_demo_event_is_found_as_package_data():
    from kncast.planner.commands.demo import demo_event_path

    assert demo_event_path().is_file()
    assert demo_event_path().read_text() == SOUTH.read_text()


# ------------------------------------------------------------------ schema
def test_plan_json_validates_against_its_schema(demo):
    import jsonschema

    from kncast.planner.plan.schema import PLAN_SCHEMA

    jsonschema.Draft202012Validator.check_schema(PLAN_SCHEMA)
    jsonschema.Draft202012Validator(PLAN_SCHEMA).validate(demo[1])


def test_schema_rejects_a_broken_document(demo):
    import copy

    import jsonschema

    from kncast.planner.plan.schema import PLAN_SCHEMA

    validator = jsonschema.Draft202012Validator(PLAN_SCHEMA)
    broken = copy.deepcopy(demo[1])
    del broken["nights"][0]["reason"]
    assert not validator.is_valid(broken)
    broken = copy.deepcopy(demo[1])
    broken["nights"][0]["status"] = "maybe"
    assert not validator.is_valid(broken)


# ------------------------------------------------------------------ the choice
def test_significance_is_depth_times_snr_per_bin_times_root_bins(demo):
    # internal consistency of the document's own fields (docs/methods.md, "Per-feature detectability")
    n_checked = 0
    for n in demo[1]["nights"]:
        for s in n["setups"]:
            for f in s["features"]:
                if f["depth"] is None or f["significance"] is None:
                    continue
                expected = f["depth"] * f["snr_bin"] * math.sqrt(f["n_bins"])
                assert f["significance"] == pytest.approx(expected, rel=2e-3, abs=2e-3)
                n_checked += 1
    assert n_checked > 100


def test_the_choice_detects_the_most_features_and_names_one(demo):
    doc = demo[1]
    sigma = doc["settings"]["sigma"]
    chosen = [n for n in doc["nights"] if n["choice"]]
    assert chosen, "the demo event must give at least one useful night"
    for n in doc["nights"]:
        for s in n["setups"]:
            records = {f["id"]: f for f in s["features"]}
            if n["epoch"]["hours_available"] > 0:
                detected = [t for t in s["targets"] if (records[t]["significance"] or 0.0) >= sigma]
                assert sorted(s["detected"]) == sorted(detected)
            assert s["score"] == len(s["detected"]) and s["detects"] == bool(s["detected"])
        if n["choice"]:
            best = max(s["score"] for s in n["setups"])
            c = n["choice"]
            assert c["score"] == pytest.approx(best) and n["status"] == "observe"
            assert n["detected"] == c["detected"] and c["detected"]
            assert c["setup"] in n["reason"] and "sigma" in n["reason"]
            assert f"{c['trough_obs_A']:.0f} A" in n["reason"]
            assert n["reference"]["feature"] == c["feature"] and n["reference"]["setup"] == c["setup"]
        else:
            assert n["status"] != "observe" and n["reason"].startswith(("no window", "nothing useful"))
            assert n["detected"] == []


def test_late_useful_nights_at_large_southern_telescopes_rest_on_red_features(demo):
    # issue 11: after day 3 the 8-10 m southern sites still give useful nights, judged by red or near-IR
    # troughs (a 3000 K photosphere peaks near 9700 A: Wien's law, b = 2.898e-3 m K, CODATA)
    large_south = {"paranal", "sutherland"}
    late = [n for n in demo[1]["nights"] if n["choice"] and n["site"] in large_south and n["epoch"]["phase_d"] > 3.0]
    assert late, "no useful night after day 3 at the 8-10 m southern sites"
    for n in late:
        assert n["reference"]["trough_A"] > 6500.0, n["reason"]


def test_campaign_summary_follows_the_nights(demo):
    doc = demo[1]
    chosen = [n for n in doc["nights"] if n["choice"]]
    last = max(chosen, key=lambda n: n["epoch"]["phase_d"])
    assert doc["campaign"]["last_useful"]["phase_d"] == pytest.approx(last["epoch"]["phase_d"], abs=1e-4)
    assert doc["campaign"]["useful_nights"] == len(chosen)
    for s in doc["campaign"]["setups"]:
        rows = sorted((n["epoch"]["phase_d"], o["detects"]) for n in doc["nights"] for o in n["setups"]
                      if o["setup"] == s["setup"] and o["significance"] is not None)
        if s["too_faint_from_phase_d"] is not None:
            assert not any(d for ph, d in rows if ph >= s["too_faint_from_phase_d"] - 1e-4)
        if s["last_reaches_target_phase_d"] is not None:
            assert any(d for ph, d in rows if abs(ph - s["last_reaches_target_phase_d"]) < 1e-4)


def test_usable_time_is_capped_and_net_of_overhead(demo):
    doc = demo[1]
    st = doc["settings"]
    for n in doc["nights"]:
        ep = n["epoch"]
        if ep:
            expected = max(0.0, min(ep["window_hours"], st["max_hours"]) - st["overhead_s"] / 3600)
            assert ep["hours_available"] == pytest.approx(expected, abs=1e-3)
            assert ep["window_start_utc"] <= ep["utc"] <= ep["window_end_utc"]


# ------------------------------------------------------------------ consistency with the other commands
def test_windows_agree_with_the_visibility_command(demo, scratch):
    doc = demo[1]
    vis = _json_of(scratch, "vis", "visibility", "--event", SOUTH, "--nights", doc["settings"]["nights"])
    plan_nights = {(n["site"], n["night"]): n for n in doc["nights"]}
    assert len(vis["nights"]) == len(plan_nights)
    for v in vis["nights"]:
        p = plan_nights[(v["site"], v["night"])]
        assert [(w["start_utc"], w["end_utc"], w["hours"], w["best_airmass"]) for w in v["windows"]] == \
               [(w["start_utc"], w["end_utc"], w["hours"], w["best_airmass"]) for w in p["windows"]]
        assert (v["dusk_utc"], v["dawn_utc"]) == (p["dusk_utc"], p["dawn_utc"])


def _picked(doc, k=3):
    """A few chosen nights spread over the campaign."""
    chosen = sorted((n for n in doc["nights"] if n["choice"]), key=lambda n: n["epoch"]["phase_d"])
    idx = sorted({0, len(chosen) // 2, len(chosen) - 1})[:k]
    return [chosen[i] for i in idx]


def test_photosphere_agrees_with_the_lightcurve_command(demo, scratch):
    picked = _picked(demo[1])
    phases = ",".join(repr(n["epoch"]["phase_d"]) for n in picked)
    lc = _json_of(scratch, "lc", "lightcurve", "--event", SOUTH, "--phases", phases)
    for n, ep in zip(picked, lc["epochs"]):
        ph = n["epoch"]["photosphere"]
        assert ep["phase_d"] == pytest.approx(n["epoch"]["phase_d"])
        for key in ("temperature_K", "radius_cm", "luminosity_erg_s", "v_phot_c"):
            assert ph[key] == pytest.approx(ep[key], rel=1e-4), key


def test_features_agree_with_the_lines_command(demo, scratch):
    for k, n in enumerate(_picked(demo[1])):
        ep, c = n["epoch"], n["choice"]
        out = _json_of(scratch, f"lines{k}", "lines", "--event", SOUTH, "--phases", repr(ep["phase_d"]),
                       "--setup", c["setup"], "--airmass", ep["airmass"], "--pwv", "2.5")
        feats = out["epochs"][0]["features"]
        mine = next(s for s in n["setups"] if s["setup"] == c["setup"])
        ref = next(f for f in feats if f["feature"] == c["feature"])
        assert c["trough_obs_A"] == pytest.approx(ref["trough_obs_A"], abs=0.2)
        assert mine["tau_sobolev"] == pytest.approx(ref["tau_sobolev"], rel=1e-3)
        # depth of a scattering line against the photosphere, (1 - W)(1 - e^-tau), W = 1/2 (docs/methods.md)
        assert mine["depth"] == pytest.approx(0.5 * (1.0 - math.exp(-ref["tau_sobolev"])), rel=1e-3)


def test_exposures_agree_with_the_exposure_command(demo, scratch):
    # the continuum S/N per resolution element at the reference trough in the usable time is what
    # `kncast exposure --time` gives there under the same conditions: one exposure path
    checked = 0
    for k, n in enumerate(_picked(demo[1], k=6)):
        ep, c = n["epoch"], n["choice"]
        mine = next(s for s in n["setups"] if s["setup"] == c["setup"])
        if mine["tau_sobolev"] is None or mine["tau_sobolev"] < 1.0:
            continue  # the exposure command lists the strong features (tau >= 1) only
        record = next(f for f in mine["features"] if f["id"] == c["feature"])
        conditions = ("--airmass", ep["airmass"], "--moon-illumination", ep["moon_illumination"],
                      "--moon-sep", ep["moon_sep_deg"], "--moon-alt", ep["moon_altitude_deg"])
        available = ep["hours_available"] * 3600.0
        nexp = max(1, math.ceil(available / 1800.0 - 1e-9))
        got = _json_of(scratch, f"exp{k}t", "exposure", "--event", SOUTH, "--setup", c["setup"],
                       "--phase", repr(ep["phase_d"]), "--time", repr(available), "--nexp", nexp, *conditions)
        at = next(f for f in got["features"] if f["feature"] == c["feature"])
        assert at["snr_per_resel"] == pytest.approx(record["snr_resel"], rel=2e-3)
        checked += 1
    assert checked


# ------------------------------------------------------------------ hard events
def test_event_near_the_sun_says_nothing_useful(tmp_path, run_cli):
    out = tmp_path / "sun"
    status, stdout, _ = run_cli("plan", "--event", DEMO / "kn-demo-near-sun.toml", "--nights", "3", "--out", out)
    assert status == 0
    doc = json.loads((out / "plan.json").read_text())
    assert doc["campaign"]["useful_nights"] == 0 and doc["campaign"]["last_useful"] is None
    for n in doc["nights"]:
        assert n["choice"] is None and n["reason"].startswith(("no window", "nothing useful"))
    assert "Nothing useful can be done" in stdout
    assert "Nothing useful can be done" in (out / "report.md").read_text()
    assert "Nothing useful can be done" in (out / "report.html").read_text()


def test_event_near_the_pole_is_planned_from_the_south_only(tmp_path, run_cli):
    out = tmp_path / "pole"
    status, _, err = run_cli("plan", "--event", DEMO / "kn-demo-pole.toml", "--nights", "2", "--out", out,
                             "--sites", "la-palma,maunakea,paranal,siding-spring")
    assert status == 0, err
    doc = json.loads((out / "plan.json").read_text())
    for n in doc["nights"]:
        if n["site"] in ("la-palma", "maunakea"):  # Dec -83 never rises north of latitude +7 (common practice)
            assert n["windows"] == [] and n["reason"].startswith("no window")
    assert any(n["epoch"] for n in doc["nights"] if n["site"] in ("paranal", "siding-spring"))


def test_several_candidates_are_ranked_per_site_and_night(tmp_path, run_cli):
    import jsonschema

    from kncast.planner.plan.schema import PLAN_SCHEMA

    out = tmp_path / "cands"
    status, _, err = run_cli("plan", "--event", DEMO / "kn-demo-candidates.toml", "--nights", "2", "--out", out,
                             "--sites", "paranal,la-palma")
    assert status == 0, err
    doc = json.loads((out / "plan.json").read_text())
    jsonschema.Draft202012Validator(PLAN_SCHEMA).validate(doc)
    assert {(n["site"], n["night"]) for n in doc["candidates"]} == {(n["site"], n["night"]) for n in doc["nights"]}
    status, _, err = run_cli("visibility", "--event", DEMO / "kn-demo-candidates.toml", "--nights", "2",
                             "--sites", "paranal,la-palma", "--candidates", "--json", tmp_path / "v.json")
    assert status == 0, err
    alone = json.loads((tmp_path / "v.json").read_text())["candidates"]
    for planned, separate in zip(doc["candidates"], alone):  # the same ranking as `kncast visibility --candidates`
        assert [c["id"] for c in planned["candidates"]] == [c["id"] for c in separate["candidates"]]
        hours = [c["hours"] for c in planned["candidates"]]
        assert all(round(a, 1) >= round(b, 1) for a, b in zip(hours, hours[1:]))
    assert "Candidates ranked per site and night" in (out / "report.md").read_text()


# ------------------------------------------------------------------ output modes and errors
def test_json_to_stdout_is_quiet_and_complete(tmp_path, run_cli):
    status, stdout, _ = run_cli("plan", "--event", SOUTH, "--nights", "2", "--sites", "paranal",
                                "--out", tmp_path / "q", "--json", "-")
    assert status == 0
    doc = json.loads(stdout)
    assert doc["kind"] == "plan" and doc["sites"][0]["id"] == "paranal"


def test_rerun_replaces_the_folder_and_foreign_folders_are_refused(tmp_path, run_cli):
    out = tmp_path / "again"
    for _ in range(2):
        assert run_cli("plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal", "--out", out)[0] == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["again"]
    foreign = tmp_path / "mine"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep me")
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal", "--out", foreign)
    assert status == 2 and "--out" in err
    assert (foreign / "notes.txt").read_text() == "keep me"


BAD = [
    (("--event", "missing.toml"), "missing.toml"),
    (("--event", SOUTH, "--snr", "0"), "--snr"),
    (("--event", SOUTH, "--max-hours", "-1"), "--max-hours"),
    (("--event", SOUTH, "--nights", "0"), "--nights"),
    (("--event", SOUTH, "--overhead-min", "nan"), "--overhead-min"),
    (("--event", SOUTH, "--sites", "paranall"), "paranal"),
    (("--ra", "10:00:00", "--dec", "95", "--t0", "2027-03-14T02:17:00Z", "--distance-mpc", "50"), "95"),
    (("--event", SOUTH, "--model", "heating", "--component", "x:0,0.2,1"), "mass"),
]


@pytest.mark.parametrize("args, named", BAD)
def test_bad_input_exits_2_and_leaves_no_folder(tmp_path, run_cli, args, named):
    out = tmp_path / "out"
    status, stdout, err = run_cli("plan", *args, "--out", out)
    assert status == 2
    assert named in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert list(tmp_path.iterdir()) == []


def test_bad_event_file_names_the_file(tmp_path, run_cli):
    bad = tmp_path / "bad.toml"
    bad.write_text('[event]\nid = "x"\nra = 10.0\ndec = -100.0\nt0 = "2027-03-14T02:17:00Z"\ndistance_mpc = 50\n')
    status, _, err = run_cli("plan", "--event", bad, "--out", tmp_path / "out")
    assert status == 2 and "bad.toml" in err and "dec" in err
    assert not (tmp_path / "out").exists()


def test_a_failure_while_writing_leaves_no_folder(tmp_path, run_cli, monkeypatch):
    import kncast.planner.plan.folder as outputs

    def broken(plan, folder, figures="chosen"):
        (folder / "figures").mkdir()
        raise RuntimeError("disk full")

    monkeypatch.setattr(outputs, "start_figures", broken)
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal",
                             "--out", tmp_path / "out")
    assert status == 1 and "internal error" in err
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------ references and cautions
def test_report_names_the_models_and_the_cautions(demo):
    from kncast.forecast import references as cite

    out, doc = demo
    refs = [r["reference"] for r in doc["references"]]  # collection rules: tests/planner/test_references.py
    for cited in (cite.KASTEN_YOUNG_1989, cite.KRISCIUNAS_SCHAEFER_1991, cite.MERLINE_HOWELL_1995,
                  cite.SOBOLEV_1957, cite.BESSELL_1999):
        assert cited.text in refs, cited
        assert cited.text in (out / "report.md").read_text()
    html = (out / "report.html").read_text()
    for words in ("Sun-avoidance", "model estimates", "take precedence"):
        assert words in html and words in (out / "report.md").read_text()
    assert len(doc["cautions"]) == 3


def test_candidates_event_near_the_zenith(tmp_path, run_cli):
    # cand-a (Dec -31.08) culminates 1.3 deg from the zenith at Sutherland (latitude -32.38 in its site file),
    # where Kasten & Young (1989) give an airmass just below 1 (0.9997 at the zenith)
    out = tmp_path / "cands"
    status, _, err = run_cli("plan", "--event", DEMO / "kn-demo-candidates.toml", "--nights", "2",
                             "--sites", "paranal,sutherland", "--out", out)
    assert status == 0, err
    doc = json.loads((out / "plan.json").read_text())
    assert doc["settings"]["target"] == "cand-a"
    assert all(n["epoch"]["airmass"] >= 1.0 for n in doc["nights"] if n["epoch"])
    assert "planned for cand-a" in (out / "report.md").read_text()


def test_a_failing_figure_worker_is_reported_and_leaves_no_folder(tmp_path, run_cli, monkeypatch):
    import kncast.planner.plan.folder as outputs

    def broken(plan, folder, arg):
        raise ValueError("no ink")

    monkeypatch.setitem(outputs.FIGURES, "lightcurve", broken)
    status, _, err = run_cli("plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal",
                             "--out", tmp_path / "out")
    assert status == 1 and "lightcurve" in err and "no ink" in err and len(err.strip().splitlines()) == 1
    assert list(tmp_path.iterdir()) == []


def test_default_folder_and_json_copy(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    status, stdout, _ = run_cli("plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal", "--json", "p.json")
    assert status == 0
    folder = tmp_path / "kncast-out" / "kn-demo-south"
    assert json.loads((tmp_path / "p.json").read_text()) == json.loads((folder / "plan.json").read_text())
    assert "Report: kncast-out/kn-demo-south/report.html" in stdout
    assert "Recommended spectra" not in stdout  # quiet with --json: no tables
