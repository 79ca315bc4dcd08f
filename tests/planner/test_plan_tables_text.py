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
