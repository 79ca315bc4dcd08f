"""Terminal tables at 80, 100 and 160 columns ($COLUMNS, output not a terminal): no line longer than the
width, no id cut inside a word, no text cut to an ellipsis.

"Cut inside a word": every id printed (site, setup and feature ids) keeps each of its pieces between
"/" and ":" whole -- the output holds as many whole pieces as the same output at 400 columns
(common practice: a wrapped id may continue on the next line after its separator).
"""
from __future__ import annotations

import re

import pytest

DEMO = "demo_events/kn-demo-south.toml"
SETUP = "las-campanas/t4m/lowres-optical:red"
COMMANDS = {
    "visibility": ["visibility", "--event", DEMO, "--nights", "2"],
    "lines": ["lines", "--event", DEMO, "--phases", "1,2", "--setup", SETUP, "--setup", "paranal/t10m/nir-xd:jh"],
    "exposure": ["exposure", "--event", DEMO, "--setup", SETUP, "--phase", "1", "--time", "1800"],
}
WIDTHS = (80, 100, 160)


def _ids() -> set[str]:
    from kncast.forecast.linelist import LineList
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load()
    return ({f.id for f in LineList.load().features()} | {r.id for r in all_setups(registry)}
            | {s.id for s in registry})


def _pieces(ids) -> set[str]:
    return {p for i in ids for p in re.split(r"[/:]", i) if len(p) > 2}


def _count(text: str, piece: str) -> int:
    return len(re.findall(r"(?<![\w-])" + re.escape(piece) + r"(?![\w-])", text))


def _run(monkeypatch, capsys, args, width, tmp_path=None):
    from kncast.planner.cli import main

    monkeypatch.setenv("COLUMNS", str(width))
    assert main(list(args)) == 0
    return capsys.readouterr().out


@pytest.fixture(scope="module")
def plan_args(tmp_path_factory):
    return lambda: ["plan", "--event", DEMO, "--nights", "2", "--verbose", "--force",
                    "--out", str(tmp_path_factory.mktemp("plan") / "out")]


@pytest.mark.parametrize("name", [*COMMANDS, "plan"])
def test_tables_fit_every_width_and_keep_ids_whole(name, monkeypatch, capsys, plan_args):
    args = plan_args() if name == "plan" else COMMANDS[name]
    wide = _run(monkeypatch, capsys, args, 400)
    pieces = [p for p in _pieces(_ids()) if _count(wide, p)]
    assert pieces
    for width in WIDTHS:
        args = plan_args() if name == "plan" else COMMANDS[name]
        out = _run(monkeypatch, capsys, args, width)
        long = [line for line in out.splitlines() if len(line) > width]
        assert not long, f"{name} at {width}: {long[0]!r}"
        assert "\u2026" not in out, f"{name} at {width}: text cut to an ellipsis"
        broken = [p for p in pieces if _count(out, p) < _count(wide, p)]
        assert not broken, f"{name} at {width}: ids cut inside a word: {broken[:5]}"
