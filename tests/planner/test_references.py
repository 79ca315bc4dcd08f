"""References as data: every record is citable, a plan cites exactly the models it used, each work once.

The citation records themselves (journal, volume, page) were checked where a catalogue was at hand
and are marked "from memory" in their note otherwise (see kncast.forecast.references); these tests
check completeness and the collection, not the bibliography.
"""
from __future__ import annotations

import importlib
import json
import pkgutil
import re
import tomllib
from pathlib import Path
from types import SimpleNamespace

import pytest

from kncast.forecast import references as catalogue
from kncast.forecast.references import Citation, unique

from conftest import ROOT as _ROOT  # noqa: E402

SOURCE_DATA = _ROOT / "forecast" / "data"  # the source tree's data folder (candidates are not installed)

ROOT = Path(__file__).resolve().parents[2]
SOUTH = ROOT / "demo_events" / "kn-demo-south.toml"
HEATING_WORKS = (catalogue.KOROBKIN_2012, catalogue.BARNES_2016, catalogue.ARNETT_1982)


def _modules():
    """Every module of the two installed packages, except the command layer (no physics there)."""
    import kncast.forecast
    import kncast.planner

    for pkg in (kncast.forecast, kncast.planner):
        for info in pkgutil.walk_packages(pkg.__path__, pkg.__name__ + "."):
            if not any(part in info.name for part in (".commands", ".data.", "__main__")):
                yield importlib.import_module(info.name)


def _declared() -> list[tuple[str, Citation]]:
    """(where, record) for every REFERENCES / VEGA_REFERENCES / SOURCE_REFERENCES entry and catalogue record."""
    out = []
    for mod in _modules():
        for name in ("REFERENCES", "VEGA_REFERENCES"):
            out += [(f"{mod.__name__}.{name}", c) for c in getattr(mod, name, ())]
        for src, cites in getattr(mod, "SOURCE_REFERENCES", {}).items():
            out += [(f"{mod.__name__}.SOURCE_REFERENCES[{src!r}]", c) for c in cites]
    out += [(f"references.{k}", v) for k, v in vars(catalogue).items() if isinstance(v, Citation)]
    return out


def _first_author_year(text: str) -> set[tuple[str, int]]:
    """('Bessell', 1999) for 'Bessell 1999 PASP ...', ('Tokunaga', 2002) for 'Tokunaga, Simons & Vacca 2002'."""
    pattern = r"\b([A-Z][a-z]+)(?:,? [A-Z][a-z]+)*(?: & [A-Z][a-z]+)?(?: et al\.)?,? \(?((?:18|19|20)\d\d)\b"
    return {(a, int(y)) for a, y in re.findall(pattern, text)}


def _key(c: Citation) -> tuple[str, int]:
    return c.authors.split()[0].rstrip(","), c.year


# ------------------------------------------------------------------ every record is citable
def test_every_declared_entry_is_a_complete_citation():
    declared = _declared()
    assert len(declared) > 40
    for where, c in declared:
        assert isinstance(c, Citation), where
        assert c.authors.strip() and c.journal.strip() and c.volume.strip() and c.page.strip(), where
        assert isinstance(c.year, int) and 1800 <= c.year <= 2030, where
        words = f"{c.authors} {c.journal}".lower()
        assert "literature" not in words and "recent" not in words, where  # a work, not a pointer to one
        assert c.text == f"{c.authors} ({c.year}), {c.journal} {c.volume}, {c.page}" == str(c), where


def test_the_physics_modules_declare_their_sources():
    from kncast.forecast import airmass, heating, lte, skybright, tellurics
    from kncast.planner.events import skymap
    from kncast.planner.visibility import sky

    assert catalogue.KASTEN_YOUNG_1989 in airmass.REFERENCES
    assert set(HEATING_WORKS) <= set(heating.REFERENCES)
    assert catalogue.SAHA_1920 in lte.REFERENCES and catalogue.SOBOLEV_1957 in lte.REFERENCES
    assert catalogue.KRISCIUNAS_SCHAEFER_1991 in skybright.REFERENCES
    assert catalogue.BESSELL_1999 in tellurics.REFERENCES
    assert catalogue.GORSKI_2005 in skymap.REFERENCES and catalogue.ASTROPY_2022 in sky.REFERENCES


def test_every_module_of_the_mapping_declares_references():
    from kncast.forecast.photosphere import MODEL_NAMES
    from kncast.planner.plan.citations import MODELS

    assert set(MODEL_NAMES) <= set(MODELS)  # every photosphere model has its entry
    for key, (label, modules) in MODELS.items():
        assert label, key
        for mod in modules:
            assert isinstance(mod.REFERENCES, tuple) and mod.REFERENCES, (key, mod.__name__)


# ------------------------------------------------------------------ data-file provenance
def test_every_line_list_source_has_a_citation():
    from kncast.forecast.linelist import SOURCE_REFERENCES, LineList

    # every candidate line's source has a citation record, and the records are exactly those the
    # candidates use; the bundled list (a selection of the candidates) cites a subset of them
    from kncast.forecast.linelist import DEFAULT_PATH

    candidates = LineList.load(SOURCE_DATA / "candidates" / "line_candidates.ecsv")
    for src in set(str(s) for s in candidates.source):
        assert SOURCE_REFERENCES.get(src), src
    assert set(candidates.references()) == {c for cites in SOURCE_REFERENCES.values() for c in cites}
    lines = LineList.load()
    assert lines.references() and set(lines.references()) <= set(candidates.references())


def test_works_named_in_the_data_files_are_declared():
    from astropy.table import Table

    from kncast.forecast import photometry, tellurics

    bands = Table.read(ROOT / "forecast" / "data" / "telluric_bands.ecsv", format="ascii.ecsv")
    named = set().union(*(_first_author_year(str(s)) for s in bands["source"]))
    assert named and named <= {_key(c) for c in tellurics.REFERENCES}, named
    vega = tomllib.loads((ROOT / "forecast" / "data" / "vega_zero_points.toml").read_text())
    named = set().union(*(_first_author_year(b["source"]) for b in vega["band"]))
    assert named and named <= {_key(c) for c in photometry.VEGA_REFERENCES}, named


# ------------------------------------------------------------------ collection
def test_each_work_once_with_its_fullest_record():
    short = Citation("Morton", 2000, "ApJS", "130", "403")
    full = Citation("Morton", 2000, "Astrophysical Journal Supplement Series", "130", "403", "eq. 3")
    other = Citation("Birch & Downs", 1994, "Metrologia", "31", "315")
    assert unique((short, other, full)) == (full, other)

    from kncast.planner.plan.citations import references

    rows = references(["air/vacuum", "tellurics"])  # Morton (2000) is cited by both modules
    morton = [r for r in rows if r["reference"] == catalogue.MORTON_2000.text]
    assert len(morton) == 1 and morton[0]["model"] == "Air/vacuum wavelengths"


def _plan(transient_name="powerlaw", ebv=0.0, tellurics=None):
    photosphere = SimpleNamespace(name=transient_name)
    return SimpleNamespace(transient=SimpleNamespace(photosphere=photosphere, ebv_mw=ebv, ebv_host=0.0),
                           tellurics=tellurics)


def test_models_used_follow_the_run():
    from kncast.planner.plan.citations import SPECTRUM_MODELS, models_used

    bare = models_used(_plan())
    assert "powerlaw" in bare and "heating" not in bare
    assert "dust" not in bare and "sky map" not in bare  # E(B-V) = 0: no dust law applied
    assert not set(SPECTRUM_MODELS) & set(bare)  # no night with a window: no features, no exposures
    full = models_used(_plan("heating", ebv=0.05, tellurics=object()), skymap_used=True)
    assert {"heating", "dust", "sky map"} <= set(full) and set(SPECTRUM_MODELS) <= set(full)


def test_the_sky_map_is_cited_only_when_read():
    from kncast.planner.plan.citations import references

    without = " ; ".join(r["reference"] for r in references(["sky geometry", "airmass"]))
    with_map = " ; ".join(r["reference"] for r in references(["sky geometry", "airmass", "sky map"]))
    for c in (catalogue.GORSKI_2005, catalogue.SINGER_2016):
        assert c.text not in without and c.text in with_map


# ------------------------------------------------------------------ whole plans on the demo event
@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """plan.json and report.md of the demo event with the power-law and the radioactive-heating photosphere."""
    from kncast.planner.cli import main

    out = {}
    for model in ("powerlaw", "heating"):
        folder = tmp_path_factory.mktemp("refs") / model
        args = ["plan", "--event", SOUTH, "--nights", "1", "--sites", "paranal", "--model", model, "--out", folder]
        assert main([str(a) for a in args]) == 0
        out[model] = (json.loads((folder / "plan.json").read_text()), (folder / "report.md").read_text())
    return out


def test_power_law_run_does_not_cite_the_heating_papers(runs):
    doc, md = runs["powerlaw"]
    assert doc["model"]["name"] == "powerlaw"
    refs = [r["reference"] for r in doc["references"]]
    for c in HEATING_WORKS:
        assert c.text not in refs and c.text not in md, c
    assert catalogue.KASTEN_YOUNG_1989.text in refs and catalogue.SOBOLEV_1957.text in refs


def test_heating_run_cites_the_heating_papers(runs):
    doc, md = runs["heating"]
    assert doc["model"]["name"] == "heating"
    rows = [r for r in doc["references"] if r["reference"] in {c.text for c in HEATING_WORKS}]
    assert len(rows) == 3 and {r["module"] for r in rows} == {"kncast.forecast.heating"}
    for c in HEATING_WORKS:
        assert f"Photosphere (radioactive heating): {c.text}" in md


@pytest.mark.parametrize("model", ["powerlaw", "heating"])
def test_plan_references_are_citable_and_unique(runs, model):
    doc, _ = runs[model]
    by_text = {c.text: c for _, c in _declared()}
    refs = [r["reference"] for r in doc["references"]]
    assert refs and set(refs) <= set(by_text)  # every row is one of the declared, complete records
    works = [by_text[r].work for r in refs]  # first author, year, volume, page
    assert len(works) == len(set(works))
    assert all(set(r) == {"model", "module", "reference"} for r in doc["references"])
    assert catalogue.FITZPATRICK_1999.text in refs  # the demo event has E(B-V) = 0.06
