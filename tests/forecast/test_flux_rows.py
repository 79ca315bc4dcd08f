"""Transient.flux_flam_rows (linear in epochs) equals flux_flam at the same epochs, element by element."""
import numpy as np

from kncast.forecast import source
from kncast.forecast.photosphere import build_model
from kncast.forecast.source import Transient


def test_rows_equal_the_diagonal_of_the_full_call(monkeypatch):
    tr = Transient(build_model({"name": "heating"}), distance_mpc=100.0, ebv_mw=0.05, ebv_host=0.1)
    rng = np.random.default_rng(3)
    n = 75  # more than two blocks, the last one short
    phase = np.linspace(0.4, 15.0, n)
    lam = rng.uniform(3500.0, 22000.0, (n, 9))
    full = tr.flux_flam(phase, lam.ravel()).reshape(n, n, 9)[np.arange(n), np.arange(n)]
    monkeypatch.setattr(source, "ROWS_BLOCK", 32)
    assert np.array_equal(tr.flux_flam_rows(phase, lam), full)
    monkeypatch.setattr(source, "ROWS_BLOCK", 1)
    assert np.array_equal(tr.flux_flam_rows(phase, lam), full)
