"""How significantly a P Cygni absorption trough will be measured in a spectrum.

For one feature at one epoch in one setup (every kernel is vectorized over any
shape of epochs x features x setups):

* ``depth = (1 - W) (1 - exp(-tau))``: the fractional depth of the absorption
  against the continuum, with tau the Sobolev optical depth of the line at the
  photosphere and W = 1/2 the geometric dilution factor there.  A pure-scattering
  line in homologous ejecta has the Sobolev source function S = W I_c, so the
  intensity through a resonance point in front of the photosphere is
  I_c [e^-tau + W (1 - e^-tau)] (Jeffery & Branch 1990, in Supernovae, Jerusalem
  Winter School 6, 149; from memory): even a saturated line fills half its
  trough near the photosphere with scattered light.  Stated approximation: one
  depth for the whole trough (tau and W taken at the photosphere; tau falling
  and W falling outwards partly cancel), line blending neglected.  With W = 0
  this is the plain 1 - exp(-tau) of a pure absorber, an upper bound.
* the velocity bin: ``bin_A = lambda_trough x dv_bin / c`` (default dv_bin =
  1500 km/s, a tenth of the trough width for 0.1-0.3 c ejecta; common
  practice for broad kilonova features, which are smoothed before fitting);
* ``snr_bin = snr_pixel x sqrt(bin_A / dispersion_A_per_pix)``: the continuum
  S/N at the trough summed over one velocity bin (independent pixels add in
  quadrature; a bin narrower than a pixel counts as one pixel);
* ``n_bins = usable x (absorption_hi_A - absorption_lo_A) / bin_A``: the bins
  across the trough from v_phot to v_max that are on the detector and not in
  an opaque telluric band (``usable``, a fraction of the window), at least
  one where anything is usable;
* ``significance = depth x snr_bin x sqrt(n_bins)`` (a matched-filter
  detection of a box-shaped dip of constant depth over n independent bins:
  sum of depth x snr_bin over the bins divided by sqrt(n); common practice).

The exposure that reaches a target significance solves ``snr_bin =
sigma / (depth sqrt(n_bins))`` for the time with the closed-form inverse of the
CCD equation (:func:`kncast.forecast.exposure.time_for_snr`, which is per
resolution element: the target is converted with the pixels per bin).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.defaults import DEFAULT_BIN_KMS, DEFAULT_MIN_DEPTH, DEFAULT_SIGMA

C_KMS = 299792.458  # speed of light, km/s (CODATA, exact)
# geometric dilution W = (1 - sqrt(1 - (R/r)^2)) / 2 at the photosphere r = R (textbook geometry)
PHOTOSPHERE_DILUTION = 0.5
MAX_TARGET_SNR = 1e5  # a continuum S/N per resolution element beyond this counts as unreachable

__all__ = ["PHOTOSPHERE_DILUTION", "absorption_depth", "bin_width_A", "snr_per_bin", "velocity_bins", "significance",
           "snr_bin_for_sigma", "resel_target_for_bin", "Detection", "detect", "DEFAULT_BIN_KMS",
           "DEFAULT_SIGMA", "DEFAULT_MIN_DEPTH"]


def absorption_depth(tau, dilution=PHOTOSPHERE_DILUTION) -> np.ndarray:
    """Fractional depth (1 - W) (1 - exp(-tau)) of a Sobolev scattering line seen against the photosphere
    (W the dilution factor; NaN where tau has no estimate)."""
    tau = np.asarray(tau, dtype=float)
    return (1.0 - float(dilution)) * -np.expm1(-np.where(np.isfinite(tau), np.clip(tau, 0.0, None), np.nan))


def bin_width_A(wavelength_A, bin_kms=DEFAULT_BIN_KMS) -> np.ndarray:
    """Width in A of a velocity bin of ``bin_kms`` km/s at ``wavelength_A``."""
    return np.asarray(wavelength_A, dtype=float) * float(bin_kms) / C_KMS


def snr_per_bin(snr_per_pixel, dispersion_A_per_pix, bin_A) -> np.ndarray:
    """Continuum S/N summed over one bin of ``bin_A`` from the S/N per pixel (at least one pixel)."""
    pixels = np.maximum(np.asarray(bin_A, float) / np.asarray(dispersion_A_per_pix, float), 1.0)
    return np.asarray(snr_per_pixel, float) * np.sqrt(pixels)


def velocity_bins(absorption_lo_A, absorption_hi_A, bin_A, usable=1.0) -> np.ndarray:
    """Usable velocity bins across the trough: usable x width / bin, at least 1 where usable > 0."""
    n = np.asarray(usable, float) * (np.asarray(absorption_hi_A, float) - np.asarray(absorption_lo_A, float)) \
        / np.asarray(bin_A, float)
    return np.where(np.asarray(usable, float) > 0.0, np.maximum(n, 1.0), 0.0)


def significance(depth, snr_bin, n_bins) -> np.ndarray:
    """Detection significance (sigma) of the trough: depth x snr_bin x sqrt(n_bins); 0 without an estimate."""
    s = np.asarray(depth, float) * np.asarray(snr_bin, float) * np.sqrt(np.asarray(n_bins, float))
    return np.where(np.isfinite(s), s, 0.0)


def snr_bin_for_sigma(sigma, depth, n_bins) -> np.ndarray:
    """The continuum S/N per bin that gives ``sigma``: sigma / (depth sqrt(n_bins)); inf if unreachable."""
    with np.errstate(divide="ignore", invalid="ignore"):
        need = float(sigma) / (np.asarray(depth, float) * np.sqrt(np.asarray(n_bins, float)))
    return np.where(np.isfinite(need) & (need > 0), need, np.inf)


def resel_target_for_bin(snr_bin_target, dispersion_A_per_pix, pixels_per_resel, bin_A) -> np.ndarray:
    """The S/N per resolution element equivalent to ``snr_bin_target`` per bin (S/N ~ sqrt(pixels))."""
    pixels = np.maximum(np.asarray(bin_A, float) / np.asarray(dispersion_A_per_pix, float), 1.0)
    return np.asarray(snr_bin_target, float) * np.sqrt(np.asarray(pixels_per_resel, float) / pixels)


@dataclass(frozen=True)
class Detection:
    """Per-feature measurement arrays (all of one broadcast shape, e.g. (n_epochs, n_features, n_setups))."""

    depth: np.ndarray
    bin_A: np.ndarray
    snr_bin: np.ndarray
    snr_resel: np.ndarray
    n_bins: np.ndarray
    significance: np.ndarray
    time_to_sigma_s: np.ndarray   # inf where unreachable
    nexp_to_sigma: np.ndarray


def detect(rates, exposure_result, depth, absorption_lo_A, absorption_hi_A, usable, sigma=DEFAULT_SIGMA,
           bin_kms=DEFAULT_BIN_KMS, max_exposure_s=None) -> Detection:
    """Significance of every trough sampled in ``rates`` (kncast.forecast.exposure.Rates at the trough
    wavelengths, shape S) for the exposure of ``exposure_result``, and the time reaching ``sigma``.

    ``depth``, ``absorption_lo_A``/``absorption_hi_A`` (vacuum A) and ``usable`` (fraction of the trough
    on the detector and not opaque) broadcast to S.
    """
    from kncast.forecast import exposure as ex

    lam = rates.wavelength_A
    bin_A = bin_width_A(lam, bin_kms)
    on = rates.on_detector
    s_bin = np.where(on, snr_per_bin(exposure_result.snr_per_pixel, rates.dispersion_A_per_pix, bin_A), 0.0)
    n_bins = velocity_bins(absorption_lo_A, absorption_hi_A, bin_A, np.where(on, usable, 0.0))
    depth = np.broadcast_to(np.asarray(depth, float), lam.shape)
    sig = significance(depth, s_bin, n_bins)
    need_bin = snr_bin_for_sigma(sigma, depth, n_bins)
    need_resel = resel_target_for_bin(need_bin, rates.dispersion_A_per_pix, rates.pixels_per_resel, bin_A)
    reachable = (need_resel <= MAX_TARGET_SNR) & on
    cap = ex.DEFAULT_MAX_EXPOSURE_S if max_exposure_s is None else max_exposure_s
    t, n = ex.time_for_snr(rates, np.where(reachable, need_resel, 1.0), cap)
    t = np.where(reachable, t, np.inf)
    return Detection(depth=depth, bin_A=bin_A, snr_bin=s_bin, snr_resel=np.where(on, exposure_result.snr_per_resel, 0.0),
                     n_bins=n_bins, significance=sig, time_to_sigma_s=t, nexp_to_sigma=np.where(reachable, n, 0))
