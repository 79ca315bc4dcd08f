"""A plan table column with nothing missing is written as a plain column: the ECSV text is unchanged.

astropy's ECSV writer (the reference) is run on the same data held as a MaskedColumn with an empty
mask and as the column :func:`kncast.planner.plan.tables._column` returns; the files must be equal,
and a column with a missing value must stay masked (an empty field).
"""
from __future__ import annotations

import io

from astropy.table import Column, MaskedColumn, Table

from kncast.planner.plan.tables import _column

ROWS = [{"x": 1.5, "n": 3, "s": "a", "b": True, "gap": None}, {"x": 2.25, "n": 4, "s": "bc", "b": False, "gap": 7.0}]


def _ecsv(columns: dict) -> str:
    out = io.StringIO()
    Table(columns).write(out, format="ascii.ecsv")
    return out.getvalue()


def test_complete_columns_write_the_same_ecsv_text_as_masked_ones():
    kinds = {"x": (float, "s", "a float"), "n": (int, None, "an int"), "s": (str, None, "a string"),
             "b": (bool, None, "a flag")}
    ours = {name: _column(ROWS, name, *spec) for name, spec in kinds.items()}
    assert all(type(c) is Column for c in ours.values())
    masked = {name: MaskedColumn(c.data, mask=[False] * len(ROWS), unit=c.unit, description=c.description)
              for name, c in ours.items()}
    assert _ecsv(ours) == _ecsv(masked)


def test_a_column_with_a_missing_value_stays_masked():
    col = _column(ROWS, "gap", float, "d", "sometimes missing")
    assert isinstance(col, MaskedColumn) and list(col.mask) == [True, False]
    back = Table.read(_ecsv({"gap": col}), format="ascii.ecsv")
    assert back["gap"].mask.tolist() == [True, False] and back["gap"][1] == 7.0


# ---------------------------------------------------------------- the column-at-a-time ECSV writer
# Reference: astropy's own ECSV writer (Table.write(format="ascii.ecsv")); ecsv_text must give the same
# bytes for every kind of column a plan table holds, masked or not, and for kinds it leaves to astropy.
import numpy as np  # noqa: E402
from astropy.time import Time  # noqa: E402
from hypothesis import given, settings, strategies as st  # noqa: E402

from kncast.planner.plan.tables import ecsv_text  # noqa: E402

FLOATS = st.floats(allow_nan=True, allow_infinity=True, width=64)
TEXTS = st.text(alphabet=st.sampled_from(list('ab "\',#\t-_Åé0')), max_size=6)


@settings(max_examples=60, deadline=None)
@given(st.data())
def test_ecsv_text_equals_astropys_writer(data):
    n = data.draw(st.integers(1, 8))
    cols = {
        "x": np.array(data.draw(st.lists(FLOATS, min_size=n, max_size=n)), dtype=float),
        "i": np.array(data.draw(st.lists(st.integers(-2**62, 2**62), min_size=n, max_size=n)), dtype=np.int64),
        "b": np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n)), dtype=bool),
        "s": np.array(data.draw(st.lists(TEXTS, min_size=n, max_size=n)), dtype=str),
    }
    masks = {k: np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n))) for k in cols}
    table = Table({k: (MaskedColumn(v, mask=masks[k], unit="d" if k == "x" else None, description=f"the {k}")
                       if data.draw(st.booleans()) else Column(v)) for k, v in cols.items()})
    when = Time(["2027-03-14T02:00:00"] * n, format="isot", scale="utc", precision=0)
    if data.draw(st.booleans()):
        when[masks["x"]] = np.ma.masked
    table["t"] = when
    table.meta.update(description="a table", settings={"sigma": 5.0, "sites": ["a", "b"]})
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    assert ecsv_text(table) == out.getvalue()


def test_ecsv_text_leaves_other_kinds_to_astropy():
    # float32 prints differently as a Python float; 2-d columns are JSON: astropy formats those itself
    table = Table({"f": np.array([0.1, 1 / 3], dtype=np.float32), "v": np.array([[1.0, 2.0], [3.0, np.nan]])})
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    assert ecsv_text(table) == out.getvalue()
