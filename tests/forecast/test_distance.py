"""The numpy Planck18 distance <-> redshift against astropy.cosmology (an independent implementation)."""
import numpy as np
import pytest

from kncast.forecast import distance as D


def test_parameters_match_astropy_planck18():
    from astropy.cosmology import Planck18

    # astropy's Planck18 (Planck Collaboration 2020, A&A 641, A6): derived densities within 1e-9
    _, om0, og0, ode0, *_ = D._P18
    assert om0 == Planck18.Om0
    assert og0 == pytest.approx(Planck18.Ogamma0, rel=1e-9)
    assert ode0 == pytest.approx(Planck18.Ode0, rel=1e-9)


@pytest.mark.parametrize("z", [2e-6, 1e-4, 0.009, 0.05, 0.3, 1.0, 2.5, 6.0, 9.5])
def test_luminosity_distance_matches_astropy(z):
    from astropy.cosmology import Planck18

    # independent: astropy.cosmology Planck18.luminosity_distance (scipy quad)
    assert D.distance_for_redshift(z) == pytest.approx(Planck18.luminosity_distance(z).value, rel=1e-6)


@pytest.mark.parametrize("d", [0.5, 10.0, 40.0, 200.0, 1500.0, 3e4, 1e5])
def test_redshift_matches_astropy_z_at_value(d):
    import astropy.units as u
    from astropy.cosmology import Planck18, z_at_value

    # independent: astropy's z_at_value on Planck18.luminosity_distance
    ref = float(z_at_value(Planck18.luminosity_distance, d * u.Mpc, zmin=D.HUBBLE_LAW_BELOW_Z, zmax=14.5))
    assert D.redshift_for_distance(d) == pytest.approx(ref, rel=1e-6)
    assert D.redshift_for_distance(d, Planck18) == pytest.approx(ref, rel=1e-6)


def test_round_trip_and_hubble_law():
    for d in np.geomspace(1e-2, 9e4, 25):  # above the Hubble-law range (D_L(1e-6) = 0.0044 Mpc)
        assert D.distance_for_redshift(D.redshift_for_distance(d)) == pytest.approx(d, rel=1e-9)
    # below z = 1e-6 the Hubble law: z = d H0 / c (H0 = 67.66 km/s/Mpc, c = 299792.458 km/s, CODATA)
    assert D.redshift_for_distance(1e-3) == pytest.approx(1e-3 * 67.66 / 299792.458, rel=1e-5)


def test_import_does_not_load_astropy_cosmology():
    import subprocess
    import sys

    code = "import sys, kncast.forecast.source; print('astropy.cosmology' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
