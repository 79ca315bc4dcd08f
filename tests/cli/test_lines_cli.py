"""``kncast lines``: JSON schema, options, errors (exit 2, one line, no partial output)."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

from conftest import ROOT as _ROOT  # noqa: E402

SOURCE_DATA = _ROOT / "forecast" / "data"  # the source tree's data folder (candidates are not installed)

DEMO_EVENT = Path(__file__).resolve().parents[2] / "demo_events" / "kn-demo-south.toml"
SETUP = "maunakea/t6m/nir-xd"
TOP_KEYS = {"kncast", "kind", "event", "epochs"}
EPOCH_KEYS = {"phase_d", "temperature_K", "v_phot_c", "v_max_c", "features"}
FEATURE_KEYS = {"feature", "species", "rest_vac_A", "trough_obs_A", "absorption_obs_A", "emission_obs_A",
                "tau_sobolev", "lte", "setups"}
SETUP_KEYS = {"setup", "coverage", "gap_loss", "telluric_loss", "verdict",
              # what each feature will show (issue 11 contract)
              "trough_A", "measured_A", "arm", "snr_bin", "snr_resel", "depth", "n_bins", "significance",
              "time_to_sigma_s",
              "usable_trough", "telluric_loss_trough", "telluric_correctable_trough", "telluric_loss_emission",
              "below_cutoff", "lte"}
VERDICTS = {"clear", "partly hidden", "hidden by atmosphere", "in detector gap", "outside coverage"}


@pytest.fixture(scope="module")
def doc(tmp_path_factory):
    from kncast.planner.cli import main

    out = tmp_path_factory.mktemp("lines") / "lines.json"
    status = main(["lines", "--event", str(DEMO_EVENT), "--phases", "1.5,3", "--setup", SETUP,
                   "--setup", "hanle/t4m/lowres-optical", "--json", str(out)])
    assert status == 0
    return json.loads(out.read_text())


def test_json_keys(doc):
    assert TOP_KEYS <= set(doc) and doc["kind"] == "lines"
    assert [e["phase_d"] for e in doc["epochs"]] == [1.5, 3.0]
    for ep in doc["epochs"]:
        assert EPOCH_KEYS <= set(ep)
        assert len(ep["features"]) >= 10
        for f in ep["features"]:
            assert FEATURE_KEYS <= set(f)
            assert len(f["absorption_obs_A"]) == 2 and len(f["emission_obs_A"]) == 2
            assert [s["setup"] for s in f["setups"]] == [SETUP, "hanle/t4m/lowres-optical"]
            for s in f["setups"]:
                assert set(s) == SETUP_KEYS and s["verdict"] in VERDICTS
                assert 0 <= s["telluric_loss"] <= s["coverage"] <= 1 and 0 <= s["gap_loss"] <= 1


def test_multiplets_list_rest_wavelengths(doc):
    feats = {f["feature"]: f for f in doc["epochs"][0]["features"]}
    assert isinstance(feats["sr2-nir"]["rest_vac_A"], list) and len(feats["sr2-nir"]["rest_vac_A"]) == 3
    assert isinstance(feats["y2-4375"]["rest_vac_A"], float)


def test_features_ranked_by_tau(doc):
    for ep in doc["epochs"]:
        taus = [f["tau_sobolev"] for f in ep["features"]]
        known = [t for t in taus if t is not None]
        assert known == sorted(known, reverse=True)
        assert taus[:len(known)] == known  # unknown strengths come last
        fr = ep["ionization_fractions"]["Sr"]
        assert sum(fr.values()) == pytest.approx(1.0, abs=1e-5)


def _he_files(tmp_path):
    """He I 10830 (a candidate the selection rule leaves out: non-LTE) as the user's own line file,
    with the bundled mixture plus helium."""
    from astropy.table import Table

    from kncast.forecast.linelist import DEFAULT_PATH
    from kncast.forecast.lte import Composition

    cand = Table.read(SOURCE_DATA / "candidates" / "line_candidates.ecsv", format="ascii.ecsv")
    cand[cand["feature"] == "he1-10830"].write(tmp_path / "he.ecsv", format="ascii.ecsv")
    comp = Composition.load()
    (tmp_path / "he.toml").write_text("[abundances]\n[abundances.mass_fraction]\nHe = 0.01\n" + "".join(
        f"{e} = {x}\n" for e, x in zip(comp.elements, comp.mass_fraction)))
    return ["--lines", tmp_path / "he.ecsv", "--abundances", tmp_path / "he.toml"]


@pytest.fixture(scope="module")
def he_doc(tmp_path_factory):
    from kncast.planner.cli import main

    tmp = tmp_path_factory.mktemp("he")
    out = tmp / "lines.json"
    status = main(["lines", "--event", str(DEMO_EVENT), "--phases", "1.5,3", "--setup", SETUP,
                   *map(str, _he_files(tmp)), "--json", str(out)])
    assert status == 0
    return json.loads(out.read_text())


def test_terminal_tables(run_cli, tmp_path):
    status, out, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP,
                               *_he_files(tmp_path))
    assert status == 0, err
    assert "sr2-nir" in out and SETUP in out and "day 2" in out
    he = next(line for line in out.splitlines() if "he1-10830" in line)
    assert "non-LTE: no LTE estimate" in he     # in the tau column, instead of a number


def test_non_lte_line_has_no_tau(he_doc):
    # He I 10830: lower level 19.8 eV, LTE does not apply (forecast.linelist.NON_LTE_E_LOW_EV)
    doc = he_doc
    for ep in doc["epochs"]:
        he = next(f for f in ep["features"] if f["feature"] == "he1-10830")
        assert he["lte"] is False and he["tau_sobolev"] is None
        assert all(isinstance(f["lte"], bool) for f in ep["features"])
        n_known = sum(f["tau_sobolev"] is not None for f in ep["features"])
        assert he["rank"] > n_known            # ranked with the unknown strengths, not as a weak line
    assert "non-LTE" in doc["settings"]["non_lte_rule"]


def test_all_setups_by_default_and_plot(run_cli, tmp_path):
    png = tmp_path / "lines.png"
    status, out, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--plot", png)
    assert status == 0, err
    assert png.stat().st_size > 10_000
    assert "alike" in out or "verdict per setup" in out


def test_velocity_overrides(run_cli, tmp_path):
    out = tmp_path / "v.json"
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2,4", "--setup", SETUP,
                             "--shell-inner-c", "0.1", "--shell-outer-c", "0.3", "--json", out)
    assert status == 0, err
    eps = json.loads(out.read_text())["epochs"]
    assert all(e["v_phot_c"] == 0.1 and e["v_max_c"] == 0.3 for e in eps)


@pytest.mark.parametrize("args,needle", [
    (["--phases", "0"], "--phases"),
    (["--phases", "-1"], "--phases"),
    (["--phases", "2,abc"], "--phases"),
    (["--shell-inner-c", "0.3", "--shell-outer-c", "0.2"], "--shell-inner-c"),
    (["--shell-inner-c", "0.25", "--shell-outer-c", "0.25"], "--shell-inner-c"),
    (["--shell-inner-c", "0"], "--shell-inner-c"),
    (["--shell-outer-c", "0.8"], "--shell-outer-c"),
    (["--shell-outer-c", "1.5"], "--shell-outer-c"),
    (["--shell-inner-c", "0.7"], "--shell-inner-c"),   # above the model's v_max with no --shell-outer-c
    (["--airmass", "0.5"], "--airmass"),
    (["--pwv", "-1"], "--pwv"),
    (["--plot", "x.gif"], "--plot"),
])
def test_bad_options_exit_2(run_cli, tmp_path, args, needle):
    out = tmp_path / "bad.json"
    status, stdout, err = run_cli("lines", "--event", DEMO_EVENT, "--setup", SETUP, *args, "--json", out)
    assert status == 2
    assert needle in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()


def test_unknown_setup_suggests(run_cli, tmp_path):
    out = tmp_path / "bad.json"
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", "maunakea/t6m/nir-xdd",
                             "--json", out)
    assert status == 2 and "did you mean maunakea/t6m/nir-xd" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_malformed_line_file(run_cli, tmp_path):
    bad = tmp_path / "mylines.ecsv"
    bad.write_text("this is not an ECSV table\n1 2 3\n")
    out = tmp_path / "bad.json"
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP,
                             "--lines", bad, "--json", out)
    assert status == 2 and "mylines.ecsv" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_user_line_file_added(run_cli, tmp_path):
    from kncast.forecast.linelist import DEFAULT_PATH

    text = DEFAULT_PATH.read_text()
    header = "".join(line + "\n" for line in text.splitlines() if line.startswith("#"))
    cols = next(line for line in text.splitlines() if not line.startswith("#"))
    row = next(line for line in text.splitlines() if line.startswith("ba2-res "))
    mine = tmp_path / "mine.ecsv"
    mine.write_text(header + cols + "\n" + row.replace("ba2-res", "my-ba2", 1) + "\n")
    out = tmp_path / "mine.json"
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP,
                             "--lines", mine, "--json", out)
    assert status == 0, err
    ids = [f["feature"] for f in json.loads(out.read_text())["epochs"][0]["features"]]
    assert "my-ba2" in ids and "ba2-res" in ids
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP,
                             "--lines", mine, "--only-lines", "--json", out)
    assert status == 0, err
    assert [f["feature"] for f in json.loads(out.read_text())["epochs"][0]["features"]] == ["my-ba2"]
    # the same feature id twice is refused
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP,
                             "--lines", mine, "--lines", mine)
    assert status == 2 and "already used" in err


def test_bad_abundance_file(run_cli, tmp_path):
    ab = tmp_path / "ab.toml"
    ab.write_text("[abundances]\n[abundances.mass_fraction]\nSr = 1.0\n")
    status, _, err = run_cli("lines", "--event", DEMO_EVENT, "--phases", "2", "--setup", SETUP, "--abundances", ab)
    assert status == 2 and "no abundance for" in err and len(err.strip().splitlines()) == 1


def test_default_phases_follow_the_model_photosphere(run_cli, tmp_path):
    # without --phases: 4 epochs log-spaced from the 6000 K to the 2500 K crossing of the photosphere.
    # For the power law these crossings have a closed form, t = t_ref (T_ref / T)^(1/alpha), in the
    # source frame; the redshift of 90 Mpc comes from astropy's Planck18 (an independent library).
    import numpy as np
    from astropy import units as u
    from astropy.cosmology import Planck18, z_at_value

    out = tmp_path / "default.json"
    status, _, err = run_cli("lines", "--ra", "150.25", "--dec", "-25.5", "--t0", "2027-04-10T03:00:00Z",
                             "--distance-mpc", "90", "--model", "powerlaw", "--setup", SETUP, "--json", out)
    assert status == 0, err
    z = float(z_at_value(Planck18.luminosity_distance, 90 * u.Mpc))
    crossings = [1.0 * (6300.0 / t) ** 2 * (1 + z) for t in (6000.0, 2500.0)]   # t_ref 1 d, alpha 0.5
    expected = np.geomspace(*crossings, 4)
    phases = np.array([e["phase_d"] for e in json.loads(out.read_text())["epochs"]])
    # 0.1 d steps (the first rounded up, the last down: inside the range) and one ~1 % scan step
    assert crossings[0] * 0.988 <= phases[0] <= crossings[0] * 1.012 + 0.1
    assert crossings[1] * 0.988 - 0.1 <= phases[-1] <= crossings[1] * 1.012
    assert np.allclose(phases[1:-1], expected[1:-1], atol=0.05 + 0.012 * expected[1:-1])
