"""The installed distribution carries its data: sites, demo events and forecast tables."""
from __future__ import annotations

import json
from importlib import metadata

import pytest

from conftest import ROOT


def _installed_files():
    # The installed dist-info (it has a RECORD); a checkout's build leaves a kncast.egg-info beside
    # the sources that importlib.metadata may find first when the project root is on sys.path.
    installed = [d for d in metadata.distributions(name="kncast") if d.read_text("RECORD")]
    if not installed:
        pytest.skip("kncast is not installed from a wheel here")
    dist = installed[0]
    direct = dist.read_text("direct_url.json")
    if direct and json.loads(direct).get("dir_info", {}).get("editable"):
        pytest.skip("editable install: data are read from the checkout (a wheel install is tested in CI)")
    return {str(f) for f in dist.files or ()}


def test_wheel_ships_every_site_and_demo_event():
    files = _installed_files()
    for path in sorted((ROOT / "sites").glob("*.toml")):
        assert f"kncast/planner/_sites/{path.name}" in files
    for path in sorted((ROOT / "demo_events").glob("*.*")):
        if path.suffix in (".toml", ".xml"):
            assert f"kncast/planner/_demo_events/{path.name}" in files


def test_wheel_ships_forecast_data():
    files = _installed_files()
    for path in sorted((ROOT / "forecast" / "data").glob("*")):
        if path.suffix in (".toml", ".ecsv"):
            assert f"kncast/forecast/data/{path.name}" in files


def test_every_package_folder_is_installed():
    # a sub-package missing from pyproject's explicit list would be absent from the wheel
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = set()
    for folder, dotted in (("planner", "kncast.planner"), ("forecast", "kncast.forecast")):
        for init in (ROOT / folder).rglob("__init__.py"):
            rel = init.parent.relative_to(ROOT / folder)
            found.add(".".join([dotted, *rel.parts]))
    assert found <= listed, sorted(found - listed)


def test_wheel_ships_the_report_templates():
    files = _installed_files()
    templates = sorted((ROOT / "planner" / "plan" / "templates").glob("*.j2"))
    assert templates
    for path in templates:
        assert f"kncast/planner/plan/templates/{path.name}" in files
