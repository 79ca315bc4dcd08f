"""Choose the bundled line list by a stated rule, and write it with the composition it was chosen for.

A plain script, not imported by kncast::

    python forecast/data/make_lines.py

Inputs, in ``forecast/data/candidates/`` (read by this script only, not installed with kncast):

``line_candidates.ecsv``
    every line whose wavelength and strength we could take from a published source (schema:
    docs/formats.md, "Line list"), each row with its source; wavelengths exactly as published
    (``published_A``, ``published_medium`` air | vacuum | unconfirmed).  Never invent a row: a line
    whose data cannot be sourced is left out.
``solar_r_pattern.toml``
    the solar-system r-process abundance pattern (N_r = N_sun f_r, with its sources).
``high_ye_light.toml``
    the light elements (not r-process) made in the high-electron-fraction part of merger ejecta,
    each with its mass fraction of the ejecta and its source (Ca: co-produced with Sr at high
    electron fraction, Domoto, Tanaka, Wanajo & Kawaguchi 2021, ApJ 913, 26).

Step 1 (:func:`regenerate`) recomputes the candidates' vacuum column ``wavelength_A`` from the
published values with the IAU air-to-vacuum conversion (Morton 2000, ApJS 130, 403;
``kncast.forecast.airvac.air_to_vac``), rounded to 0.001 A (vacuum and unconfirmed values are
copied), and the ``lte`` flag from ``kncast.forecast.linelist.lte_applies`` (lower level at most
``NON_LTE_E_LOW_EV`` = 5 eV above the ground).

Step 2 (:func:`select`), the rule (docs/methods.md, "Line selection"): a candidate feature (rows
sharing a ``feature`` id) is shipped when

1. LTE gives it a strength: every member is an LTE line (``lte``) with a published g f;
2. its element is in the ejecta composition: the r-process pattern, or one of the light elements
   of high-electron-fraction ejecta (``high_ye_light.toml``);
3. its rest vacuum wavelengths lie in ``LINE_RULE_WAVELENGTH_A`` (3000-25000 A);
4. its strongest member reaches a Sobolev optical depth ``STRONG_TAU`` (1) at some photospheric
   temperature in ``LINE_RULE_TEMPERATURE_K`` (2500-6000 K) along the default power-law
   photosphere (its age, line-forming velocity, outer velocity and ejecta mass at that
   temperature), for the composition (the light elements at their mass fractions, the pattern
   elements that have candidate lines with a strength in the pattern's proportions making up the
   rest; all of them the electron donors) and the density profile below, with kncast's own
   Saha-Boltzmann and partition functions (``kncast.forecast.lte``).  For a light element the
   decision also states the smallest mass fraction at which the feature would still be kept.

Step 3 writes ``lines.ecsv`` (the shipped features, candidate rows unchanged, the rule and every
decision in its comments) and ``abundances.toml`` (the mass fractions of the elements that have a
shipped feature, as in step 2, and the density profile).  Elements without a shipped feature are not
in either file.
"""
from __future__ import annotations

import sys
import tempfile
import tomllib
from pathlib import Path

import numpy as np
from astropy.table import Table

from kncast.forecast.airvac import air_to_vac
from kncast.forecast.defaults import LINE_RULE_TEMPERATURE_K, LINE_RULE_WAVELENGTH_A, STRONG_TAU
from kncast.forecast.linelist import NON_LTE_E_LOW_EV, LineList, lte_applies

HERE = Path(__file__).resolve().parent
CANDIDATES = HERE / "candidates" / "line_candidates.ecsv"
PATTERN = HERE / "candidates" / "solar_r_pattern.toml"
LIGHT = HERE / "candidates" / "high_ye_light.toml"
ATOMS = HERE / "atoms.toml"
LINES_OUT = HERE / "lines.ecsv"
ABUNDANCES_OUT = HERE / "abundances.toml"

# Ejecta density profile of the rule and of the shipped composition (forecast/lte.py):
# rho ~ v^-3 from 0.05 c to the outer edge, flat inside, as in the kilonova spectral models of
# Domoto, Tanaka, Wanajo & Kawaguchi 2021 (ApJ 913, 26; from memory: rho ~ r^-3 from 0.05 c outwards).
DENSITY_INDEX = 3.0
INNER_VELOCITY_C = 0.05
RULE_POINTS = 36            # temperatures sampled, log-spaced over LINE_RULE_TEMPERATURE_K

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
    "confidence": "checked | memory (see docs/formats.md, Line list)",
    "source": "where the wavelength and strength come from",
    "note": "remarks",
}

CANDIDATE_COMMENTS = [
    "kncast line candidates: every line with a published wavelength and strength, each with its source",
    "(schema: docs/formats.md, Line list).  forecast/data/make_lines.py chooses the shipped list",
    "(forecast/data/lines.ecsv) from these rows by the rule in docs/methods.md, Line selection.",
    "Wavelengths: published air values were converted to vacuum with the IAU standard (Morton 2000,",
    "ApJS 130, 403) by make_lines.py; the He I 10830 components and the Cs I D lines were published in",
    "vacuum; [Te III] 2.105 micron is quoted without a stated medium and is flagged uncertain.",
    "Lanthanide lines (e.g. Ce III near 1.6 micron) are not candidates: no individual wavelength or",
    "oscillator strength could be checked in a published source.",
    "Never edit wavelength_A by hand: edit published_A / published_medium and rerun make_lines.py.",
    f"lte = false marks lines from levels more than {NON_LTE_E_LOW_EV:g} eV above the ground (He I 10830, 19.8 eV).",
]


def regenerate(path: Path) -> Table:
    """Recompute ``wavelength_A`` and ``lte`` of a line table in place (docstring, step 1); returns it."""
    table = Table.read(path, format="ascii.ecsv")
    published = np.asarray(table["published_A"], dtype=float)
    air = np.asarray(table["published_medium"]) == "air"
    table["wavelength_A"] = np.round(np.where(air, air_to_vac(published), published), 3)
    flag = lte_applies(table["E_low_eV"])
    if "lte" in table.colnames:
        table["lte"] = flag
    else:
        table.add_column(flag, name="lte", index=table.colnames.index("uncertain") + 1)
    _describe(table)
    if path.resolve() == CANDIDATES.resolve():
        table.meta = {"comments": CANDIDATE_COMMENTS}
    table.write(path, format="ascii.ecsv", overwrite=True)
    return table


def _describe(table: Table) -> None:
    for name, text in DESCRIPTIONS.items():
        table[name].description = text
    table["wavelength_A"].unit = table["published_A"].unit = "Angstrom"
    table["E_low_eV"].unit = "eV"
    table["A_ul_s"].unit = "1 / s"


def light_mass_fractions(light_path: Path = LIGHT) -> dict:
    """Element -> mass fraction of the ejecta for the light elements of high-electron-fraction ejecta."""
    light = tomllib.loads(light_path.read_text())["light"]["element"]
    return {el: float(row["mass_fraction"]) for el, row in light.items()}


def pattern_mass_fractions(elements, pattern_path: Path = PATTERN, atoms_path: Path = ATOMS,
                           light_path: Path = LIGHT) -> dict:
    """Mass fractions of ``elements``: the light ones at their own mass fractions, the r-process ones in the
    pattern's proportions (N_sun f_r times the atomic mass) sharing the rest, so that they sum to 1."""
    pattern = tomllib.loads(pattern_path.read_text())["pattern"]["element"]
    atoms = tomllib.loads(atoms_path.read_text())["element"]
    light = {el: x for el, x in light_mass_fractions(light_path).items() if el in elements}
    mass = {el: pattern[el]["n_sun"] * pattern[el]["r_fraction"] * atoms[el]["mass_u"]
            for el in elements if el not in light}
    total = sum(mass.values())
    rest = 1.0 - sum(light.values())
    return {el: light[el] if el in light else mass[el] / total * rest for el in elements}


def rule_photosphere():
    """(temperature_K, age_d, v_line_c, v_max_c, mass_msun) along the default power law over the rule's range."""
    from kncast.forecast.photosphere import PowerLawPhotosphere

    model = PowerLawPhotosphere()
    low, high = LINE_RULE_TEMPERATURE_K
    temp = np.geomspace(high, low, RULE_POINTS)
    # invert T = T_ref (t / t_ref)^-alpha (the floor is the lower end of the range)
    age = model.t_ref_d * (model.temperature_ref_K / temp) ** (1.0 / model.temperature_index)
    v_line = model.line_velocities(age)[0]
    return temp, age, v_line, np.full(temp.shape, model.v_max_c), model.mass_msun


def _abundance_text(fractions: dict, source: str) -> str:
    rows = "".join(f"{el} = {x:.4g}\n" for el, x in fractions.items())
    return f'''# Ejecta composition for kncast's LTE line-strength estimate (forecast/lte.py).
#
# WRITTEN BY forecast/data/make_lines.py: do not edit by hand.  To use your own, copy this file,
# change the numbers and give it to `kncast lines` (docs/commands/lines.md, option abundances).
#
# The elements are those of the bundled line list (the line-selection rule, docs/methods.md,
# section "Line selection"): the light elements of high-electron-fraction ejecta at their mass
# fractions (forecast/data/candidates/high_ye_light.toml; Ca), the r-process elements sharing the
# rest in the proportions of the solar-system r-process pattern (N_r = N_sun f_r times the atomic
# mass; forecast/data/candidates/solar_r_pattern.toml).  They stand for the whole ejecta: they are
# its only electron donors and carry all its mass.  In a full r-process mixture the r-process
# elements listed are a minority, so their line strengths are upper estimates.  Mass fractions are
# relative and renormalized to sum to 1.  Every element named in the line list needs an entry here
# and in atoms.toml.

[abundances]
description = "light elements of high-electron-fraction ejecta plus the solar-system r-process pattern, for the line-list elements"
source = "{source}"

[abundances.mass_fraction]
{rows}
[ejecta]
# Density profile (homologous): rho(v, t) = A v^-n / t^3 between inner_velocity_c and the model's
# v_max, flat (rho = A v_in^-n / t^3) inside inner_velocity_c; it holds the model's ejecta mass and
# is evaluated at the photosphere.  n = 3 from 0.05 c outwards as in the kilonova spectral models of
# Domoto, Tanaka, Wanajo & Kawaguchi 2021 (ApJ 913, 26; from memory).
density_index = {DENSITY_INDEX!r}
inner_velocity_c = {INNER_VELOCITY_C!r}
'''


def _feature_rows(table: Table) -> dict:
    out: dict = {}
    for i, fid in enumerate(table["feature"]):
        out.setdefault(str(fid), []).append(i)
    return out


def select(table: Table, pattern_path: Path = PATTERN, light_path: Path = LIGHT) -> tuple[list[str], list[str]]:
    """(shipped feature ids in file order, one line per candidate feature saying why) -- the rule."""
    from kncast.forecast.lte import Composition, line_optical_depths, lte_state

    pattern = set(tomllib.loads(pattern_path.read_text())["pattern"]["element"])
    light = light_mass_fractions(light_path)
    lo_a, hi_a = LINE_RULE_WAVELENGTH_A
    element = np.asarray(table["element"]).astype(str)
    gf_known = np.isfinite(np.asarray(table["log_gf"], dtype=float))
    lte = np.asarray(table["lte"], dtype=bool)
    lam = np.asarray(table["wavelength_A"], dtype=float)
    features = _feature_rows(table)
    reasons, ranked = {}, []
    for fid, rows in features.items():
        el = element[rows[0]]
        if not lte[rows].all():
            reasons[fid] = f"left out {fid}: non-LTE line, no LTE strength"
        elif not gf_known[rows].all():
            reasons[fid] = f"left out {fid}: no published g f (forbidden line, or none in our sources)"
        elif el not in pattern and el not in light:
            reasons[fid] = (f"left out {fid}: {el} is in neither the r-process pattern nor the light "
                            "elements of high-electron-fraction ejecta")
        elif not ((lam[rows] >= lo_a) & (lam[rows] <= hi_a)).all():
            reasons[fid] = f"left out {fid}: outside {lo_a:g}-{hi_a:g} A"
        else:
            ranked.append(fid)
    donors = sorted({element[features[f][0]] for f in ranked}, key=list(dict.fromkeys(element)).index)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "pattern.toml"
        fractions = pattern_mass_fractions(donors, pattern_path, light_path=light_path)
        path.write_text(_abundance_text(fractions, "rule"))
        comp = Composition.load(path)
    temp, age, v_line, v_max, mass = rule_photosphere()
    state = lte_state(temp, age, v_line, v_max, mass, comp)
    idx = [i for f in ranked for i in features[f]]
    tau = line_optical_depths(state, element[idx], np.asarray(table["ion_stage"])[idx],
                              10.0 ** np.asarray(table["log_gf"], dtype=float)[idx], lam[idx],
                              np.asarray(table["E_low_eV"], dtype=float)[idx])
    shipped, k = [], 0
    for fid in ranked:
        n = len(features[fid])
        best = tau[:, k:k + n].max(axis=1)
        k += n
        at = int(np.argmax(best))
        verdict = "kept" if best[at] >= STRONG_TAU else "left out"
        reasons[fid] = f"{verdict} {fid}: max tau {best[at]:.2g} at {temp[at]:.0f} K"
        el = element[features[fid][0]]
        if el in light:     # a minority element: tau scales with its mass fraction
            reasons[fid] += (f" ({el} mass fraction {fractions[el]:.2g}; kept down to about "
                             f"{fractions[el] * STRONG_TAU / best[at]:.1g})")
        if best[at] >= STRONG_TAU:
            shipped.append(fid)
    return shipped, [reasons[f] for f in features]


def _lines_comments(decisions) -> list[str]:
    low, high = LINE_RULE_TEMPERATURE_K
    lo_a, hi_a = LINE_RULE_WAVELENGTH_A
    return [
        "kncast diagnostic line list (schema: docs/formats.md, Line list), WRITTEN BY forecast/data/make_lines.py",
        "from forecast/data/candidates/line_candidates.ecsv: rows are candidate rows, unchanged.",
        "Rule (docs/methods.md, Line selection): features of the ejecta's elements (the solar-system",
        "r-process pattern, candidates/solar_r_pattern.toml, plus the light elements of high-electron-",
        "fraction ejecta, candidates/high_ye_light.toml: Ca) with an LTE strength (permitted lines,",
        f"published g f) at {lo_a:g}-{hi_a:g} A rest whose strongest member reaches Sobolev tau >= {STRONG_TAU:g}",
        f"at some temperature in {low:g}-{high:g} K along the default power-law photosphere, for that",
        "composition.  Decisions:",
        *decisions,
        "Wavelengths are vacuum (IAU conversion of the published air values, Morton 2000, ApJS 130, 403).",
    ]


def main() -> int:
    candidates = regenerate(CANDIDATES)
    LineList.load(CANDIDATES)                      # the candidates must pass kncast's own validation
    shipped, decisions = select(candidates)
    keep = np.isin(np.asarray(candidates["feature"]).astype(str), shipped)
    out = candidates[keep]
    _describe(out)
    out.meta = {"comments": _lines_comments(decisions)}
    out.write(LINES_OUT, format="ascii.ecsv", overwrite=True)
    elements = list(dict.fromkeys(np.asarray(out["element"]).astype(str)))
    pattern = tomllib.loads(PATTERN.read_text())["pattern"]
    light = tomllib.loads(LIGHT.read_text())["light"]
    source = pattern["source"]
    if set(elements) & set(light["element"]):
        source = f"{light['source']}; r-process elements: {source}"
    ABUNDANCES_OUT.write_text(_abundance_text(pattern_mass_fractions(elements), source))
    LineList.load(LINES_OUT)
    print(f"{LINES_OUT}: {len(out)} lines in {len(shipped)} features of {', '.join(elements)}")
    print("\n".join(decisions))
    return 0


if __name__ == "__main__":
    sys.exit(main())
