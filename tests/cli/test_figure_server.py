"""The figure process of ``kncast plan`` (kncast.planner.plan.figureserver).

Forked before the plan is built, it loads matplotlib meanwhile and draws the figures of the plan sent to
it; the parent never loads matplotlib, a plan that cannot be sent is drawn by the parent's own workers,
and no process outlives the command.
"""
from __future__ import annotations

import multiprocessing
import subprocess
import sys

import pytest

from kncast.planner.plan import figureserver

PLAN = ("plan", "--nights", "1", "--sites", "paranal,pachon", "--draws", "20")

pytestmark = pytest.mark.skipif(not figureserver.FigureServer.available(), reason="needs fork and two cores")


def test_the_parent_never_loads_matplotlib_nor_scipy_special(tmp_path, demo_event_path):
    # the figure process draws; the Moffat slit table is read and erf and the distance draws use the
    # standard library, so a plan's own process needs neither (each costs ~0.1 s or more to import)
    code = ("import sys, kncast.planner.cli as c\n"
            f"status = c.main({[*PLAN, '--event', str(demo_event_path), '--out', str(tmp_path / 'out')]!r})\n"
            "print(status, 'matplotlib' in sys.modules, 'scipy.special' in sys.modules)\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert done.stdout.split()[-3:] == ["0", "False", "False"], done.stderr
    assert sorted(p.name for p in (tmp_path / "out" / "figures").iterdir())


def test_the_server_draws_the_same_figures_as_the_parents_workers(tmp_path, run_cli, demo_event_path, monkeypatch):
    status, _, err = run_cli(*PLAN, "--event", demo_event_path, "--out", tmp_path / "served")
    assert status == 0, err
    monkeypatch.setattr(figureserver.FigureServer, "available", classmethod(lambda cls: False))
    status, _, err = run_cli(*PLAN, "--event", demo_event_path, "--out", tmp_path / "own")
    assert status == 0, err
    served = sorted((tmp_path / "served" / "figures").iterdir())
    own = sorted((tmp_path / "own" / "figures").iterdir())
    assert [p.name for p in served] == [p.name for p in own] and served
    assert all(a.read_bytes() == b.read_bytes() for a, b in zip(served, own))  # Agg output is deterministic


def test_a_plan_that_cannot_be_sent_is_drawn_by_the_parent(tmp_path, run_cli, demo_event_path, monkeypatch):
    monkeypatch.setattr(figureserver, "MAX_PLAN_BYTES", 10)
    status, _, err = run_cli(*PLAN, "--event", demo_event_path, "--out", tmp_path / "out")
    assert status == 0, err
    assert (tmp_path / "out" / "figures" / "campaign.png").is_file()
    assert not multiprocessing.active_children()


def test_no_process_outlives_a_failed_plan(tmp_path, run_cli, demo_event_path):
    status, _, err = run_cli(*PLAN, "--event", demo_event_path, "--out", tmp_path / "out", "--setups", "nowhere/x/y")
    assert status == 2, err
    assert not multiprocessing.active_children()
    assert not (tmp_path / "out").exists()


def test_the_server_leaves_no_staging_folder_and_writes_nothing_before_the_plan_is_complete(
        tmp_path, run_cli, demo_event_path, monkeypatch):
    import tempfile

    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))  # where the (forked) server stages its figures
    for extra, status_wanted in (((), 0), (("--setups", "nowhere/x/y"), 2)):
        out = tmp_path / f"out{status_wanted}"
        status, _, err = run_cli(*PLAN, "--event", demo_event_path, "--out", out, *extra)
        assert status == status_wanted, err
        assert not list(scratch.iterdir())
        assert not multiprocessing.active_children()
    assert sorted(p.name for p in (tmp_path / "out0" / "figures").iterdir())
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out0", "scratch"]
