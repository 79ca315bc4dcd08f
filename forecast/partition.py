"""Atomic partition functions U(T) of ions I-IV, from bundled level lists and a published table.

Each ion (element, stage) takes its U from the first source that has it:

1. **Level sums** over the lowest levels in ``data/levels.ecsv``
   (NIST Atomic Spectra Database energies, provenance per row; common practice):
   U(T) = sum_i g_i exp(-E_i / k T).  Used for the ions with few low-lying levels
   (He, Ca, Sr, Ba I-III, Cs II), whose lists stop where the omitted levels add under
   ~1 % at T <= 5000 K (README, "Partition functions", gives the check against Gray 2005).
2. **Gray (2005) Table D.2** (The Observation and Analysis of Stellar Photospheres,
   3rd ed.; compiled from Irwin 1981, ApJS 45, 621, NIST and others), ``data/partition_gray2005.ecsv``:
   log10 U tabulated at theta = 5040 K / T = 0.2 ... 2.0, interpolated linearly in theta.
   Used for the open d- and f-shell ions (Y, Zr, Ce I-III), Te I-III and Cs I, whose hundreds
   of low levels are not bundled.  Below 2520 K (theta > 2) the last interval is extrapolated,
   never below log10 of the ground-level weight; above 25200 K the table's edge is held.
3. **Ground-term weight** (2S+1)(2L+1) from ``data/atoms.toml`` for every other stage
   (stage IV everywhere, Cs III): populations there are negligible at photospheric
   temperatures, so the approximation does not matter.

Kernels are plain numpy, vectorized over temperatures; energies in cm^-1, T in K.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
from astropy import constants as const

from kncast.forecast.errors import DataFileError
from kncast.forecast.references import NIST_ASD

# Published sources cited above, as data (Gray 2005 is a book: cited in the docstring only).
REFERENCES = (NIST_ASD,)

__all__ = ["REFERENCES", "LEVELS_PATH", "GRAY_PATH", "SOURCES", "C2_CM_K", "THETA_K", "PartitionData", "PartitionFunctions", "level_sum",
           "gray_table_log_u"]

DATA = Path(__file__).resolve().parent / "data"
LEVELS_PATH = DATA / "levels.ecsv"
GRAY_PATH = DATA / "partition_gray2005.ecsv"

#: second radiation constant hc/k in cm K (CODATA, via astropy.constants)
C2_CM_K = float((const.h * const.c / const.k_B).cgs.value)
THETA_K = 5040.0                          # theta = THETA_K / T (Gray 2005 convention)
GRAY_THETA = 0.2 * np.arange(1, 11)       # the table's theta nodes, 0.2 ... 2.0
GRAY_COLUMNS = tuple(f"log_u_{f'{t:.1f}'.replace('.', '')}" for t in GRAY_THETA)
SOURCES = ("levels", "gray2005", "ground term")
N_STAGES = 4


def level_sum(energy_cm1, g, temperature_K) -> np.ndarray:
    """U(T) = sum g_i exp(-E_i / kT) over the last axis of ``energy_cm1``/``g`` (g = 0 pads).

    ``temperature_K``: (n,) -> result (n,) + energy_cm1.shape[:-1].
    """
    t = np.asarray(temperature_K, dtype=float)
    e = np.asarray(energy_cm1, dtype=float)
    x = C2_CM_K / t.reshape(t.shape + (1,) * e.ndim)
    return np.sum(np.asarray(g, dtype=float) * np.exp(-e * x), axis=-1)


def gray_table_log_u(log_u_nodes, log_g_ground, temperature_K) -> np.ndarray:
    """log10 U from values on theta = 0.2..2.0 (last axis, length 10), linear in theta.

    theta > 2 extrapolates the last interval, floored at ``log_g_ground``; theta < 0.2
    holds the first node.  ``temperature_K``: (n,) -> (n,) + log_u_nodes.shape[:-1].
    """
    nodes = np.asarray(log_u_nodes, dtype=float)
    t = np.asarray(temperature_K, dtype=float)
    theta = np.maximum(THETA_K / t, GRAY_THETA[0]).reshape(t.shape + (1,) * (nodes.ndim - 1))
    step = GRAY_THETA[1] - GRAY_THETA[0]
    i = np.clip(np.floor((theta - GRAY_THETA[0]) / step).astype(int), 0, GRAY_THETA.size - 2)
    frac = (theta - GRAY_THETA[i]) / step
    full = np.broadcast_to(nodes, t.shape + nodes.shape)
    lo = np.take_along_axis(full, i[..., None], axis=-1)[..., 0]
    hi = np.take_along_axis(full, i[..., None] + 1, axis=-1)[..., 0]
    return np.maximum(lo + frac * (hi - lo), np.asarray(log_g_ground, dtype=float))


# ---------------------------------------------------------------------------------------------
# data files

@dataclass(frozen=True)
class PartitionData:
    """Bundled (or given) level lists and table rows, keyed by (element, stage)."""

    levels: dict          # (el, stage) -> (energy_cm1 array, g array)
    gray: dict            # (el, stage) -> (log_u nodes (10,), g_ground)
    levels_path: str
    gray_path: str

    @classmethod
    def load(cls, levels_path=None, gray_path=None) -> "PartitionData":
        lp = Path(levels_path) if levels_path is not None else LEVELS_PATH
        gp = Path(gray_path) if gray_path is not None else GRAY_PATH
        return _load_cached(str(lp), str(gp))

    def source(self, element: str, stage: int) -> str:
        """Which of :data:`SOURCES` gives U for this ion."""
        key = (element, int(stage))
        return SOURCES[0] if key in self.levels else SOURCES[1] if key in self.gray else SOURCES[2]


@lru_cache(maxsize=8)
def _load_cached(levels_path: str, gray_path: str) -> PartitionData:
    return PartitionData(_read_levels(Path(levels_path)), _read_gray(Path(gray_path)), levels_path, gray_path)


def _read_ecsv(path: Path, columns):
    from kncast.forecast.datafiles import read_ecsv

    return read_ecsv(path, "an ECSV partition-function table", columns)


def _stage(path, where, row) -> tuple[str, int]:
    el, stage = str(row["element"]).strip(), row["ion_stage"]
    if not el or not isinstance(stage, (int, np.integer)) or not 1 <= stage <= N_STAGES - 1:
        raise DataFileError(path, f"{where}.ion_stage", f"value {stage!r} not allowed", "1, 2 or 3")
    return el, int(stage)


def _read_levels(path: Path) -> dict:
    t = _read_ecsv(path, ("element", "ion_stage", "g", "energy_cm1", "source"))
    rows: dict = {}
    for i, row in enumerate(t):
        where = f"row {i + 1}"
        key = _stage(path, where, row)
        g, e = row["g"], float(row["energy_cm1"])
        if not isinstance(g, (int, np.integer)) or g < 1:
            raise DataFileError(path, f"{where}.g", f"value {g!r} not allowed", "a whole number >= 1")
        if not (np.isfinite(e) and 0.0 <= e < 1e6):
            raise DataFileError(path, f"{where}.energy_cm1", f"value {e!r} not allowed", "[0, 1e6) cm^-1")
        if not str(row["source"]).strip():
            raise DataFileError(path, f"{where}.source", "empty provenance", "a non-empty source")
        rows.setdefault(key, []).append((e, int(g)))
    out = {}
    for key, lv in rows.items():
        e, g = np.array(lv, dtype=float).T
        if e.min() != 0.0:
            raise DataFileError(path, f"{key[0]} stage {key[1]}", "no ground level at 0 cm^-1", "one row with energy 0")
        out[key] = (e, g)
    return out


def _read_gray(path: Path) -> dict:
    t = _read_ecsv(path, ("element", "ion_stage", "g_ground") + GRAY_COLUMNS + ("source",))
    out = {}
    for i, row in enumerate(t):
        where = f"row {i + 1}"
        key = _stage(path, where, row)
        g0 = row["g_ground"]
        if not isinstance(g0, (int, np.integer)) or g0 < 1:
            raise DataFileError(path, f"{where}.g_ground", f"value {g0!r} not allowed", "a whole number >= 1")
        nodes = np.array([float(row[c]) for c in GRAY_COLUMNS])
        finite = np.isfinite(nodes)
        if not finite[-1] or np.any(finite[:-1] & ~finite[1:]) or np.any(nodes[finite] < 0) or np.any(nodes[finite] > 6):
            raise DataFileError(path, where, "log_u values must be in [0, 6], with nan only at the high-temperature "
                                "(small theta) end")
        first = int(np.argmax(finite))
        nodes[:first] = nodes[first]   # untabulated high-temperature entries: hold the first tabulated value
        out[key] = (nodes, int(g0))
    return out


# ---------------------------------------------------------------------------------------------
# per-composition evaluator

@dataclass(frozen=True)
class PartitionFunctions:
    """U(T) for the (k elements, 4 stages) of a composition, evaluated in one vectorized call.

    Built by :meth:`for_elements`; ``sources`` (k, 4) says where each U comes from.
    """

    elements: tuple[str, ...]
    sources: np.ndarray        # (k, 4) str, one of SOURCES
    ground_weights: np.ndarray  # (k, 4) ground-term weights (fallback)
    _level_e: np.ndarray       # (k, 4, L) cm^-1, padded
    _level_g: np.ndarray       # (k, 4, L), 0 = pad
    _gray: np.ndarray          # (k, 4, 10) log10 U nodes (0 where unused)
    _log_g0: np.ndarray        # (k, 4)

    @classmethod
    def for_elements(cls, elements, ground_weights, data: PartitionData | None = None) -> "PartitionFunctions":
        data = data if data is not None else PartitionData.load()
        k = len(elements)
        gw = np.asarray(ground_weights, dtype=float).reshape(k, N_STAGES)
        width = max([e.size for e, _ in data.levels.values()] + [1])
        e_pad = np.zeros((k, N_STAGES, width))
        g_pad = np.zeros((k, N_STAGES, width))
        gray = np.zeros((k, N_STAGES, GRAY_THETA.size))
        log_g0 = np.zeros((k, N_STAGES))
        src = np.full((k, N_STAGES), SOURCES[2], dtype=object)
        for a, el in enumerate(elements):
            for j in range(N_STAGES):
                s = data.source(el, j + 1)
                src[a, j] = s
                if s == SOURCES[0]:
                    e, g = data.levels[(el, j + 1)]
                    e_pad[a, j, :e.size], g_pad[a, j, :g.size] = e, g
                elif s == SOURCES[1]:
                    nodes, g0 = data.gray[(el, j + 1)]
                    gray[a, j], log_g0[a, j] = nodes, np.log10(g0)
        return cls(tuple(elements), src, gw, e_pad, g_pad, gray, log_g0)

    def __call__(self, temperature_K) -> np.ndarray:
        """U, shape (n, k, 4), at temperatures (n,) in K."""
        t = np.atleast_1d(np.asarray(temperature_K, dtype=float))
        levels = level_sum(self._level_e, self._level_g, t)
        table = 10.0 ** gray_table_log_u(self._gray, self._log_g0, t)
        return np.where(self.sources == SOURCES[0], levels,
                        np.where(self.sources == SOURCES[1], table, self.ground_weights[None]))
