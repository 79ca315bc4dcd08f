"""Line list, air/vacuum, Doppler windows and LTE constants against outside references.

Each check names its source.  Tolerances are named constants in Angstrom or
relative units.
"""
from __future__ import annotations

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u

from kncast.forecast.airvac import air_to_vac, vac_to_air
from kncast.forecast.doppler import doppler_factor, feature_windows
from kncast.forecast.features import Epochs, forecast_features
from kncast.forecast.linelist import LineList
from kncast.forecast.lte import SAHA_CONSTANT, SOBOLEV_PREFACTOR_CM2_S, saha_log_ratio

from conftest import ROOT as _ROOT  # noqa: E402

SOURCE_DATA = _ROOT / "forecast" / "data"  # the source tree's data folder (candidates are not installed)

AIRVAC_TOL_A = 0.01         # the tolerance for air/vacuum checks
PUBLISHED_TOL_A = 1e-6      # published values are stored verbatim
ROUNDING_TOL_A = 6e-4       # vacuum column is rounded to 0.001 A by make_lines.py
CODATA_RELEASE_REL = 1e-8   # CODATA 2018 vs later releases of m_e, eps0 (a few 1e-10 relative)


# ------------------------------------------------------------------------------------ air / vacuum

def test_worked_example_kr_line():
    # IDL Astronomy User's Library, `airtovac` documentation: Kr line air 6056.125 A -> vacuum 6057.8019 A.
    # (That example uses the Ciddor 1996 formula; the IAU/Morton 2000 formula agrees to well under 0.01 A.)
    assert air_to_vac(6056.125) == pytest.approx(6057.8019, abs=AIRVAC_TOL_A)
    assert vac_to_air(6057.8019) == pytest.approx(6056.125, abs=AIRVAC_TOL_A)


@pytest.mark.parametrize("air,vac", [
    (5006.843, 5008.240),   # [O III] 5007: air 5006.843, vacuum 5008.240 (SDSS line table; from memory)
    (5889.950, 5891.583),   # Na I D2: air 5889.950, vacuum 5891.583 (NIST ASD; from memory)
    (5895.924, 5897.558),   # Na I D1: air 5895.924, vacuum 5897.558 (NIST ASD; from memory)
])
def test_air_vacuum_pairs(air, vac):
    assert air_to_vac(air) == pytest.approx(vac, abs=AIRVAC_TOL_A)
    assert vac_to_air(vac) == pytest.approx(air, abs=AIRVAC_TOL_A)


def test_morton_refractive_index_at_5000_A():
    # Morton 2000 (ApJS 130, 403) eq. 3 evaluated by hand at lambda_vac = 5000 A (s = 2 micron^-1):
    # n - 1 = 8.34254e-5 + 2.406147e-2 / 126 + 1.5998e-4 / 34.9 = 2.7896e-4
    expected = 5000.0 / (1 + 8.34254e-5 + 2.406147e-2 / 126.0 + 1.5998e-4 / 34.9)
    assert vac_to_air(5000.0) == pytest.approx(expected, abs=1e-9)


def test_below_2000_A_is_vacuum_by_convention():
    # Morton 2000: wavelengths below 2000 A are quoted in vacuum, so nothing changes there.
    assert air_to_vac(1215.67) == 1215.67
    assert vac_to_air(1215.67) == 1215.67


def test_round_trip_vectorized():
    lam = np.geomspace(2000.0, 50000.0, 500)
    assert np.max(np.abs(vac_to_air(air_to_vac(lam)) - lam)) < 1e-8


# ------------------------------------------------------------------------------------ line list

# Published values as listed in the cited sources (air wavelengths unless noted), with the source of each.
PUBLISHED = [
    ("Sr II", 4077.709, 0.000, 0.148, "air"),      # NIST ASD (via a published compilation)
    ("Sr II", 4215.524, 0.000, -0.173, "air"),     # NIST ASD
    ("Sr II", 10036.654, 1.805, -1.22, "air"),     # NIST ASD
    ("Sr II", 10327.309, 1.840, -0.25, "air"),     # NIST ASD
    ("Sr II", 10914.874, 1.805, -0.574, "air"),    # NIST ASD
    ("Ca II", 3933.660, 0.0, 0.113, "air"),        # Safronova et al. 2011
    ("Ca II", 3968.470, 0.0, -0.192, "air"),       # Safronova et al. 2011
    ("Ca II", 8498.020, 1.692, -1.365, "air"),     # Safronova et al. 2011
    ("Ca II", 8542.090, 1.700, -0.410, "air"),     # Safronova et al. 2011
    ("Ca II", 8662.140, 1.692, -0.672, "air"),     # Safronova et al. 2011
    ("Ba II", 4554.029, 0.0, 0.170, "air"),        # Gallagher 1967
    ("Ba II", 4934.076, 0.0, -0.157, "air"),       # Gallagher 1967
    ("Ba II", 5853.668, 0.604, -1.010, "air"),     # Gallagher 1967
    ("Ba II", 6141.713, 0.703, -0.077, "air"),     # Gallagher 1967
    ("Ba II", 6496.897, 0.604, -0.380, "air"),     # Gallagher 1967
    ("Y II", 4374.93, 0.409, 0.29, "air"),         # Biemont et al. 2011
    ("Y II", 4883.68, 1.084, 0.19, "air"),         # Biemont et al. 2011
    ("Y II", 5087.42, 1.084, -0.16, "air"),        # Biemont et al. 2011
    ("Y II", 5205.72, 1.033, -0.28, "air"),        # Biemont et al. 2011
    ("Y II", 5662.92, 1.944, 0.34, "air"),         # Biemont et al. 2011
    ("Y II", 7881.88, 1.839, -0.60, "air"),        # Biemont et al. 2011
    ("Zr II", 4149.198, 0.802, -0.04, "air"),      # Ljung et al. 2006
    ("Zr II", 4208.980, 0.713, -0.51, "air"),      # Ljung et al. 2006
    ("Zr II", 4442.992, 1.486, -0.42, "air"),      # Ljung et al. 2006
    ("He I", 10832.057, 19.8196, None, "vacuum"),  # NIST ASD (vacuum; A = 1.0216e7 s^-1)
    ("He I", 10833.217, 19.8196, None, "vacuum"),  # NIST ASD
    ("He I", 10833.306, 19.8196, None, "vacuum"),  # NIST ASD
    ("Cs I", 8523.47, 0.0, None, "vacuum"),        # Steck, Cesium D line data (from memory; flagged uncertain)
    ("Cs I", 8945.93, 0.0, None, "vacuum"),        # Steck (from memory; flagged uncertain)
]


@pytest.fixture(scope="module")
def lines():
    # every candidate line (forecast/data/candidates/line_candidates.ecsv); the bundled list is a
    # selection of these rows, unchanged (checked below and in tests/forecast/test_lines_linelist.py)
    from astropy.table import Table

    from kncast.forecast.linelist import DEFAULT_PATH

    path = SOURCE_DATA / "candidates" / "line_candidates.ecsv"
    return LineList.load(path), Table.read(path, format="ascii.ecsv")


@pytest.mark.parametrize("species,lam,e_low,log_gf,medium", [p for p in PUBLISHED if p[0] in
                                                             ("Sr II", "Ba II", "Y II", "Zr II")])
def test_bundled_line_equals_published_value(species, lam, e_low, log_gf, medium):
    # the shipped list keeps every published value of the r-process lines the rule selects
    from astropy.table import Table

    from kncast.forecast.linelist import DEFAULT_PATH

    rows = [r for r in Table.read(DEFAULT_PATH, format="ascii.ecsv")
            if r["species"] == species and abs(r["published_A"] - lam) < 1e-6]
    assert len(rows) == 1
    assert rows[0]["E_low_eV"] == pytest.approx(e_low, abs=1e-9) and rows[0]["log_gf"] == pytest.approx(log_gf, abs=1e-9)
    vac = air_to_vac(lam) if medium == "air" else lam
    assert rows[0]["wavelength_A"] == pytest.approx(vac, abs=ROUNDING_TOL_A)


@pytest.mark.parametrize("species,lam,e_low,log_gf,medium", PUBLISHED)
def test_line_equals_published_value(lines, species, lam, e_low, log_gf, medium):
    ll, table = lines
    rows = [r for r in table if r["species"] == species and abs(r["published_A"] - lam) < 1e-6]
    assert len(rows) == 1
    row = rows[0]
    assert row["published_medium"] == medium
    assert row["E_low_eV"] == pytest.approx(e_low, abs=1e-9)
    if log_gf is not None:
        assert row["log_gf"] == pytest.approx(log_gf, abs=1e-9)
    # the vacuum column is the IAU conversion of the published value (Morton 2000), rounded to 0.001 A
    vac = air_to_vac(lam) if medium == "air" else lam
    assert row["wavelength_A"] == pytest.approx(vac, abs=ROUNDING_TOL_A)
    i = int(np.flatnonzero(np.abs(ll.wavelength_A - row["wavelength_A"]) < PUBLISHED_TOL_A)[0])
    if medium == "air":
        assert vac_to_air(ll.wavelength_A[i]) == pytest.approx(lam, abs=ROUNDING_TOL_A)


def test_te_iii_and_uncertain_flags(lines):
    ll, table = lines
    te = [r for r in table if r["species"] == "[Te III]"]
    # [Te III] 2.105 micron (recent kilonova literature; air/vacuum not confirmed): kept, flagged uncertain
    assert len(te) == 1 and te[0]["published_A"] == pytest.approx(21050.0) and te[0]["uncertain"]
    for r in table:
        if r["confidence"] == "memory" or r["published_medium"] == "unconfirmed":
            assert r["uncertain"], r["species"]


def test_he_i_gf_from_einstein_a(lines):
    # NIST ASD lists log gf = -0.745, -0.268, -0.046 for the He I 10830 components J = 0, 1, 2
    # (from memory); we derive them from A = 1.0216e7 s^-1 and g_up = 1, 3, 5.
    ll, _ = lines
    he = np.flatnonzero(ll.element == "He")
    assert np.log10(ll.gf[he]) == pytest.approx([-0.745, -0.268, -0.046], abs=0.005)


# ------------------------------------------------------------------------------------ Doppler

@pytest.mark.parametrize("beta", [0.0, 0.05, 0.1, 0.2, 0.3, 0.5, 0.79])
def test_doppler_factor_matches_astropy(beta):
    # astropy.units.doppler_relativistic: approaching matter has negative radial velocity
    lam0 = 10000.0 * u.AA
    observed = (-beta * const.c).to(u.AA, equivalencies=u.doppler_relativistic(lam0))
    assert doppler_factor(beta) * lam0.value == pytest.approx(observed.value, rel=1e-12)
    receding = (beta * const.c).to(u.AA, equivalencies=u.doppler_relativistic(lam0))
    assert lam0.value / doppler_factor(beta) == pytest.approx(receding.value, rel=1e-12)


def _one_feature(vp, vm, z=0.0):
    ll = LineList.load()
    sr = [i for i in range(len(ll)) if ll.feature[i] == "sr2-nir"]
    ep = Epochs(np.array([2.0]), np.array([2.0]), np.array([4000.0]), np.array([vp]), np.array([vm]), z, 0.04)
    res = forecast_features(ep, None, ll, setups=[])
    f = [k for k, feat in enumerate(res.features) if feat.id == "sr2-nir"][0]
    return res, f, ll.wavelength_A[sr]


@pytest.mark.parametrize("vp", [0.2, 0.25, 0.3])
def test_near_ir_triplet_absorption_near_7600_8500(vp):
    # Common practice: the Sr II near-IR triplet (~1 micron) in ejecta at 0.2-0.3 c shows its absorption
    # minimum near 7600-8500 A, and its emission peak near the rest wavelength.
    res, f, rest = _one_feature(vp, 0.4)
    trough = res.windows.trough_A[0, f]
    assert 7500.0 <= trough <= 8500.0
    assert rest.min() <= res.windows.emission_peak_A[0, f] <= rest.max()
    assert res.windows.absorption_lo_A[0, f] < trough < res.windows.absorption_hi_A[0, f]
    assert res.windows.emission_lo_A[0, f] <= res.windows.emission_peak_A[0, f] < res.windows.emission_hi_A[0, f]


def test_windows_follow_the_definitions_and_redshift():
    # Window definitions of the issue: absorption lambda0 D(vmax)..lambda0, trough lambda0 D(vph),
    # emission lambda0..lambda0/D(vmax), all times (1 + z); D from astropy's relativistic equivalency.
    lam0, vp, vm, z = 8544.437, 0.15, 0.3, 0.05
    w = feature_windows([lam0], [lam0], [lam0], [vp], [vm], z)
    d = lambda b: (-b * const.c).to(u.AA, equivalencies=u.doppler_relativistic(1 * u.AA)).value  # noqa: E731
    assert w.absorption_lo_A[0, 0] == pytest.approx(lam0 * d(vm) * (1 + z), rel=1e-12)
    assert w.absorption_hi_A[0, 0] == pytest.approx(lam0 * (1 + z), rel=1e-12)
    assert w.trough_A[0, 0] == pytest.approx(lam0 * d(vp) * (1 + z), rel=1e-12)
    assert w.emission_hi_A[0, 0] == pytest.approx(lam0 / d(vm) * (1 + z), rel=1e-12)


# ------------------------------------------------------------------------------------ LTE constants

def test_sobolev_prefactor_from_codata():
    # pi e^2 / (m_e c) in Gaussian units = e^2 / (4 eps0 m_e c) in SI; CODATA 2018 values typed in
    # (astropy may carry a later CODATA release: m_e and eps0 moved by ~1e-9 relative since).
    e, m_e, c, eps0 = 1.602176634e-19, 9.1093837015e-31, 299792458.0, 8.8541878128e-12
    si_m2_s = e**2 / (4 * eps0 * m_e * c)
    assert SOBOLEV_PREFACTOR_CM2_S == pytest.approx(si_m2_s * 1e4, rel=CODATA_RELEASE_REL)
    assert SOBOLEV_PREFACTOR_CM2_S == pytest.approx(2.654009e-2, rel=1e-6)  # computed from CODATA 2018


def test_saha_constant_from_codata():
    # (2 pi m_e k / h^2)^(3/2) with CODATA 2018 values typed in, converted to cm^-3 K^-3/2
    m_e, k, h = 9.1093837015e-31, 1.380649e-23, 6.62607015e-34
    assert SAHA_CONSTANT == pytest.approx((2 * np.pi * m_e * k / h**2) ** 1.5 * 1e-6, rel=CODATA_RELEASE_REL)
    assert SAHA_CONSTANT == pytest.approx(2.414683e15, rel=1e-6)  # computed from CODATA 2018


def test_hydrogen_half_ionized_near_9600_K():
    # Carroll & Ostlie, An Introduction to Modern Astrophysics (Saha equation example, from memory):
    # hydrogen is half ionized near 9600 K for an electron pressure of 20 N m^-2 with U_I = 2, U_II = 1,
    # chi = 13.6 eV.
    from scipy.optimize import brentq

    k = const.k_B.cgs.value
    p_e = 20.0 * 10.0  # 20 N m^-2 = 200 dyn cm^-2
    t_half = brentq(lambda t: saha_log_ratio(t, p_e / (k * t), 13.6, 2.0, 1.0), 5000.0, 20000.0)
    assert t_half == pytest.approx(9600.0, rel=0.02)
