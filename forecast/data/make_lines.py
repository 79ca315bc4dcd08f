"""Regenerate the vacuum wavelength column of ``lines.ecsv`` from the published values.

A plain script, not imported by kncast.  Each row of ``lines.ecsv`` keeps the
wavelength exactly as published (``published_A``) and says whether that value
is an air or a vacuum wavelength (``published_medium``: air | vacuum |
unconfirmed).  This script recomputes ``wavelength_A`` (vacuum, the column
kncast uses) with the IAU standard air-to-vacuum conversion (Morton 2000,
ApJS 130, 403; ``kncast.forecast.airvac.air_to_vac``), rounded to 0.001 A; vacuum
and unconfirmed values are copied unchanged.  It sets the ``lte`` flag of every
row from the rule ``kncast.forecast.linelist.lte_applies`` (lower level at most
``NON_LTE_E_LOW_EV`` = 5 eV above the ground: LTE estimate; higher: non-LTE, no
estimate), and rewrites the column descriptions and the file's provenance notes.

    python forecast/data/make_lines.py [path/to/lines.ecsv]
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from astropy.table import Table

from kncast.forecast.airvac import air_to_vac
from kncast.forecast.linelist import NON_LTE_E_LOW_EV, lte_applies

HERE = Path(__file__).resolve().parent

DESCRIPTIONS = {
    "feature": "blend id: rows with the same id form one forecast feature",
    "species": "spectrum, e.g. 'Sr II' (brackets for forbidden lines)",
    "element": "element symbol",
    "ion_stage": "1 = neutral, 2 = singly ionized, 3 = doubly ionized, 4 = triply ionized",
    "wavelength_A": "vacuum rest wavelength, A (computed by make_lines.py from published_A)",
    "published_A": "rest wavelength exactly as published, A",
    "published_medium": "air | vacuum | unconfirmed (unconfirmed is used as vacuum)",
    "E_low_eV": "excitation energy of the lower level, eV",
    "log_gf": "log10 of g_low * f (nan when the source gives an A-value instead, or nothing)",
    "A_ul_s": "Einstein A of the transition, s^-1 (nan unless that is what the source gives)",
    "g_low": "statistical weight of the lower level (0 = not needed/not given)",
    "g_up": "statistical weight of the upper level (0 = not needed/not given)",
    "multiplet": "transition array label (configurations and terms; from memory, descriptive only)",
    "uncertain": "true when the wavelength or identification is not checked in a published source",
    "lte": f"false = non-LTE line, no LTE strength estimate (set by make_lines.py: E_low_eV > {NON_LTE_E_LOW_EV:g})",
    "confidence": "checked | memory (see REFERENCES notes in the README section Spectral features)",
    "source": "where the wavelength and strength come from",
    "note": "remarks",
}

COMMENTS = [
    "kncast diagnostic line list (our own schema; documented in the README section Spectral features).",
    "Wavelengths: all published optical/near-IR values quoted in air (published_medium = air) were",
    "converted to vacuum with the IAU standard (Morton 2000, ApJS 130, 403) by make_lines.py.",
    "The He I 10830 components and the Cs I D lines were published in vacuum; [Te III] 2.105 micron",
    "is quoted without a stated medium and is flagged uncertain.",
    "Lanthanide lines (e.g. Ce III near 1.6 micron) are left out: no individual wavelength could be",
    "checked in a published source.",
    "Never edit wavelength_A by hand: edit published_A / published_medium and rerun make_lines.py.",
    f"lte = false marks lines from levels more than {NON_LTE_E_LOW_EV:g} eV above the ground (He I 10830, 19.8 eV):",
    "LTE does not apply there, so kncast reports 'non-LTE: no LTE estimate' instead of a Sobolev tau.",
]


def regenerate(path: Path) -> Table:
    table = Table.read(path, format="ascii.ecsv")
    published = np.asarray(table["published_A"], dtype=float)
    air = np.asarray(table["published_medium"]) == "air"
    vacuum = np.where(air, air_to_vac(published), published)
    table["wavelength_A"] = np.round(vacuum, 3)
    flag = lte_applies(table["E_low_eV"])
    if "lte" in table.colnames:
        table["lte"] = flag
    else:
        table.add_column(flag, name="lte", index=table.colnames.index("uncertain") + 1)
    for name, text in DESCRIPTIONS.items():
        table[name].description = text
    table["wavelength_A"].unit = table["published_A"].unit = "Angstrom"
    table["E_low_eV"].unit = "eV"
    table["A_ul_s"].unit = "1 / s"
    table.meta = {"comments": COMMENTS}
    table.write(path, format="ascii.ecsv", overwrite=True)
    return table


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE / "lines.ecsv"
    out = regenerate(target)
    print(f"{target}: {len(out)} lines, {int((out['published_medium'] == 'air').sum())} converted from air")
