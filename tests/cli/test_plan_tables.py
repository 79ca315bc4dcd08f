"""The ECSV tables of a plan folder travel: meta, Time columns, one missing-value convention, descriptions.

Every table of the demo plan is read back with ``astropy.table.Table.read`` (an independent reader: the
ECSV 1.0 standard as astropy implements it) and compared with plan.json, written by the same run.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

TABLES = ("windows", "features", "exposures")
META_KEYS = ("kncast", "event_id", "t0_utc", "ra_deg", "dec_deg", "distance_mpc", "model", "settings")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from kncast.planner.cli import main

    out = tmp_path_factory.mktemp("tables") / "demo"
    assert main(["demo", "--out", str(out), "--nights", "3"]) == 0
    return out, json.loads((out / "plan.json").read_text())


@pytest.fixture(scope="module")
def tables(demo):
    from astropy.table import Table

    out, _ = demo
    return {name: Table.read(out / f"{name}.ecsv") for name in TABLES}


def test_meta_names_what_made_the_table(demo, tables):
    _, doc = demo
    for name, t in tables.items():
        assert all(k in t.meta for k in META_KEYS), (name, sorted(t.meta))
        assert t.meta["kncast"] == doc["kncast"]
        assert t.meta["event_id"] == doc["event"]["id"] and t.meta["t0_utc"] == doc["event"]["t0_utc"]
        assert t.meta["ra_deg"] == pytest.approx(doc["event"]["ra_deg"])
        assert t.meta["dec_deg"] == pytest.approx(doc["event"]["dec_deg"])
        assert t.meta["distance_mpc"] == pytest.approx(doc["event"]["distance_mpc"])
        assert t.meta["model"]["name"] == doc["model"]["name"]
        assert t.meta["model"]["parameters"] == doc["model"]["parameters"]
        for key in ("sigma", "bin_kms", "nights", "max_hours", "overhead_s", "sites", "setups", "draws", "seed"):
            assert t.meta["settings"][key] == doc["settings"][key], (name, key)


def test_time_columns_read_back_as_utc_times(demo, tables):
    from astropy.time import Time

    _, doc = demo
    w = tables["windows"]
    for col in ("start_utc", "end_utc", "best_utc"):
        assert isinstance(w[col], Time) and w[col].scale == "utc", col
    # the same instants as plan.json's ISO strings (ISO 8601 with a trailing Z, parsed independently)
    expected = [win["start_utc"] for n in doc["nights"] for win in n["windows"]]
    assert len(expected) == len(w)
    got = w["start_utc"].isot
    assert [g[:19] for g in got] == [e.rstrip("Z")[:19] for e in expected]
    assert np.all((w["end_utc"] - w["start_utc"]).to_value("h") == pytest.approx(np.asarray(w["hours"]), abs=1e-3))
    epochs = {(n["site"], n["night"]): n["epoch"]["utc"] for n in doc["nights"] if n["epoch"]}
    for name in ("features", "exposures"):
        t = tables[name]
        assert isinstance(t["epoch_utc"], Time) and t["epoch_utc"].scale == "utc", name
        got = [s[:19] for s in t["epoch_utc"].isot]
        assert got == [epochs[(s, n)].rstrip("Z") for s, n in zip(t["site"], t["night"])], name


def test_one_missing_value_convention_and_descriptions(tables):
    for name, t in tables.items():
        for col in t.colnames:
            c = t[col]
            assert (c.info.description or "").strip(), (name, col)
            if not hasattr(c, "dtype"):  # a Time column
                continue
            if c.dtype.kind == "f":
                data = np.ma.getdata(c)[~np.ma.getmaskarray(c)]
                assert not np.isnan(data).any(), f"{name}.{col}: NaN where a masked value belongs"
            if c.dtype.kind in "US":
                assert not (np.ma.getdata(c)[~np.ma.getmaskarray(c)] == "").any(), f"{name}.{col}: empty string"
    nexp = tables["exposures"]["nexp"]
    assert np.ma.getmaskarray(nexp).any(), "the demo has setups that never reach the target: masked nexp"
    assert (np.ma.compressed(nexp) >= 1).all(), "no -1 sentinels: a missing count is masked"


def _floats(value):
    if isinstance(value, dict):
        for v in value.values():
            yield from _floats(v)
    elif isinstance(value, list):
        for v in value:
            yield from _floats(v)
    elif isinstance(value, float):
        yield value


def test_plan_json_numbers_carry_meaningful_digits(demo):
    # common practice: percentiles over a few hundred draws support no more than 3-4 significant digits
    _, doc = demo
    ens = [f for n in doc["nights"] for f in _floats(n.get("ensemble"))] + list(_floats(doc["ensemble"]))
    phot = [n["epoch"]["photosphere"] for n in doc["nights"] if n["epoch"]]
    physical = [f for p in phot for k in ("temperature_K", "radius_cm", "luminosity_erg_s") for f in _floats(p[k])]
    times = [p[k] for p in phot for k in p if k.endswith("_d") or k.endswith("_c")]  # days, speed of light
    assert ens and physical and times
    assert all(float(f"{f:.4g}") == f for f in ens)
    assert all(float(f"{f:.6g}") == f for f in physical)
    assert all(round(f, 6) == f for f in times)
