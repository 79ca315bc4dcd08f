"""The ``kncast`` program as a process: main's status, every byte of its output, no teardown.

``kncast.planner.cli.run`` (the console script and ``python -m kncast.planner.cli``) ends the
process with main's status after the exit handlers, skipping the interpreter's teardown.
"""
from __future__ import annotations

import json
import subprocess
import sys

import pytest


def _kncast(*args, cwd):
    return subprocess.run([sys.executable, "-m", "kncast.planner.cli", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


def test_json_on_stdout_arrives_whole_with_status_0(tmp_path):
    done = _kncast("setups", "--json", "-", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)  # every byte written before the process ended
    assert doc["setups"]


def test_bad_input_ends_with_status_2_and_one_line(tmp_path):
    done = _kncast("visibility", "--event", tmp_path / "missing.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert len(done.stderr.strip().splitlines()) == 1 and "missing.toml" in done.stderr


def test_files_are_complete_when_the_process_ends(tmp_path, demo_event_path):
    out = tmp_path / "lc.json"
    done = _kncast("lightcurve", "--event", demo_event_path, "--json", out, "--plot", tmp_path / "lc.png",
                   cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert json.loads(out.read_text())["kind"] == "lightcurve"
    assert (tmp_path / "lc.png").read_bytes()[-8:] == b"IEND\xaeB`\x82"  # PNG ends with its IEND chunk


@pytest.mark.parametrize("status", [0, 2, 130])
def test_run_exits_with_mains_status(status):
    code = ("import kncast.planner.cli as c, atexit\n"
            "atexit.register(lambda: print('handler ran', flush=True))\n"
            f"c.main = lambda argv=None: {status}\n"
            "c.run()\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert done.returncode == status and "handler ran" in done.stdout


def test_the_command_raises_the_collector_thresholds_and_the_library_leaves_them(tmp_path):
    # kncast.planner._early: the command's process only; the interpreter's defaults stay for a library user
    from kncast.planner._early import COLLECTOR_THRESHOLDS

    as_command = ("import gc, sys; sys.argv[0] = 'kncast'; import kncast.planner; print(gc.get_threshold())")
    as_library = "import gc; before = gc.get_threshold(); import kncast.planner; print(gc.get_threshold() == before)"
    for code, expected in ((as_command, str(COLLECTOR_THRESHOLDS)), (as_library, "True")):
        done = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=120)
        assert done.stdout.strip() == expected, done.stderr
