"""Relativistic Doppler factors and P Cygni feature windows of expanding ejecta.

For matter moving straight toward the observer at speed beta c the observed
wavelength is lambda_0 D(beta) with D(beta) = sqrt((1 - beta) / (1 + beta))
(the line-of-sight relativistic Doppler factor: Einstein 1905, Annalen der Physik
17, 891, sect. 7; e.g. Rybicki & Lightman 1979, eq. 4.11; both from memory).  In
homologous expansion the P Cygni absorption comes from matter in front of the
photosphere moving toward us at v_ph .. v_max, so
it spans lambda_0 D(v_max) .. lambda_0 with its minimum near lambda_0 D(v_ph);
the emission comes from the whole envelope and spans lambda_0 .. lambda_0 /
D(v_max) with its peak near lambda_0 (common practice).  Observed wavelengths
then carry the cosmological factor (1 + z).

All functions broadcast: epochs along the first axis, features along the last.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.errors import ForecastInputError, check_range
from kncast.forecast.references import EINSTEIN_1905

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (EINSTEIN_1905,)

__all__ = ["doppler_factor", "FeatureWindows", "feature_windows", "MAX_BETA"]

#: Largest ejecta speed accepted (fraction of c); faster matter is outside any kilonova model.
MAX_BETA = 0.8
_ROUNDING = 1e-9  # a model photosphere computed as R / (c t) may overshoot v_max by rounding


def doppler_factor(beta):
    """D(beta) = sqrt((1 - beta) / (1 + beta)) for matter approaching at ``beta`` = v/c in [0, 1)."""
    b = np.asarray(check_range("beta (v/c)", beta, 0.0, 1.0, high_open=True), dtype=float)
    return np.sqrt((1.0 - b) / (1.0 + b))


@dataclass(frozen=True)
class FeatureWindows:
    """Observed-frame (vacuum) windows in A, arrays of shape (n_epochs, n_features)."""

    absorption_lo_A: np.ndarray
    absorption_hi_A: np.ndarray
    trough_A: np.ndarray
    emission_lo_A: np.ndarray
    emission_hi_A: np.ndarray
    emission_peak_A: np.ndarray

    @property
    def lo_A(self) -> np.ndarray:
        """Blue edge of the whole P Cygni profile."""
        return self.absorption_lo_A

    @property
    def hi_A(self) -> np.ndarray:
        """Red edge of the whole P Cygni profile."""
        return self.emission_hi_A


def check_velocities(v_phot_c, v_max_c, what: str = "v_phot_c/v_max_c", strict: bool = False):
    """Both velocities in (0, MAX_BETA) and v_phot <= v_max everywhere (< with ``strict``); float arrays.

    A model photosphere may sit at the outer edge of the ejecta (v_phot = v_max, the
    limiting case of an empty line-forming shell); a what-if override must leave a shell.
    """
    vp = np.asarray(check_range("v_phot_c", v_phot_c, 0.0, MAX_BETA, low_open=True, high_open=True), dtype=float)
    vm = np.asarray(check_range("v_max_c", v_max_c, 0.0, MAX_BETA, low_open=True, high_open=True), dtype=float)
    vp, vm = np.broadcast_arrays(vp, vm)
    bad = (vp >= vm) if strict else (vp > vm * (1.0 + _ROUNDING))
    if np.any(bad):
        i = np.flatnonzero(bad.ravel())[0]
        raise ForecastInputError(f"{what}: photospheric velocity {vp.ravel()[i]:g} c must be below the outer "
                                 f"velocity {vm.ravel()[i]:g} c")
    return np.minimum(vp, vm), vm


def feature_windows(rest_blue_A, rest_red_A, rest_trough_A, v_phot_c, v_max_c, redshift=0.0) -> FeatureWindows:
    """P Cygni windows of features observed at several epochs.

    Parameters
    ----------
    rest_blue_A, rest_red_A : array (n_features,)
        Shortest and longest vacuum rest wavelength of each feature's members (A);
        equal for a single line.  A blend spans all its members.
    rest_trough_A : array (n_features,) or (n_epochs, n_features)
        Rest wavelength whose blueshift marks the expected absorption minimum
        (the strongest member of a blend, which may change with epoch).
    v_phot_c, v_max_c : array (n_epochs,)
        Photospheric and outer ejecta velocity (fraction of c) per epoch.
    redshift : float
        Cosmological redshift z; observed = emitted x (1 + z).
    """
    z = float(check_range("redshift", redshift, 0.0, 10.0))
    vp, vm = check_velocities(v_phot_c, v_max_c)
    d_ph = doppler_factor(vp)[..., None]
    d_max = doppler_factor(vm)[..., None]
    blue = np.asarray(rest_blue_A, dtype=float)[None, :]
    red = np.asarray(rest_red_A, dtype=float)[None, :]
    trough = np.asarray(rest_trough_A, dtype=float)
    trough = trough[None, :] if trough.ndim == 1 else trough
    s = 1.0 + z
    shape = np.broadcast_shapes(d_ph.shape, blue.shape)
    full = lambda a: np.broadcast_to(a, shape).copy()  # noqa: E731 - tiny local helper
    return FeatureWindows(
        absorption_lo_A=full(blue * d_max * s),
        absorption_hi_A=full(red * s),
        trough_A=full(trough * d_ph * s),
        emission_lo_A=full(blue * s),
        emission_hi_A=full(red / d_max * s),
        emission_peak_A=full(trough * s),
    )
