"""The JSON writer gives the standard library's document, and the direct UTC formatting astropy's text.

* :func:`kncast.planner.output.json_text` (orjson) against ``json.dumps(to_jsonable(doc), indent=2,
  allow_nan=False)`` (Python's own encoder) on generated documents: nested dicts and lists, numpy
  scalars and arrays, non-finite floats, booleans, unicode, astropy Times.  The same value once parsed,
  strict JSON (no NaN or Infinity), ASCII (other characters escaped) and the same layout (one line per
  value, two-space indents); numbers may be spelled differently (1e+16 or 1e16).
* :func:`kncast.planner.output.iso_utc` against astropy's ``Time.strftime`` at random instants,
  near second boundaries and in a leap second.
"""
from __future__ import annotations

import json

import numpy as np
from astropy.time import Time
from hypothesis import given, settings
from hypothesis import strategies as st

from kncast.planner.output import iso_utc, json_text, to_jsonable

scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-10**12, 10**12), st.text(max_size=8),
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(-1e6, 1e6).map(np.float64), st.integers(-1000, 1000).map(np.int64), st.booleans().map(np.bool_),
    st.lists(st.floats(-1e3, 1e3), max_size=4).map(np.array),
    st.floats(50000.0, 70000.0).map(lambda m: Time(m, format="mjd", scale="utc")),
)
documents = st.recursive(scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.lists(inner, max_size=3).map(tuple),
    st.dictionaries(st.one_of(st.text(max_size=6), st.integers(0, 9)), inner, max_size=4)), max_leaves=30)


def _reference(doc) -> str:
    return json.dumps(to_jsonable(doc), indent=2, allow_nan=False)  # Python's json module


@settings(max_examples=300, deadline=None)
@given(documents)
def test_json_text_is_the_standard_librarys_document(doc):
    _same_document(json_text(doc), _reference(doc))


def _same_document(ours: str, reference: str) -> None:
    assert ours.isascii()  # as the standard library writes it: no particular encoding needed to store it
    assert json.loads(ours, parse_constant=_no_constant) == json.loads(reference)
    indents = lambda text: [len(line) - len(line.lstrip(" ")) for line in text.splitlines()]  # noqa: E731
    assert indents(ours) == indents(reference)


def _no_constant(name):
    raise AssertionError(f"{name} in strict JSON")


def test_json_text_of_a_plan_like_document():
    doc = {"kind": "plan", "nights": [{"epoch": None, "setups": [], "x": np.float64(0.1), "ok": np.bool_(True),
                                        "t": Time("2027-03-14T02:17:00", scale="utc"), "a": np.arange(3),
                                        "nan": float("nan"), "é": "Sr II λ10039", "empty": {}}],
           1: "one", "1": "the later equal key wins", 2.5: [np.float32(0.1)]}
    _same_document(json_text(doc), _reference(doc))  # keys that are not text: the standard library's path
    del doc[1], doc[2.5]
    _same_document(json_text(doc), _reference(doc))
    assert json.loads(json_text(doc))["nights"][0]["t"] == "2027-03-14T02:17:00Z"


def test_iso_utc_is_astropys_strftime():
    rng = np.random.default_rng(3)
    mjd = np.concatenate([rng.uniform(41000.0, 70000.0, 400),
                          61478.0 + (np.array([-0.5, 0.4, 0.9, 0.9994, 0.99999]) / 86400.0)])  # near a second
    times = [Time(m, format="mjd", scale="utc") for m in mjd]
    times += [Time("2016-12-31T23:59:60.5", scale="utc"), Time("2027-03-14T02:16:59.9996", scale="utc"),
              Time(2461478.5, format="jd", scale="tt")]  # a leap second, rounding up to the next minute, TT input
    for t in times:
        assert iso_utc(t) == t.utc.strftime("%Y-%m-%dT%H:%M:%SZ")
    assert iso_utc(None) is None
