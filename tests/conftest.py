"""Shared test fixtures: paths to bundled data and a CLI runner that captures exit status."""
from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_events"


@pytest.fixture
def demo_event_path():
    return DEMO / "kn-demo-south.toml"


@pytest.fixture
def run_cli(capsys):
    """Run ``kncast ARGS`` in-process; returns (status, stdout, stderr)."""
    from kncast.planner.cli import main

    def run(*args):
        try:
            status = main([str(a) for a in args])
        except SystemExit as exc:  # argparse usage errors
            status = exc.code
        out = capsys.readouterr()
        return status, out.out, out.err

    return run


def every_element_composition(tmp_path_factory):
    """A composition of every element with atomic data (atoms.toml), equal parts: the partition
    functions do not depend on the mass fractions, and the bundled mixture holds only the line-list
    elements (forecast/data/make_lines.py)."""
    import tomllib

    from kncast.forecast.lte import ATOMS_PATH

    elements = tomllib.loads(ATOMS_PATH.read_text())["element"]
    path = tmp_path_factory.mktemp("every_element") / "abundances.toml"
    path.write_text("[abundances]\n[abundances.mass_fraction]\n" + "".join(f"{e} = 1.0\n" for e in elements))
    from kncast.forecast.lte import Composition

    return Composition.load(path)
