"""Partition functions against a published table.

Reference: Gray 2005, The Observation and Analysis of Stellar Photospheres, 3rd ed.
(Cambridge University Press), Table D.2: log10 U at theta = 5040 K / T; read from a public
copy of the table (checked, secondary).  Gray states its entries are accurate to
about 1 %.  Our level sums use NIST ASD energies (forecast/data/levels.ecsv), an
independent calculation of the same quantity.
"""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.partition import PartitionData, PartitionFunctions

from conftest import every_element_composition

THETA = np.array([1.0, 1.2, 1.4, 1.6, 1.8, 2.0])       # 5040 K ... 2520 K
# Gray's ~1 % accuracy + 0.001 dex rounding + our truncated level lists (< 1 % at <= 5040 K)
LEVEL_SUM_TOL = 0.02

# Gray 2005 Table D.2, log10 U at theta = 1.0, 1.2, 1.4, 1.6, 1.8, 2.0 (checked, secondary)
GRAY_LOG_U = {
    ("Ca", 1): [0.073, 0.028, 0.010, 0.003, 0.001, 0.000],
    ("Ca", 2): [0.344, 0.320, 0.309, 0.304, 0.302, 0.301],
    ("Ca", 3): [0.000, 0.000, 0.000, 0.000, 0.000, 0.000],
    ("Sr", 1): [0.098, 0.041, 0.016, 0.005, 0.001, 0.000],
    ("Sr", 2): [0.334, 0.315, 0.306, 0.303, 0.301, 0.301],
    ("Sr", 3): [0.000, 0.000, 0.000, 0.000, 0.000, 0.000],
    ("Ba", 1): [0.419, 0.264, 0.166, 0.103, 0.062, 0.037],
    ("Ba", 2): [0.623, 0.558, 0.504, 0.460, 0.424, 0.396],
    ("Ba", 3): [0.000, 0.000, 0.000, 0.000, 0.000, 0.000],
    ("He", 1): [0.000, 0.000, 0.000, 0.000, 0.000, 0.000],
    ("He", 2): [0.301, 0.301, 0.301, 0.301, 0.301, 0.301],
}


@pytest.fixture(scope="module")
def bundled(tmp_path_factory):
    comp = every_element_composition(tmp_path_factory)
    return comp, comp.partition_model


def _u(model, element, stage, temperature_K):
    return model(np.atleast_1d(temperature_K))[:, model.elements.index(element), stage - 1]


@pytest.mark.parametrize("ion", sorted(GRAY_LOG_U))
def test_level_sums_match_gray_2005(bundled, ion):
    _, model = bundled
    assert PartitionData.load().source(*ion) == "levels"
    got = _u(model, ion[0], ion[1], 5040.0 / THETA)
    assert got == pytest.approx(10.0 ** np.array(GRAY_LOG_U[ion]), rel=LEVEL_SUM_TOL)


def test_ba_ii_is_about_twice_its_ground_term_weight_at_5000_K(bundled):
    # REFERENCES.md (from memory): at 5000 K Ba II's U is about 2x its ground-term weight (2, 6s 2S);
    # Gray 2005 Table D.2 gives log U = 0.623 (U = 4.20) at theta = 1.0 (5040 K).
    comp, model = bundled
    u = _u(model, "Ba", 2, 5000.0)[0]
    ground = comp.partition[comp.index("Ba"), 1]
    assert ground == 2
    assert 1.9 <= u / ground <= 2.2


def test_table_ions_reproduce_gray_2005_nodes(bundled):
    # Interpolation is exact at the table's nodes: Gray 2005 Table D.2 (theta = 1.0 and 1.6)
    _, model = bundled
    for (el, stage), (at_10, at_16) in {("Zr", 2): (1.662, 1.483), ("Y", 2): (1.201, 1.055),
                                        ("Ce", 2): (2.274, 1.952), ("Te", 1): (0.798, 0.742)}.items():
        got = np.log10(_u(model, el, stage, 5040.0 / np.array([1.0, 1.6])))
        assert got == pytest.approx([at_10, at_16], abs=1e-9)


def test_a_custom_level_list_replaces_the_table(tmp_path):
    # A two-level ion by hand: U = 2 + 4 exp(-hc E / kT), E = 1000 cm^-1, hc/k = 1.438776877 cm K (CODATA)
    from kncast.forecast.partition import GRAY_PATH

    lv = tmp_path / "levels.ecsv"
    lv.write_text("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: element, datatype: string}\n"
                  "# - {name: ion_stage, datatype: int64}\n# - {name: g, datatype: int64}\n"
                  "# - {name: energy_cm1, datatype: float64}\n# - {name: source, datatype: string}\n"
                  "# schema: astropy-2.0\nelement ion_stage g energy_cm1 source\n"
                  "Zr 2 2 0.0 hand\nZr 2 4 1000.0 hand\n")
    data = PartitionData.load(lv, GRAY_PATH)
    model = PartitionFunctions.for_elements(("Zr",), np.ones((1, 4)), data)
    t = np.array([1000.0, 3000.0])
    assert model(t)[:, 0, 1] == pytest.approx(2 + 4 * np.exp(-1.438776877 * 1000.0 / t), rel=1e-9)
    assert model.sources[0].tolist() == ["gray2005", "levels", "gray2005", "ground term"]
