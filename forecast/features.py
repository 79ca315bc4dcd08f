"""Per-epoch forecast of diagnostic features: where they land, how strong, which setups see them.

:func:`forecast_features` combines the photosphere (temperature, velocities,
age, ejecta mass), the line list (blended features), the P Cygni windows of
:mod:`kncast.forecast.doppler`, the LTE Sobolev strengths of :mod:`kncast.forecast.lte` and
the coverage kernel of :mod:`kncast.forecast.coverage` into one result, ranked per
epoch by expected strength.

Coverage and losses are evaluated over the whole P Cygni profile of a
feature, absorption blue edge to emission red edge:
[lambda_blue D(v_max), lambda_red / D(v_max)] x (1 + z).

Non-LTE lines (``lte`` false in the line list: lower level above
``NON_LTE_E_LOW_EV``, e.g. He I 10830) get no LTE estimate: their tau is nan, a
feature with such a member reports ``lte`` = false and no tau, and ranks with the
features of unknown strength (last), not as a weak one.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kncast.forecast.defaults import STRONG_TAU

from kncast.forecast.doppler import FeatureWindows, check_velocities, feature_windows
from kncast.forecast.errors import ForecastInputError, check_range
from kncast.forecast.linelist import Feature, LineList
from kncast.forecast.lte import Composition, LTEState, line_optical_depths, lte_state

__all__ = ["Epochs", "FeatureForecast", "epochs_from", "forecast_features", "strong_mask", "STAGE_NAMES",
           "STRONG_TAU", "NON_LTE_NOTE"]

STAGE_NAMES = ("I", "II", "III", "IV")
LTE_T_RANGE_K = (500.0, 1e5)  # photospheric temperatures the LTE ionization balance is computed for (kncast.forecast.lte)
#: What reports show instead of a tau for a non-LTE feature.
NON_LTE_NOTE = "non-LTE: no LTE estimate"


def strong_mask(tau) -> np.ndarray:
    """True where the Sobolev optical depth is finite and >= ``STRONG_TAU`` (any array shape)."""
    tau = np.asarray(tau, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.isfinite(tau) & (tau >= STRONG_TAU)


@dataclass(frozen=True)
class Epochs:
    """Physical conditions per epoch (arrays over n epochs) and the ejecta they belong to.

    ``v_phot_c`` is the photospheric velocity where the features form: from a
    Transient, its line-forming velocity ``PhotosphereState.v_line_c`` (not the
    blackbody radius over c t, which recedes faster once a temperature floor or
    the heating cap is reached; ``kncast.forecast.photosphere``).
    """

    phase_d: np.ndarray
    age_d: np.ndarray
    temperature_K: np.ndarray
    v_phot_c: np.ndarray
    v_max_c: np.ndarray
    redshift: float
    ejecta_mass_msun: float


def epochs_from(source, phases_d=None, vphot_c=None, vmax_c=None) -> Epochs:
    """Epochs from a ``kncast.forecast.source.Transient`` (evaluated at ``phases_d``) or an ``Epochs``.

    ``vphot_c`` / ``vmax_c`` (fractions of c) replace the model's velocities at
    every epoch (what-if questions); the result must keep 0 < v_phot < v_max < 0.8
    (the model's own velocities may have v_phot = v_max: a photosphere at the outer edge).
    """
    if isinstance(source, Epochs):
        ep = source
    else:
        st = source.state(phases_d)
        ep = Epochs(np.asarray(st.phase_d, float), np.asarray(st.age_d, float), np.asarray(st.temperature_K, float),
                    np.asarray(st.v_line_c, float), np.asarray(st.v_max_c, float), float(source.redshift),
                    float(source.ejecta_mass_msun))
    n = ep.phase_d.shape
    vp = ep.v_phot_c if vphot_c is None else np.full(n, float(check_range("vphot_c", vphot_c, 0.0, 0.8,
                                                                             low_open=True, high_open=True)))
    vm = ep.v_max_c if vmax_c is None else np.full(n, float(check_range("vmax_c", vmax_c, 0.0, 0.8,
                                                                           low_open=True, high_open=True)))
    vp, vm = check_velocities(vp, vm, what=_velocity_source(vphot_c, vmax_c),
                              strict=vphot_c is not None or vmax_c is not None)
    return Epochs(ep.phase_d, ep.age_d, ep.temperature_K, vp, vm, ep.redshift, ep.ejecta_mass_msun)


def _velocity_source(vphot_c, vmax_c) -> str:
    given = [n for n, v in (("vphot_c", vphot_c), ("vmax_c", vmax_c)) if v is not None]
    return ("given " + " and ".join(given) + " with the model's other velocity") if len(given) == 1 else \
        ("given vphot_c and vmax_c" if given else "model velocities")


@dataclass
class FeatureForecast:
    """Everything forecast for n epochs x F features x S setups (arrays; see :meth:`epoch_rows`)."""

    epochs: Epochs
    features: list[Feature]
    windows: FeatureWindows                 # (n, F)
    tau: np.ndarray                         # (n, F): strongest member; nan = no estimate (or non-LTE)
    tau_lines: np.ndarray                   # (n, m): every line
    trough_member: np.ndarray               # (n, F): line index setting the trough
    lte: LTEState
    setup_ids: list[str]
    coverage: np.ndarray                    # (n, F, S)
    gap_loss: np.ndarray
    telluric_loss: np.ndarray
    verdict: np.ndarray                     # (n, F, S) str
    rank: np.ndarray                        # (n, F): feature indices, strongest first
    elements: tuple[str, ...] = field(default=())

    @property
    def lte_valid(self) -> np.ndarray:
        """(F,) bool: False for non-LTE features (no LTE estimate; tau is nan)."""
        return np.array([f.lte for f in self.features], dtype=bool)

    def epoch_rows(self) -> list[dict]:
        """JSON-ready rows, one per epoch, features ranked by tau (unknown strengths last)."""
        return [self._epoch_row(i) for i in range(self.epochs.phase_d.size)]

    def _epoch_row(self, i: int) -> dict:
        ep, w, lte = self.epochs, self.windows, self.lte
        fracs = {el: dict(zip(STAGE_NAMES, np.round(lte.fractions_of(el)[i], 6).tolist())) for el in self.elements}
        feats = []
        for r, f in enumerate(self.rank[i]):
            feat = self.features[f]
            members = list(feat.members)
            feats.append({
                "feature": feat.id,
                "species": feat.species,
                "rest_vac_A": _round(list(feat.rest_vac_A), 3) if len(members) > 1 else round(feat.rest_vac_A[0], 3),
                "trough_obs_A": round(float(w.trough_A[i, f]), 1),
                "absorption_obs_A": [round(float(w.absorption_lo_A[i, f]), 1), round(float(w.absorption_hi_A[i, f]), 1)],
                "emission_obs_A": [round(float(w.emission_lo_A[i, f]), 1), round(float(w.emission_hi_A[i, f]), 1)],
                "tau_sobolev": _sig(self.tau[i, f]),
                "lte": feat.lte,
                "rank": r + 1,
                "uncertain": feat.uncertain,
                "members_tau_sobolev": [_sig(self.tau_lines[i, j]) for j in members],
                "setups": [{
                    "setup": sid,
                    "coverage": round(float(self.coverage[i, f, k]), 4),
                    "gap_loss": round(float(self.gap_loss[i, f, k]), 4),
                    "telluric_loss": round(float(self.telluric_loss[i, f, k]), 4),
                    "verdict": str(self.verdict[i, f, k]),
                } for k, sid in enumerate(self.setup_ids)],
            })
        return {
            "phase_d": round(float(ep.phase_d[i]), 4),
            "age_d": round(float(ep.age_d[i]), 4),
            "temperature_K": round(float(ep.temperature_K[i]), 1),
            "v_phot_c": round(float(ep.v_phot_c[i]), 4),
            "v_max_c": round(float(ep.v_max_c[i]), 4),
            "density_g_cm3": _sig(lte.density_g_cm3[i]),
            "electron_density_cm3": _sig(lte.n_e_cm3[i]),
            "ionization_fractions": fracs,
            "features": feats,
        }


def _sig(x, digits: int = 4):
    x = float(x)
    return None if not np.isfinite(x) else float(f"{x:.{digits}g}")


def _round(values, nd):
    return [round(float(v), nd) for v in values]


def _member_matrix(features: list[Feature]) -> np.ndarray:
    """(F, M) line indices of each feature's members, padded with -1."""
    width = max(len(f.members) for f in features)
    out = np.full((len(features), width), -1, dtype=int)
    for i, f in enumerate(features):
        out[i, :len(f.members)] = f.members
    return out


def forecast_features(source, phases_d, linelist: LineList | None = None, setups=(), tellurics=None,
                      airmass=1.0, pwv_mm=2.5, vphot_c=None, vmax_c=None, composition: Composition | None = None,
                      setup_ids=None) -> FeatureForecast:
    """Forecast every feature of ``linelist`` at each epoch, for each setup.

    Parameters
    ----------
    source : kncast.forecast.source.Transient or Epochs
    phases_d : array (n,), observer-frame days since t0 (ignored for an Epochs source)
    linelist : LineList (default: the bundled list)
    setups : sequence of kncast.forecast.instruments.Setup (may be empty)
    tellurics : kncast.forecast.tellurics.TelluricModel or None (no atmosphere)
    airmass, pwv_mm : scalars or arrays broadcastable to (n_epochs, n_features, n_setups),
        e.g. (S,) for one value per setup or (n, 1, 1) for one per epoch
    vphot_c, vmax_c : optional velocity overrides (fraction of c) for every epoch
    composition : kncast.forecast.lte.Composition (default: bundled abundances and atoms)
    setup_ids : labels for the setups (default: each Setup's ``id``)
    """
    from kncast.forecast.coverage import verdict as verdict_words
    from kncast.forecast.coverage import window_fractions

    linelist = linelist if linelist is not None else LineList.load()
    composition = composition if composition is not None else Composition.load()
    ep = epochs_from(source, phases_d, vphot_c, vmax_c)
    missing = sorted(set(linelist.element) - set(composition.elements))
    if missing:
        raise ForecastInputError(f"{composition.path}: no abundance for {', '.join(missing)}, which the line list "
                                 f"{linelist.path} uses (add it to [abundances.mass_fraction])")
    # epochs hotter or cooler than the LTE tables cover (e.g. a power law minutes after t0) get no estimate
    in_range = (ep.temperature_K >= LTE_T_RANGE_K[0]) & (ep.temperature_K <= LTE_T_RANGE_K[1])
    lte = lte_state(np.clip(ep.temperature_K, *LTE_T_RANGE_K), ep.age_d, ep.v_phot_c, ep.v_max_c,
                    ep.ejecta_mass_msun, composition)
    tau_lines = line_optical_depths(lte, linelist.element, linelist.ion_stage, linelist.gf,
                                    linelist.wavelength_A, linelist.E_low_eV)
    tau_lines = np.where(np.asarray(linelist.lte, dtype=bool)[None, :], tau_lines, np.nan)  # non-LTE: no estimate
    tau_lines = np.where(in_range[:, None], tau_lines, np.nan)

    features = linelist.features()
    members = _member_matrix(features)                       # (F, M)
    pad = members < 0
    safe = np.where(pad, 0, members)
    lam = linelist.wavelength_A[safe]                         # (F, M)
    blue = np.where(pad, np.inf, lam).min(axis=1)
    red = np.where(pad, -np.inf, lam).max(axis=1)
    tau_m = np.where(pad[None], np.nan, tau_lines[:, safe])   # (n, F, M)
    known = np.isfinite(tau_m)
    score = np.where(known, tau_m, -np.inf)
    gf_score = np.where(pad | ~np.isfinite(linelist.gf[safe]), -np.inf, linelist.gf[safe])
    fallback = np.argmax(gf_score, axis=1)                    # strongest by gf, else the first listed
    best = np.where(known.any(axis=-1), np.argmax(score, axis=-1), fallback[None, :])
    trough_member = np.take_along_axis(np.broadcast_to(safe, tau_m.shape), best[..., None], axis=-1)[..., 0]
    feature_lte = np.array([f.lte for f in features], dtype=bool)
    tau = np.where(known.any(axis=-1) & feature_lte[None, :], score.max(axis=-1), np.nan)

    windows = feature_windows(blue, red, linelist.wavelength_A[trough_member], ep.v_phot_c, ep.v_max_c, ep.redshift)

    setups = list(setups)
    n, nf, ns = ep.phase_d.size, len(features), len(setups)
    if ns:
        fr = window_fractions(windows.lo_A, windows.hi_A, setups, tellurics, airmass, pwv_mm)
        cov, gap, tell = fr["coverage"], fr["gap_loss"], fr["telluric_loss"]
        words = np.asarray(verdict_words(cov, gap, tell))
    else:
        cov = gap = tell = np.zeros((n, nf, 0))
        words = np.zeros((n, nf, 0), dtype="<U24")

    order = np.argsort(-np.where(np.isfinite(tau), tau, -np.inf), axis=1, kind="stable")
    ids = list(setup_ids) if setup_ids is not None else [getattr(s, "id", str(k)) for k, s in enumerate(setups)]
    elements = tuple(e for e in composition.elements if e in set(linelist.element))
    return FeatureForecast(ep, features, windows, tau, tau_lines, trough_member, lte, ids,
                           cov, gap, tell, words, order, elements)
