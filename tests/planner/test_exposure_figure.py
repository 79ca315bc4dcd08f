"""The S/N chart of ``kncast exposure`` (planner/figures/exposure.py): readable text, Angstrom axis,
feature names instead of ids, telluric bands hatched as lost / correctable like the feature map."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

MIN_PT = 9.0          # smallest readable text (common practice for printed figures)
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def result():
    from kncast.planner.events.eventfile import load_event
    from kncast.planner.observation import Given, Request, night_conditions, observe
    from kncast.planner.setups import resolve_setup
    from kncast.planner.sites import SiteRegistry
    from kncast.planner.source import transient_for_event

    event = load_event(ROOT / "demo_events" / "kn-demo-south.toml")
    ref = resolve_setup("sutherland/t8m/wide-3arm", SiteRegistry.load([]))
    transient = transient_for_event(event)
    given = Given(airmass=1.3, moon_illumination=0.3, moon_sep_deg=80.0)
    request = Request(phase_d=1.5, time_s=3600.0)
    return observe(event, ref, transient, night_conditions(event, ref.site, 1.5, given), request)


@pytest.fixture(scope="module")
def chart(result):
    from kncast.planner.figures.exposure import exposure_figure

    fig = exposure_figure(result)
    fig.canvas.draw()
    return fig


def _texts(fig):
    from matplotlib.text import Text

    return [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]


def test_all_text_is_at_least_9_pt(chart):
    sizes = {t.get_text(): t.get_fontsize() for t in _texts(chart)}
    ticks = [t.get_fontsize() for a in chart.axes for t in a.get_xticklabels() + a.get_yticklabels()]
    assert min(sizes.values()) >= MIN_PT, {k: v for k, v in sizes.items() if v < MIN_PT}
    assert ticks and min(ticks) >= MIN_PT


def test_wavelength_axis_in_angstrom(chart):
    assert [a.get_xlabel() for a in chart.axes] == ["observed vacuum wavelength (\u00c5)"]


def test_features_are_named_not_by_id(chart, result):
    from kncast.forecast.linelist import LineList
    from kncast.planner.measure import feature_words

    texts = [t.get_text() for t in _texts(chart)]
    ids = {f["feature"] for f in result["features"]}
    assert ids and not any(i in t for t in texts for i in ids)
    from kncast.planner.figures.text import angstrom

    words = {f.id: angstrom(feature_words(f)) for f in LineList.load().features()}  # drawn with the Angstrom sign
    lo, hi = result["grid"].wavelength_A.min(), result["grid"].wavelength_A.max()
    shown = [f for f in result["features"][:8] if lo <= f["trough_obs_A"] <= hi]
    assert shown and all(words[f["feature"]] in texts for f in shown)


def test_telluric_bands_hatched_lost_and_correctable(chart, result):
    from matplotlib.collections import PolyCollection

    from kncast.forecast.tellurics import CORRECTABLE_TRANSMISSION
    from kncast.planner.figures.lines import CORRECTABLE_COLOR, LOST_COLOR

    hatched = {c.get_hatch(): c for c in chart.findobj(PolyCollection) if c.get_hatch()}
    assert set(hatched) == {"xx", "//"}
    assert np.allclose(hatched["xx"].get_edgecolor()[0][:3], np.array(matplotlib_rgb(LOST_COLOR)))
    assert np.allclose(hatched["//"].get_edgecolor()[0][:3], np.array(matplotlib_rgb(CORRECTABLE_COLOR)))
    # each lost column is a place where the band model transmits below the threshold (independent
    # evaluation of the same model at the column's centre)
    cond = result["conditions"]
    for path in hatched["xx"].get_paths():
        x = path.vertices[:, 0]
        mid = 0.5 * (x.min() + x.max())
        trans = result["tellurics"].transmission(np.array([mid]), cond["airmass"], cond["pwv_mm"])[0]
        assert trans < CORRECTABLE_TRANSMISSION
    assert not [p for p in chart.axes[0].patches if p.get_facecolor()[:3] == (0.5, 0.5, 0.5)]


def matplotlib_rgb(color):
    from matplotlib.colors import to_rgb

    return to_rgb(color)
