"""Default epochs of ``kncast lines``: the time the photosphere spends in the line list's temperature range."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.defaults import LINE_RULE_TEMPERATURE_K
from kncast.forecast.epochs import useful_phases, useful_range
from kncast.forecast.photosphere import EjectaComponent, HeatingPhotosphere, PowerLawPhotosphere
from kncast.forecast.source import Transient


def _powerlaw_crossing(model, temperature_K, z):
    # closed form of the power law's own definition, T = T_ref (t / t_ref)^-alpha, observer frame
    return model.t_ref_d * (model.temperature_ref_K / temperature_K) ** (1 / model.temperature_index) * (1 + z)


@pytest.mark.parametrize("z", [0.0, 0.05, 0.3])
def test_powerlaw_range_is_the_closed_form_crossing_of_6000_and_2500_K(z):
    model = PowerLawPhotosphere()
    tr = Transient(model, redshift=z) if z else Transient(model, distance_mpc=10.0, redshift=1e-9)
    low, high = LINE_RULE_TEMPERATURE_K
    start, end = useful_range(tr)
    assert start == pytest.approx(_powerlaw_crossing(model, high, z), rel=0.012)   # scan step ~1 %
    assert end == pytest.approx(_powerlaw_crossing(model, low, z), rel=0.012)


def test_default_phases_are_log_spaced_and_rounded():
    model = PowerLawPhotosphere()
    tr = Transient(model, redshift=0.05)
    low, high = LINE_RULE_TEMPERATURE_K
    expected = np.geomspace(_powerlaw_crossing(model, high, 0.05), _powerlaw_crossing(model, low, 0.05), 4)
    phases = np.array(useful_phases(tr))
    assert len(phases) == 4 and np.all(np.diff(phases) > 0)
    _check_rounding(phases, expected)
    assert all(round(p * 10) == pytest.approx(p * 10, abs=1e-9) for p in phases)


def _check_rounding(phases, expected, scan=0.012):
    # 0.1 d steps: the first rounded up and the last down (inside the range), the others to the nearest;
    # plus one step (about 1 %) of the temperature scan
    assert expected[0] * (1 - scan) <= phases[0] <= expected[0] * (1 + scan) + 0.1
    assert expected[-1] * (1 - scan) - 0.1 <= phases[-1] <= expected[-1] * (1 + scan)
    assert np.allclose(phases[1:-1], expected[1:-1], atol=0.05 + scan * expected[1:-1])


def test_a_floor_above_the_range_ends_where_the_floor_is_reached():
    comp = EjectaComponent("fast", 0.03, 0.25, 0.5, 3500.0)
    tr = Transient(HeatingPhotosphere((comp,)), redshift=0.02)
    start, end = useful_range(tr)
    assert start < end
    # a one-zone component approaches its floor and holds it: the range ends within 1 % of it
    t = tr.state([start * 0.97, end * 0.97, end]).temperature_K
    assert t[0] > 6000.0 and t[1] > 3500.0 * 1.01 and 3500.0 <= t[2] <= 3500.0 * 1.01
