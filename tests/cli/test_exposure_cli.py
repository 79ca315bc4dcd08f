"""``kncast exposure``: JSON schema, target-time round trip, planner conditions, error contract."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SOUTH = ROOT / "demo_events" / "kn-demo-south.toml"
POLE = ROOT / "demo_events" / "kn-demo-pole.toml"
SETUP = "sutherland/t8m/wide-3arm"
FIXED = ["--airmass", "1.3", "--moon-illumination", "0.3", "--moon-sep", "80"]  # no planner call


def _run(run_cli, tmp_path, *extra, name="out.json"):
    out = tmp_path / name
    status, stdout, stderr = run_cli("exposure", "--event", SOUTH, "--setup", SETUP, *extra, "--json", out)
    doc = json.loads(out.read_text()) if status == 0 else None
    return status, doc, stdout, stderr


def test_json_schema_time_mode(run_cli, tmp_path):
    status, doc, stdout, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", "3600", "--nexp", "2", *FIXED)
    assert status == 0
    for key in ("kncast", "kind", "event", "setup", "phase_d", "conditions", "exposure", "samples", "features",
                "snr_basis"):
        assert key in doc
    assert doc["kind"] == "exposure" and doc["snr_basis"] == "per resolution element"
    assert set(doc["conditions"]) >= {"airmass", "seeing_arcsec", "moon_illumination", "moon_sep_deg"}
    assert doc["exposure"]["time_s"] == 3600 and doc["exposure"]["nexp"] == 2
    assert "time_for_target_s" not in doc
    s = doc["samples"][0]
    assert set(s) >= {"wavelength_A", "snr_per_pixel", "snr_per_resel", "source_e", "sky_e"}
    # samples across every arm of the setup
    arms = {x["arm"] for x in doc["samples"]}
    assert arms == {"blue", "red", "ir"}
    for f in doc["features"]:
        assert set(f) >= {"feature", "trough_obs_A", "snr_per_resel"}
    assert "per resolution element" in stdout and "take precedence" in stdout


def test_snr_mode_round_trips(run_cli, tmp_path):
    status, doc, stdout, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--snr", "20", "--at", "5500",
                                  "--max-exposure", "1200", *FIXED)
    assert status == 0 and "time for S/N 20 per resolution element" in stdout
    t, n = doc["time_for_target_s"], doc["exposure"]["nexp"]
    assert doc["exposure"]["time_s"] == pytest.approx(t)
    assert t / n <= 1200.0 + 1e-6
    status, doc2, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", repr(t), "--nexp", str(n),
                              "--max-exposure", "1200", *FIXED, name="b.json")
    assert status == 0
    at5500 = [r for r in doc2["reference"] if r["wavelength_A"] == 5500.0][0]
    assert at5500["snr_per_resel"] == pytest.approx(20.0, rel=1e-3)  # 0.1% round trip


def test_feature_target_and_ideal_upper_bound(run_cli, tmp_path):
    status, doc, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", "1800", *FIXED)
    assert status == 0 and doc["features"]
    feat = max((f for f in doc["features"] if f["snr_per_resel"]), key=lambda f: f["snr_per_resel"])["feature"]
    status, doc_f, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--snr", "10", "--at", feat, *FIXED, name="f.json")
    assert status == 0 and doc_f["target"]["at"] == f"{feat} trough"
    status, ideal, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", "1800", "--ideal", *FIXED, name="i.json")
    assert status == 0
    real = {r["wavelength_A"]: r["snr_per_resel"] for r in doc["reference"]}
    for r in ideal["reference"]:
        assert r["snr_per_resel"] > real[r["wavelength_A"]]


def test_brighter_moon_lowers_snr(run_cli, tmp_path):
    base = ["--phase", "2.5", "--time", "1800", "--airmass", "1.2"]
    _, dark, _, _ = _run(run_cli, tmp_path, *base, "--moon-illumination", "0.0", "--moon-sep", "90", name="d.json")
    _, bright, _, _ = _run(run_cli, tmp_path, *base, "--moon-illumination", "1.0", "--moon-sep", "30", name="m.json")
    d = {r["wavelength_A"]: r["snr_per_resel"] for r in dark["reference"]}
    b = {r["wavelength_A"]: r["snr_per_resel"] for r in bright["reference"]}
    assert b[4500.0] < d[4500.0]


def test_conditions_from_planner_window(run_cli, tmp_path):
    status, doc, _, _ = _run(run_cli, tmp_path, "--phase", "1.5", "--time", "1200")
    assert status == 0
    assert doc["conditions"]["source"].startswith("best window of the night")
    assert doc["conditions"]["airmass"] == pytest.approx(doc["conditions"]["window"]["best_airmass"], abs=1e-3)


def test_no_window_is_an_error_unless_airmass_given(run_cli, tmp_path):
    # the far-southern demo event never rises from La Palma (northern hemisphere)
    out = tmp_path / "x.json"
    args = ["exposure", "--event", POLE, "--setup", "la-palma/t6m/lowres-optical", "--phase", "1.5",
            "--time", "600", "--json", out]
    status, _, stderr = run_cli(*args)
    assert status == 2 and "no observing window" in stderr and "--airmass" in stderr
    assert not out.exists()
    status, _, _ = run_cli(*args, "--airmass", "1.5")
    assert status == 0 and out.exists()


def test_user_sky_file(run_cli, tmp_path):
    sky = tmp_path / "sky.dat"
    sky.write_text("# wavelength_A flam_per_arcsec2\n3000 1e-16\n25000 1e-16\n")
    status, doc, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", "1800", "--sky", sky, *FIXED)
    assert status == 0 and doc["conditions"]["sky"].startswith("user file")
    _, model, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--time", "1800", *FIXED, name="m.json")
    assert doc["reference"][1]["snr_per_resel"] < model["reference"][1]["snr_per_resel"]


def test_plot_written(run_cli, tmp_path):
    png = tmp_path / "snr.png"
    status, _, _, _ = _run(run_cli, tmp_path, "--phase", "2.5", "--snr", "15", "--at", "6000", "--plot", png,
                            *FIXED)
    assert status == 0 and png.stat().st_size > 1000


@pytest.mark.parametrize("extra, needle", [
    (["--phase", "0", "--time", "100"], "--phase"),
    (["--phase", "-1", "--time", "100"], "--phase"),
    (["--phase", "200", "--time", "100"], "--phase"),
    (["--phase", "2", "--time", "0"], "--time"),
    (["--phase", "2", "--time", "-5"], "--time"),
    (["--phase", "2", "--snr", "0"], "--snr"),
    (["--phase", "2", "--time", "100", "--airmass", "0.5"], "--airmass"),
    (["--phase", "2", "--time", "100", "--seeing", "0"], "--seeing"),
    (["--phase", "2", "--time", "100", "--airmass", "1.2", "--moon-illumination", "1.5", "--moon-sep", "40"],
     "--moon-illumination"),
    (["--phase", "2", "--time", "100", "--airmass", "1.2", "--moon-illumination", "0.5", "--moon-sep", "200"],
     "--moon-sep"),
    (["--phase", "2", "--time", "100", "--airmass", "1.2", "--moon-illumination", "0.5"], "--moon-sep"),
    (["--phase", "2", "--time", "100", "--pwv", "-1", *FIXED], "--pwv"),
    (["--phase", "2", "--time", "100", "--max-exposure", "0", *FIXED], "--max-exposure"),
    (["--phase", "2", "--time", "5000", "--nexp", "1", "--max-exposure", "1800", *FIXED], "--max-exposure"),
    (["--phase", "2", "--snr", "10", "--nexp", "2", *FIXED], "--nexp"),
    (["--phase", "2", "--time", "100", "--at", "5000", *FIXED], "--at"),
    (["--phase", "2", "--snr", "10", "--at", "50000", *FIXED], "--at"),
    (["--phase", "2", "--snr", "10", "--at", "no-such-feature", *FIXED], "unknown feature"),
    (["--phase", "2", "--snr", "5000", "--at", "3300", *FIXED], "not reachable"),
    (["--phase", "2", "--time", "100", "--snr", "10", *FIXED], "not allowed"),
    (["--phase", "2", "--time", "100", "--plot", "x.gif", *FIXED], "--plot"),
])
def test_bad_options_exit_2_without_output(run_cli, tmp_path, extra, needle):
    status, doc, _, stderr = _run(run_cli, tmp_path, *extra)
    assert status == 2
    assert needle in stderr and "Traceback" not in stderr
    assert len(stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out.json").exists()


def test_unknown_setup_suggests(run_cli, tmp_path):
    out = tmp_path / "o.json"
    status, _, stderr = run_cli("exposure", "--event", SOUTH, "--setup", "sutherland/t8m/wide-3am",
                                "--phase", "2", "--time", "100", *FIXED, "--json", out)
    assert status == 2 and "did you mean" in stderr and SETUP in stderr
    assert not out.exists()


@pytest.mark.parametrize("text, needle", [
    ("3000 1e-17\n", "at least 2"),
    ("3000 1e-17\n2000 1e-17\n", "increase"),
    ("3000 abc\n9000 1e-17\n", "line 1"),
    ("3000 1e-17 5\n9000 1e-17\n", "two"),
    ("3000 -1e-17\n9000 1e-17\n", "out of range"),
    ("4000 1e-17\n6000 1e-17\n", "covers"),  # does not cover the setup
])
def test_malformed_sky_file(run_cli, tmp_path, text, needle):
    sky = tmp_path / "sky.dat"
    sky.write_text(text)
    status, _, _, stderr = _run(run_cli, tmp_path, "--phase", "2", "--time", "100", "--sky", sky, *FIXED)
    assert status == 2 and needle in stderr and str(sky) in stderr
    assert not (tmp_path / "out.json").exists()


def test_bad_atmosphere_table(run_cli, tmp_path):
    site = (ROOT / "sites" / "paranal.toml").read_text().replace('id = "paranal"', 'id = "testpar"')
    site = site.replace("aerosol_k5500 = 0.02", "aerosol_k5500 = 5.0")
    d = tmp_path / "sites"
    d.mkdir()
    (d / "testpar.toml").write_text(site)
    out = tmp_path / "o.json"
    status, _, stderr = run_cli("exposure", "--event", SOUTH, "--setup", "testpar/t10m/fibre-optical", "--sites-dir", d,
                                "--phase", "2", "--time", "100", *FIXED, "--json", out)
    assert status == 2 and "atmosphere.aerosol_k5500" in stderr
    assert not out.exists()


def _radec(distance_mpc):
    return ["--ra", "10:42:30", "--dec=-35:12:00", "--t0", "2027-03-14T02:17:00Z", "--distance-mpc", str(distance_mpc)]


def test_saturation_warning(run_cli, tmp_path):
    out = tmp_path / "s.json"
    status, stdout, _ = run_cli("exposure", *_radec(0.5), "--setup", SETUP, "--phase", "1.5", "--time", "1800",
                                *FIXED, "--json", out)
    assert status == 0 and "saturates" in stdout
    assert any("saturates" in w for w in json.loads(out.read_text())["warnings"])


def test_systematics_warning(run_cli, tmp_path):
    out = tmp_path / "s.json"
    # 400 Mpc: a source at 4 d far below the sky yet reachable within the 1e6 s search limit (the
    # default photosphere is capped by its radioactive heating, ~2x fainter at 4 d than uncapped)
    status, stdout, _ = run_cli("exposure", *_radec(400), "--setup", SETUP, "--phase", "4", "--snr", "3",
                                "--at", "12500", *FIXED, "--json", out)
    assert status == 0 and "below 1% of the sky" in stdout
    doc = json.loads(out.read_text())
    assert doc["exposure"]["nexp"] == pytest.approx(doc["time_for_target_s"] / 1800.0, abs=1.0)
