"""The bundled telescopes and spectrographs are invented examples of our own.

Each bundled instrument has a layout of its own (no two share their arms' ranges, and no two multi-arm
instruments split their coverage at the same wavelengths): an example is never a copy of another one,
and a layout copied from elsewhere would show up as a twin.  Setups of one instrument share its arms and
are compared with the other instruments' setups only.  Every site file that carries telescopes says in
its header that they are invented examples and points to the tutorial for describing one's own.
"""
from __future__ import annotations

import re
from collections import defaultdict
from pathlib import Path

import pytest

from kncast.planner.setups import all_setups
from kncast.planner.sites import SiteRegistry

ROOT = Path(__file__).resolve().parents[2]
SITE_FILES = sorted((ROOT / "sites").glob("*.toml"))
INVENTED = "invented examples"                       # the phrase every site file's header carries
TUTORIAL = "Plan your own event with your own telescope"   # README section a header points to


@pytest.fixture(scope="module")
def refs():
    return all_setups(SiteRegistry.load([]))


def _instrument(ref):
    return (ref.site.id, ref.telescope.id, ref.instrument.id)


def _layout(arms):
    """Arm ranges (vacuum A), in wavelength order."""
    return tuple(sorted((float(a.min_A), float(a.max_A)) for a in arms))


def _split_points(arms):
    """Wavelengths (A) where one arm hands over to the next: the midpoint of each arm boundary."""
    ranges = _layout(arms)
    return tuple(round(0.5 * (hi + lo)) for (_, hi), (lo, _) in zip(ranges, ranges[1:]))


def test_no_two_instruments_share_a_layout(refs):
    owners = defaultdict(set)
    for r in refs:
        owners[_layout(r.setup.arms)].add(_instrument(r))
    twins = {layout: sorted(who) for layout, who in owners.items() if len(who) > 1}
    assert not twins, twins


def test_no_two_multi_arm_instruments_split_at_the_same_wavelengths(refs):
    owners = defaultdict(set)
    for r in refs:
        if r.setup.is_default and len(r.setup.arms) > 1:
            owners[_split_points(r.setup.arms)].add(_instrument(r))
    assert owners, "a broad-coverage multi-arm example is bundled"
    twins = {splits: sorted(who) for splits, who in owners.items() if len(who) > 1}
    assert not twins, twins


def test_example_apertures_are_whole_metres(refs):
    # round example values of our own (issue 12): no example takes a real telescope's odd diameter
    for r in refs:
        assert float(r.telescope.aperture_m).is_integer(), (r.id, r.telescope.aperture_m)


def _header(text: str) -> str:
    """The comment lines above the [site] table, joined into one string."""
    lines = text.split("[site]", 1)[0].splitlines()
    return " ".join(line.lstrip("# ").strip() for line in lines if line.startswith("#"))


@pytest.mark.parametrize("path", SITE_FILES, ids=[p.stem for p in SITE_FILES])
def test_site_file_header_declares_invented_examples(path):
    text = path.read_text(encoding="utf-8")
    header = _header(text)
    assert TUTORIAL in header and "README.md" in header, path.name
    if re.search(r"^\[\[telescope\]\]", text, flags=re.M):
        assert INVENTED in header, path.name


def test_the_tutorial_the_headers_point_to_exists():
    headings = [line for line in (ROOT / "README.md").read_text(encoding="utf-8").splitlines()
                if line.startswith("## ")]
    assert any(TUTORIAL in h for h in headings)
