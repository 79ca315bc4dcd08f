"""Malformed telluric band files give one-line DataFileErrors naming the file and field."""
from __future__ import annotations

import pytest
from astropy.table import Table

from kncast.forecast.errors import DataFileError
from kncast.forecast.tellurics import TelluricModel, default_bands_path


def _write(tmp_path, edit):
    t = Table.read(default_bands_path(), format="ascii.ecsv")
    t = edit(t) or t
    path = tmp_path / "bands.ecsv"
    t.write(path, format="ascii.ecsv", overwrite=True)
    return path


def _set(col, value, row=2):
    def edit(t):
        if t[col].dtype.kind in "US":
            t[col] = t[col].astype(object)
        t[col][row] = value
        return t
    return edit


@pytest.mark.parametrize("edit,key", [
    (_set("depth", 1.0), "row 3 (o2-b).depth"),
    (_set("depth", -0.1), "row 3 (o2-b).depth"),
    (_set("min_A", 2000.0), "row 3 (o2-b).min_A"),
    (_set("max_A", 6000.0), "row 3 (o2-b).max_A"),
    (_set("scaling", "pressure"), "row 3 (o2-b).scaling"),
    (_set("power", 0.0), "row 3 (o2-b).power"),
    (_set("source", " "), "row 3 (o2-b).source"),
    (_set("id", "o2-a"), "row 5 (o2-a).id: duplicate"),
    (lambda t: t.remove_column("depth"), "column depth"),
])
def test_bad_rows(tmp_path, edit, key):
    path = _write(tmp_path, edit)
    with pytest.raises(DataFileError) as err:
        TelluricModel.load(path)
    msg = str(err.value)
    assert msg.startswith(f"{path}: {key}") and "\n" not in msg, msg


@pytest.mark.parametrize("content", ["", "not a table at all\n1 2 3\n", "\x00\x01binary"])
def test_unreadable_files(tmp_path, content):
    path = tmp_path / "bands.ecsv"
    path.write_text(content)
    with pytest.raises(DataFileError) as err:
        TelluricModel.load(path)
    assert str(err.value).startswith(str(path)) and "\n" not in str(err.value)


def test_missing_file(tmp_path):
    with pytest.raises(DataFileError, match="file not found"):
        TelluricModel.load(tmp_path / "none.ecsv")
