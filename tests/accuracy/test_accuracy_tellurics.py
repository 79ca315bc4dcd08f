"""Telluric band table against its published sources, and the scaling laws."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.tellurics import TelluricModel

EDGE_TOL_A = 0.5  # band edges are quoted to ~5 A; our conversion must not move them more than this


def _n_air(vac_A):
    """Refractive index of standard air, IAU standard (Morton 2000, ApJS 130, 403, eq. 8)."""
    s2 = (1e4 / np.asarray(vac_A, float)) ** 2
    return 1 + 8.34254e-5 + 2.406147e-2 / (130 - s2) + 1.5998e-4 / (38.9 - s2)


@pytest.fixture(scope="module")
def model():
    return TelluricModel.load()


def _band(model, band_id):
    row = model.bands[list(model.bands["id"]).index(band_id)]
    return float(row["min_A"]), float(row["max_A"])


# Bessell 1999, PASP 111, 1426, Fig. 1 (edges in air Angstrom, as the source quotes them)
@pytest.mark.parametrize("band_id,air_lo,air_hi", [
    ("o2-b", 6850, 6960),
    ("h2o-7200", 7150, 7350),
    ("o2-a", 7560, 7720),
    ("h2o-8200", 8105, 8240),
    ("h2o-9300", 8950, 9850),   # from memory (Bessell 1999 strong H2O band)
])
def test_optical_band_edges_match_bessell_1999_in_air(model, band_id, air_lo, air_hi):
    lo, hi = _band(model, band_id)   # the table holds vacuum wavelengths
    assert lo / _n_air(lo) == pytest.approx(air_lo, abs=EDGE_TOL_A)
    assert hi / _n_air(hi) == pytest.approx(air_hi, abs=EDGE_TOL_A)


# MKO near-IR filter half-power points, micron (Tokunaga, Simons & Vacca 2002, PASP 114, 180),
# from memory: J 1.17-1.33, H 1.49-1.78, K 2.03-2.37.  The opaque gaps sit between the windows.
@pytest.mark.parametrize("band_id,edge,micron", [
    ("h2o-jh-blue", "min_A", 1.33),
    ("h2o-jh-red", "max_A", 1.49),
    ("h2o-hk-blue", "min_A", 1.78),
    ("h2o-hk-red", "max_A", 2.03),
    ("h2o-k-red", "min_A", 2.37),
])
def test_near_ir_gaps_match_mko_window_edges(model, band_id, edge, micron):
    lo, hi = _band(model, band_id)
    assert {"min_A": lo, "max_A": hi}[edge] == pytest.approx(micron * 1e4, abs=1.0)


def test_mko_isophotal_wavelengths_are_in_clear_windows(model):
    # isophotal wavelengths of the MKO J, H, Ks, K filters (Tokunaga & Vacca 2005, PASP 117, 421)
    t = model.transmission(np.array([1.250, 1.644, 2.149, 2.198]) * 1e4)
    assert np.all(t > 0.9)


def test_gaps_between_near_ir_windows_are_nearly_opaque(model):
    # deepest water absorption near 1.38 and 1.88 micron (from memory)
    assert np.all(model.transmission([13800.0, 18800.0]) < 0.05)


def test_o2_a_band_is_deepest_optical_band(model):
    # common practice: the O2 A band is the strongest telluric feature shortward of 9000 A
    w = np.arange(6000.0, 8900.0, 1.0)
    t = model.transmission(w)
    deepest = w[t == t.min()]
    assert deepest.min() >= 7560 and deepest.max() <= 7725  # inside the O2 A band (box band)


def test_transmission_monotonic_in_airmass_and_pwv(model):
    w = np.linspace(3000, 26000, 4000)
    x = np.array([1.0, 1.2, 1.5, 2.0, 3.0])[:, None]
    t_x = model.transmission(w, airmass=x)
    assert np.all(np.diff(t_x, axis=0) <= 1e-15)
    p = np.array([0.5, 1.0, 2.5, 5.0, 10.0])[:, None]
    t_p = model.transmission(w, pwv_mm=p)
    assert np.all(np.diff(t_p, axis=0) <= 1e-15)
    # common practice: O2 absorption does not depend on water vapour
    assert np.allclose(t_p[:, (w > 7600) & (w < 7700)], t_p[0, (w > 7600) & (w < 7700)])


def test_reference_state_reproduces_tabulated_depths(model):
    lo, hi = np.asarray(model.bands["min_A"]), np.asarray(model.bands["max_A"])
    mid = 0.5 * (lo + hi)
    t = model.transmission(mid)
    # each band's centre shows the product of the transmissions 1 - depth of every row covering it
    # (the file's rule: overlapping rows multiply); only the CO2 2.01 micron band overlaps a water row
    inside = (mid[:, None] >= lo[None, :]) & (mid[:, None] < hi[None, :])
    expected = np.prod(np.where(inside, 1 - np.asarray(model.bands["depth"])[None, :], 1.0), axis=1)
    assert np.allclose(t, expected)
    overlapping = {model.bands["id"][i] for i in np.flatnonzero(inside.sum(axis=1) > 1)}
    assert overlapping == {"co2-2010"}


# CO2 Fermi-triad combination bands near 2 micron, band origins in cm^-1 (HITRAN line list,
# Gordon et al. 2022, JQSRT 277, 107949; from memory): (20012) 4977.8 -> 2.0089 micron,
# (20013) 4853.6 -> 2.0603 micron (vacuum: 1e8 / wavenumber).  At atmospheric temperatures the
# P and R branches of a CO2 band reach about +-(30-45) cm^-1 from the origin (B = 0.39 cm^-1,
# J up to ~50; common practice, from memory).
@pytest.mark.parametrize("band_id,origin_cm1", [("co2-2010", 4977.8), ("co2-2060", 4853.6)])
def test_co2_bands_near_2_micron(model, band_id, origin_cm1):
    lo, hi = _band(model, band_id)
    row = model.bands[list(model.bands["id"]).index(band_id)]
    assert row["species"] == "CO2" and row["scaling"] == "airmass"   # well mixed: no water-vapour scaling
    assert lo < 1e8 / origin_cm1 < hi
    half_widths = (1e8 / lo - origin_cm1, origin_cm1 - 1e8 / hi)   # R and P branch extents, cm^-1
    assert all(30.0 <= w <= 45.0 for w in half_widths)
    centre = np.array([1e8 / origin_cm1])
    # absorbs at every airmass, more with airmass, independent of precipitable water
    t = model.transmission(centre, airmass=np.array([[1.0], [2.0]]), pwv_mm=np.array([[0.5], [10.0]]))
    if band_id == "co2-2060":   # outside every water row: water vapour changes nothing
        assert model.transmission(centre, pwv_mm=0.5) == pytest.approx(model.transmission(centre, pwv_mm=10.0))
    assert np.all(t < 1.0) and t[1, 0] < model.transmission(centre, airmass=1.0, pwv_mm=10.0)[0]


def test_co2_2060_band_sits_inside_the_k_window(model):
    # MKO K half-power window 2.03-2.37 micron (Tokunaga, Simons & Vacca 2002, PASP 114, 180; from memory):
    # the 2.06 micron CO2 band is a dip inside the window, not part of the H-K water gap
    lo, hi = _band(model, "co2-2060")
    assert 20300.0 < lo < hi < 23700.0
    assert model.transmission([20350.0, 20900.0]) == pytest.approx([1.0, 1.0])


def test_loss_fraction_is_mean_absorption(model):
    lo = np.array([[7000.0], [13000.0]])
    hi = lo + np.array([500.0, 1500.0])
    w = np.linspace(lo, hi, 200001, axis=-1)
    direct = 1 - model.transmission(w, airmass=1.4, pwv_mm=4.0).mean(axis=-1)
    assert np.allclose(model.loss_fraction(lo, hi, 1.4, 4.0), direct, atol=1e-4)


def test_bad_airmass_and_pwv_refused(model):
    from kncast.forecast.errors import ForecastInputError

    with pytest.raises(ForecastInputError, match="airmass"):
        model.transmission(7000.0, airmass=0.5)
    with pytest.raises(ForecastInputError, match="pwv_mm"):
        model.loss_fraction(7000.0, 7100.0, 1.0, -1.0)
