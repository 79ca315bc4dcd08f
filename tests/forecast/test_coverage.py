"""Coverage, gap and telluric-loss fractions on hand-built cases; verdict words."""
from __future__ import annotations


import numpy as np
import pytest
from astropy.table import Table

from kncast.forecast.coverage import verdict, window_fractions
from kncast.forecast.instruments import Arm, Setup
from kncast.forecast.tellurics import TelluricModel


def _arm(name, lo, hi, gaps=()):
    return Arm(name, lo, hi, 1000.0, 2.0, tuple(gaps), 4.0, 0.0, 1.0, 1e5,
               np.array([lo, hi], float), np.array([0.2, 0.2]))


# two arms 4000-6000 (detector gap 5000-5100) and 6200-9000: an inter-arm gap 6000-6200
SETUP = Setup("hand", "hand-built", (_arm("blue", 4000, 6000, [(5000, 5100)]), _arm("red", 6200, 9000)))


def _one_band_model(lo, hi, depth, tmp_path):
    """A model with a single box band (built here, not from the bundled table)."""
    t = Table(rows=[("b", "O2", lo, hi, depth, "airmass", 1.0, "test")],
              names=["id", "species", "min_A", "max_A", "depth", "scaling", "power", "source"])
    path = tmp_path / "bands.ecsv"
    t.write(path, format="ascii.ecsv")
    return TelluricModel.load(path)


def _f(lo, hi, tell=None, **kw):
    out = window_fractions(lo, hi, SETUP, tell, **kw)
    return {k: float(v) for k, v in out.items()}


# exact interval arithmetic on the hand-built layout above
@pytest.mark.parametrize("lo,hi,cov,gap", [
    (4200, 4800, 1.0, 0.0),          # fully inside an arm
    (3800, 4200, 0.5, 0.0),          # straddling the blue edge of the span
    (5020, 5080, 0.0, 1.0),          # inside a detector gap
    (4900, 5200, 200 / 300, 100 / 300),   # straddling a detector gap
    (5900, 6300, 200 / 400, 200 / 400),   # across two arms (inter-arm gap 6000-6200)
    (9500, 9800, 0.0, 0.0),          # outside coverage
    (8800, 9200, 0.5, 0.0),          # straddling the red edge
])
def test_coverage_and_gaps(lo, hi, cov, gap):
    f = _f(lo, hi)
    assert f["coverage"] == pytest.approx(cov)
    assert f["gap_loss"] == pytest.approx(gap)
    assert f["telluric_loss"] == 0.0


def test_telluric_loss_counts_only_covered_part(tmp_path):
    tell = _one_band_model(5950, 6250, 0.5, tmp_path)
    # window 5900-6300: covered 5900-6000 and 6200-6300; the band covers 50 A of each covered piece
    f = _f(5900, 6300, tell)
    assert f["telluric_loss"] == pytest.approx(0.5 * 100 / 400)
    # airmass 2, power 1: tau doubles, depth 1 - 0.5**2 = 0.75
    f2 = _f(5900, 6300, tell, airmass=2.0)
    assert f2["telluric_loss"] == pytest.approx(0.75 * 100 / 400)


def test_zero_width_window_is_a_point(tmp_path):
    tell = _one_band_model(7000, 7100, 0.4, tmp_path)
    f = _f(7050, 7050, tell)
    assert (f["coverage"], f["telluric_loss"]) == (pytest.approx(1.0), pytest.approx(0.4))
    assert _f(5050, 5050)["gap_loss"] == pytest.approx(1.0)


def test_bad_window_refused():
    from kncast.forecast.errors import ForecastInputError

    with pytest.raises(ForecastInputError, match="width"):
        window_fractions(5000, 4000, SETUP)


def test_vectorized_shapes_and_setup_axis(tmp_path):
    tell = _one_band_model(7000, 7100, 0.4, tmp_path)
    lo = np.array([[4200, 5020], [5900, 9500]], float)
    hi = lo + np.array([[600, 60], [400, 300]])
    one = window_fractions(lo, hi, SETUP, tell)
    both = window_fractions(lo, hi, [SETUP, SETUP], tell, airmass=np.array([1.0, 2.0]))
    assert one["coverage"].shape == (2, 2) and both["coverage"].shape == (2, 2, 2)
    for k in one:
        assert np.allclose(both[k][..., 0], one[k])
    # per-element airmass (epochs x features) agrees with scalar calls
    x = np.array([[1.0], [1.7]])
    grid = window_fractions(lo + 2800, hi + 2800, SETUP, tell, airmass=x)
    for i in range(2):
        ref = window_fractions(lo[i] + 2800, hi[i] + 2800, SETUP, tell, airmass=float(x[i, 0]))
        assert np.allclose(grid["telluric_loss"][i], ref["telluric_loss"])


@pytest.mark.parametrize("cov,gap,tell,word", [
    (1.0, 0.0, 0.0, "clear"),
    (0.95, 0.05, 0.0, "clear"),
    (1.0, 0.0, 0.3, "partly hidden"),
    (0.6, 0.4, 0.0, "partly hidden"),
    (1.0, 0.0, 0.8, "hidden by atmosphere"),
    (0.0, 1.0, 0.0, "in detector gap"),
    (0.2, 0.8, 0.0, "in detector gap"),
    (0.3, 0.7, 0.0, "partly hidden"),
    (0.0, 0.0, 0.0, "outside coverage"),
    (0.2, 0.1, 0.0, "outside coverage"),
])
def test_verdicts(cov, gap, tell, word):
    assert verdict(cov, gap, tell).item() == word
    assert verdict([cov, 1.0], [gap, 0.0], [tell, 0.0]).tolist() == [word, "clear"]


def test_verdict_from_fractions_end_to_end():
    f = window_fractions([4200, 5020, 9500], [4800, 5080, 9800], SETUP)
    assert verdict(**f).tolist() == ["clear", "in detector gap", "outside coverage"]


def test_features_sized_grid_broadcasts():
    """50 epochs x 40 features x 20 setups (the features benchmark size; its timing is in bench/features.py)."""
    tell = TelluricModel.load()
    rng = np.random.default_rng(1)
    lo = rng.uniform(3500, 22000, (50, 40))
    hi = lo + rng.uniform(50, 3000, (50, 40))
    setups = [SETUP] * 20
    f = window_fractions(lo, hi, setups, tell, airmass=1.3, pwv_mm=3.0)
    verdict(**f)
    assert f["coverage"].shape == (50, 40, 20)


def test_fractions_agree_with_dense_sampling():
    """Interval arithmetic against brute force: sample each window densely and count."""
    tell = TelluricModel.load()
    rng = np.random.default_rng(7)
    lo = rng.uniform(3000, 10000, 30)
    hi = lo + rng.uniform(20, 1500, 30)
    f = window_fractions(lo, hi, SETUP, tell, airmass=1.5, pwv_mm=4.0)
    w = np.linspace(lo, hi, 20001, axis=-1)
    on = np.zeros(w.shape, bool)
    for arm in SETUP.arms:
        on |= arm.covers(w)
    in_span = (w >= SETUP.min_A) & (w <= SETUP.max_A)
    lost = np.where(on, 1 - tell.transmission(w, 1.5, 4.0), 0.0)
    assert np.allclose(f["coverage"], on.mean(-1), atol=1e-3)
    assert np.allclose(f["gap_loss"], (in_span & ~on).mean(-1), atol=1e-3)
    assert np.allclose(f["telluric_loss"], lost.mean(-1), atol=1e-3)
    assert np.all(f["coverage"] + f["gap_loss"] <= 1 + 1e-12)
    assert np.all(f["telluric_loss"] <= f["coverage"] + 1e-12)


def test_airmass_shape_must_fit_windows_and_setups():
    from kncast.forecast.errors import ForecastInputError

    with pytest.raises(ForecastInputError, match="airmass"):
        window_fractions(np.zeros(4) + 5000, np.zeros(4) + 5100, [SETUP] * 3, None, airmass=np.ones(2))
