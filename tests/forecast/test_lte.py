"""LTE kernels: charge neutrality, ionization fractions, monotonic trends, density normalization, tau."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.errors import DataFileError, ForecastInputError
from kncast.forecast.lte import (Composition, ground_term_weight, ionization_fractions, line_optical_depths, lte_state,
                          photospheric_density, sobolev_tau, solve_electron_density)

MSUN_G = 1.98840987e33  # solar mass, g (IAU 2015 nominal GM_sun / CODATA G, as astropy.constants.M_sun)
C_CM_S = 2.99792458e10  # speed of light, cm/s (exact SI definition, CODATA)


@pytest.fixture(scope="module")
def comp():
    return Composition.load()


@pytest.fixture(scope="module")
def grid(comp):
    temps = np.array([2500.0, 3000.0, 4000.0, 5000.0, 6000.0, 8000.0])
    return lte_state(temps, np.full(temps.size, 2.0), 0.2, 0.35, 0.04, comp)


def test_fractions_sum_to_one(grid):
    assert np.allclose(grid.fractions.sum(axis=-1), 1.0, atol=1e-12)
    assert np.all(grid.fractions >= 0)


def test_charge_neutrality(grid):
    # electrons = sum over elements and stages of (stage - 1) x ions
    charge = np.arange(4)
    supplied = (grid.n_atoms_cm3 * (grid.fractions @ charge)).sum(axis=-1)
    assert supplied == pytest.approx(grid.n_e_cm3, rel=1e-9)


def test_mean_charge_rises_with_temperature(grid):
    mean_charge = grid.fractions @ np.arange(4)          # (n, k)
    assert np.all(np.diff(mean_charge, axis=0) >= -1e-12)
    assert np.all(np.diff(grid.n_e_cm3) > 0)


def test_higher_density_means_less_ionized(comp):
    t = np.full(3, 5000.0)
    ne = np.array([1e6, 1e8, 1e10])
    f = ionization_fractions(t, ne, comp.chi_eV, comp.partition)
    mean_charge = f @ np.arange(4)
    assert np.all(np.diff(mean_charge, axis=0) <= 1e-12)


def test_single_element_solution_by_hand():
    # one element with one ionization stage of interest: n_e = x n, x^2 n / (1 - x) = S (Saha), so
    # x = (-S + sqrt(S^2 + 4 S n)) / (2 n)
    from kncast.forecast.lte import saha_log_ratio

    chi = np.array([[7.0, np.inf, np.inf]])
    u = np.array([[1.0, 2.0, 1.0, 1.0]])
    t, n = np.array([5000.0]), np.array([[1e12]])
    ne = solve_electron_density(t, n, chi, u)
    s = np.exp(saha_log_ratio(t, 1.0, 7.0, 1.0, 2.0))  # S = n_II n_e / n_I
    x = (-s + np.sqrt(s**2 + 4 * s * n[0])) / (2 * n[0])
    assert ne == pytest.approx(x * n[0], rel=1e-9)


def test_density_profile_holds_the_mass():
    # integral of 4 pi v^2 t^3 rho(v) dv over [0, v_max] equals the ejecta mass (flat core inside v_in)
    mass_g, t_s = 0.04 * MSUN_G, 2.0 * 86400.0
    v = np.linspace(0.0, 0.35, 200001)
    for n in (2.0, 3.0, 4.5):
        rho = photospheric_density(mass_g, np.maximum(v, 1e-9), 0.35, t_s, n, inner_velocity_c=0.05)
        total = np.trapezoid(4 * np.pi * (v * C_CM_S) ** 2 * t_s**3 * rho, v * C_CM_S)
        assert total == pytest.approx(mass_g, rel=1e-6)
        # power law outside the core, flat inside
        r = photospheric_density(mass_g, np.array([0.01, 0.05, 0.1, 0.2]), 0.35, t_s, n, inner_velocity_c=0.05)
        assert r[0] == pytest.approx(r[1]) and r[2] / r[3] == pytest.approx(2.0**n)


def test_density_scales_as_t_minus_3():
    r = photospheric_density(1e32, 0.2, 0.3, np.array([1e5, 2e5]))
    assert r[0] / r[1] == pytest.approx(8.0)


def test_sobolev_tau_by_hand():
    # tau = (pi e^2/m_e c) gf/U lambda t n exp(-E/kT) (1 - exp(-hc/lambda k T)), evaluated term by term
    gf, lam, e_low, n_ion, u, t, age = 1.4, 4078.86, 0.0, 1e6, 2.0, 5000.0, 1.5 * 86400
    hc_over_k = 1.438776877  # cm K, second radiation constant (CODATA)
    expected = 2.654008e-2 * gf / u * lam * 1e-8 * age * n_ion * (1 - np.exp(-hc_over_k / (lam * 1e-8 * t)))
    got = sobolev_tau([gf], [lam], [e_low], np.array([[n_ion]]), np.array([[u]]), [t], [age])
    assert got[0, 0] == pytest.approx(expected, rel=1e-5)


def test_boltzmann_factor_between_two_lines(comp, grid):
    # same ion and gf, lower levels 1 eV apart: tau ratio = exp(-1 eV / kT) x stimulated-term ratio
    tau = line_optical_depths(grid, ["Sr", "Sr"], [2, 2], [1.0, 1.0], [5000.0, 5000.0], [0.0, 1.0])
    k_ev = 8.617333262e-5
    assert tau[:, 1] / tau[:, 0] == pytest.approx(np.exp(-1.0 / (k_ev * grid.temperature_K)), rel=1e-6)


def test_unknown_gf_gives_nan(grid):
    tau = line_optical_depths(grid, ["Sr"], [2], [np.nan], [4078.86], [0.0])
    assert np.all(np.isnan(tau))


def test_ground_term_weights():
    # (2S+1)(2L+1): 2S -> 2, 2P -> 6, 4F -> 28, 3H -> 33 (term-symbol arithmetic)
    assert [ground_term_weight(t) for t in ("5s 2S", "4p5 2P", "4d2 5s 4F", "4f2 3H", "6s2 1S")] == [2, 6, 28, 33, 1]


def test_bad_inputs(comp):
    with pytest.raises(ForecastInputError, match="temperature_K"):
        lte_state([100.0], [1.0], 0.2, 0.3, 0.04, comp)
    with pytest.raises(ForecastInputError, match="v_phot_c <= v_max_c"):
        lte_state([5000.0], [1.0], 0.3, 0.2, 0.04, comp)
    with pytest.raises(ForecastInputError, match="ejecta_mass_msun"):
        lte_state([5000.0], [1.0], 0.2, 0.3, 0.0, comp)


def test_abundance_file_errors(tmp_path):
    bad = tmp_path / "ab.toml"
    bad.write_text('[abundances]\nsource = "x"\n[abundances.mass_fraction]\nSr = 0.5\nXx = 0.5\n')
    with pytest.raises(DataFileError, match=r"ab\.toml: abundances\.mass_fraction\.Xx: no atomic data"):
        Composition.load(bad)
    bad.write_text('[abundances]\n[abundances.mass_fraction]\nSr = -0.1\n')
    with pytest.raises(DataFileError, match="out of range"):
        Composition.load(bad)
    bad.write_text('[abundances]\n[abundances.mass_fraction]\nSr = 1.0\n[ejecta]\ndensity_index = 40\n')
    with pytest.raises(DataFileError, match="ejecta.density_index"):
        Composition.load(bad)


def test_mass_fractions_normalized(tmp_path):
    f = tmp_path / "ab.toml"
    f.write_text('[abundances]\n[abundances.mass_fraction]\nSr = 0.4\nBa = 0.0\nCa = 0.4\n')
    c = Composition.load(f)
    assert c.mass_fraction.sum() == pytest.approx(1.0)
    assert c.mass_fraction[c.index("Sr")] == pytest.approx(0.5)
