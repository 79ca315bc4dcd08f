"""What each feature will show: per-feature measurements for epochs x setups under one sky.

:func:`measure` takes a feature forecast (:func:`kncast.forecast.features.forecast_features`),
the rows (epochs) and columns (setups) to evaluate, the observing conditions of each row and
the time spent, and returns, per epoch x feature x setup, the observed trough and its arm,
the continuum S/N per velocity bin and per resolution element, the expected depth, the
detection significance and the time reaching the target significance
(:mod:`kncast.forecast.detect`), and the telluric losses over the trough (v_phot to v_max)
and over the emission peak, bands transmitting at least
:data:`kncast.forecast.defaults.CORRECTABLE_TRANSMISSION` counting as correctable.  One
batched exposure evaluation for all rows and columns: no loop over epochs.

A trough counts only where it is measured: on the detector (arm coverage, detector and
dichroic gaps as in :mod:`kncast.forecast.coverage`), outside opaque telluric bands, and
above the atmospheric cut-off (extinction below
:data:`kncast.forecast.defaults.UV_CUTOFF_MAG_PER_AIRMASS` mag per airmass).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kncast.forecast.defaults import (DEFAULT_BIN_KMS, DEFAULT_MAX_EXPOSURE_S, DEFAULT_MIN_DEPTH, DEFAULT_SIGMA,
                                      UV_CUTOFF_MAG_PER_AIRMASS, CORRECTABLE_TRANSMISSION)

TROUGH_SAMPLES = 9  # places across the trough (v_phot .. v_max) where the continuum S/N may be measured
DRAW_CHUNK_VALUES = 2**16  # draws x setups x epochs x features per chunk of the draws' detection

__all__ = ["Measurements", "measure", "feature_record", "feature_words", "diagnostic_mask"]


@dataclass
class Measurements:
    """Arrays (n_rows, n_features, n_cols) unless noted; ``rows``/``cols`` index the forecast's epochs/setups."""

    rows: np.ndarray
    cols: list
    trough_A: np.ndarray                 # (n_rows, n_features), vacuum observed A
    depth: np.ndarray                    # (n_rows, n_features); NaN: no LTE estimate
    lte: np.ndarray                      # (n_features,) bool
    arm: np.ndarray                      # str, '' off the detector
    measured_A: np.ndarray               # where the continuum S/N is measured: the trough, or the nearest usable
    snr_bin: np.ndarray
    snr_resel: np.ndarray
    n_bins: np.ndarray
    significance: np.ndarray
    time_to_sigma_s: np.ndarray          # inf where unreachable
    nexp_to_sigma: np.ndarray
    usable_trough: np.ndarray            # fraction of the trough measured
    telluric_loss_trough: np.ndarray     # fraction of the trough in opaque bands (on the detector)
    telluric_correctable_trough: np.ndarray
    telluric_loss_emission: np.ndarray   # fraction of the emission peak in opaque bands (on the detector)
    below_cutoff: np.ndarray             # (n_rows, n_features) bool
    settings: dict = field(default_factory=dict)
    # with ``flux_scale``: per draw (n_draws, n_rows, n_features, n_cols)
    draw_significance: np.ndarray | None = None
    draw_snr_bin: np.ndarray | None = None
    draw_time_to_sigma_s: np.ndarray | None = None


def measure(transient, fc, rows, cols, refs, conditions, airmass, pwv_mm, time_s, tellurics, atmosphere,
            sigma=DEFAULT_SIGMA, bin_kms=DEFAULT_BIN_KMS, max_exposure_s=DEFAULT_MAX_EXPOSURE_S,
            telluric_threshold=CORRECTABLE_TRANSMISSION, flux_scale=None) -> Measurements:
    """Per-feature measurements of forecast epochs ``rows`` in setups ``cols`` (indices into ``refs``,
    the forecast's setup order), all under one ``atmosphere``.

    ``flux_scale`` (n_draws,): the source flux multiplied by each factor (e.g. (D / D_draw)^2 for distance
    draws), evaluated in one broadcast call; the per-draw significance, S/N per bin and time to sigma
    are returned in ``draw_*`` (the sky, background and detector terms do not change).

    ``conditions``: kncast.forecast.exposure.Conditions whose arrays have one value per row (or scalars);
    ``airmass``, ``pwv_mm``, ``time_s`` (total on the target, s): scalars or arrays (n_rows,).
    Telluric bands transmitting at least ``telluric_threshold`` are divided out (correctable); below it the
    trough is lost there.
    """
    from kncast.forecast import exposure as ex
    from kncast.forecast.detect import absorption_depth, detect

    rows = np.asarray(rows, dtype=int)
    n_rows, n_feat, n_cols, k = rows.size, fc.tau.shape[1], len(cols), TROUGH_SAMPLES
    w = fc.windows
    lam = w.trough_A[rows]                                             # (R, F)
    lo, hi = trough_window(w, rows)
    # samples from the trough (v_phot) towards the blue edge (v_max): the continuum is measured at the
    # first one that is on the detector, above the cut-off and outside opaque bands
    lam_k = hi[..., None] - (hi - lo)[..., None] * np.linspace(0.0, 1.0, k)          # (R, F, K)
    flat = lam_k.ravel()
    per_row = lambda v: np.repeat(np.broadcast_to(np.asarray(v, float), (n_rows,)), n_feat)  # noqa: E731
    x_flat, pwv_flat, t_flat = per_row(airmass), per_row(pwv_mm), per_row(time_s)
    flux = _trough_flux(transient, fc.epochs.phase_d[rows], lam_k.reshape(n_rows, -1)).ravel()
    grids = [ex.setup_grid(refs[c].telescope, refs[c].instrument, refs[c].setup, wavelength_A=flat) for c in cols]
    tell = np.ones_like(flat) if tellurics is None else tellurics.transmission(flat, np.repeat(x_flat, k),
                                                                               np.repeat(pwv_flat, k))
    r = ex.rates(flux[None, :], ex.stack_grids(grids), _flat_conditions(conditions, n_rows, n_feat * k), tell)
    ok = r.on_detector & (tell >= telluric_threshold) & (atmosphere.k_mag(flat) <= UV_CUTOFF_MAG_PER_AIRMASS)
    ok = ok.reshape(n_cols, n_rows * n_feat, k)
    pick = np.argmax(ok, axis=-1)                                      # first usable sample (0: none)
    r = _picked(r, pick, ok.any(axis=-1), k)                           # (C, R*F)
    nexp = np.maximum(1, np.ceil(t_flat / max_exposure_s - 1e-9)).astype(int)
    res = ex.expose(r, t_flat, nexp)
    lte = _lte_flags(fc)
    depth = np.where(lte[None, :], absorption_depth(fc.tau[rows]), np.nan)
    cutoff = atmosphere.k_mag(lam) > UV_CUTOFF_MAG_PER_AIRMASS
    losses = _losses(fc, rows, cols, refs, tellurics, airmass, pwv_mm, telluric_threshold)
    usable = np.where(cutoff[..., None], 0.0, losses["usable"])       # (R, F, C)
    det = detect(r, res, depth.ravel()[None, :], lo.ravel()[None, :], hi.ravel()[None, :],
                 np.moveaxis(usable, -1, 0).reshape(n_cols, -1), sigma=sigma, bin_kms=bin_kms,
                 max_exposure_s=max_exposure_s)
    back = lambda a: np.moveaxis(np.asarray(a).reshape(n_cols, n_rows, n_feat), 0, -1)  # noqa: E731
    draws = {}
    if flux_scale is not None:
        scale = np.asarray(flux_scale, dtype=float)
        usable_flat = np.moveaxis(usable, -1, 0).reshape(n_cols, -1)
        # the draws in chunks of at most DRAW_CHUNK_VALUES values per array: a detection's temporaries
        # stay a few MB however many epochs and draws (the results are the same, chunk by chunk)
        step = max(1, DRAW_CHUNK_VALUES // max(1, n_cols * n_rows * n_feat))
        parts = []
        for start in range(0, scale.size, step):
            r_d = _scaled(r, scale[start:start + step])
            d = detect(r_d, ex.expose(r_d, t_flat, nexp), depth.ravel()[None, :], lo.ravel()[None, :],
                       hi.ravel()[None, :], usable_flat, sigma=sigma, bin_kms=bin_kms, max_exposure_s=max_exposure_s)
            n = min(step, scale.size - start)
            parts.append([np.reshape(a, (n, n_cols, n_rows, n_feat)) for a in (d.significance, d.snr_bin,
                                                                              d.time_to_sigma_s)])
        joined = [np.moveaxis(np.concatenate(arrays), 1, -1) for arrays in zip(*parts)]  # (n_draws, R, F, C)
        draws = dict(zip(("draw_significance", "draw_snr_bin", "draw_time_to_sigma_s"), joined))
    arms = np.stack([_take(_arm_names(g).reshape(-1, k), pick[j]) for j, g in enumerate(grids)])
    arms = np.where(r.on_detector, arms, "")
    return Measurements(
        rows=rows, cols=list(cols), trough_A=lam, depth=depth, lte=lte, arm=back(arms),
        measured_A=back(r.wavelength_A), snr_bin=back(det.snr_bin), snr_resel=back(det.snr_resel),
        n_bins=back(det.n_bins), significance=back(det.significance), time_to_sigma_s=back(det.time_to_sigma_s),
        nexp_to_sigma=back(det.nexp_to_sigma), usable_trough=usable,
        telluric_loss_trough=losses["opaque_trough"], telluric_correctable_trough=losses["correctable_trough"],
        telluric_loss_emission=losses["opaque_emission"], below_cutoff=cutoff,
        settings={"sigma": float(sigma), "bin_kms": float(bin_kms)}, **draws)


def _scaled(r, scale):
    """Rates with the source multiplied by each of ``scale`` (n_draws,): arrays gain a leading draws axis."""
    from kncast.forecast.exposure import scale_source

    return scale_source(r, np.asarray(scale, dtype=float).reshape((-1,) + (1,) * np.ndim(r.source_e_per_s)))


def _take(a, pick):
    """``a[..., pick]`` along the last axis (``pick`` one index per row)."""
    return np.take_along_axis(a, pick[..., None], axis=-1)[..., 0]


def _picked(r, pick, usable, k: int):
    """Rates at the chosen sample of each trough: fields (C, N*K) -> (C, N); unusable troughs off the detector."""
    import dataclasses

    shape = r.wavelength_A.shape
    fields = {f.name: _take(np.broadcast_to(np.asarray(getattr(r, f.name)), shape).reshape(shape[0], -1, k), pick)
              for f in dataclasses.fields(r)}
    fields["on_detector"] = usable
    return type(r)(**fields)


def trough_window(windows, rows):
    """(lo, hi) vacuum A of the trough where a feature is measured: from the blue edge at v_max to the
    trough at v_phot (rows x features)."""
    lo = windows.absorption_lo_A[rows]
    return lo, np.maximum(windows.trough_A[rows], lo + 1e-3)


def _trough_flux(transient, phase_d, lam):
    """Observed continuum F_lambda at each row's own troughs (rows x features), linear in the rows."""
    return transient.flux_flam_rows(np.asarray(phase_d, float), lam)


def _flat_conditions(cond, n_rows: int, n_feat: int):
    """Conditions with per-row arrays repeated over the features (flat rows x features axis)."""
    import dataclasses

    def flat(v):
        a = np.asarray(v, dtype=float)
        return np.repeat(np.broadcast_to(a, (n_rows,)), n_feat) if a.ndim else v

    moon = cond.moon
    if moon is not None:
        moon = dataclasses.replace(moon, **{f.name: flat(getattr(moon, f.name)) for f in dataclasses.fields(moon)})
    return dataclasses.replace(cond, airmass=flat(cond.airmass), seeing_arcsec=flat(cond.seeing_arcsec),
                               pwv_mm=flat(cond.pwv_mm), moon=moon)


def _lte_flags(fc) -> np.ndarray:
    """(n_features,) True where the line strengths have an LTE estimate (FeatureForecast.lte_valid)."""
    return np.asarray(fc.lte_valid, dtype=bool)


def _losses(fc, rows, cols, refs, tellurics, airmass, pwv_mm, threshold) -> dict:
    """Trough and emission-peak fractions per setup: measured (on the detector and not opaque), opaque and
    correctable (bands transmitting at least the threshold)."""
    from kncast.forecast.coverage import window_fractions

    w = fc.windows
    lo, hi = trough_window(w, rows)
    elo, ehi = w.emission_lo_A[rows], w.emission_hi_A[rows]
    x = np.asarray(airmass, float).reshape(-1, 1) if np.ndim(airmass) else airmass
    p = np.asarray(pwv_mm, float).reshape(-1, 1) if np.ndim(pwv_mm) else pwv_mm
    shape = lo.shape + (len(cols),)
    out = {k: np.zeros(shape) for k in ("usable", "opaque_trough", "correctable_trough", "opaque_emission")}
    for j, c in enumerate(cols):  # a loop over setups only; each step is vectorized over all epochs and features
        setup = refs[c].setup
        covered = window_fractions(lo, hi, setup)["coverage"]
        if tellurics is None:
            opaque = correct = e_opaque = np.zeros(lo.shape)
        else:
            cov = setup.covered_intervals_A()
            opaque, correct = tellurics.opaque_and_correctable(lo, hi, x, p, covered_A=cov, threshold=threshold)
            e_opaque, _ = tellurics.opaque_and_correctable(elo, ehi, x, p, covered_A=cov, threshold=threshold)
        out["usable"][..., j] = np.clip(covered - opaque, 0.0, 1.0)
        out["opaque_trough"][..., j], out["correctable_trough"][..., j] = opaque, correct
        out["opaque_emission"][..., j] = e_opaque
    return out


def _arm_names(grid) -> np.ndarray:
    names = np.array(list(grid.arm_names) + [""], dtype=object)
    idx = np.where(grid.on_detector, grid.arm_index, len(grid.arm_names))
    return names[idx].astype(str)


def diagnostic_mask(m: Measurements, chosen=None, feature_ids=None, min_depth=DEFAULT_MIN_DEPTH) -> np.ndarray:
    """(n_rows, n_features) True for the diagnostic targets: the ``chosen`` feature ids, or by default
    every feature with an LTE estimate whose expected depth is at least ``min_depth`` at that epoch."""
    if chosen:
        ids = np.array(list(feature_ids))
        return np.broadcast_to(np.isin(ids, list(chosen))[None, :], m.depth.shape)
    with np.errstate(invalid="ignore"):
        return np.isfinite(m.depth) & (m.depth >= min_depth)


def _r(v, nd):
    if v is None:
        return None
    v = float(v)
    return round(v, nd) if np.isfinite(v) else None


def _sig(v, digits: int = 5):
    """``v`` to ``digits`` significant figures (None when not finite)."""
    v = float(v)
    return float(f"{v:.{digits}g}") if np.isfinite(v) else None


def feature_record(m: Measurements, i: int, f: int, j: int, feature) -> dict:
    """The JSON record of feature ``f`` at row ``i`` in column ``j`` (keys documented in docs/json.md)."""
    t = float(m.time_to_sigma_s[i, f, j])
    return {"id": feature.id, "species": feature.species, "trough_A": _r(m.trough_A[i, f], 1),
            "measured_A": _r(m.measured_A[i, f, j], 1) if m.arm[i, f, j] else None,
            "arm": str(m.arm[i, f, j]) or None, "snr_bin": _sig(m.snr_bin[i, f, j]),
            "snr_resel": _sig(m.snr_resel[i, f, j]), "depth": _sig(m.depth[i, f]),
            "n_bins": _sig(m.n_bins[i, f, j]), "significance": _sig(m.significance[i, f, j]),
            "time_to_sigma_s": _r(t, 1) if np.isfinite(t) else None,
            "usable_trough": _r(m.usable_trough[i, f, j], 4),
            "telluric_loss_trough": _r(m.telluric_loss_trough[i, f, j], 4),
            "telluric_correctable_trough": _r(m.telluric_correctable_trough[i, f, j], 4),
            "telluric_loss_emission": _r(m.telluric_loss_emission[i, f, j], 4),
            "below_cutoff": bool(m.below_cutoff[i, f]), "lte": bool(m.lte[f])}


def feature_words(feature) -> str:
    """'Sr II 10039 A' : the species and its first rest wavelength (vacuum)."""
    return f"{feature.species} {feature.rest_vac_A[0]:.0f} A"


def records_for_setups(transient, fc, refs, airmass: float, pwv_mm: float, time_s: float, tellurics,
                       sigma=DEFAULT_SIGMA, bin_kms=DEFAULT_BIN_KMS,
                       telluric_threshold=CORRECTABLE_TRANSMISSION) -> list:
    """Feature records (:func:`feature_record`) for every epoch x feature x setup of ``fc`` (setups in
    ``refs`` order), for ``time_s`` seconds at ``airmass`` and ``pwv_mm`` under a dark sky, each setup with
    its site's seeing and extinction.  Returns nested lists [epoch][feature][setup]."""
    from kncast.forecast.exposure import Conditions
    from kncast.forecast.extinction_atm import atmosphere_for_site

    n, nf = fc.tau.shape
    out = [[[None] * len(refs) for _ in range(nf)] for _ in range(n)]
    by_site: dict = {}
    for k, r in enumerate(refs):
        by_site.setdefault(r.site.id, []).append(k)
    rows = np.arange(n)
    for cols in by_site.values():  # one batched evaluation per site (a handful of sites)
        atm = atmosphere_for_site(refs[cols[0]].site)
        cond = Conditions(airmass=airmass, seeing_arcsec=atm.seeing_arcsec, moon=None, pwv_mm=pwv_mm,
                          atmosphere=atm)
        m = measure(transient, fc, rows, cols, refs, cond, airmass, pwv_mm, time_s, tellurics, atm,
                    sigma=sigma, bin_kms=bin_kms, telluric_threshold=telluric_threshold)
        for i in range(n):
            for f in range(nf):
                for j, k in enumerate(cols):
                    out[i][f][k] = feature_record(m, i, f, j, fc.features[f])
    return out


def feature_short(feature) -> str:
    """A short trade name: 'Sr II 1.0um', 'Ca II 0.85um' in the near-IR, 'Ba II 4554' in the optical (rest, vacuum A)."""
    lam = feature.rest_vac_A[0]
    if lam >= 9500.0:
        return f"{feature.species} {lam / 1e4:.1f}um"
    return f"{feature.species} {lam / 1e4:.2f}um" if lam >= 8000.0 else f"{feature.species} {lam:.0f}"


def feature_short_names() -> dict:
    """Feature id -> short trade name for the bundled line list."""
    from kncast.forecast.linelist import LineList

    return {f.id: feature_short(f) for f in LineList.load().features()}


def measure_sites(plan, fc, epochs: list, by_site: dict, refs: list, transient, flux_scale=None):
    """Yield (site id, its setups, row indices, usable seconds, Measurements) for every site with planned
    epochs: one batched :func:`measure` per site with each epoch's window conditions and usable time."""
    from kncast.planner.observation import batched_conditions, forecast_airmass

    st = plan.settings
    column = {r.id: k for k, r in enumerate(refs)}
    site_of = np.array([p.site.id for p in epochs])
    for site_id, site_refs in by_site.items():  # one batched evaluation per site (a handful of sites)
        rows = np.flatnonzero(site_of == site_id)
        if not (site_refs and rows.size):
            continue
        windows = [epochs[i].window for i in rows]
        atm = plan.atmospheres[site_id]
        seconds = np.array([max(epochs[i].hours_available, 0.0) * 3600.0 for i in rows])
        m = measure(transient, fc, rows, [column[r.id] for r in site_refs], refs, batched_conditions(windows, atm),
                    np.array([forecast_airmass(w) for w in windows]), atm.pwv_mm, np.maximum(seconds, 1.0),
                    plan.tellurics, atm, sigma=st["sigma"], bin_kms=st["bin_kms"],
                    telluric_threshold=st["telluric_threshold"], flux_scale=flux_scale)
        yield site_id, site_refs, rows, seconds, m
        del m  # one site's measurements alive at a time (with draws: MBs per site)
