"""The public names of kncast.planner, a light ``import kncast.planner``, Event.from_coord, and the
Python examples of docs/api.md (each runs, offline, fast, importing only public names).

(Named test_planner_public_api.py: tests/forecast/test_public_api.py has the plain name, and the test
folders are not packages, so two test files may not share a basename.)
"""
from __future__ import annotations

import ast
import importlib
import inspect
import json
import pkgutil
import re
import subprocess
import sys

import astropy.units as u
import pytest
from astropy.coordinates import SkyCoord
from astropy.time import Time

import kncast.forecast as forecast
import kncast.planner as planner
from conftest import ROOT
from test_offline import no_network  # noqa: F401  (the socket tripwire fixture)

API_DOC = ROOT / "docs" / "api.md"


def test_every_public_name_resolves_and_no_submodule_shadows_it():
    before = {name: getattr(planner, name) for name in planner.__all__}
    for info in pkgutil.walk_packages(planner.__path__, prefix="kncast.planner."):
        importlib.import_module(info.name)
    for name in planner.__all__:
        value = getattr(planner, name)
        assert not inspect.ismodule(value), name
        assert value is before[name], name
        assert name in dir(planner)
    assert len(set(planner.__all__)) == len(planner.__all__)
    with pytest.raises(AttributeError, match="no_such_name"):
        planner.no_such_name  # noqa: B018


def test_import_planner_is_light_and_keeps_iers_offline():
    code = (
        "import json, sys\n"
        "import kncast.planner\n"
        "light = {m: m in sys.modules for m in ('matplotlib', 'astropy.table', 'astropy.coordinates', "
        "'kncast.forecast.source', 'kncast.planner.plan.core')}\n"
        "from astropy.utils import iers\n"
        "conf = [iers.conf.auto_download, iers.conf.auto_max_age, iers.conf.iers_degraded_accuracy]\n"
        "print(json.dumps({'loaded': light, 'conf': conf, 'version': kncast.planner.__version__}))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    doc = json.loads(out.stdout)
    assert doc["loaded"] == dict.fromkeys(doc["loaded"], False)
    assert doc["conf"] == [False, None, "ignore"]  # the offline settings of kncast.planner._offline
    assert doc["version"]


# ---------------------------------------------------------------- Event.from_coord

def test_event_from_coord_matches_an_event_file(tmp_path):
    path = tmp_path / "ev.toml"
    path.write_text('[event]\nid = "ev"\nra = "10:05:00"\ndec = "-28:30:00"\nt0 = "2027-03-14T02:00:00Z"\n'
                    'distance_mpc = 60.0\nebv_mw = 0.05\n')
    from_file = planner.load_event(path)
    ev = planner.Event.from_coord("ev", SkyCoord("10h05m00s", "-28d30m00s"), Time("2027-03-14T02:00:00", scale="utc"),
                                  distance=60 * u.Mpc, ebv_mw=0.05)
    assert ev.ra_deg == pytest.approx(from_file.ra_deg, abs=1e-12)
    assert ev.dec_deg == pytest.approx(from_file.dec_deg, abs=1e-12)
    assert ev.t0 == from_file.t0 and ev.t0.scale == "utc"
    assert (ev.distance_mpc, ev.ebv_mw) == (from_file.distance_mpc, from_file.ebv_mw)


def test_event_from_coord_converts_frames_scales_and_units():
    gal = SkyCoord(l=250 * u.deg, b=20 * u.deg, frame="galactic")
    t_tai = Time("2027-03-14T02:00:37", scale="tai")
    ev = planner.Event.from_coord("g", gal, t_tai, distance=0.1 * u.Gpc)
    # astropy's own frame transformation is the reference
    assert ev.ra_deg == pytest.approx(gal.icrs.ra.deg, abs=1e-10)
    assert ev.dec_deg == pytest.approx(gal.icrs.dec.deg, abs=1e-10)
    assert ev.t0.scale == "utc" and ev.t0.isot == t_tai.utc.isot  # astropy's TAI -> UTC (leap-second table)
    assert ev.distance_mpc == pytest.approx(100.0)
    assert planner.Event.from_coord("z", gal, t_tai, redshift=0.02).redshift == 0.02


@pytest.mark.parametrize("kwargs, name", [
    ({"distance": 60.0}, "distance"),
    ({"distance": 60 * u.s}, "distance"),
    ({}, "distance"),
    ({"distance": 60 * u.Mpc, "t0": "2027-03-14T02:00:00Z"}, "t0"),
    ({"distance": 60 * u.Mpc, "t0": Time("2060-01-01", scale="utc")}, "t0"),
    ({"distance": 60 * u.Mpc, "coord": (150.0, -28.5)}, "coord"),
    ({"distance": 60 * u.Mpc, "ebv_mw": -1.0}, "ebv_mw"),
])
def test_event_from_coord_errors_name_the_parameter(kwargs, name):
    args = {"coord": SkyCoord(150 * u.deg, -28.5 * u.deg), "t0": Time("2027-03-14T02:00:00", scale="utc"), **kwargs}
    with pytest.raises(planner.ParameterError) as err:
        planner.Event.from_coord("x", **args)
    assert err.value.parameter == name and "\n" not in str(err.value)


# ---------------------------------------------------------------- docs/api.md

def _python_blocks() -> list[str]:
    return re.findall(r"^```python\n(.*?)^```", API_DOC.read_text(encoding="utf-8"), flags=re.S | re.M)


def test_api_doc_has_examples():
    assert len(_python_blocks()) >= 8


def _kncast_imports(block: str):
    for node in ast.walk(ast.parse(block)):
        if isinstance(node, ast.Import):
            yield from ((a.name, None) for a in node.names if a.name.split(".")[0] == "kncast")
        elif isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] == "kncast":
            yield from ((node.module, a.name) for a in node.names)


@pytest.mark.parametrize("index", range(len(_python_blocks())))
def test_api_doc_examples_import_only_public_names(index):
    public = {"kncast.forecast": set(forecast.__all__), "kncast.planner": set(planner.__all__)}
    for module, name in _kncast_imports(_python_blocks()[index]):
        assert module in public and name is not None, f"block {index}: import {module} (use 'from {module} import ...')"
        assert name in public[module], f"block {index}: {name} is not in {module}.__all__"


@pytest.mark.parametrize("index", range(len(_python_blocks())))
def test_api_doc_example_runs_offline(index, no_network, tmp_path, monkeypatch, capsys):  # noqa: F811
    import tempfile

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    block = _python_blocks()[index]
    exec(compile(block, f"docs/api.md python block {index}", "exec"), {"__name__": "__api_doc__"})
    assert no_network == []
    assert capsys.readouterr().out.strip(), f"block {index} prints nothing"
