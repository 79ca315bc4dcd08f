"""``kncast setups``: JSON schema, custom site folders, errors without partial output."""
from __future__ import annotations

import json

SITE = """
[site]
id = "testpeak"
name = "Test peak (invented)"
latitude_deg = -30.0
longitude_deg = -70.0
elevation_m = 2000
timezone = "America/Santiago"
min_altitude_deg = 20

[[telescope]]
id = "t3m"
aperture_m = 3.0
central_obstruction = 0.1

[[telescope.instrument]]
id = "simple"
kind = "slit"
slit_width_arcsec = 1.0
pixel_scale_arcsec = 0.4

[[telescope.instrument.arm]]
name = "optical"
min_A = 4000
max_A = 9000
resolving_power = 800
dispersion_A_per_pix = 2.5
read_noise_e = 5.0
dark_e_per_s = 0.001
gain_e_per_adu = 1.0
full_well_e = 100000
throughput_A = [4000, 9000]
throughput = [0.2, 0.1]

[[telescope.instrument.setup]]
id = "red"
description = "red half"
[[telescope.instrument.setup.arm]]
name = "optical"
min_A = 6500
"""


def test_json_keys(run_cli, tmp_path):
    out = tmp_path / "setups.json"
    status, _, err = run_cli("setups", "--json", out)
    assert status == 0, err
    doc = json.loads(out.read_text())
    assert {"kncast", "kind", "setups"} <= set(doc) and doc["kind"] == "setups"
    assert len(doc["setups"]) >= 20
    for s in doc["setups"]:
        assert {"setup", "site", "aperture_m", "arms"} <= set(s)
        assert s["setup"].startswith(s["site"] + "/")
        for arm in s["arms"]:
            assert {"name", "min_A", "max_A", "resolving_power"} <= set(arm)
            assert arm["min_A"] < arm["max_A"]


def test_custom_site_folder(run_cli, tmp_path):
    (tmp_path / "testpeak.toml").write_text(SITE)
    status, out, err = run_cli("setups", "--sites-dir", tmp_path, "--sites", "testpeak", "--json", "-")
    assert status == 0, err
    doc = json.loads(out)
    ids = [s["setup"] for s in doc["setups"]]
    assert ids == ["testpeak/t3m/simple", "testpeak/t3m/simple:red"]
    assert doc["setups"][1]["arms"][0]["min_A"] == 6500
    assert doc["setups"][0]["aperture_m"] == 3.0


def test_table_output(run_cli):
    status, out, _ = run_cli("setups", "--sites", "paranal")
    assert status == 0 and "paranal/t10m/fibre-optical:red" in out


def test_malformed_instrument_table_exits_2_without_output(run_cli, tmp_path):
    (tmp_path / "testpeak.toml").write_text(SITE.replace("max_A = 9000", "max_A = 30000"))
    out = tmp_path / "out.json"
    status, stdout, err = run_cli("setups", "--sites-dir", tmp_path, "--json", out)
    assert status == 2
    assert "testpeak.toml" in err and "telescope[0].instrument[0].arm[0].max_A" in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists() and stdout == ""
    assert not list(tmp_path.glob(".out.json*"))


def test_unknown_site_exits_2(run_cli):
    status, _, err = run_cli("setups", "--sites", "paranl")
    assert status == 2 and "did you mean paranal" in err
