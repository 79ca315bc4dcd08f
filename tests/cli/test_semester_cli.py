"""``kncast semester`` end to end: the folder and its contract, same seed same numbers (also on a Dask
LocalCluster), and bad input ending with one line and exit status 2 with no output left behind."""
from __future__ import annotations

import datetime as dt
import functools
import json

import numpy as np
import pytest

SMALL = ["--sites", "sutherland", "--start", "2027-04-01", "--end", "2027-05-01", "--events", "60", "--nights", "2"]
KEYS = ("kncast", "kind", "schema", "settings", "expected", "per_event", "grid", "files", "assumptions",
        "references", "cautions")


def _main(*args):
    from kncast.planner.cli import main

    try:
        return main([str(a) for a in args])
    except SystemExit as exc:  # argparse usage errors
        return exc.code


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    out = tmp_path_factory.mktemp("semester") / "run"
    assert _main("semester", *SMALL, "--out", out) == 0
    return out


def test_folder_and_contract(folder):
    doc = json.loads((folder / "semester.json").read_text())
    for k in KEYS:
        assert k in doc
    assert doc["kind"] == "semester"
    for k in ("events", "useful_epochs"):
        s = doc["expected"][k]
        assert s["p05"] <= s["median"] <= s["p95"]
    for k in ("phase_d", "distance_mpc", "setup", "snr_bin", "significance"):
        assert k in doc["grid"]
    assert doc["grid"]["phase_d"][0] == 1.0 and doc["grid"]["phase_d"][-1] == 10.0   # 1-10 d (issue 15)
    assert doc["grid"]["distance_mpc"][0] == 40.0 and doc["grid"]["distance_mpc"][-1] == 300.0
    sig = np.array(doc["grid"]["significance"])          # [setup][phase][distance]
    assert np.all(np.diff(sig, axis=-1) <= 1e-9)          # fainter with distance at every phase
    for name in ("grid.ecsv", "setups.ecsv", "epochs.ecsv", "report.md", "report.html"):
        assert (folder / name).is_file()
    for f in doc["files"]["figures"]:
        assert (folder / f).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2
    html = (folder / "report.html").read_text()
    assert "data:image/png;base64," in html and "Technical justification" in html
    n = doc["per_event"]["simulated"]
    assert f"Simulating {n} mergers" in doc["justification"]
    u = doc["expected"]["useful_epochs"]
    assert f"{u['median']:.0f} (mean {u['mean']:.2g}, 90 % interval {u['p05']:.0f}-{u['p95']:.0f}) useful" \
        in doc["justification"]


@functools.lru_cache(maxsize=None)
def _reference(seed):
    return _simulate(seed)


def _simulate(seed, dask=None):
    from kncast.planner.semester.run import Settings, simulate_semester
    from kncast.planner.sites import SiteRegistry

    reg = SiteRegistry.load()
    st = Settings(start=dt.date(2027, 4, 1), end=dt.date(2027, 5, 1), sites=reg.select(["sutherland"]), events=60,
                  nights=2, seed=seed, registry=reg)
    return simulate_semester(st, dask_address=dask)


def test_same_seed_same_numbers():
    a, b = _reference(7), _simulate(7)
    for k in a["per"]:
        assert np.array_equal(a["per"][k], b["per"][k])
    assert a["expected"] == b["expected"] and a["models"] == b["models"]
    from kncast.planner.semester import population

    other = population.draw_population(np.random.default_rng(8), 60, 160.0, 61000.0, 61030.0, 6)
    assert not np.array_equal(a["population"].ra_deg, other.ra_deg)


def test_dask_local_cluster_equals_single_process():
    pytest.importorskip("dask.distributed")
    from dask.distributed import Client, LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        on_cluster = _simulate(7, dask=client)
    here = _reference(7)
    for k in here["per"]:
        assert np.array_equal(on_cluster["per"][k], here["per"][k])
    assert on_cluster["expected"] == here["expected"]


@pytest.mark.parametrize("bad", [["--rate", "-5"], ["--rate", "100,10"], ["--horizon-mpc", "0"],
                                 ["--end", "2027-04-01"], ["--events", "0"], ["--duty", "1.5"],
                                 ["--mass-msun", "0.1"], ["--sites", "nowhere"]])
def test_bad_input_one_line_exit_2(bad, tmp_path, capsys):
    args = dict(zip(SMALL[::2], SMALL[1::2]))
    args.update(dict(zip(bad[::2], bad[1::2])))
    out = tmp_path / "out"
    code = _main("semester", *[x for kv in args.items() for x in kv], "--out", out)
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()


def test_dask_option_takes_a_scheduler_address(folder, tmp_path, capsys):
    pytest.importorskip("dask.distributed")
    from dask.distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        code = _main("semester", *SMALL, "--out", tmp_path / "d", "--json", "-", "--dask", cluster.scheduler_address)
    assert code == 0
    doc = json.loads(capsys.readouterr().out)
    single = json.loads((folder / "semester.json").read_text())
    assert doc["expected"] == single["expected"] and doc["per_event"] == single["per_event"]
