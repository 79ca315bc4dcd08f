"""kncast.forecast.partition: limits, monotonicity, extrapolation rule, bad data files."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.errors import DataFileError
from kncast.forecast.partition import GRAY_PATH, LEVELS_PATH, PartitionData, PartitionFunctions

from conftest import every_element_composition


@pytest.fixture(scope="module")
def comp(tmp_path_factory):
    return every_element_composition(tmp_path_factory)


def _ground_level_weights(comp):
    """g of the level at 0 cm^-1 (level lists) or g_ground (table); the ground term elsewhere."""
    data = PartitionData.load()
    g = np.array(comp.partition, dtype=float)
    for a, el in enumerate(comp.elements):
        for j in range(3):
            key = (el, j + 1)
            if key in data.levels:
                e, w = data.levels[key]
                g[a, j] = w[e == 0.0].sum()
            elif key in data.gray:
                g[a, j] = data.gray[key][1]
    return g


def test_low_temperature_limit_is_the_ground_level_weight(comp):
    # Boltzmann: every excited level empties as T -> 0, so U -> g of the ground level.
    # (Cs I's tabulated 0.303 dex at theta >= 1.8 is log10 2 = 0.301 plus the table's rounding.)
    u = comp.partition_functions([100.0])[0]
    assert u == pytest.approx(_ground_level_weights(comp), rel=0.01)


def test_monotonic_in_temperature(comp):
    t = np.geomspace(500.0, 30000.0, 400)
    u = comp.partition_functions(t)
    assert np.all(np.diff(u, axis=0) >= -1e-12)
    assert np.all(u >= _ground_level_weights(comp)[None] * (1 - 1e-12))  # never below the ground level


def test_shape_and_stage_iv_is_the_ground_term(comp):
    u = comp.partition_functions(np.array([3000.0, 5000.0]))
    assert u.shape == (2, len(comp.elements), 4)
    assert np.array_equal(u[..., 3], np.broadcast_to(comp.partition[:, 3], (2, len(comp.elements))))
    assert set(comp.partition_model.sources[:, 3]) == {"ground term"}


def test_table_is_extrapolated_below_2520_K_but_not_below_the_ground_level(comp):
    model = comp.partition_model
    zr = comp.index("Zr")
    # Gray 2005 Table D.2, Zr II: log U = 1.438 (theta 1.8), 1.398 (theta 2.0): slope -0.2 per unit theta
    got = np.log10(model(np.array([5040.0 / 2.5]))[0, zr, 1])
    assert got == pytest.approx(1.398 - 0.2 * 0.5, abs=1e-9)
    # Te II: the table falls below log10 4 (its 4S3/2 ground level) at theta >= 1.4; U is held at 4
    te = comp.index("Te")
    assert model(np.array([5040.0 / 2.0]))[0, te, 1] == pytest.approx(4.0)


def test_lte_state_uses_u_of_each_epoch(comp):
    from kncast.forecast.lte import lte_state

    t = np.array([3000.0, 5000.0])
    st = lte_state(t, [2.0, 2.0], 0.2, 0.35, 0.04, comp)
    assert np.array_equal(st.partition, comp.partition_functions(t))
    assert st.partition[1, comp.index("Ba"), 1] > st.partition[0, comp.index("Ba"), 1]


def _levels_file(tmp_path, rows):
    path = tmp_path / "levels.ecsv"
    path.write_text("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: element, datatype: string}\n"
                    "# - {name: ion_stage, datatype: int64}\n# - {name: g, datatype: int64}\n"
                    "# - {name: energy_cm1, datatype: float64}\n# - {name: source, datatype: string}\n"
                    "# schema: astropy-2.0\nelement ion_stage g energy_cm1 source\n" + rows)
    return path


@pytest.mark.parametrize("rows,key", [
    ("Sr 2 2 100.0 x\n", "no ground level"),
    ("Sr 2 0 0.0 x\n", "row 1.g"),
    ("Sr 5 2 0.0 x\n", "row 1.ion_stage"),
    ("Sr 2 2 -5.0 x\n", "row 1.energy_cm1"),
])
def test_bad_level_files(tmp_path, rows, key):
    path = _levels_file(tmp_path, rows)
    with pytest.raises(DataFileError) as err:
        PartitionData.load(path, GRAY_PATH)
    assert str(err.value).startswith(str(path)) and key in str(err.value) and "\n" not in str(err.value)


def test_missing_files(tmp_path):
    with pytest.raises(DataFileError, match="file not found"):
        PartitionData.load(tmp_path / "none.ecsv", GRAY_PATH)
    with pytest.raises(DataFileError, match="file not found"):
        PartitionData.load(LEVELS_PATH, tmp_path / "none.ecsv")


def test_every_bundled_row_has_provenance():
    from astropy.table import Table

    for path in (LEVELS_PATH, GRAY_PATH):
        t = Table.read(path, format="ascii.ecsv")
        assert all(str(s).strip() for s in t["source"])
    lv = Table.read(LEVELS_PATH, format="ascii.ecsv")
    assert set(lv["confidence"]) <= {"checked", "memory"}


def test_without_a_model_the_ground_terms_are_used(comp):
    from dataclasses import replace

    bare = replace(comp, partition_model=None)
    assert np.array_equal(bare.partition_functions([4000.0])[0], comp.partition)
    assert isinstance(comp.partition_model, PartitionFunctions)
