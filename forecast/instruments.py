"""Telescopes, spectrographs, arms and setups, read from the site files.

A site file may hold ``[[telescope]]`` tables, each with one or more
``[[telescope.instrument]]`` (a spectrograph) made of
``[[telescope.instrument.arm]]`` tables and optional named
``[[telescope.instrument.setup]]`` choices (schema in docs/formats.md, section "Telescopes, instruments, arms and setups").

Wavelengths are vacuum Angstrom.  Throughput tables are the total
telescope + instrument + detector efficiency (no atmosphere: that is
:mod:`kncast.forecast.tellurics` and the extinction model).
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace

import numpy as np

from kncast.forecast.datafiles import field
from kncast.forecast.errors import DataFileError

__all__ = ["Telescope", "Spectrograph", "Arm", "Setup", "parse_telescopes", "load_telescopes", "DEFAULT_SETUP",
           "MIN_WAVELENGTH_A", "MAX_WAVELENGTH_A"]

DEFAULT_SETUP = "default"  # id of the setup with every arm at its full range
MIN_WAVELENGTH_A, MAX_WAVELENGTH_A = 3000.0, 26000.0  # ground-based optical + near-IR
_NO_DEFAULT = object()
_ID = re.compile(r"^[a-z0-9][a-z0-9._-]*$")

_TELESCOPE_KEYS = {"id", "name", "aperture_m", "central_obstruction", "instrument"}
_INSTRUMENT_KEYS = {"id", "name", "kind", "slit_width_arcsec", "pixel_scale_arcsec", "arm", "setup"}
_ARM_KEYS = {"name", "min_A", "max_A", "resolving_power", "dispersion_A_per_pix", "gaps_A",
             "read_noise_e", "dark_e_per_s", "gain_e_per_adu", "full_well_e", "throughput_A", "throughput"}
_SETUP_KEYS = {"id", "description", "arm"}
_SETUP_ARM_KEYS = {"name", "min_A", "max_A", "resolving_power", "dispersion_A_per_pix"}


@dataclass(frozen=True, eq=False)
class Arm:
    """One spectrograph arm (one detector channel).

    Wavelengths in vacuum Angstrom; ``gaps_A`` are detector gaps (no pixels)
    inside [min_A, max_A]; ``throughput`` (0..1) at ``throughput_A`` is the total
    telescope + instrument + detector efficiency, without the atmosphere.
    """

    name: str
    min_A: float
    max_A: float
    resolving_power: float
    dispersion_A_per_pix: float
    gaps_A: tuple = ()
    read_noise_e: float = 5.0
    dark_e_per_s: float = 0.0
    gain_e_per_adu: float = 1.0
    full_well_e: float = 1.0e5
    throughput_A: np.ndarray = None
    throughput: np.ndarray = None

    def throughput_at(self, wavelength_A):
        """Total efficiency at ``wavelength_A`` (linear interpolation; 0 outside the arm's range)."""
        w = np.asarray(wavelength_A, dtype=float)
        t = np.interp(w, self.throughput_A, self.throughput, left=0.0, right=0.0)
        return np.where((w >= self.min_A) & (w <= self.max_A), t, 0.0)

    def resolution_element_A(self, wavelength_A):
        """Width of one resolution element, lambda / R, in Angstrom."""
        return np.asarray(wavelength_A, dtype=float) / self.resolving_power

    def pixels_per_resolution_element(self, wavelength_A):
        """Number of detector pixels along the dispersion per resolution element."""
        return self.resolution_element_A(wavelength_A) / self.dispersion_A_per_pix

    def covers(self, wavelength_A):
        """True where ``wavelength_A`` falls on the arm's detector (inside the range, not in a gap)."""
        w = np.asarray(wavelength_A, dtype=float)
        on = (w >= self.min_A) & (w <= self.max_A)
        for lo, hi in self.gaps_A:
            on &= ~((w > lo) & (w < hi))
        return on


@dataclass(frozen=True, eq=False)
class Setup:
    """A named configuration of a spectrograph: the arms in use with their ranges."""

    id: str
    description: str
    arms: tuple

    @property
    def min_A(self) -> float:
        return min(a.min_A for a in self.arms)

    @property
    def max_A(self) -> float:
        return max(a.max_A for a in self.arms)

    @property
    def is_default(self) -> bool:
        return self.id == DEFAULT_SETUP

    def covered_intervals_A(self) -> np.ndarray:
        """Disjoint sorted (n, 2) intervals on detector pixels: union of arms minus their gaps."""
        pieces = []
        for arm in self.arms:
            lo = arm.min_A
            for g_lo, g_hi in arm.gaps_A:
                pieces.append((lo, g_lo))
                lo = g_hi
            pieces.append((lo, arm.max_A))
        pieces = sorted(p for p in pieces if p[1] > p[0])
        merged = [list(pieces[0])]
        for lo, hi in pieces[1:]:
            if lo <= merged[-1][1]:
                merged[-1][1] = max(merged[-1][1], hi)
            else:
                merged.append([lo, hi])
        # a detector gap of one arm may be covered by an overlapping arm: the union handles it
        return np.array(merged, dtype=float)


@dataclass(frozen=True, eq=False)
class Spectrograph:
    """A spectrograph on a telescope.

    ``kind`` is "slit" or "fibre"; for a fibre ``slit_width_arcsec`` is the
    fibre's diameter on the sky.  ``pixel_scale_arcsec`` is the spatial scale
    along the slit.  ``setups[0]`` is the default setup (every arm at full range).
    """

    id: str
    name: str
    kind: str
    slit_width_arcsec: float
    pixel_scale_arcsec: float
    arms: tuple
    setups: tuple

    @property
    def default_setup(self) -> Setup:
        return self.setups[0]

    def setup(self, setup_id: str | None = None) -> Setup | None:
        """The setup with this id (None or "default" gives the default); None if unknown."""
        key = (setup_id or DEFAULT_SETUP).strip().lower()
        return next((s for s in self.setups if s.id == key), None)


@dataclass(frozen=True, eq=False)
class Telescope:
    """A telescope.  ``central_obstruction`` is the fraction of the primary's AREA that is
    blocked (secondary mirror and its baffles), not a fraction of the diameter."""

    id: str
    name: str
    aperture_m: float
    central_obstruction: float
    instruments: tuple

    @property
    def collecting_area_cm2(self) -> float:
        """Unobstructed collecting area, cm^2: pi (D/2)^2 (1 - obstruction)."""
        return math.pi * (50.0 * self.aperture_m) ** 2 * (1.0 - self.central_obstruction)

    def instrument(self, instrument_id: str) -> Spectrograph | None:
        key = instrument_id.strip().lower()
        return next((i for i in self.instruments if i.id == key), None)


# ---------------------------------------------------------------- parsing

def parse_telescopes(rows, path) -> tuple:
    """Validate the ``[[telescope]]`` array of a site file into Telescope objects.

    Every problem raises :class:`DataFileError` naming the file and the key
    path, e.g. ``telescope[0].instrument[1].arm[0].max_A``.
    """
    rows = _array_of_tables(rows, "telescope", path)
    out = [_telescope(row, f"telescope[{i}]", path) for i, row in enumerate(rows)]
    _unique([t.id for t in out], "telescope", "id", path)
    return tuple(out)


def load_telescopes(path) -> tuple:
    """The Telescope objects of a TOML file's ``[[telescope]]`` tables (a site file, or telescopes alone)."""
    from kncast.forecast.datafiles import read_toml

    doc = read_toml(path)
    if "telescope" not in doc:
        raise DataFileError(path, "telescope", "required key missing", "one or more [[telescope]] tables")
    return parse_telescopes(doc["telescope"], path)


def _telescope(row: dict, where: str, path) -> Telescope:
    _known_keys(row, _TELESCOPE_KEYS, where, path)
    f = lambda key, **kw: field(row, key, path, prefix=where, **kw)  # noqa: E731
    tid = _ident(f("id", kind=str), f"{where}.id", path)
    insts = _array_of_tables(row.get("instrument"), f"{where}.instrument", path, required=True)
    instruments = tuple(_instrument(r, f"{where}.instrument[{j}]", path) for j, r in enumerate(insts))
    _unique([i.id for i in instruments], f"{where}.instrument", "id", path)
    return Telescope(
        id=tid,
        name=f("name", kind=str, default=tid),
        aperture_m=f("aperture_m", low=0, high=50, low_open=True, unit="m"),
        central_obstruction=f("central_obstruction", low=0, high=0.9, high_open=True,
                              unit="(fraction of the primary's area)"),
        instruments=instruments,
    )


def _instrument(row: dict, where: str, path) -> Spectrograph:
    _known_keys(row, _INSTRUMENT_KEYS, where, path)
    f = lambda key, **kw: field(row, key, path, prefix=where, **kw)  # noqa: E731
    iid = _ident(f("id", kind=str), f"{where}.id", path)
    arm_rows = _array_of_tables(row.get("arm"), f"{where}.arm", path, required=True)
    arms = tuple(_arm(r, f"{where}.arm[{k}]", path) for k, r in enumerate(arm_rows))
    _unique([a.name for a in arms], f"{where}.arm", "name", path)
    default = Setup(DEFAULT_SETUP, "every arm at its full range", arms)
    setup_rows = _array_of_tables(row.get("setup"), f"{where}.setup", path)
    setups = tuple(_setup(r, f"{where}.setup[{k}]", arms, path) for k, r in enumerate(setup_rows))
    _unique([DEFAULT_SETUP] + [s.id for s in setups], f"{where}.setup", "id", path)
    return Spectrograph(
        id=iid,
        name=f("name", kind=str, default=iid),
        kind=f("kind", kind=str, choices=("slit", "fibre")),
        slit_width_arcsec=f("slit_width_arcsec", low=0, high=30, low_open=True, unit="arcsec"),
        pixel_scale_arcsec=f("pixel_scale_arcsec", low=0, high=10, low_open=True, unit="arcsec/pixel"),
        arms=arms,
        setups=(default, *setups),
    )


def _arm(row: dict, where: str, path) -> Arm:
    _known_keys(row, _ARM_KEYS, where, path)
    f = lambda key, **kw: field(row, key, path, prefix=where, **kw)  # noqa: E731
    lo, hi = _range(row, where, path, MIN_WAVELENGTH_A, MAX_WAVELENGTH_A)
    wave = _numbers(f("throughput_A", kind=list), f"{where}.throughput_A", path)
    eff = _numbers(f("throughput", kind=list), f"{where}.throughput", path)
    if wave.size < 2 or wave.size != eff.size:
        raise DataFileError(path, f"{where}.throughput", f"{eff.size} values for {wave.size} wavelengths",
                            "the same number as throughput_A, at least 2")
    if np.any(np.diff(wave) <= 0):
        raise DataFileError(path, f"{where}.throughput_A", "wavelengths must increase strictly")
    if wave[0] > lo or wave[-1] < hi:
        raise DataFileError(path, f"{where}.throughput_A",
                            f"table spans {wave[0]:g}-{wave[-1]:g} A but the arm spans {lo:g}-{hi:g} A",
                            "a table covering the whole arm")
    if np.any((eff < 0) | (eff > 1)):
        bad = eff[(eff < 0) | (eff > 1)][0]
        raise DataFileError(path, f"{where}.throughput", f"value {bad:g} out of range", "[0, 1]")
    wave.flags.writeable = False
    eff.flags.writeable = False
    return Arm(
        name=_ident(f("name", kind=str), f"{where}.name", path),
        min_A=lo, max_A=hi,
        resolving_power=f("resolving_power", low=50, high=200000),
        dispersion_A_per_pix=f("dispersion_A_per_pix", low=0, high=100, low_open=True, unit="A/pixel"),
        gaps_A=_gaps(row.get("gaps_A", []), lo, hi, f"{where}.gaps_A", path),
        read_noise_e=f("read_noise_e", low=0, high=100, unit="e-"),
        dark_e_per_s=f("dark_e_per_s", low=0, high=10, unit="e-/s/pixel"),
        gain_e_per_adu=f("gain_e_per_adu", low=0, high=100, low_open=True, unit="e-/ADU"),
        full_well_e=f("full_well_e", low=1000, high=1e7, unit="e-"),
        throughput_A=wave,
        throughput=eff,
    )


def _setup(row: dict, where: str, arms: tuple, path) -> Setup:
    """A named setup: the arms it uses ([[...setup.arm]] by name), each within its full range."""
    _known_keys(row, _SETUP_KEYS, where, path)
    sid = _ident(field(row, "id", path, prefix=where, kind=str), f"{where}.id", path)
    desc = field(row, "description", path, prefix=where, kind=str)
    by_name = {a.name: a for a in arms}
    chosen = []
    for k, sel in enumerate(_array_of_tables(row.get("arm"), f"{where}.arm", path, required=True)):
        w = f"{where}.arm[{k}]"
        _known_keys(sel, _SETUP_ARM_KEYS, w, path)
        name = field(sel, "name", path, prefix=w, kind=str)
        if name not in by_name:
            raise DataFileError(path, f"{w}.name", f"no arm named {name!r} in this instrument",
                                " | ".join(by_name))
        full = by_name[name]
        lo, hi = _range(sel, w, path, full.min_A, full.max_A, default=(full.min_A, full.max_A))
        chosen.append(replace(
            full, min_A=lo, max_A=hi,
            gaps_A=tuple((max(g0, lo), min(g1, hi)) for g0, g1 in full.gaps_A if g0 < hi and g1 > lo
                         and not (g0 <= lo and g1 >= hi)),
            resolving_power=field(sel, "resolving_power", path, prefix=w, low=50, high=200000,
                                  default=full.resolving_power),
            dispersion_A_per_pix=field(sel, "dispersion_A_per_pix", path, prefix=w, low=0, high=100,
                                       low_open=True, unit="A/pixel", default=full.dispersion_A_per_pix),
        ))
    _unique([a.name for a in chosen], f"{where}.arm", "name", path)
    return Setup(sid, desc, tuple(chosen))


# ---------------------------------------------------------------- helpers

def _range(row, where, path, low, high, default=None):
    """(min_A, max_A) with low <= min_A < max_A <= high."""
    kw = dict(low=low, high=high, unit="A (vacuum)")
    d_lo, d_hi = default if default else (_NO_DEFAULT, _NO_DEFAULT)
    lo = field(row, "min_A", path, prefix=where, **kw) if d_lo is _NO_DEFAULT else \
        field(row, "min_A", path, prefix=where, default=d_lo, **kw)
    hi = field(row, "max_A", path, prefix=where, **kw) if d_hi is _NO_DEFAULT else \
        field(row, "max_A", path, prefix=where, default=d_hi, **kw)
    if hi <= lo:
        raise DataFileError(path, f"{where}.max_A", f"value {hi:g} not above min_A = {lo:g}",
                            f"({lo:g}, {high:g}] A")
    return lo, hi


def _gaps(value, lo, hi, where, path) -> tuple:
    """Detector gaps: [[lo, hi], ...] sorted, disjoint, strictly inside (min_A, max_A)."""
    if not isinstance(value, list):
        raise DataFileError(path, where, f"expected an array of [lo, hi] pairs, got {value!r}")
    out = []
    for k, pair in enumerate(value):
        if (not isinstance(pair, list) or len(pair) != 2
                or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in pair)):
            raise DataFileError(path, f"{where}[{k}]", f"expected [lo, hi] in A, got {pair!r}")
        g0, g1 = float(pair[0]), float(pair[1])
        if not (lo < g0 < g1 < hi):
            raise DataFileError(path, f"{where}[{k}]", f"gap {g0:g}-{g1:g} A not inside the arm",
                                f"{lo:g} < lo < hi < {hi:g} A")
        if out and g0 < out[-1][1]:
            raise DataFileError(path, f"{where}[{k}]", "gaps must be sorted and must not overlap")
        out.append((g0, g1))
    return tuple(out)


def _numbers(values: list, where, path) -> np.ndarray:
    if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in values):
        raise DataFileError(path, where, "must hold numbers only")
    arr = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise DataFileError(path, where, "must hold finite numbers")
    return arr


def _array_of_tables(value, where, path, required=False) -> list:
    if value is None:
        if required:
            raise DataFileError(path, where, "required table missing", f"at least one [[{_toml_name(where)}]]")
        return []
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise DataFileError(path, where, f"expected an array of tables [[{_toml_name(where)}]]")
    if required and not value:
        raise DataFileError(path, where, "empty", f"at least one [[{_toml_name(where)}]]")
    return value


def _toml_name(where: str) -> str:
    return re.sub(r"\[\d+\]", "", where)


def _known_keys(row: dict, allowed: set, where, path) -> None:
    from kncast.forecast.datafiles import check_keys

    check_keys(row, allowed, path, where)


def _ident(value: str, where, path) -> str:
    v = value.strip().lower()
    if not _ID.match(v):
        raise DataFileError(path, where, f"id {value!r} not allowed",
                            "lower-case letters, digits, '.', '_' and '-' (no '/' or ':')")
    return v


def _unique(ids, where, key, path) -> None:
    seen = set()
    for k, i in enumerate(ids):
        if i in seen:
            raise DataFileError(path, f"{where}.{key}", f"duplicate {key} {i!r}")
        seen.add(i)
