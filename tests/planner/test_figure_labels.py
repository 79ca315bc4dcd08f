"""Every figure of a demo plan speaks to people: no internal id on any text, text of at least 9 pt,
phases to 2 decimals, wavelengths in Angstrom, every legend outside the data.

Internal ids are the bundled line list's feature ids (``sr2-nir``) and speclite filter names
(``bessell-R``); readers' names are "Sr II 10039 A" and "R (Bessell)".
"""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from kncast.planner.plan import folder

MIN_PT = 9.0  # issue 14: >= 9 pt at the saved size (common practice for figures read on a projector or page)


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    """{figure file: [visible texts (text, size in pt)]} and the legends' overlap, for every figure of a
    2-night demo plan with --figures all."""
    from matplotlib.text import Text

    from kncast.planner.commands.demo import demo_event_path
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.plan.core import build_plan
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load()
    plan = build_plan(load_event(demo_event_path()), registry.select(None), nights=2, registry=registry)
    out, seen = tmp_path_factory.mktemp("figures"), {}
    save = folder._save

    def record(fig, where, kind, arg=None):
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        rel = save(fig, where, kind, arg)
        name = Path(rel).stem
        canvas = FigureCanvasAgg(fig)  # laid out again as saved (saving closes the figure)
        fig.set_dpi(folder.FIGURE_DPI)
        canvas.draw()
        renderer = canvas.get_renderer()
        texts = [(t.get_text(), t.get_fontsize()) for t in fig.findobj(Text)
                 if t.get_visible() and t.get_text().strip() and t.get_window_extent(renderer).width > 0]
        overlaps = []
        for ax in fig.axes:
            leg = ax.get_legend()
            if leg is not None and ax.get_visible():
                box, area = leg.get_window_extent(renderer), ax.get_window_extent(renderer)
                overlaps.append(box.x0 >= area.x1 or box.x1 <= area.x0 or box.y0 >= area.y1 or box.y1 <= area.y0)
        seen[name] = (texts, overlaps)
        return rel

    mp = pytest.MonkeyPatch()
    mp.setattr(folder, "_save", record)
    mp.setattr(folder, "use_pool", lambda *a: False)  # drawn in this process, where they are recorded
    try:
        folder.write_figures(plan, out, "all")
    finally:
        mp.undo()
    return plan, seen


def _internal_ids() -> set[str]:
    from kncast.forecast.defaults import DEFAULT_BANDS
    from kncast.forecast.linelist import LineList

    return {f.id for f in LineList.load().features()} | set(DEFAULT_BANDS)


def test_every_kind_of_figure_is_drawn(drawn):
    plan, seen = drawn
    kinds = {name.split("-")[0] for name in seen}
    assert {"campaign", "lightcurve", "spectrum", "snr"} <= kinds
    assert "snr-campaign" in seen


def test_no_text_shows_an_internal_id(drawn):
    ids = _internal_ids()
    pattern = re.compile(r"(?<![\w-])(" + "|".join(map(re.escape, sorted(ids, key=len, reverse=True))) + r")(?![\w-])")
    for name, (texts, _) in drawn[1].items():
        for text, _size in texts:
            assert not pattern.search(text), f"{name}: internal id in {text!r}"


def test_text_is_at_least_nine_points(drawn):
    for name, (texts, _) in drawn[1].items():
        small = [(t, s) for t, s in texts if s < MIN_PT]
        assert not small, f"{name}: {small[:3]}"


def test_phases_have_two_decimals_and_wavelengths_are_in_angstrom(drawn):
    long_day = re.compile(r"\b(day|phase)s? \d+\.\d{3,}")
    for name, (texts, _) in drawn[1].items():
        for text, _size in texts:
            assert not long_day.search(text), f"{name}: {text!r}"
            assert not re.search(r"(\bum\b|\u00b5m|micron)", text), f"{name}: {text!r}"


def test_legends_sit_outside_the_data(drawn):
    for name, (_, outside) in drawn[1].items():
        assert all(outside), name


def test_band_names_are_readers_names():
    from kncast.planner.figures.text import band_name

    # speclite filter groups (speclite documentation, "Filters"): bessell-R is Bessell's R, twomass-Ks 2MASS Ks
    assert band_name("bessell-R") == "R (Bessell)"
    assert band_name("twomass-Ks") == "Ks (2MASS)"
