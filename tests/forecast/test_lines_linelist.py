"""Line-list loading: bundled list, blends, and one-line errors naming file, column and row."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.errors import DataFileError
from kncast.forecast.linelist import DEFAULT_PATH, LineList

from conftest import ROOT as _ROOT  # noqa: E402

SOURCE_DATA = _ROOT / "forecast" / "data"  # the source tree's data folder (candidates are not installed)

# every line with published data; make_lines.py chooses the bundled list from it (docs/methods.md)
CANDIDATES = SOURCE_DATA / "candidates" / "line_candidates.ecsv"


@pytest.fixture(scope="module")
def text():
    return DEFAULT_PATH.read_text()


@pytest.fixture(scope="module")
def candidates_text():
    return CANDIDATES.read_text()


def _write(tmp_path, content, name="lines.ecsv"):
    p = tmp_path / name
    p.write_text(content)
    return p


def test_bundled_list_is_what_the_selection_rule_ships():
    # lines.ecsv is written by make_lines.py: the candidates' rows of the features the rule keeps
    # (docs/methods.md, "Line selection"), unchanged; every element of the list is in the composition
    import runpy

    from astropy.table import Table

    from kncast.forecast.lte import Composition

    mod = runpy.run_path(str(SOURCE_DATA / "make_lines.py"), run_name="kncast_test")
    candidates = Table.read(CANDIDATES, format="ascii.ecsv")
    shipped, decisions = mod["select"](candidates)
    ll = LineList.load()
    assert list(dict.fromkeys(ll.feature)) == shipped
    assert len(decisions) == len(set(candidates["feature"]))
    rows = candidates[np.isin(np.asarray(candidates["feature"]).astype(str), shipped)]
    assert np.array_equal(np.asarray(rows["wavelength_A"]), ll.wavelength_A)
    assert np.array_equal(np.asarray(rows["log_gf"]), np.asarray(Table.read(DEFAULT_PATH, format="ascii.ecsv")["log_gf"]))
    assert set(ll.species) == {"Sr II", "Ca II", "Ba II", "Y II", "Zr II"}
    # Ca is in the composition as a light element of high-electron-fraction ejecta (Domoto, Tanaka,
    # Wanajo & Kawaguchi 2021, ApJ 913, 26: Ca II triplet in their lanthanide-poor model; checked, abstract)
    assert {"ca2-nir", "ca2-hk"} <= set(shipped)
    assert set(Composition.load().elements) == set(ll.element)
    assert np.all(np.diff(ll.wavelength_A[ll.feature == "sr2-nir"]) > 0)


def test_candidates_hold_the_lines_the_rule_leaves_out():
    cand = LineList.load(CANDIDATES)
    assert {"He I", "Cs I", "[Te III]"} <= set(cand.species)
    assert not set(cand.feature[np.isin(cand.element, ["He", "Cs", "Te"])]) & set(LineList.load().feature)


def test_multiplets_merge_into_features():
    feats = {f.id: f for f in LineList.load().features()}
    assert len(feats["sr2-nir"].members) == 3 and len(feats["ba2-res"].members) == 2
    assert len(feats["ba2-red"].members) == 3 and len(feats["y2-5000"].members) == 3
    cand = {f.id: f for f in LineList.load(CANDIDATES).features()}
    assert len(cand["ca2-nir"].members) == 3 and len(cand["ca2-hk"].members) == 2
    assert len(cand["he1-10830"].members) == 3
    assert cand["cs1-d"].uncertain and not feats["sr2-uv"].uncertain


def test_regenerate_script_reproduces_the_vacuum_column(tmp_path, text):
    import runpy

    copy = _write(tmp_path, text)
    mod = runpy.run_path(str(SOURCE_DATA / "make_lines.py"), run_name="kncast_test")
    table = mod["regenerate"](copy)
    assert np.allclose(np.asarray(table["wavelength_A"]), LineList.load().wavelength_A, atol=1e-9)


def _replace_row(text, start, old, new):
    lines = text.splitlines()
    i = next(k for k, line in enumerate(lines) if line.startswith(start))
    assert old in lines[i]
    lines[i] = lines[i].replace(old, new, 1)
    return "\n".join(lines) + "\n", i


@pytest.mark.parametrize("start,old,new,match", [
    ("sr2-uv \"Sr II\" Sr 2 4078.86", " 2 4078.86", " 7 4078.86", r"ion_stage row 1: value 7 out of range"),
    ("ba2-red \"Ba II\" Ba 2 5855.291", "\"Ba II\" Ba", "\"Ba III\" Ba", r"species row 13: 'Ba III' does not match"),
    ("ba2-res \"Ba II\" Ba 2 4555.306", "4555.306", "4556.306", r"wavelength_A row 11: .*rerun forecast/data/make_lines.py"),
    ("y2-4375 ", " air ", " sky ", r"published_medium row 16: value 'sky' not recognised"),
    ("zr2-4443 ", " 1.486 ", " -3.0 ", r"E_low_eV row 24: value -3 out of range"),
    ("sr2-nir \"Sr II\" Sr 2 10039.406", "sr2-nir", "\"sr2 nir\"", r"feature row 3: id .sr2 nir. has spaces"),
])
def test_bad_rows_name_file_column_row(tmp_path, text, start, old, new, match):
    content, _ = _replace_row(text, start, old, new)
    with pytest.raises(DataFileError, match=r"lines\.ecsv: " + match) as err:
        LineList.load(_write(tmp_path, content))
    assert "\n" not in str(err.value)


def test_missing_column(tmp_path, text):
    content = text.replace("{name: log_gf,", "{name: logGF,").replace(" log_gf ", " logGF ")
    with pytest.raises(DataFileError, match=r"log_gf: required column missing"):
        LineList.load(_write(tmp_path, content))


@pytest.mark.parametrize("content", ["", "not a table\n", "# %ECSV 1.0\n# ---\n# garbage: [\n"])
def test_not_ecsv(tmp_path, content):
    with pytest.raises(DataFileError, match=r"mine\.ecsv: malformed ECSV") as err:
        LineList.load(_write(tmp_path, content, "mine.ecsv"))
    assert "\n" not in str(err.value)


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(DataFileError, match="file not found"):
        LineList.load(tmp_path / "nope.ecsv")
    with pytest.raises(DataFileError, match="is a folder"):
        LineList.load(tmp_path)


def test_a_value_needs_g_up(tmp_path, candidates_text):
    content, _ = _replace_row(candidates_text, "he1-10830 \"He I\" He 1 10832.057", " 3 1 ", " 3 0 ")
    with pytest.raises(DataFileError, match=r"g_up row 25"):
        LineList.load(_write(tmp_path, content))


def test_blend_members_too_far_apart(tmp_path, text):
    content, _ = _replace_row(text, "y2-7882", "y2-7882", "sr2-uv")
    with pytest.raises(DataFileError, match=r"blend 'sr2-uv' spans members too far apart"):
        LineList.load(_write(tmp_path, content))


def test_lte_flag_follows_the_rule_and_marks_he_i():
    # The bundled lte column is what make_lines.py writes: lte_applies(E_low_eV) (lower level <= 5 eV).
    # He I 10830 arises from the 19.82 eV 2s 3S level (NIST ASD), populated non-thermally in radioactive
    # ejecta (Lucy 1991, ApJ 383, 308; from memory): no LTE estimate.
    from kncast.forecast.linelist import NON_LTE_E_LOW_EV, lte_applies

    ll = LineList.load(CANDIDATES)
    assert np.array_equal(ll.lte, lte_applies(ll.E_low_eV))
    assert set(ll.feature[~ll.lte]) == {"he1-10830"}
    assert np.all(ll.E_low_eV[ll.lte] <= NON_LTE_E_LOW_EV)
    feats = {f.id: f for f in ll.features()}
    assert not feats["he1-10830"].lte and feats["sr2-nir"].lte and feats["cs1-d"].lte
    assert LineList.load().lte.all()          # the rule ships LTE features only


def test_lte_flag_from_the_file_or_the_rule(tmp_path):
    # without an lte column the rule applies; with one, the file's flag is used as given
    from astropy.table import Table

    t = Table.read(CANDIDATES, format="ascii.ecsv")
    t.remove_column("lte")
    t.write(tmp_path / "no_lte.ecsv", format="ascii.ecsv")
    ll = LineList.load(tmp_path / "no_lte.ecsv")
    assert len(ll) == len(LineList.load(CANDIDATES)) and set(ll.feature[~ll.lte]) == {"he1-10830"}
    one = Table.read(DEFAULT_PATH, format="ascii.ecsv")[:1]
    one["feature"] = ["my-sr2"]
    one["lte"] = [False]
    one.write(tmp_path / "mine.ecsv", format="ascii.ecsv")
    mine = LineList.load(tmp_path / "mine.ecsv")
    assert not mine.lte[0] and not mine.features()[0].lte
    merged = LineList.merge([LineList.load(), mine])
    assert merged.lte.size == len(merged) and not merged.lte[-1] and merged.lte[0]


def test_a_file_is_read_once_while_unchanged_and_its_arrays_are_read_only(tmp_path, text):
    assert LineList.load() is LineList.load(DEFAULT_PATH)
    path = _write(tmp_path, text)
    first = LineList.load(path)
    assert LineList.load(path) is first
    with pytest.raises(ValueError, match="read-only"):
        first.wavelength_A[0] = 1.0
    import os

    shorter = "\n".join(line for line in text.splitlines() if "sr2-nir" not in line) + "\n"
    path.write_text(shorter)
    os.utime(path, ns=(1, 1))  # a changed file (size and time) is read again
    again = LineList.load(path)
    assert again is not first and "sr2-nir" in set(first.feature) and "sr2-nir" not in set(again.feature)
