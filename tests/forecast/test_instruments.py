"""Instrument tables in site files: parsing, validation messages, setup ids."""
from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from kncast.forecast.errors import DataFileError
from kncast.forecast.instruments import DEFAULT_SETUP, parse_telescopes
from kncast.planner.errors import UnknownNameError
from kncast.planner.setups import all_setups, resolve_setup
from kncast.planner.sites import SiteRegistry

PATH = "custom-site.toml"


def _rows():
    """A small valid [[telescope]] array (invented example values)."""
    arm = {"name": "a", "min_A": 4000, "max_A": 8000, "resolving_power": 1000, "dispersion_A_per_pix": 2.0,
           "gaps_A": [[6000, 6020]], "read_noise_e": 4.0, "dark_e_per_s": 0.001, "gain_e_per_adu": 1.5,
           "full_well_e": 100000, "throughput_A": [4000, 6000, 8000], "throughput": [0.1, 0.3, 0.2]}
    arm2 = dict(arm, name="b", min_A=8100, max_A=10000, gaps_A=[], throughput_A=[8100, 10000], throughput=[0.2, 0.1])
    inst = {"id": "spec", "kind": "slit", "slit_width_arcsec": 1.0, "pixel_scale_arcsec": 0.3, "arm": [arm, arm2],
            "setup": [{"id": "red", "description": "red part", "arm": [{"name": "a", "min_A": 5000}, {"name": "b"}]}]}
    return [{"id": "t4m", "aperture_m": 4.0, "central_obstruction": 0.1, "instrument": [inst]}]


def test_valid_rows_parse():
    (tel,) = parse_telescopes(_rows(), PATH)
    inst = tel.instruments[0]
    assert [s.id for s in inst.setups] == [DEFAULT_SETUP, "red"]
    red = inst.setup("red")
    assert (red.arms[0].min_A, red.arms[0].max_A, red.arms[1].name) == (5000, 8000, "b")
    assert red.arms[0].gaps_A == ((6000, 6020),)
    # area of a 4-m disc with 10 % of its area blocked: pi * 200 cm^2 ... (geometry)
    assert tel.collecting_area_cm2 == pytest.approx(math.pi * 200.0**2 * 0.9)


def test_arm_helpers():
    arm = parse_telescopes(_rows(), PATH)[0].instruments[0].arms[0]
    assert arm.throughput_at([3000, 5000, 8000, 9000]).tolist() == pytest.approx([0.0, 0.2, 0.2, 0.0])
    assert arm.resolution_element_A(6000.0) == pytest.approx(6.0)  # lambda / R
    assert arm.pixels_per_resolution_element(6000.0) == pytest.approx(3.0)
    assert arm.covers([5000, 6010, 9000]).tolist() == [True, False, False]


def _set(rows, keys, value):
    node = rows
    for k in keys[:-1]:
        node = node[k]
    if value is _DELETE:
        del node[keys[-1]]
    else:
        node[keys[-1]] = value
    return rows


_DELETE = object()
T, I, A = (0,), (0, "instrument", 0), (0, "instrument", 0, "arm", 0)


@pytest.mark.parametrize("keys,value,key_path", [
    (T + ("aperture_m",), 0, "telescope[0].aperture_m"),
    (T + ("aperture_m",), 60, "telescope[0].aperture_m"),
    (T + ("central_obstruction",), 0.95, "telescope[0].central_obstruction"),
    (T + ("aperture_m",), _DELETE, "telescope[0].aperture_m"),
    (T + ("id",), "bad/id", "telescope[0].id"),
    (T + ("apertur_m",), 4.0, "telescope[0].apertur_m"),
    (T + ("instrument",), [], "telescope[0].instrument"),
    (I + ("kind",), "prism", "telescope[0].instrument[0].kind"),
    (I + ("slit_width_arcsec",), -1, "telescope[0].instrument[0].slit_width_arcsec"),
    (I + ("arm",), "x", "telescope[0].instrument[0].arm"),
    (A + ("min_A",), 2500, "telescope[0].instrument[0].arm[0].min_A"),
    (A + ("max_A",), 27000, "telescope[0].instrument[0].arm[0].max_A"),
    (A + ("max_A",), 3900, "telescope[0].instrument[0].arm[0].max_A"),
    (A + ("resolving_power",), 10, "telescope[0].instrument[0].arm[0].resolving_power"),
    (A + ("resolving_power",), "high", "telescope[0].instrument[0].arm[0].resolving_power"),
    (A + ("dispersion_A_per_pix",), 0, "telescope[0].instrument[0].arm[0].dispersion_A_per_pix"),
    (A + ("read_noise_e",), -3, "telescope[0].instrument[0].arm[0].read_noise_e"),
    (A + ("gain_e_per_adu",), 0, "telescope[0].instrument[0].arm[0].gain_e_per_adu"),
    (A + ("full_well_e",), _DELETE, "telescope[0].instrument[0].arm[0].full_well_e"),
    (A + ("gaps_A",), [[3000, 3100]], "telescope[0].instrument[0].arm[0].gaps_A[0]"),
    (A + ("gaps_A",), [[6000, 5000]], "telescope[0].instrument[0].arm[0].gaps_A[0]"),
    (A + ("gaps_A",), [[5000, 5100], [5050, 5200]], "telescope[0].instrument[0].arm[0].gaps_A[1]"),
    (A + ("gaps_A",), [5000], "telescope[0].instrument[0].arm[0].gaps_A[0]"),
    (A + ("throughput",), [0.1, 1.3, 0.2], "telescope[0].instrument[0].arm[0].throughput"),
    (A + ("throughput",), [0.1, 0.2], "telescope[0].instrument[0].arm[0].throughput"),
    (A + ("throughput_A",), [4500, 6000, 8000], "telescope[0].instrument[0].arm[0].throughput_A"),
    (A + ("throughput_A",), [4000, 4000, 8000], "telescope[0].instrument[0].arm[0].throughput_A"),
    (I + ("arm", 1, "name"), "a", "telescope[0].instrument[0].arm.name"),
    (I + ("setup", 0, "arm", 0, "name"), "c", "telescope[0].instrument[0].setup[0].arm[0].name"),
    (I + ("setup", 0, "arm", 0, "min_A"), 3000, "telescope[0].instrument[0].setup[0].arm[0].min_A"),
    (I + ("setup", 0, "id"), "default", "telescope[0].instrument[0].setup.id"),
    (I + ("setup", 0, "description"), _DELETE, "telescope[0].instrument[0].setup[0].description"),
])
def test_malformed_rows_give_one_line_errors(keys, value, key_path):
    rows = _set(copy.deepcopy(_rows()), keys, value)
    with pytest.raises(DataFileError) as err:
        parse_telescopes(rows, PATH)
    msg = str(err.value)
    assert "\n" not in msg
    assert msg.startswith(f"{PATH}: {key_path}"), msg


def test_duplicate_telescope_id():
    rows = _rows() * 2
    with pytest.raises(DataFileError, match=r"telescope\.id: duplicate"):
        parse_telescopes(rows, PATH)


def test_bundled_sites_have_enough_setups_and_the_three_designs():
    refs = all_setups(SiteRegistry.load())
    assert len(refs) >= 20
    kinds = {r.instrument.id for r in refs}
    assert {"lowres-optical", "nir-xd", "wide-3arm"} <= kinds
    for r in refs:
        for arm in r.setup.arms:
            assert np.all((arm.throughput >= 0) & (arm.throughput <= 1))
            assert arm.throughput_A[0] <= arm.min_A and arm.throughput_A[-1] >= arm.max_A


def test_setup_ids_resolve_case_insensitively_and_default_alias():
    reg = SiteRegistry.load()
    ref = resolve_setup("Sutherland/T8M/wide-3arm", reg)
    assert ref.setup.is_default and ref.id == "sutherland/t8m/wide-3arm"
    assert resolve_setup("sutherland/t8m/wide-3arm:default", reg) is not None
    assert resolve_setup("sutherland/t8m/wide-3arm:red-ir", reg).setup.id == "red-ir"


def test_unknown_setup_suggests_close_ids():
    reg = SiteRegistry.load()
    with pytest.raises(UnknownNameError, match="did you mean sutherland/t8m/wide-3arm"):
        resolve_setup("sutherland/t8m/wide-3am", reg)
