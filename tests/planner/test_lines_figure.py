"""The feature map (planner/figures/lines.py): readable labels, text size, Angstrom axes, few artists."""
from __future__ import annotations

import re

import numpy as np
import pytest

MIN_PT = 9.0          # the smallest readable text (common practice for printed figures)


@pytest.fixture(scope="module")
def chart():
    from kncast.forecast.features import forecast_features
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.forecast.tellurics import TelluricModel
    from kncast.planner.figures.lines import lines_figure
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    refs = all_setups(SiteRegistry.load([]))[:3]
    tr = Transient(build_model({"name": "powerlaw"}), distance_mpc=100.0)
    tell = TelluricModel.load()
    fc = forecast_features(tr, [1.2, 2.5, 5.0], None, [r.setup for r in refs], tell, airmass=1.3,
                           setup_ids=[r.id for r in refs])
    fig = lines_figure(tr, fc, refs, tell, airmass=1.3, pwv_mm=2.5, title="test event")
    fig.canvas.draw()
    return fig, fc, refs


def _texts(fig):
    from matplotlib.text import Text

    return [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]


def test_all_text_is_at_least_9_pt(chart):
    fig, _, _ = chart
    sizes = {t.get_text(): t.get_fontsize() for t in _texts(fig)}
    assert min(sizes.values()) >= MIN_PT, {k: v for k, v in sizes.items() if v < MIN_PT}


def test_features_are_named_by_species_and_rest_wavelength_not_by_id(chart):
    fig, fc, _ = chart
    texts = [t.get_text() for t in _texts(fig)]
    ids = {f.id for f in fc.features}
    assert not ids & set(texts) and not any(i in t for t in texts for i in ids)
    names = [t for t in texts if re.fullmatch(r"[A-Z][a-z]? [IV]+ \d{4,5} \u00c5", t)]
    assert len(names) == len(fc.features)
    # Sr II 1 micron triplet: named by the member that sets the trough (the strongest), 10330 A vacuum
    assert "Sr II 10330 \u00c5" in names


def test_wavelength_axis_in_angstrom(chart):
    fig, _, refs = chart
    labels = [a.get_xlabel() for a in fig.axes if a.get_xlabel()]
    assert labels == ["observed vacuum wavelength (\u00c5)"]
    assert all(r.id in [t.get_text() for t in _texts(fig)] for r in refs)


def test_bars_are_collections_not_one_patch_each(chart):
    from matplotlib.collections import PolyCollection
    from matplotlib.patches import Rectangle

    fig, fc, _ = chart
    n_bars = 2 * fc.tau.size
    polys = [c for c in fig.findobj(PolyCollection)]
    assert sum(len(c.get_paths()) for c in polys) >= n_bars
    assert len(polys) < 15 and len([p for p in fig.findobj(Rectangle)]) < 20


def test_one_epoch_and_no_setups_still_draw():
    from kncast.forecast.features import forecast_features
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.planner.figures.lines import lines_figure

    tr = Transient(build_model({"name": "heating"}), distance_mpc=100.0)
    fc = forecast_features(tr, [2.0], None, [])
    fig = lines_figure(tr, fc, [], title="alone")
    fig.canvas.draw()
    assert np.isfinite(fig.get_size_inches()).all()
