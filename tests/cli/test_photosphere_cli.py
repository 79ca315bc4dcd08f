"""``kncast lightcurve``: outputs, model options, the event file's [model] table, and the error contract."""
from __future__ import annotations

import json

import pytest

EVENT = ["--ra", "150.25", "--dec", "-25.5", "--t0", "2027-04-10T03:00:00Z"]


def test_lightcurve_json_keys_and_components(run_cli, demo_event_path, tmp_path):
    out = tmp_path / "lc.json"
    status, stdout, stderr = run_cli("lightcurve", "--event", demo_event_path, "--phases", "1,2,5", "--json", out)
    assert status == 0, stderr
    doc = json.loads(out.read_text())
    assert doc["kind"] == "lightcurve" and "kncast" in doc and doc["event"]["id"] == "kn-demo-south"
    assert doc["model"]["name"] == "heating"  # from the demo file's [model] table
    assert [c["name"] for c in doc["model"]["parameters"]["component"]] == ["fast", "slow"]
    assert [e["phase_d"] for e in doc["epochs"]] == [1.0, 2.0, 5.0]
    for epoch in doc["epochs"]:
        for key in ("phase_d", "temperature_K", "radius_cm", "luminosity_erg_s", "v_phot_c", "mag_ab"):
            assert key in epoch
        assert set(epoch["mag_ab"]) == set(doc["bands"])
        assert [c["name"] for c in epoch["components"]] == ["fast", "slow"]
        assert sum(c["luminosity_erg_s"] for c in epoch["components"]) == pytest.approx(epoch["luminosity_erg_s"])
    assert "twomass-Ks" in stdout and "days since t0" in stdout


def test_lightcurve_from_options_powerlaw_with_overrides(run_cli, tmp_path):
    out = tmp_path / "lc.json"
    status, stdout, stderr = run_cli("lightcurve", *EVENT, "--distance-mpc", "90", "--model", "powerlaw",
                                     "--temperature-ref-k", "6000", "--v-max-c", "0.4", "--phases", "1",
                                     "--bands", "sdss2010-g,sdss2010-r", "--bands", "twomass-H", "--json", out)
    assert status == 0, stderr
    doc = json.loads(out.read_text())
    assert doc["model"]["parameters"]["temperature_ref_K"] == 6000.0
    assert doc["bands"] == ["sdss2010-g", "sdss2010-r", "twomass-H"]
    epoch = doc["epochs"][0]
    assert epoch["temperature_K"] == pytest.approx(6000.0, rel=0.01)
    assert "components" not in epoch and epoch["mag_vega"].keys() == {"twomass-H"}


def test_lightcurve_component_option_replaces_file_components(run_cli, demo_event_path, tmp_path):
    out = tmp_path / "lc.json"
    status, _, stderr = run_cli("lightcurve", "--event", demo_event_path, "--phases", "2",
                                "--component", "fast:0.01,0.3,1", "--component", "slow:0.05,0.1,5,2000",
                                "--json", out)
    assert status == 0, stderr
    comps = json.loads(out.read_text())["model"]["parameters"]["component"]
    assert [(c["name"], c["temperature_floor_K"]) for c in comps] == [("fast", 2500.0), ("slow", 2000.0)]


def test_lightcurve_json_to_stdout(run_cli):
    status, stdout, _ = run_cli("lightcurve", *EVENT, "--distance-mpc", "60", "--phases", "1", "--json", "-")
    assert status == 0 and json.loads(stdout)["epochs"][0]["phase_d"] == 1.0


def test_lightcurve_plot_is_written(run_cli, demo_event_path, tmp_path):
    plot = tmp_path / "lc.png"
    status, _, stderr = run_cli("lightcurve", "--event", demo_event_path, "--phases", "0.5,1,3,7", "--plot", plot)
    assert status == 0, stderr
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


BAD_OPTIONS = [
    (["--phases", "0,1"], "--phases"),
    (["--phases", "1,-2"], "--phases"),
    (["--phases", "one"], "--phases"),
    (["--model", "powerlaw", "--mass-msun", "0"], "--mass-msun"),
    (["--model", "powerlaw", "--v-max-c", "0.9"], "--v-max-c"),
    (["--model", "powerlaw", "--temperature-floor-k", "-5"], "--temperature-floor-k"),
    (["--model", "heating", "--component", "x:0.01,0.85,1"], "velocity_c = 0.85"),
    (["--model", "heating", "--component", "x:0,0.2,1"], "mass_msun = 0"),
    (["--model", "heating", "--component", "x:0.01,0.2"], "--component"),
    (["--model", "heating", "--mass-msun", "0.1"], "not a parameter of the heating model"),
    (["--model", "arnett"], "--model"),
    (["--bands", "bessell-Q"], "unknown band"),
    (["--ebv-host", "-1"], "--ebv-host"),
]


@pytest.mark.parametrize("extra, fragment", BAD_OPTIONS)
def test_bad_options_exit_2_with_one_line_and_no_output(run_cli, tmp_path, extra, fragment):
    out, plot = tmp_path / "lc.json", tmp_path / "lc.png"
    status, stdout, stderr = run_cli("lightcurve", *EVENT, "--distance-mpc", "60", *extra,
                                     "--json", out, "--plot", plot)
    assert status == 2
    assert fragment in stderr and len(stderr.strip().splitlines()) == 1 and "Traceback" not in stderr
    assert not out.exists() and not plot.exists() and list(tmp_path.iterdir()) == []


def test_missing_distance_is_a_clear_error(run_cli, tmp_path):
    out = tmp_path / "lc.json"
    status, _, stderr = run_cli("lightcurve", *EVENT, "--json", out)
    assert status == 2 and "distance needed: give --distance-mpc (in an event file: distance_mpc)" in stderr  # the option, mapped by the command line
    assert not out.exists()


BASE_EVENT = """[event]
id = "kn-test"
ra = 150.0
dec = -20.0
t0 = "2027-04-10T03:00:00Z"
distance_mpc = 80.0
"""


@pytest.mark.parametrize("model_table, fragment", [
    ('[model]\nname = "arnett"\n', "allowed powerlaw | heating"),
    ('[model]\nname = "powerlaw"\nv_max_c = 1.5\n', "v_max_c = 1.5"),
    ('[model]\nname = "powerlaw"\nmass = 0.1\n', "mass: not a parameter"),
    ('[model]\nname = "heating"\n[[model.component]]\nmass_msun = 0.01\nvelocity_c = 0.2\n', "required key missing"),
    ('[model]\nname = "heating"\n[[model.component]]\nname = "b"\nmass_msun = -1\nvelocity_c = 0.2\n'
     'opacity_cm2_g = 1.0\ntemperature_floor_K = 2500.0\n', "mass_msun = -1"),
])
def test_malformed_model_table_names_the_file(run_cli, tmp_path, model_table, fragment):
    path = tmp_path / "ev.toml"
    path.write_text(BASE_EVENT + model_table)
    out = tmp_path / "lc.json"
    status, _, stderr = run_cli("lightcurve", "--event", path, "--json", out)
    assert status == 2 and fragment in stderr and str(path) in stderr and "[model]" in stderr
    assert not out.exists()


def test_cli_model_choice_ignores_the_file_parameters_of_another_model(run_cli, tmp_path):
    path = tmp_path / "ev.toml"
    path.write_text(BASE_EVENT + '[model]\nname = "powerlaw"\ntemperature_ref_K = 7000.0\n')
    out = tmp_path / "lc.json"
    status, _, stderr = run_cli("lightcurve", "--event", path, "--model", "heating", "--phases", "1", "--json", out)
    assert status == 0, stderr
    assert json.loads(out.read_text())["model"]["name"] == "heating"


def test_transient_for_event_uses_event_distance_and_dust(demo_event_path):
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.source import transient_for_event

    event = load_event(demo_event_path)
    tr = transient_for_event(event)
    assert tr.distance_mpc == 120.0 and tr.ebv_mw == pytest.approx(0.06)
    # the demo file's two components: 0.015 + 0.06 Msun
    assert tr.photosphere.name == "heating" and tr.ejecta_mass_msun == pytest.approx(0.075)
    pl = transient_for_event(event, model="powerlaw", overrides={"mass_msun": 0.02})
    assert pl.photosphere.name == "powerlaw" and pl.ejecta_mass_msun == pytest.approx(0.02)


# every powerlaw option: (option, [model] key, a valid value, an out-of-range value)
POWERLAW_OPTION_CASES = [
    ("--t-ref-d", "t_ref_d", "2", "0"),
    ("--temperature-ref-k", "temperature_ref_K", "5500", "100"),
    ("--temperature-index", "temperature_index", "0.7", "-0.1"),
    ("--temperature-floor-k", "temperature_floor_K", "2000", "0"),
    ("--velocity-ref-c", "velocity_ref_c", "0.25", "0.8"),
    ("--velocity-index", "velocity_index", "0.2", "3"),
    ("--v-max-c", "v_max_c", "0.5", "0"),
    ("--mass-msun", "mass_msun", "0.01", "-0.01"),
]


@pytest.mark.parametrize("option, key, good, bad", POWERLAW_OPTION_CASES)
def test_each_powerlaw_option_sets_its_parameter_and_checks_its_range(run_cli, tmp_path, option, key, good, bad):
    out = tmp_path / "lc.json"
    base = ["lightcurve", *EVENT, "--distance-mpc", "60", "--phases", "1,3", "--model", "powerlaw"]
    status, _, stderr = run_cli(*base, option, good, "--json", out)
    assert status == 0, stderr
    assert json.loads(out.read_text())["model"]["parameters"][key] == float(good)
    out.unlink()
    status, _, stderr = run_cli(*base, option, bad, "--json", out)
    assert status == 2 and option in stderr and "allowed" in stderr and not out.exists()
