"""Text from files (ids, names, paths) in figure titles and legends, shown as written; readers' names.

Matplotlib reads a pair of ``$`` as mathtext; a ``$`` from a file is escaped so that an id such as
``kn$1$`` is drawn as written instead of being typeset (or failing to parse).
"""
from __future__ import annotations

# speclite filter group -> the name a reader knows the system by
FILTER_SYSTEMS = {"bessell": "Bessell", "twomass": "2MASS", "sdss2010": "SDSS", "decam2014": "DECam",
                  "lsst2016": "LSST", "lsst2023": "LSST", "hsc2017": "HSC", "wise2010": "WISE",
                  "gaiadr2": "Gaia DR2", "gaiadr3": "Gaia DR3", "MASS": "2MASS"}


def plain(text) -> str:
    """``text`` with every ``$`` escaped for matplotlib (``\\$`` is drawn as a dollar sign)."""
    return str(text).replace("$", r"\$")


def band_name(speclite_name: str) -> str:
    """A reader's name for a speclite filter: 'bessell-R' -> 'R (Bessell)', 'twomass-Ks' -> 'Ks (2MASS)'."""
    group, _, band = str(speclite_name).partition("-")
    if not band:
        return plain(speclite_name)
    return plain(f"{band} ({FILTER_SYSTEMS.get(group, group)})")


def angstrom(text: str) -> str:
    """A feature name ending in ' A' (plain-text Angstrom) with the Angstrom sign instead."""
    return text[:-2] + " \u00c5" if text.endswith(" A") else text


__all__ = ["plain", "band_name", "angstrom", "FILTER_SYSTEMS"]
