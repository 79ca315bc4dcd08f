"""Published sources of kncast's models, as data.

Each model module declares ``REFERENCES``, a tuple of :class:`Citation` taken
from what its docstring cites (the docstring stays the readable account; the
tuple is what a report collects).  Every work is defined once here, so two
modules citing the same paper hold the same record.

A citation is always complete: authors, year, journal (or series, or
database), volume and first page (or article number, or identifier).  Books
without a volume and page are cited in docstrings only.  ``note`` says what the
work is cited for and how the entry was checked: "from memory" marks a journal,
volume or page that could not be verified against the paper or a catalogue.
"""
from __future__ import annotations

import re
from dataclasses import dataclass


@dataclass(frozen=True)
class Citation:
    """One published work: ``Citation("Kasten & Young", 1989, "Applied Optics", "28", "4735")``."""

    authors: str
    year: int
    journal: str
    volume: str
    page: str
    note: str = ""

    @property
    def text(self) -> str:
        """'Authors (Year), Journal Volume, Page'."""
        return f"{self.authors} ({self.year}), {self.journal} {self.volume}, {self.page}"

    @property
    def work(self) -> tuple:
        """Identity of the work: first author, year, volume, page (case and punctuation ignored)."""
        first = self.authors.split()[0] if self.authors.split() else ""
        return tuple(re.sub(r"[^a-z0-9]", "", str(x).lower()) for x in (first, self.year, self.volume, self.page))

    def __str__(self) -> str:
        return self.text


# ---------------------------------------------------------------------- sky geometry and time
ASTROPY_2022 = Citation("Astropy Collaboration", 2022, "ApJ", "935", "167",
                        "first author Price-Whelan; apparent Sun, Moon and target positions, sidereal time "
                        "(checked: astropy.__citation__)")
WALLACE_CAPITAINE_2006 = Citation("Wallace & Capitaine", 2006, "A&A", "459", "981",
                                  "IAU 2006/2000A Greenwich apparent sidereal time (checked: ERFA gst06a docs)")
CAPITAINE_WALLACE_2006 = Citation("Capitaine & Wallace", 2006, "A&A", "450", "855",
                                  "IAU 2006/2000A precession-nutation matrix (checked: ERFA pnm06a docs)")
KASTEN_YOUNG_1989 = Citation("Kasten & Young", 1989, "Applied Optics", "28", "4735",
                             "eq. (3), relative optical airmass")
GORSKI_2005 = Citation("Gorski et al.", 2005, "ApJ", "622", "759", "HEALPix pixelization and FITS conventions")
SINGER_2016 = Citation("Singer et al.", 2016, "ApJL", "829", "L15", "per-pixel distance ansatz of sky maps")

# ---------------------------------------------------------------------- photosphere and source
KOROBKIN_2012 = Citation("Korobkin et al.", 2012, "MNRAS", "426", "1940", "eq. 4, r-process heating rate")
BARNES_2016 = Citation("Barnes et al.", 2016, "ApJ", "829", "110", "eq. 36 and Table 1, thermalization efficiency")
ARNETT_1982 = Citation("Arnett", 1982, "ApJ", "253", "785", "one-zone radiative diffusion")
METZGER_2010 = Citation("Metzger et al.", 2010, "MNRAS", "406", "2650",
                        "one-zone radioactive kilonova model family (r-process heating, diffusion, photosphere at "
                        "the ejecta velocity); from memory")
METZGER_2019 = Citation("Metzger", 2019, "Living Rev. Relativ.", "23", "1",
                        "review of kilonova models (published 2019, volume dated 2020); from memory")
TANAKA_2020 = Citation("Tanaka, Kato, Gaigalas & Kawaguchi", 2020, "MNRAS", "496", "1369",
                       "grey opacities of kilonova ejecta, ~1 cm^2/g for lanthanide-free matter (citation checked; "
                       "the opacity value from memory)")
DOMOTO_2021 = Citation("Domoto, Tanaka, Wanajo & Kawaguchi", 2021, "ApJ", "913", "26",
                       "ejecta density rho ~ v^-3 between 0.05 c and the outer edge; from memory")
WAXMAN_2018 = Citation("Waxman, Ofek, Kushnir & Gal-Yam", 2018, "MNRAS", "481", "3423",
                       "kilonova bolometric light curve near the thermalized radioactive deposition; "
                       "authors checked (arXiv listing), journal volume and page from memory")
PLANCK_2018 = Citation("Planck Collaboration", 2020, "A&A", "641", "A6",
                       "Paper VI, first author Aghanim; the 'Planck 2018' cosmology, astropy Planck18 "
                       "(checked: Planck18.meta['reference'])")
FITZPATRICK_1999 = Citation("Fitzpatrick", 1999, "PASP", "111", "63",
                            "R_V-dependent extinction curve (checked: dust_extinction F99 docs)")
FITZPATRICK_MASSA_2009 = Citation("Fitzpatrick & Massa", 2009, "ApJ", "699", "1209",
                                  "near-IR power law of diffuse-ISM extinction; from memory")
OKE_GUNN_1983 = Citation("Oke & Gunn", 1983, "ApJ", "266", "713", "AB magnitudes, 3631 Jy zero point")
BESSELL_CASTELLI_PLEZ_1998 = Citation("Bessell, Castelli & Plez", 1998, "A&A", "333", "231",
                                      "Table A2, Vega zero points UBVRI")
COHEN_WHEATON_MEGEATH_2003 = Citation("Cohen, Wheaton & Megeath", 2003, "AJ", "126", "1090",
                                      "Table 2, Vega zero points J H Ks")

# ---------------------------------------------------------------------- lines and line strengths
MORTON_2000 = Citation("Morton", 2000, "ApJS", "130", "403", "eq. 3, IAU standard air/vacuum conversion")
BIRCH_DOWNS_1994 = Citation("Birch & Downs", 1994, "Metrologia", "31", "315",
                            "updated Edlen formula for the refractive index of air; from memory")
EINSTEIN_1905 = Citation("Einstein", 1905, "Annalen der Physik", "17", "891",
                         "sect. 7, relativistic Doppler factor; from memory")
SAHA_1920 = Citation("Saha", 1920, "Philosophical Magazine", "40", "472", "the ionization equation; from memory")
SOBOLEV_1957 = Citation("Sobolev", 1957, "Soviet Astronomy", "1", "678",
                        "Sobolev optical depth in a fast flow (his book Moving Envelopes of Stars, 1960, "
                        "is the fuller account); from memory")
CASTOR_1970 = Citation("Castor", 1970, "MNRAS", "149", "111", "Sobolev optical depth in expanding envelopes")
JEFFERY_BRANCH_1990 = Citation("Jeffery & Branch", 1990, "Jerusalem Winter School for Theoretical Physics", "6",
                               "149", "in Supernovae, eds. Wheeler, Piran & Weinberg (World Scientific): Sobolev "
                               "optical depth in homologous flow; from memory")
HILBORN_1982 = Citation("Hilborn", 1982, "American Journal of Physics", "50", "982",
                        "Einstein A to oscillator strength; from memory")

# ---------------------------------------------------------------------- atomic data of the line list
NIST_ASD = Citation("Kramida, Ralchenko, Reader & NIST ASD Team", 2024, "NIST Atomic Spectra Database",
                    "ver. 5.12", "doi:10.18434/T4W30F",
                    "a database; the version consulted for the line list is not recorded "
                    "(citation form checked against the database's own bibliographic line)")
SAFRONOVA_SAFRONOVA_2011 = Citation("Safronova & Safronova", 2011, "Phys. Rev. A", "83", "012503",
                                    "Ca II oscillator strengths (authors checked; volume and article from memory)")
GALLAGHER_1967 = Citation("Gallagher", 1967, "Phys. Rev.", "157", "24", "Ba II oscillator strengths; from memory")
BIEMONT_2011 = Citation("Biemont et al.", 2011, "MNRAS", "414", "3350",
                        "Y II lifetimes and oscillator strengths; from memory")
LJUNG_2006 = Citation("Ljung et al.", 2006, "A&A", "456", "1181", "Zr II oscillator strengths; from memory")
LUCY_1991 = Citation("Lucy", 1991, "ApJ", "383", "308",
                     "non-thermal excitation of He I in radioactive ejecta: why the He I 10830 lower level "
                     "(19.8 eV) gets no LTE estimate; from memory")
STECK_CS = Citation("Steck", 2010, "Cesium D Line Data", "rev. 2.1.4", "steck.us/alkalidata",
                    "Cs I D1/D2 wavelengths; online reference notes, not a journal article; the revision "
                    "used for the line list is not recorded")
ANDERS_GREVESSE_1989 = Citation("Anders & Grevesse", 1989, "Geochim. Cosmochim. Acta", "53", "197",
                                "solar-system (meteoritic) abundances, Si = 1e6; from memory")
SIMMERER_2004 = Citation("Simmerer et al.", 2004, "ApJ", "617", "1091",
                         "r-process fractions of the solar-system abundances; from memory")
HOTOKEZAKA_2023 = Citation("Hotokezaka et al.", 2023, "MNRAS", "526", "L155",
                           "[Te III] 2.1 micron identification (authors checked; volume and page from memory; "
                           "the line-list row names no paper)")

# ---------------------------------------------------------------------- atmosphere, sky and detector
HANSEN_TRAVIS_1974 = Citation("Hansen & Travis", 1974, "Space Sci. Rev.", "16", "527",
                              "eq. (2.30), Rayleigh optical depth")
BURROWS_1999 = Citation("Burrows et al.", 1999, "JQSRT", "61", "509",
                        "ozone absorption cross-sections; values recalled from memory")
BESSELL_1999 = Citation("Bessell", 1999, "PASP", "111", "1426", "Fig. 1, optical telluric band edges")
GORDON_2022 = Citation("Gordon et al.", 2022, "JQSRT", "277", "107949",
                       "HITRAN2020 line list: CO2 band origins near 2.01 and 2.06 micron (values from memory)")
TOKUNAGA_SIMONS_VACCA_2002 = Citation("Tokunaga, Simons & Vacca", 2002, "PASP", "114", "180",
                                      "near-IR window half-power edges")
BENN_ELLISON_1998 = Citation("Benn & Ellison", 1998, "New Astronomy Reviews", "42", "503",
                             "dark-sky brightness U-I; the docstring's values are those of their longer "
                             "La Palma Technical Note 115; from memory")
BLANTON_ROWEIS_2007 = Citation("Blanton & Roweis", 2007, "AJ", "133", "734", "AB - Vega offsets, U-I")
KRISCIUNAS_SCHAEFER_1991 = Citation("Krisciunas & Schaefer", 1991, "PASP", "103", "1033", "moonlight model")
MOFFAT_1969 = Citation("Moffat", 1969, "A&A", "3", "455", "Moffat point-spread function")
TRUJILLO_2001 = Citation("Trujillo et al.", 2001, "MNRAS", "328", "977", "Moffat beta 4.765 for Kolmogorov seeing")
MERLINE_HOWELL_1995 = Citation("Merline & Howell", 1995, "Experimental Astronomy", "6", "163",
                               "eq. (2), the CCD equation")
FILIPPENKO_1982 = Citation("Filippenko", 1982, "PASP", "94", "715",
                           "eqs. 1-3, refractive index of moist air; differential refraction 206265 [n(lambda) - "
                           "n(ref)] tan z and its Table 1 (table values checked against a public reproduction)")
EDLEN_1953 = Citation("Edlen", 1953, "J. Opt. Soc. Am.", "43", "339",
                      "dispersion of standard air, the coefficients of Filippenko's eq. 1; from memory")


def unique(citations) -> tuple[Citation, ...]:
    """Each work once, in first-seen order, keeping its fullest record (longest text, then note)."""
    best: dict[tuple, Citation] = {}
    for c in citations:
        kept = best.get(c.work)
        if kept is None or (len(c.text), len(c.note)) > (len(kept.text), len(kept.note)):
            best[c.work] = c
    return tuple(best.values())


__all__ = ["Citation", "unique"]
