"""The CCD equation and its closed-form inverse.

Merline & Howell (1995, Experimental Astronomy 6, 163), eq. (2); Howell,
Handbook of CCD Astronomy (2nd ed., 2006), sect. 4.4:

    S/N = N* / sqrt( N* + n_pix (1 + n_pix / n_B) (N_S + N_D + N_R^2 + G^2 sigma_f^2) )

N* source electrons in the aperture, n_pix pixels in the aperture, n_B pixels
used to estimate the background, N_S and N_D sky and dark electrons per pixel,
N_R read noise (e- rms per pixel per read), G gain (e-/ADU), sigma_f the
digitisation noise (~0.289 ADU for a uniform rounding error).  For n_exp
exposures summed, the read and digitisation terms enter n_exp times.

Everything is vectorised (numpy broadcasting) over any array shape.
"""
from __future__ import annotations

import numpy as np

from kncast.forecast.errors import check_range
from kncast.forecast.references import MERLINE_HOWELL_1995

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (MERLINE_HOWELL_1995,)

SIGMA_F_ADU = 0.289  # 1/sqrt(12): rounding to whole ADU (Merline & Howell 1995)


def noise_per_read(read_noise_e, gain_e_per_adu=1.0, sigma_f_adu=SIGMA_F_ADU):
    """Variance (e^2) per pixel per read: N_R^2 + G^2 sigma_f^2."""
    return np.asarray(read_noise_e, dtype=float) ** 2 + (np.asarray(gain_e_per_adu, dtype=float) * sigma_f_adu) ** 2


def snr(source_e, n_pix, sky_e_per_pix, dark_e_per_pix, read_var_e2, n_exp=1, n_background=np.inf):
    """S/N from the CCD equation for electrons summed over ``n_exp`` exposures.

    ``source_e``, ``sky_e_per_pix`` and ``dark_e_per_pix`` are totals over all
    exposures; ``read_var_e2`` is the variance per pixel per read (see
    :func:`noise_per_read`), counted ``n_exp`` times.
    """
    factor = 1.0 + np.asarray(n_pix, dtype=float) / n_background
    var = (np.asarray(source_e, dtype=float)
           + n_pix * factor * (sky_e_per_pix + dark_e_per_pix + np.asarray(n_exp, dtype=float) * read_var_e2))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(var > 0, source_e / np.sqrt(var), 0.0)


def snr_from_rates(time_s, n_exp, source_rate, n_pix, sky_rate_per_pix, dark_rate_per_pix, read_var_e2,
                   n_background=np.inf):
    """S/N for a total time ``time_s`` split into ``n_exp`` exposures; rates in e- s^-1."""
    t = np.asarray(time_s, dtype=float)
    return snr(source_rate * t, n_pix, sky_rate_per_pix * t, dark_rate_per_pix * t, read_var_e2, n_exp, n_background)


def time_for_snr(target_snr, source_rate, n_pix, sky_rate_per_pix, dark_rate_per_pix, read_var_e2, n_exp=1,
                 n_background=np.inf):
    """Total time (s) reaching ``target_snr`` with ``n_exp`` reads: the positive root of the CCD equation.

    With S = a t, Var = b t + c:  a^2 t^2 - s^2 b t - s^2 c = 0, so
    t = [s^2 b + sqrt(s^4 b^2 + 4 a^2 s^2 c)] / (2 a^2).  Infinite when a = 0.
    """
    check_range("target S/N", target_snr, 0.0, 1e6, low_open=True)
    s2 = np.asarray(target_snr, dtype=float) ** 2
    a = np.asarray(source_rate, dtype=float)
    factor = 1.0 + np.asarray(n_pix, dtype=float) / n_background
    b = a + n_pix * factor * (sky_rate_per_pix + dark_rate_per_pix)
    c = n_pix * factor * np.asarray(n_exp, dtype=float) * read_var_e2
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (s2 * b + np.sqrt(s2 * s2 * b * b + 4.0 * a * a * s2 * c)) / (2.0 * a * a)
    return np.where(a > 0, t, np.inf)


def time_and_exposures(target_snr, source_rate, n_pix, sky_rate_per_pix, dark_rate_per_pix, read_var_e2,
                       max_exposure_s, n_background=np.inf):
    """(total time s, n_exp) to reach ``target_snr`` in the fewest exposures of at most ``max_exposure_s``.

    Closed form.  With exposures of full length t_max the read terms grow as
    T / t_max, so Var = (b + c1 / t_max) T and T_full = s^2 (b + c1 / t_max) / a^2;
    the fewest exposures is n = ceil(T_full / t_max) (n - 1 full exposures fall
    short, n reach the target).  The total time for that n then comes from the
    quadratic of :func:`time_for_snr` (shorter than n t_max, split equally).
    """
    check_range("maximum exposure", max_exposure_s, 0.0, None, low_open=True, unit=" s")
    check_range("target S/N", target_snr, 0.0, 1e6, low_open=True)
    s2 = np.asarray(target_snr, dtype=float) ** 2
    a = np.asarray(source_rate, dtype=float)
    factor = 1.0 + np.asarray(n_pix, dtype=float) / n_background
    b = a + n_pix * factor * (sky_rate_per_pix + dark_rate_per_pix)
    c1 = n_pix * factor * read_var_e2
    with np.errstate(divide="ignore", invalid="ignore"):
        t_full = s2 * (b + c1 / max_exposure_s) / (a * a)
        n = np.where(np.isfinite(t_full) & (a > 0), np.maximum(1.0, np.ceil(t_full / max_exposure_s - 1e-9)), 1.0)
    t = time_for_snr(target_snr, source_rate, n_pix, sky_rate_per_pix, dark_rate_per_pix, read_var_e2, n,
                     n_background)
    return t, n.astype(int) if np.ndim(n) else int(n)


def snr_per_resel(snr_per_pixel, pixels_per_resel):
    """S/N per resolution element: summing ``pixels_per_resel`` similar pixels gives sqrt(n) x per-pixel S/N."""
    return np.asarray(snr_per_pixel) * np.sqrt(pixels_per_resel)


def snr_per_angstrom(snr_per_pixel, dispersion_A_per_pix):
    """S/N per A: sqrt(1 / dispersion) pixels per A."""
    return np.asarray(snr_per_pixel) / np.sqrt(dispersion_A_per_pix)
