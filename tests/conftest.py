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
