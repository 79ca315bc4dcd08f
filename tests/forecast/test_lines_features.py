"""kncast.forecast.features: shapes, ranking, blends, velocity overrides and airmass broadcasting."""
from __future__ import annotations

import numpy as np
import pytest

from kncast.forecast.errors import ForecastInputError
from kncast.forecast.features import Epochs, epochs_from, forecast_features
from kncast.forecast.linelist import LineList

from conftest import ROOT as _ROOT  # noqa: E402

SOURCE_DATA = _ROOT / "forecast" / "data"  # the source tree's data folder (candidates are not installed)


def _epochs(n=3, vp=0.2, vm=0.35):
    return Epochs(np.linspace(1.5, 6.0, n), np.linspace(1.5, 6.0, n), np.linspace(5500.0, 3000.0, n),
                  np.full(n, vp), np.full(n, vm), 0.02, 0.04)


@pytest.fixture(scope="module")
def setups():
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    refs = all_setups(SiteRegistry.load([]))[:5]
    return [r.setup for r in refs], [r.id for r in refs]


@pytest.fixture(scope="module")
def with_left_out(tmp_path_factory):
    """(line list, composition): the bundled list plus the candidate features the selection rule leaves
    out (He I 10830, Cs I D, [Te III]) as a user's own file, and the bundled mixture plus their elements."""
    from astropy.table import Table

    from kncast.forecast.linelist import DEFAULT_PATH
    from kncast.forecast.lte import Composition

    tmp = tmp_path_factory.mktemp("left_out")
    cand = Table.read(SOURCE_DATA / "candidates" / "line_candidates.ecsv", format="ascii.ecsv")
    cand[np.isin(np.asarray(cand["feature"]).astype(str), ["he1-10830", "cs1-d", "te3-21050"])].write(
        tmp / "left_out.ecsv", format="ascii.ecsv")
    bundled = Composition.load()
    fractions = dict(zip(bundled.elements, bundled.mass_fraction)) | {"He": 0.01, "Cs": 0.01, "Te": 0.01}
    (tmp / "ab.toml").write_text("[abundances]\n[abundances.mass_fraction]\n"
                                 + "".join(f"{e} = {x}\n" for e, x in fractions.items()))
    return LineList.merge([LineList.load(), LineList.load(tmp / "left_out.ecsv")]), Composition.load(tmp / "ab.toml")


@pytest.fixture(scope="module")
def tellurics():
    from kncast.forecast.tellurics import TelluricModel

    return TelluricModel.load()


def test_shapes_and_ranking(setups, tellurics):
    s, ids = setups
    fc = forecast_features(_epochs(), None, None, s, tellurics, setup_ids=ids)
    n, nf = 3, len(fc.features)
    assert fc.tau.shape == (n, nf) and fc.coverage.shape == (n, nf, len(s)) and fc.verdict.shape == (n, nf, len(s))
    for i in range(n):
        t = fc.tau[i, fc.rank[i]]
        known = t[np.isfinite(t)]
        assert np.all(np.diff(known) <= 0) and np.all(np.isfinite(t[:known.size]))
    assert np.all(fc.telluric_loss <= fc.coverage + 1e-12)


def test_blend_trough_at_strongest_member():
    ll = LineList.load()
    fc = forecast_features(_epochs(1), None, ll, [])
    f = [k for k, feat in enumerate(fc.features) if feat.id == "ba2-red"][0]
    members = list(fc.features[f].members)
    strongest = members[int(np.argmax(fc.tau_lines[0, members]))]
    assert fc.trough_member[0, f] == strongest
    assert fc.tau[0, f] == pytest.approx(fc.tau_lines[0, strongest])
    # the blend spans its members: absorption up to the reddest rest wavelength (x (1 + z))
    assert fc.windows.absorption_hi_A[0, f] == pytest.approx(ll.wavelength_A[members].max() * 1.02)


def test_per_epoch_airmass_broadcasts(setups, tellurics):
    s, ids = setups
    ep = _epochs()
    one = forecast_features(ep, None, None, s, tellurics, airmass=2.0, setup_ids=ids)
    per_epoch = forecast_features(ep, None, None, s, tellurics, airmass=np.full((3, 1, 1), 2.0), setup_ids=ids)
    assert np.allclose(one.telluric_loss, per_epoch.telluric_loss)
    low = forecast_features(ep, None, None, s, tellurics, airmass=1.0, pwv_mm=1.0, setup_ids=ids)
    assert np.all(low.telluric_loss <= one.telluric_loss + 1e-12)


def test_velocity_overrides():
    ep = epochs_from(_epochs(), vphot_c=0.1)
    assert np.all(ep.v_phot_c == 0.1) and np.all(ep.v_max_c == 0.35)
    with pytest.raises(ForecastInputError, match="below the outer velocity"):
        epochs_from(_epochs(), vphot_c=0.4)
    with pytest.raises(ForecastInputError, match="vmax_c"):
        epochs_from(_epochs(), vmax_c=0.9)


def test_features_form_at_the_models_line_forming_velocity():
    # past the temperature floor / heating cap the blackbody radius recedes; the troughs and the LTE
    # density follow the line-forming velocity instead (kncast.forecast.photosphere)
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient

    for name in ("powerlaw", "heating"):
        tr = Transient(build_model({"name": name}), distance_mpc=100.0)
        st, ep = tr.state([1.0, 5.0]), epochs_from(tr, [1.0, 5.0])
        assert np.array_equal(ep.v_phot_c, st.v_line_c)
        assert st.v_phot_c[1] < st.v_line_c[1]


def test_faster_ejecta_shift_troughs_bluer():
    slow = forecast_features(_epochs(1, 0.1, 0.2), None, None, [])
    fast = forecast_features(_epochs(1, 0.25, 0.4), None, None, [])
    assert np.all(fast.windows.trough_A < slow.windows.trough_A)
    assert np.all(fast.windows.absorption_lo_A < slow.windows.absorption_lo_A)


def test_epoch_rows_json_ready(setups, tellurics, with_left_out):
    import json

    s, ids = setups
    ll, comp = with_left_out
    rows = forecast_features(_epochs(2), None, ll, s, tellurics, setup_ids=ids, composition=comp).epoch_rows()
    text = json.dumps(rows, allow_nan=False)
    assert '"tau_sobolev": null' in text  # Cs I and [Te III] have no strength estimate


def test_model_photosphere_at_the_outer_edge_is_allowed():
    # early times: a model photosphere may sit at v_max; what-if overrides must leave a shell
    fc = forecast_features(_epochs(2, 0.35, 0.35), None, None, [])
    assert np.all(np.isfinite(fc.lte.density_g_cm3))
    with pytest.raises(ForecastInputError, match="below the outer velocity"):
        epochs_from(_epochs(), vphot_c=0.3, vmax_c=0.3)


def test_rounding_overshoot_of_the_model_photosphere_is_clipped():
    ep = epochs_from(_epochs(2, 0.35 * (1 + 1e-12), 0.35))
    assert np.all(ep.v_phot_c <= ep.v_max_c)


def test_non_lte_feature_has_no_tau_and_ranks_with_the_unknowns(with_left_out):
    # He I 10830 (lower level 19.8 eV, lte = false): no LTE estimate, not a "weak" line
    from kncast.forecast.features import NON_LTE_NOTE

    ll, comp = with_left_out
    fc = forecast_features(_epochs(3), None, ll, [], composition=comp)
    ids = [f.id for f in fc.features]
    he = ids.index("he1-10830")
    assert not fc.lte_valid[he] and fc.lte_valid[ids.index("sr2-nir")]
    assert np.all(np.isnan(fc.tau[:, he])) and np.all(np.isnan(fc.tau_lines[:, list(fc.features[he].members)]))
    for i in range(3):
        order = list(fc.rank[i])
        n_known = int(np.isfinite(fc.tau[i]).sum())
        assert order.index(he) >= n_known
    rows = fc.epoch_rows()
    rec = next(f for f in rows[0]["features"] if f["feature"] == "he1-10830")
    assert rec["lte"] is False and rec["tau_sobolev"] is None and rec["members_tau_sobolev"] == [None] * 3
    assert all(f["lte"] for f in rows[0]["features"] if f["feature"] != "he1-10830")
    assert NON_LTE_NOTE == "non-LTE: no LTE estimate"


def test_epochs_hotter_than_the_lte_tables_get_no_estimate_instead_of_an_error():
    # a power-law photosphere minutes after t0 is hotter than 1e5 K (T ~ t^-1/2 from 6300 K at 1 d):
    # the feature forecast gives no LTE estimate there (tau NaN) and still forecasts the later epochs
    from kncast.forecast.photosphere import PowerLawPhotosphere
    from kncast.forecast.source import Transient

    t = Transient(PowerLawPhotosphere(), distance_mpc=100.0)
    assert t.state([0.0005]).temperature_K[0] > 1e5
    fc = forecast_features(t, np.array([0.0005, 1.0]))
    assert not np.isfinite(fc.tau[0]).any() and np.isfinite(fc.tau[1]).any()
