"""What every setup measures, tabulated once per model realisation, phase and airmass.

For each photosphere realisation (a draw of the ejecta parameters), each observer-frame phase node
and each airmass node, :func:`kncast.planner.measure.measure` finds, per diagnostic feature and setup,
where the trough's continuum is measured (on the detector, outside opaque telluric bands, above the
atmospheric cut-off), its expected depth and its usable velocity bins; the electron rates there
(:func:`kncast.forecast.exposure.rates`, dark sky) are stored at a reference distance.  A simulated
event at luminosity distance D and redshift z then has source rates scaled by (D_ref / D)^2 (1 + z_ref) / (1 + z)
(F_lambda of :class:`kncast.forecast.source.Transient`) and its significance
follows from the CCD equation for its usable time (:func:`significance`), as in
:mod:`kncast.forecast.detect`: significance = depth x snr_bin x sqrt(n_bins).

Stated approximations: the spectrum's shape and the age are those at D_ref (inside the largest horizon
allowed, 600 Mpc or z = 0.12, the features move by < 12 % of their 0.1-0.3 c width); the dark sky (no Moon).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S

C_KMS = 299792.458  # speed of light, km/s (CODATA, exact)
TABLE_TIME_S = 3600.0  # time of the reference measurement (only its rates are kept)


@dataclass
class Table:
    """Rates at the measured trough of every diagnostic feature, arrays (K, P, A, F, C).

    K model realisations, P phase nodes (observer-frame d), A airmass nodes, F features, C setups
    (``setup_ids`` order).  ``weight`` = depth x sqrt(n_bins x pixels per bin), 0 where the feature is
    not a diagnostic target or not measured; rates in e- s^-1 at ``ref_distance_mpc``.
    """

    phases_d: np.ndarray
    airmass: np.ndarray
    setup_ids: list
    feature_ids: list
    ref_distance_mpc: float
    weight: np.ndarray
    source: np.ndarray
    n_pix: np.ndarray
    sky: np.ndarray
    dark: np.ndarray
    read_var: np.ndarray
    ppb: np.ndarray          # detector pixels per velocity bin (at least 1)
    ref_redshift: float = 0.0  # redshift at ref_distance_mpc (Planck18)

    def node(self, phase_d, airmass):
        """Indices of the nearest phase node and of the first airmass node at or above ``airmass``."""
        p = np.clip(np.rint(np.interp(phase_d, self.phases_d, np.arange(self.phases_d.size))), 0,
                    self.phases_d.size - 1).astype(int)
        a = np.clip(np.searchsorted(self.airmass, np.asarray(airmass) - 1e-9), 0, self.airmass.size - 1)
        return p, a


def significance(table: Table, k, p, a, cols, scale, time_s):
    """Significance of every feature (..., F, len(cols)) for realisation ``k``, nodes ``p``/``a`` (arrays of
    one shape), flux scale ``scale`` = (D_ref / D)^2 and total time ``time_s`` (s, > 0) split into
    exposures of at most DEFAULT_MAX_EXPOSURE_S."""
    from kncast.forecast.ccd import snr_from_rates

    idx = (np.asarray(k)[..., None, None], np.asarray(p)[..., None, None], np.asarray(a)[..., None, None],
           np.arange(len(table.feature_ids))[:, None], np.asarray(cols)[None, :])
    t = np.asarray(time_s, float)[..., None, None]
    nexp = np.maximum(1, np.ceil(t / DEFAULT_MAX_EXPOSURE_S - 1e-9))
    src = table.source[idx] * np.asarray(scale, float)[..., None, None]
    snr_pix = snr_from_rates(t, nexp, src, table.n_pix[idx], table.sky[idx], table.dark[idx], table.read_var[idx])
    return np.where(table.weight[idx] > 0, table.weight[idx] * np.nan_to_num(snr_pix), 0.0)


def build_table(photospheres, refs, phases_d, airmass, ref_distance_mpc, sigma, bin_kms, min_depth,
                telluric_threshold) -> Table:
    """The :class:`Table` of ``photospheres`` (built models) for setups ``refs`` (SetupRef)."""
    from kncast.forecast.features import forecast_features
    from kncast.forecast.source import Transient
    from kncast.forecast.tellurics import TelluricModel

    phases_d, airmass = np.asarray(phases_d, float), np.asarray(airmass, float)
    tellurics = TelluricModel.load()
    by_site: dict = {}
    for c, r in enumerate(refs):
        by_site.setdefault(r.site.id, []).append(c)
    out = None
    for k, ph in enumerate(photospheres):  # a handful of model realisations
        tr = Transient(ph, distance_mpc=ref_distance_mpc)
        fc = forecast_features(tr, phases_d, setups=[r.setup for r in refs], tellurics=tellurics,
                               airmass=float(np.median(airmass)), setup_ids=[r.id for r in refs])
        if out is None:
            shape = (len(photospheres), phases_d.size, airmass.size, len(fc.features), len(refs))
            out = {n: np.zeros(shape) for n in ("weight", "source", "n_pix", "sky", "dark", "read_var", "ppb")}
            out["n_pix"][:] = 1.0
            out["ppb"][:] = 1.0
            features = [f.id for f in fc.features]
        for cols in by_site.values():  # one batched evaluation per site
            _site_rows(out, k, tr, fc, refs, cols, phases_d, airmass, tellurics, sigma, bin_kms, min_depth,
                       telluric_threshold)
    return Table(phases_d=phases_d, airmass=airmass, setup_ids=[r.id for r in refs], feature_ids=features,
                 ref_distance_mpc=float(ref_distance_mpc), ref_redshift=float(tr.redshift), **out)


def _site_rows(out, k, tr, fc, refs, cols, phases_d, airmass, tellurics, sigma, bin_kms, min_depth, threshold):
    """Fill realisation ``k`` of ``out`` for the setups ``cols`` of one site: rows are phase x airmass."""
    from kncast.forecast import exposure as ex
    from kncast.forecast.exposure import Conditions
    from kncast.forecast.extinction_atm import atmosphere_for_site
    from kncast.planner.measure import diagnostic_mask, measure

    n_p, n_a = phases_d.size, airmass.size
    rows = np.repeat(np.arange(n_p), n_a)
    x_rows = np.tile(airmass, n_p)
    atm = atmosphere_for_site(refs[cols[0]].site)
    cond = Conditions(airmass=x_rows, seeing_arcsec=atm.seeing_arcsec, moon=None, pwv_mm=atm.pwv_mm, atmosphere=atm)
    m = measure(tr, fc, rows, cols, refs, cond, x_rows, atm.pwv_mm, TABLE_TIME_S, tellurics, atm, sigma=sigma,
                bin_kms=bin_kms, telluric_threshold=threshold)
    target = diagnostic_mask(m, None, [f.id for f in fc.features], min_depth)     # (R, F)
    n_r, n_f, n_c = m.measured_A.shape
    lam = np.where(m.arm != "", m.measured_A, fc.windows.trough_A[rows][..., None])    # (R, F, C)
    flux = tr.flux_flam(phases_d, lam.reshape(n_p, -1)).reshape(n_p, n_p, n_a, n_f, n_c)
    flux = flux[np.arange(n_p), np.arange(n_p)].reshape(n_r, n_f, n_c)                  # each row its own phase
    grids = [ex.setup_grid(refs[c].telescope, refs[c].instrument, refs[c].setup, wavelength_A=lam[..., j].ravel())
             for j, c in enumerate(cols)]
    x_flat = np.repeat(x_rows, n_f)
    tell = np.stack([tellurics.transmission(lam[..., j].ravel(), x_flat, atm.pwv_mm) for j in range(n_c)])
    cond_flat = Conditions(airmass=x_flat, seeing_arcsec=atm.seeing_arcsec, moon=None, pwv_mm=atm.pwv_mm,
                           atmosphere=atm)
    r = ex.rates(np.moveaxis(flux, -1, 0).reshape(n_c, -1), ex.stack_grids(grids), cond_flat, tell)
    back = lambda v: np.moveaxis(np.broadcast_to(np.asarray(v, float), (n_c, n_r * n_f)).reshape(n_c, n_r, n_f),  # noqa: E731
                                 0, -1).reshape(n_p, n_a, n_f, n_c)
    bin_A = lam * bin_kms / C_KMS
    ppb = np.maximum(bin_A / np.moveaxis(np.asarray(r.dispersion_A_per_pix).reshape(n_c, n_r, n_f), 0, -1), 1.0)
    ok = (m.arm != "") & (m.n_bins > 0) & target[..., None] & np.isfinite(m.depth)[..., None]
    weight = np.where(ok, np.nan_to_num(m.depth)[..., None] * np.sqrt(m.n_bins * ppb), 0.0)
    values = {"weight": weight.reshape(n_p, n_a, n_f, n_c),
              "source": np.where(ok.reshape(n_p, n_a, n_f, n_c), back(r.source_e_per_s), 0.0),
              "n_pix": back(r.n_spatial), "sky": back(r.sky_e_per_s_pix), "dark": back(r.dark_e_per_s_pix),
              "read_var": back(r.read_var_e2), "ppb": ppb.reshape(n_p, n_a, n_f, n_c)}
    for name, v in values.items():
        out[name][k][..., cols] = v
    return m
