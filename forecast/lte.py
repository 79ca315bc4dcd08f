"""Expected line strengths in LTE: Saha-Boltzmann populations and Sobolev optical depths.

The estimate, evaluated at the photosphere of each epoch:

1. Density.  Homologous ejecta, rho(v, t) = rho_v(v) t^-3, with a broken power law in
   velocity: flat inside an inner velocity v_in, rho_v = A v^-n between v_in and v_max
   (a flat core under a power-law envelope; common practice for simple ejecta models),
   normalized so that the ejecta mass M lies inside v_max:
   M = 4 pi A [v_in^(3-n) / 3 + (v_max^(3-n) - v_in^(3-n)) / (3 - n)]
   (the second term is ln(v_max / v_in) for n = 3), evaluated at the photosphere,
   rho(v_ph, t).  n and v_in come from the abundance file (defaults 3 and 0.05 c).
   The profile is fixed in velocity, so the density stays finite both when v_ph
   approaches v_max and when the photosphere recedes into the core.
2. Ionization.  Saha equation for each pair of stages (Saha 1920; e.g. Rybicki &
   Lightman 1979, eq. 9.45; Carroll & Ostlie, An Introduction to Modern Astrophysics,
   eq. 8.8, from memory):
   n_{i+1} n_e / n_i = 2 (U_{i+1} / U_i) (2 pi m_e k T / h^2)^{3/2} exp(-chi_i / k T),
   over stages I-IV of every element of the composition (stage IV stands for
   "IV and above"), with n_e solved self-consistently from charge neutrality
   n_e = sum_k n_k sum_j (j - 1) f_kj(n_e, T).
3. Excitation.  Boltzmann population of the lower level:
   n_l = n_ion (g_l / U) exp(-E_l / k T).
4. Line opacity.  Sobolev optical depth in homologous flow (Sobolev 1957, Soviet Astronomy
   1, 678, and his 1960 book; e.g. Castor 1970, MNRAS 149, 111; Jeffery & Branch 1990; from memory):
   tau = (pi e^2 / m_e c) f lambda t n_l (1 - exp(-h c / lambda k T)),
   the last factor being the LTE stimulated-emission correction
   1 - g_l n_u / (g_u n_l).

Partition functions U(T) of every ion come from :mod:`kncast.forecast.partition`:
sums over the lowest NIST ASD levels (He, Ca, Sr, Ba), the published table of
Gray 2005 (Y, Zr, Ce, Te, Cs I), or the ground-term weight (2S+1)(2L+1) from the
atomic data file (stage IV and any ion in neither source).  They enter the Saha
ratios and the Boltzmann populations at each epoch's temperature.

Every kernel is plain numpy, vectorized over epochs (first axis), elements
and lines.  Units: cgs inside; temperatures in K, energies in eV, times in d or s
as named.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy import constants as const

from kncast.forecast.datafiles import check_keys, field, read_toml, table
from kncast.forecast.errors import DataFileError, ForecastInputError, check_range
from kncast.forecast.partition import PartitionData, PartitionFunctions
from kncast.forecast.references import CASTOR_1970, JEFFERY_BRANCH_1990, SAHA_1920, SOBOLEV_1957

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (SAHA_1920, SOBOLEV_1957, CASTOR_1970, JEFFERY_BRANCH_1990)

__all__ = [
    "SOBOLEV_PREFACTOR_CM2_S", "SAHA_CONSTANT", "Composition", "LTEState",
    "saha_log_ratio", "ionization_fractions", "solve_electron_density", "photospheric_density",
    "sobolev_tau", "lte_state", "line_optical_depths", "ground_term_weight",
]

DATA = Path(__file__).resolve().parent / "data"
ATOMS_PATH = DATA / "atoms.toml"
ABUNDANCES_PATH = DATA / "abundances.toml"

_K_B = const.k_B.cgs.value               # erg / K
_EV = (1 * const.e.si).value * 1e7        # erg per eV
_K_EV = _K_B / _EV                        # eV / K
_HC = (const.h * const.c).cgs.value       # erg cm
_M_U = const.u.cgs.value                  # g
_MSUN = const.M_sun.cgs.value             # g
_C = const.c.cgs.value                    # cm / s

#: pi e^2 / (m_e c) in cm^2 s^-1 (Gaussian units), from CODATA via astropy.constants.
SOBOLEV_PREFACTOR_CM2_S = float(np.pi * const.e.gauss.value**2 / (const.m_e.cgs.value * _C))
#: (2 pi m_e k / h^2)^(3/2) in cm^-3 K^-3/2, from CODATA via astropy.constants.
SAHA_CONSTANT = float((2 * np.pi * const.m_e.cgs.value * _K_B / const.h.cgs.value**2) ** 1.5)

N_STAGES = 4
_L_LETTERS = "SPDFGHIKLMNOQ"
_TERM = re.compile(r"(\d+)([SPDFGHIKLMNOQ])$")


def ground_term_weight(term: str) -> int:
    """Statistical weight (2S+1)(2L+1) of a term written like '5s 2S' or '4f2 3H'."""
    m = _TERM.search(term.strip())
    if not m:
        raise ValueError(term)
    return int(m.group(1)) * (2 * _L_LETTERS.index(m.group(2)) + 1)


# ---------------------------------------------------------------------------------------------
# composition

@dataclass(frozen=True)
class Composition:
    """Element mass fractions and atomic data for the electron-donor mixture.

    Arrays over the k elements: ``mass_fraction`` (sums to 1), ``mass_u``,
    ``chi_eV`` (k, 3; inf where a stage does not exist), ``partition`` (k, 4;
    ground-term weights, the fallback where no level list or table exists).
    ``partition_functions(T)`` gives U(T), shape (n, k, 4).
    """

    elements: tuple[str, ...]
    mass_fraction: np.ndarray
    mass_u: np.ndarray
    chi_eV: np.ndarray
    partition: np.ndarray
    density_index: float
    inner_velocity_c: float
    source: str
    path: str
    partition_model: PartitionFunctions | None = None

    @classmethod
    def load(cls, abundances_path=None, atoms_path=None, partition_data: PartitionData | None = None) -> "Composition":
        """Read an abundance table (default: the bundled one, written by make_lines.py) and the atomic data.

        ``partition_data``: level lists and table for U(T) (default: the bundled files).
        """
        ab_path = Path(abundances_path) if abundances_path is not None else ABUNDANCES_PATH
        at_path = Path(atoms_path) if atoms_path is not None else ATOMS_PATH
        atoms = _load_atoms(at_path)
        doc = read_toml(ab_path)
        check_keys(doc, ("abundances", "ejecta"), ab_path)
        ab = table(doc, "abundances", ab_path)
        check_keys(ab, ("mass_fraction", "source", "description"), ab_path, "abundances")
        fractions = table(ab, "mass_fraction", ab_path)
        if not fractions:
            raise DataFileError(ab_path, "abundances.mass_fraction", "no elements listed")
        source = field(ab, "source", ab_path, prefix="abundances", kind=str, default="not stated")
        ej = table(doc, "ejecta", ab_path, required=False)
        check_keys(ej, ("density_index", "inner_velocity_c"), ab_path, "ejecta")
        n = field(ej, "density_index", ab_path, prefix="ejecta", default=3.0, low=0.0, high=12.0)
        v_in = field(ej, "inner_velocity_c", ab_path, prefix="ejecta", default=0.05, low=0.0, high=0.5,
                     low_open=True, unit="c")
        names, x = [], []
        for el, _ in fractions.items():
            if el not in atoms:
                raise DataFileError(ab_path, f"abundances.mass_fraction.{el}", "no atomic data for this element",
                                    "elements in " + at_path.name + ": " + ", ".join(sorted(atoms)))
            x.append(field(fractions, el, ab_path, prefix="abundances.mass_fraction", low=0.0, high=1.0))
            names.append(el)
        total = sum(x)
        if total <= 0:
            raise DataFileError(ab_path, "abundances.mass_fraction", "mass fractions sum to zero", "a positive sum")
        ground = np.array([atoms[e][2] for e in names])
        return cls(tuple(names), np.array(x) / total,
                   np.array([atoms[e][0] for e in names]),
                   np.array([atoms[e][1] for e in names]),
                   ground, float(n), float(v_in), str(source), str(ab_path),
                   PartitionFunctions.for_elements(tuple(names), ground, partition_data))

    def index(self, element: str) -> int:
        return self.elements.index(element)

    def partition_functions(self, temperature_K) -> np.ndarray:
        """U(T) of stages I-IV of every element, shape (n, k, 4), at temperatures (n,) in K."""
        t = np.atleast_1d(np.asarray(temperature_K, dtype=float))
        if self.partition_model is None:
            return np.broadcast_to(self.partition, t.shape + self.partition.shape)
        return self.partition_model(t)


def _load_atoms(path: Path) -> dict:
    doc = read_toml(path)
    elements = table(doc, "element", path)
    out = {}
    for el, tab in elements.items():
        pre = f"element.{el}"
        mass = field(tab, "mass_u", path, prefix=pre, low=1.0, high=300.0, unit="u")
        chi = field(tab, "ionization_eV", path, prefix=pre, kind=list)
        terms = field(tab, "ground_terms", path, prefix=pre, kind=list)
        if not 1 <= len(chi) <= 3 or not all(isinstance(c, (int, float)) and 0 < c < 200 for c in chi):
            raise DataFileError(path, f"{pre}.ionization_eV", f"bad value {chi!r}", "1 to 3 energies in (0, 200) eV")
        if sorted(chi) != list(chi):
            raise DataFileError(path, f"{pre}.ionization_eV", f"not increasing: {chi!r}", "chi_I < chi_II < chi_III")
        if len(terms) != len(chi) + 1 and not (len(chi) == 3 and len(terms) == 4):
            raise DataFileError(path, f"{pre}.ground_terms", f"{len(terms)} terms for {len(chi)} ionization energies",
                                "one term per stage, stages I to (number of energies + 1), at most 4")
        try:
            weights = [ground_term_weight(str(t)) for t in terms]
        except ValueError as err:
            raise DataFileError(path, f"{pre}.ground_terms", f"cannot read term {err}",
                                "a term symbol at the end, e.g. '5s 2S' or '4f2 3H'") from None
        chi_full = np.full(N_STAGES - 1, np.inf)
        chi_full[:len(chi)] = chi
        u = np.ones(N_STAGES)
        u[:len(weights)] = weights
        out[el] = (mass, chi_full, u)
    return out


# ---------------------------------------------------------------------------------------------
# kernels

def saha_log_ratio(temperature_K, n_e_cm3, chi_eV, U_lower, U_upper):
    """ln(n_{i+1} / n_i) from the Saha equation (broadcasting arrays; chi = inf gives -inf)."""
    t = np.asarray(temperature_K, dtype=float)
    with np.errstate(divide="ignore"):
        return (np.log(2.0 * np.asarray(U_upper, float) / np.asarray(U_lower, float))
                + np.log(SAHA_CONSTANT * t**1.5) - np.asarray(chi_eV, float) / (_K_EV * t)
                - np.log(np.asarray(n_e_cm3, dtype=float)))


def ionization_fractions(temperature_K, n_e_cm3, chi_eV, partition):
    """Fractions in stages I-IV, shape (n_epochs, k_elements, 4); they sum to 1 per element.

    ``temperature_K`` and ``n_e_cm3``: (n,); ``chi_eV``: (k, 3); ``partition``: (k, 4), or
    (n, k, 4) for U evaluated at each epoch's temperature.
    """
    t = np.asarray(temperature_K, dtype=float)[:, None, None]
    ne = np.asarray(n_e_cm3, dtype=float)[:, None, None]
    u = np.asarray(partition, dtype=float)
    u = u[None] if u.ndim == 2 else u
    log_r = saha_log_ratio(t, ne, np.asarray(chi_eV, float)[None], u[..., :-1], u[..., 1:])
    log_n = np.concatenate([np.zeros(log_r.shape[:-1] + (1,)), np.cumsum(log_r, axis=-1)], axis=-1)
    log_n -= log_n.max(axis=-1, keepdims=True)
    w = np.exp(log_n)
    return w / w.sum(axis=-1, keepdims=True)


def solve_electron_density(temperature_K, n_atoms_cm3, chi_eV, partition, iterations: int = 64):
    """Free-electron density (cm^-3, shape (n,)) from charge neutrality, by bisection in ln n_e.

    ``n_atoms_cm3``: (n, k) number density of nuclei per element.  The electron
    supply sum_k n_k sum_j j f_kj(n_e) falls as n_e rises, so the root of
    supply(n_e) - n_e is unique; it lies between 1e-40 and 3 times the nuclei
    density (at most three electrons per nucleus in stages I-IV).  ``partition``:
    (k, 4) or (n, k, 4), as in :func:`ionization_fractions`.
    """
    t = np.asarray(temperature_K, dtype=float)
    n_k = np.asarray(n_atoms_cm3, dtype=float)
    n_tot = n_k.sum(axis=-1)
    charge = np.arange(N_STAGES, dtype=float)
    lo = np.log(np.maximum(n_tot * 1e-40, 1e-300))
    hi = np.log(N_STAGES - 1.0) + np.log(n_tot)
    for _ in range(iterations):  # bisection steps on all epochs at once, not a loop over epochs
        mid = 0.5 * (lo + hi)
        ne = np.exp(mid)
        supply = (n_k * (ionization_fractions(t, ne, chi_eV, partition) @ charge)).sum(axis=-1)
        too_low = supply > ne
        lo = np.where(too_low, mid, lo)
        hi = np.where(too_low, hi, mid)
    return np.exp(0.5 * (lo + hi))


def photospheric_density(ejecta_mass_g, v_phot_c, v_max_c, age_s, density_index=3.0, inner_velocity_c=0.05):
    """Mass density (g cm^-3) at v_ph: flat core inside v_in, rho = A v^-n t^-3 from v_in to v_max.

    The profile holds ``ejecta_mass_g`` inside v_max; velocities are fractions of c
    (v_in capped at v_max), ``age_s`` in s.  Vectorized over epochs.
    """
    n = float(density_index)
    vp = np.asarray(v_phot_c, dtype=float) * _C
    vm = np.asarray(v_max_c, dtype=float) * _C
    vi = np.minimum(float(inner_velocity_c) * _C, vm)
    t = np.asarray(age_s, dtype=float)
    core = vi ** (3.0 - n) / 3.0
    if abs(n - 3.0) < 1e-9:
        envelope = np.log(vm / vi)
    else:
        envelope = (vm ** (3.0 - n) - vi ** (3.0 - n)) / (3.0 - n)
    a = np.asarray(ejecta_mass_g, dtype=float) / (4.0 * np.pi * (core + envelope))
    return a * np.maximum(vp, vi) ** (-n) / t**3


def sobolev_tau(gf, wavelength_A, E_low_eV, n_ion_cm3, partition_ion, temperature_K, age_s):
    """Sobolev optical depth, shape (n_epochs, m_lines).

    ``gf``, ``wavelength_A`` (vacuum), ``E_low_eV``: (m,); ``n_ion_cm3`` and
    ``partition_ion``: (n, m) or (m,); ``temperature_K``, ``age_s``: (n,).
    tau = (pi e^2/m_e c) (g_l f / U) lambda t n_ion exp(-E_l/kT) (1 - exp(-hc/lambda kT)).
    """
    t = np.asarray(temperature_K, dtype=float)[:, None]
    age = np.asarray(age_s, dtype=float)[:, None]
    lam_cm = np.asarray(wavelength_A, dtype=float)[None, :] * 1e-8
    boltz = np.exp(-np.asarray(E_low_eV, dtype=float)[None, :] / (_K_EV * t))
    stim = -np.expm1(-_HC / (lam_cm * _K_B * t))
    n_lower_f = np.asarray(n_ion_cm3, float) * np.asarray(gf, float)[None, :] / np.asarray(partition_ion, float) * boltz
    return SOBOLEV_PREFACTOR_CM2_S * lam_cm * age * n_lower_f * stim


# ---------------------------------------------------------------------------------------------
# the estimate per epoch

@dataclass(frozen=True)
class LTEState:
    """Gas state at the photosphere per epoch (arrays over n epochs; k elements)."""

    temperature_K: np.ndarray
    age_s: np.ndarray
    density_g_cm3: np.ndarray
    n_atoms_cm3: np.ndarray        # (n, k)
    n_e_cm3: np.ndarray            # (n,)
    fractions: np.ndarray          # (n, k, 4): stages I-IV
    composition: Composition
    partition: np.ndarray          # (n, k, 4): U(T) of stages I-IV

    def fractions_of(self, element: str) -> np.ndarray:
        """(n, 4) ionization fractions of one element."""
        return self.fractions[:, self.composition.index(element), :]


def lte_state(temperature_K, age_d, v_phot_c, v_max_c, ejecta_mass_msun, composition: Composition) -> LTEState:
    """Density, electron density and ionization balance at the photosphere of each epoch."""
    t = np.atleast_1d(np.asarray(check_range("temperature_K", temperature_K, 500.0, 1e5, unit=" K"), dtype=float))
    age_s = np.atleast_1d(np.asarray(check_range("age_d", age_d, 0.0, low_open=True, unit=" d"), dtype=float)) * 86400.0
    mass_g = float(check_range("ejecta_mass_msun", ejecta_mass_msun, 0.0, 10.0, low_open=True)) * _MSUN
    vp, vm = np.broadcast_arrays(np.atleast_1d(np.asarray(v_phot_c, float)), np.atleast_1d(np.asarray(v_max_c, float)))
    if np.any(vp > vm) or np.any(vp <= 0):
        raise ForecastInputError("LTE estimate: need 0 < v_phot_c <= v_max_c at every epoch")
    rho = photospheric_density(mass_g, vp, vm, age_s, composition.density_index, composition.inner_velocity_c)
    n_atoms = rho[:, None] * composition.mass_fraction[None, :] / (composition.mass_u[None, :] * _M_U)
    u = composition.partition_functions(t)
    ne = solve_electron_density(t, n_atoms, composition.chi_eV, u)
    frac = ionization_fractions(t, ne, composition.chi_eV, u)
    return LTEState(t, age_s, rho, n_atoms, ne, frac, composition, u)


def line_optical_depths(state: LTEState, element, ion_stage, gf, wavelength_A, E_low_eV) -> np.ndarray:
    """Sobolev tau (n_epochs, m_lines) of lines given by element symbols and ion stages (1..4).

    Lines with unknown gf (nan) get nan.  Every element must be in the composition.
    """
    comp = state.composition
    missing = sorted(set(element) - set(comp.elements))
    if missing:
        raise ForecastInputError(f"abundance table {comp.path}: no mass fraction for {', '.join(missing)} "
                                 f"(needed by the line list; listed: {', '.join(comp.elements)})")
    k = np.array([comp.index(e) for e in element], dtype=int)
    j = np.asarray(ion_stage, dtype=int) - 1
    n_ion = state.n_atoms_cm3[:, k] * state.fractions[:, k, j]
    u_ion = state.partition[:, k, j]
    return sobolev_tau(gf, wavelength_A, E_low_eV, n_ion, u_ion, state.temperature_K, state.age_s)
