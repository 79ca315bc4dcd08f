"""The diagnostic line list: loading, validation and grouping into blended features.

The bundled list is ``forecast/data/lines.ecsv`` (schema in docs/formats.md, section "Line list");
users may pass their own ECSV file with the same columns.  Wavelengths are
vacuum Angstrom.  Rows sharing a ``feature`` id are members of one blended
feature (a multiplet, or lines close enough to merge at kilonova velocities).
"""
from __future__ import annotations

import functools
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from kncast.forecast.errors import DataFileError
from kncast.forecast.references import (BIEMONT_2011, GALLAGHER_1967, HILBORN_1982, HOTOKEZAKA_2023, LJUNG_2006,
                                        LUCY_1991, NIST_ASD, SAFRONOVA_SAFRONOVA_2011, STECK_CS)

# Published sources cited below (gf from an Einstein A; the non-LTE rule), as data (records in
# kncast.forecast.references).
REFERENCES = (HILBORN_1982, LUCY_1991)
# The works behind each ``source`` string of the bundled list (forecast/data/lines.ecsv).  A user's
# list may name other sources: those are kept in its rows but have no citation record here.
SOURCE_REFERENCES = {
    "NIST ASD (via a published compilation)": (NIST_ASD,),
    "NIST ASD (secondary)": (NIST_ASD,),
    "Safronova et al. 2011": (SAFRONOVA_SAFRONOVA_2011,),
    "Gallagher 1967": (GALLAGHER_1967,),
    "Biemont et al. 2011": (BIEMONT_2011,),
    "Ljung et al. 2006": (LJUNG_2006,),
    "Steck, Cesium D line data": (STECK_CS,),
    "recent kilonova literature (secondary)": (HOTOKEZAKA_2023,),
}

__all__ = ["LineList", "Feature", "DEFAULT_PATH", "gf_from_einstein_a", "REFERENCES", "SOURCE_REFERENCES"]

DEFAULT_PATH = Path(__file__).resolve().parent / "data" / "lines.ecsv"

_ROMAN = {1: "I", 2: "II", 3: "III", 4: "IV"}
_MEDIA = ("air", "vacuum", "unconfirmed")
_CONFIDENCE = ("checked", "memory")
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.+-]*$")

#: Lines whose lower level lies above this excitation energy get no LTE estimate (``lte`` = false).
#: At kilonova photospheres after the first day (T <= 6000 K, kT <= 0.52 eV) such a level holds an
#: LTE population below exp(-5 / 0.52) = 7e-5 of its ion's ground level, so non-thermal channels
#: (fast electrons from radioactive decay, recombination) set it instead; the classic case is He I
#: from the 19.8 eV metastable 2s 3S level in radioactive ejecta (Lucy 1991, ApJ 383, 308; from
#: memory).  Every lower level of the bundled metal lines lies below 2 eV.
NON_LTE_E_LOW_EV = 5.0

# name: (kind, required)
_COLUMNS = {
    "feature": (str, True), "species": (str, True), "element": (str, True), "ion_stage": (int, True),
    "wavelength_A": (float, True), "E_low_eV": (float, True), "log_gf": (float, True),
    "source": (str, True), "published_A": (float, False), "published_medium": (str, False),
    "A_ul_s": (float, False), "g_low": (int, False), "g_up": (int, False), "multiplet": (str, False),
    "uncertain": (bool, False), "confidence": (str, False), "note": (str, False), "lte": (bool, False),
}


def lte_applies(E_low_eV) -> np.ndarray:
    """The rule behind the ``lte`` column: True where E_low <= :data:`NON_LTE_E_LOW_EV` (eV)."""
    return np.asarray(E_low_eV, dtype=float) <= NON_LTE_E_LOW_EV


def gf_from_einstein_a(a_ul_s, g_up, wavelength_A):
    """g_low * f_lu from the Einstein A (s^-1) of a line at vacuum ``wavelength_A``.

    g_l f_lu = g_u A_ul m_e c lambda^2 / (8 pi^2 e^2) in Gaussian units
    (e.g. Rybicki & Lightman 1979, Radiative Processes in Astrophysics, eq. 10.87; Hilborn 1982,
    American Journal of Physics 50, 982; from memory).
    """
    from astropy import constants as const

    lam_cm = np.asarray(wavelength_A, dtype=float) * 1e-8
    factor = const.m_e.cgs.value * const.c.cgs.value / (8 * np.pi**2 * const.e.gauss.value**2)
    return np.asarray(g_up, dtype=float) * np.asarray(a_ul_s, dtype=float) * factor * lam_cm**2


@dataclass(frozen=True)
class Feature:
    """One forecast feature: a single line or a blend of lines (indices into the line list)."""

    id: str
    species: str
    members: tuple[int, ...]
    rest_vac_A: tuple[float, ...]
    uncertain: bool
    lte: bool = True        # False: a member line is non-LTE (no LTE strength estimate)


class LineList:
    """Validated line list with column arrays (one entry per line).

    Attributes (numpy arrays of length n_lines): ``feature``, ``species``,
    ``element``, ``ion_stage``, ``wavelength_A`` (vacuum), ``E_low_eV``,
    ``gf`` (g_low * f; nan where unknown), ``uncertain``, ``source``, ``note``,
    ``lte`` (False: non-LTE line, no LTE estimate; from the file's ``lte`` column, else
    from :func:`lte_applies`).
    """

    def __init__(self, columns: dict, path):
        self.path = str(path)
        for name, values in columns.items():
            setattr(self, name, values)
        self.gf = columns["gf"]
        if "lte" not in columns:
            self.lte = lte_applies(columns["E_low_eV"])

    def __len__(self) -> int:
        return len(self.wavelength_A)

    def references(self) -> tuple:
        """Citation records of the sources named in this list's rows (:data:`SOURCE_REFERENCES`), each once."""
        cited = (c for src in dict.fromkeys(self.source) for c in SOURCE_REFERENCES.get(str(src), ()))
        return tuple(dict.fromkeys(cited))

    @classmethod
    def load(cls, path=None) -> "LineList":
        """Read and validate a line-list ECSV file (default: the bundled list).

        A file is read once per process while it is unchanged (same size and modification time): a plan
        asks for the bundled list in many places, each read costing ~25 ms.  The list returned is shared,
        its arrays read-only."""
        path = Path(path) if path is not None else DEFAULT_PATH
        try:
            stat = path.stat()
        except OSError:
            return cls._read(path)  # the reader names the missing file
        return _cached_list(cls, str(path), stat.st_size, stat.st_mtime_ns)

    @classmethod
    def _read(cls, path: Path) -> "LineList":
        table = _read_ecsv(path)
        cols = {}
        for name, (kind, required) in _COLUMNS.items():
            if name not in table.colnames:
                if required:
                    raise DataFileError(path, name, "required column missing",
                                        "columns " + ", ".join(n for n, (_, r) in _COLUMNS.items() if r))
                continue
            cols[name] = _column(table, name, kind, path)
        n = len(table)
        if n == 0:
            raise DataFileError(path, "", "no lines in the file")
        cols.setdefault("uncertain", np.zeros(n, bool))
        cols.setdefault("note", np.array([""] * n, dtype=object))
        cols.setdefault("lte", lte_applies(cols["E_low_eV"]))
        _check_rows(cols, path)
        cols["gf"] = _gf(cols, path)
        return cls(cols, path)

    @classmethod
    def merge(cls, lists) -> "LineList":
        """One list from several (e.g. the bundled list plus a user's file); feature ids must be unique."""
        lists = list(lists)
        if len(lists) == 1:
            return lists[0]
        seen: dict[str, str] = {}
        for ll in lists:
            for fid in dict.fromkeys(ll.feature):
                if fid in seen:
                    raise DataFileError(ll.path, "feature", f"id {fid!r} is already used by {seen[fid]}",
                                        "feature ids unique across line lists")
                seen[fid] = ll.path
        names = ("feature", "species", "element", "ion_stage", "wavelength_A", "E_low_eV", "log_gf", "gf",
                 "source", "uncertain", "note", "lte")
        cols = {n: np.concatenate([np.asarray(getattr(ll, n)) for ll in lists]) for n in names}
        for n in ("feature", "species", "element", "source", "note"):
            cols[n] = cols[n].astype(object)
        return cls(cols, " + ".join(ll.path for ll in lists))

    def features(self) -> list[Feature]:
        """Blended features in file order: rows sharing a ``feature`` id merge into one."""
        out, order = [], dict.fromkeys(self.feature)
        for fid in order:
            idx = tuple(int(i) for i in np.flatnonzero(self.feature == fid))
            species = " + ".join(dict.fromkeys(self.species[list(idx)]))
            out.append(Feature(fid, species, idx, tuple(float(self.wavelength_A[i]) for i in idx),
                               bool(np.any(self.uncertain[list(idx)])), bool(np.all(self.lte[list(idx)]))))
        return out


@functools.lru_cache(maxsize=8)
def _cached_list(cls, path: str, _size: int, _mtime_ns: int) -> LineList:
    lines = cls._read(Path(path))
    for value in vars(lines).values():
        if isinstance(value, np.ndarray):
            value.setflags(write=False)
    return lines


def _read_ecsv(path: Path):
    from kncast.forecast.datafiles import read_ecsv

    return read_ecsv(path, "an ECSV line list")


def _column(table, name, kind, path):
    col = table[name]
    mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else np.zeros(len(col), bool)
    values = np.asarray(col)
    if kind is float:
        try:
            arr = np.asarray(np.ma.filled(np.ma.asarray(col, dtype=float), np.nan), dtype=float)
        except (TypeError, ValueError):
            bad = next(i for i, v in enumerate(values) if not _is_number(v))
            raise DataFileError(path, f"{name} row {bad + 1}", f"expected a number, got {values[bad]!r}") from None
        return arr
    if kind is int:
        if values.dtype.kind not in "iu" or mask.any():
            bad = int(np.flatnonzero(mask)[0]) if mask.any() else 0
            raise DataFileError(path, f"{name} row {bad + 1}", f"expected a whole number, got {values[bad]!r}")
        return values.astype(int)
    if kind is bool:
        if values.dtype.kind != "b":
            raise DataFileError(path, f"{name} row 1", f"expected true/false (ECSV bool), got {values[0]!r}")
        return values.astype(bool)
    arr = np.array([("" if m else str(v)).strip() for v, m in zip(values, mask)], dtype=object)
    return arr


def _is_number(v) -> bool:
    try:
        float(v)
        return True
    except (TypeError, ValueError):
        return False


def _fail(path, name, i, problem, allowed=None):
    raise DataFileError(path, f"{name} row {i + 1}", problem, allowed)


def _check_rows(c, path) -> None:
    for i in range(len(c["wavelength_A"])):
        for name in ("feature", "species", "element", "source"):
            if not c[name][i]:
                _fail(path, name, i, "empty value", "a non-empty string")
        if not _ID.match(c["feature"][i]):
            _fail(path, "feature", i, f"id {c['feature'][i]!r} has spaces or odd characters",
                  "letters, digits and _ . + -")
        stage = c["ion_stage"][i]
        if not 1 <= stage <= 4:
            _fail(path, "ion_stage", i, f"value {stage} out of range", "1 (neutral) to 4")
        expected = f"{c['element'][i]} {_ROMAN[stage]}"
        if c["species"][i].strip("[]") != expected:
            _fail(path, "species", i, f"{c['species'][i]!r} does not match element {c['element'][i]!r} "
                  f"and ion_stage {stage}", f"{expected!r} or '[{expected}]'")
        lam = c["wavelength_A"][i]
        if not (np.isfinite(lam) and 900.0 <= lam <= 60000.0):
            _fail(path, "wavelength_A", i, f"value {lam:g} out of range", "[900, 60000] A (vacuum)")
        e = c["E_low_eV"][i]
        if not (np.isfinite(e) and 0.0 <= e <= 60.0):
            _fail(path, "E_low_eV", i, f"value {e:g} out of range", "[0, 60] eV")
        lg = c["log_gf"][i]
        if np.isfinite(lg) and not -10.0 <= lg <= 3.0:
            _fail(path, "log_gf", i, f"value {lg:g} out of range", "[-10, 3] or nan (unknown)")
        if "published_medium" in c and c["published_medium"][i] not in _MEDIA:
            _fail(path, "published_medium", i, f"value {c['published_medium'][i]!r} not recognised", " | ".join(_MEDIA))
        if "confidence" in c and c["confidence"][i] not in _CONFIDENCE:
            _fail(path, "confidence", i, f"value {c['confidence'][i]!r} not recognised", " | ".join(_CONFIDENCE))
        if "published_A" in c and "published_medium" in c:
            _check_published(c, path, i)
    for fid in dict.fromkeys(c["feature"]):
        idx = np.flatnonzero(c["feature"] == fid)
        if np.ptp(c["wavelength_A"][idx]) > 0.5 * c["wavelength_A"][idx].min():
            _fail(path, "feature", int(idx[0]), f"blend {fid!r} spans members too far apart to merge",
                  "members within a factor 1.5 in wavelength")


def _check_published(c, path, i) -> None:
    """``wavelength_A`` must agree with ``published_A`` after the air-to-vacuum step (to 0.002 A)."""
    from kncast.forecast.airvac import air_to_vac

    pub = c["published_A"][i]
    if not np.isfinite(pub):
        return
    vac = air_to_vac(pub) if c["published_medium"][i] == "air" else pub
    if abs(vac - c["wavelength_A"][i]) > 2e-3:
        _fail(path, "wavelength_A", i, f"{c['wavelength_A'][i]:.3f} does not match published_A {pub} "
              f"({c['published_medium'][i]}) = {vac:.3f} vacuum", "rerun forecast/data/make_lines.py")


def _gf(c, path) -> np.ndarray:
    """g f per line: from log_gf, else from an A-value with g_up; nan when neither is given."""
    gf = 10.0 ** c["log_gf"]
    if "A_ul_s" not in c:
        return gf
    from_a = np.isnan(gf) & np.isfinite(c["A_ul_s"])
    if from_a.any():
        g_up = c.get("g_up", np.zeros(len(gf), int))
        bad = from_a & ((g_up <= 0) | (c["A_ul_s"] <= 0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            _fail(path, "g_up", i, "an A-value needs a positive g_up and A_ul_s", "g_up >= 1, A_ul_s > 0")
        gf = np.where(from_a, gf_from_einstein_a(c["A_ul_s"], g_up, c["wavelength_A"]), gf)
    return gf
