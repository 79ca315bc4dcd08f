"""Source and sky electrons per pixel, S/N spectra and exposure times for spectra.

Source electrons per spectral pixel, summed over the extraction aperture:

    N* = F_lambda lambda / (h c)               photons s^-1 cm^-2 A^-1
         x A_collect (aperture, central obstruction)
         x T(lambda)                            telescope + instrument + detector
         x 10^(-0.4 k(lambda) X)                atmospheric extinction (kncast.forecast.extinction_atm)
         x T_telluric(lambda, X, PWV)           molecular bands (kncast.forecast.tellurics)
         x T_slit(FWHM(lambda, X))              slit or fibre losses (kncast.forecast.slit)
         x d_lambda (A per pixel) x t

Sky electrons per pixel: sky photon surface brightness (kncast.forecast.skybright,
or a user file) x A_collect x T x d_lambda x (slit width x pixel scale) x t.
Noise: the CCD equation (kncast.forecast.ccd).  "Per resolution element" means the
sum over lambda / R / d_lambda pixels along the dispersion.

``ideal=True``: unit throughput, no atmosphere, no sky, no detector noise and
no slit loss, so S/N = sqrt(N*) exactly (pure photon statistics).

All kernels broadcast: flux arrays (n_epoch, n_setup, n_wave) against setup
grids (n_setup, n_wave).  The conditions broadcast too: airmass, seeing, water
vapour and the Moon geometry (:class:`kncast.forecast.skybright.MoonGeometry`) may be
arrays, e.g. shape (n_epoch, 1, 1) for one value per epoch, or (n_sample,) for
one value per wavelength sample of a flat grid; so may the time and the number
of exposures given to :func:`expose`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kncast.forecast import ccd
from kncast.forecast import slit
from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S, SNR_BASIS  # noqa: F401  (re-exported)
from kncast.forecast.errors import ForecastInputError, check_range
from kncast.forecast.extinction_atm import Atmosphere
from kncast.forecast.skybright import MoonGeometry, SkySpectrum, flam_to_photons, sky_photons

SYSTEMATICS_RATIO = 0.01   # source below 1% of the sky in the aperture: sky-subtraction limited (common practice)


@dataclass(frozen=True)
class Conditions:
    """Observing conditions: airmass, zenith seeing FWHM at 5000 A (arcsec), Moon, water vapour, site atmosphere.

    ``airmass``, ``seeing_arcsec``, ``pwv_mm`` and the fields of ``moon`` may be arrays that
    broadcast against the rate arrays (..., n_wave); ``atmosphere`` and ``sky`` are one per call.
    """

    airmass: float = 1.2
    seeing_arcsec: float = 0.8
    moon: MoonGeometry | None = None
    pwv_mm: float = 2.5
    atmosphere: Atmosphere = field(default_factory=Atmosphere)
    sky: SkySpectrum | None = None

    def __post_init__(self):
        check_range("airmass", self.airmass, 1.0, 10.0)
        check_range("seeing", self.seeing_arcsec, 0.1, 10.0, unit=" arcsec")
        check_range("pwv", self.pwv_mm, 0.0, 50.0, unit=" mm")


@dataclass(frozen=True)
class SetupGrid:
    """Per-sample instrument properties of one or more setups, arrays of shape (..., n_wave).

    Scalars per setup (area, slit width, pixel scale, fibre flag) have shape (..., 1).
    """

    wavelength_A: np.ndarray
    on_detector: np.ndarray
    arm_index: np.ndarray
    throughput: np.ndarray
    dispersion_A_per_pix: np.ndarray
    resolving_power: np.ndarray
    read_noise_e: np.ndarray
    dark_e_per_s: np.ndarray
    gain_e_per_adu: np.ndarray
    full_well_e: np.ndarray
    area_cm2: np.ndarray
    slit_width_arcsec: np.ndarray
    pixel_scale_arcsec: np.ndarray
    fibre: np.ndarray
    arm_names: tuple = ()


def setup_grid(telescope, spectrograph, setup, n_samples: int = 2000, wavelength_A=None) -> SetupGrid:
    """A :class:`SetupGrid` across every arm of ``setup``.

    Without ``wavelength_A``, ``n_samples`` points are shared among the arms in
    proportion to their lengths (at least 2 each), evenly spaced in each arm.
    Samples in detector gaps or outside every arm are kept but flagged off-detector.
    """
    arms = setup.arms
    if wavelength_A is None:
        check_range("samples", n_samples, 2 * len(arms), 10_000_000)
        span = np.array([a.max_A - a.min_A for a in arms])
        counts = np.maximum(2, np.floor(n_samples * span / span.sum())).astype(int)
        counts[np.argmax(counts)] += n_samples - counts.sum()
        lam = np.concatenate([np.linspace(a.min_A, a.max_A, c) for a, c in zip(arms, counts)])
        arm_index = np.repeat(np.arange(len(arms)), counts)
    else:
        lam = np.asarray(wavelength_A, dtype=float)
        arm_index = np.full(lam.shape, -1)
        for i, arm in reversed(list(enumerate(arms))):  # the first arm listed wins in overlaps
            arm_index = np.where((lam >= arm.min_A) & (lam <= arm.max_A), i, arm_index)
    idx = np.clip(arm_index, 0, None)

    def per_arm(attr):
        return np.array([getattr(a, attr) for a in arms], dtype=float)[idx]

    on = arm_index >= 0
    thr = np.zeros(lam.shape)
    for i, arm in enumerate(arms):  # one interpolation per arm (a handful), vectorized over samples
        sel = arm_index == i
        on[sel] &= arm.covers(lam[sel])
        thr[sel] = arm.throughput_at(lam[sel])
    one = np.ones(1)
    return SetupGrid(
        wavelength_A=lam, on_detector=on, arm_index=arm_index, throughput=np.where(on, thr, 0.0),
        dispersion_A_per_pix=per_arm("dispersion_A_per_pix"), resolving_power=per_arm("resolving_power"),
        read_noise_e=per_arm("read_noise_e"), dark_e_per_s=per_arm("dark_e_per_s"),
        gain_e_per_adu=per_arm("gain_e_per_adu"), full_well_e=per_arm("full_well_e"),
        area_cm2=one * telescope.collecting_area_cm2, slit_width_arcsec=one * spectrograph.slit_width_arcsec,
        pixel_scale_arcsec=one * spectrograph.pixel_scale_arcsec,
        fibre=one * (getattr(spectrograph, "kind", "slit") == "fibre"), arm_names=tuple(a.name for a in arms),
    )


def stack_grids(grids) -> SetupGrid:
    """Stack setup grids with the same number of samples into one grid of shape (n_setup, n_wave)."""
    names = [f for f in SetupGrid.__dataclass_fields__ if f != "arm_names"]
    return SetupGrid(**{f: np.stack([getattr(g, f) for g in grids]) for f in names}, arm_names=())


@dataclass(frozen=True)
class Rates:
    """Electron rates per spectral pixel (e- s^-1) and the pixel bookkeeping, arrays (..., n_wave)."""

    wavelength_A: np.ndarray
    source_e_per_s: np.ndarray     # summed over the extraction aperture
    sky_e_per_s_pix: np.ndarray    # per (binned) detector pixel
    dark_e_per_s_pix: np.ndarray
    read_var_e2: np.ndarray        # per pixel per read
    n_spatial: np.ndarray          # pixels in the extraction aperture along the slit
    pixels_per_resel: np.ndarray   # along the dispersion
    dispersion_A_per_pix: np.ndarray
    peak_e_per_s_pix: np.ndarray   # brightest pixel: source core + sky + dark
    full_well_e: np.ndarray
    on_detector: np.ndarray
    slit_fraction: np.ndarray
    fwhm_arcsec: np.ndarray

    @property
    def sky_e_per_s(self):
        """Sky electrons per second in the extraction aperture of one spectral pixel."""
        return self.sky_e_per_s_pix * self.n_spatial


def rates(flux_flam, grid: SetupGrid, conditions: Conditions, telluric=1.0, *, ideal=False,
          profile="moffat", extraction_fwhm=2.0, binning=(1, 1)) -> Rates:
    """Electron rates for observed F_lambda ``flux_flam`` (erg s^-1 cm^-2 A^-1, shape (..., n_wave)).

    ``telluric`` is the telluric transmission on the grid (array or 1).
    ``binning`` = (spectral, spatial) on-chip binning.
    """
    lam = grid.wavelength_A
    flux = np.asarray(flux_flam, dtype=float)
    if np.any(flux < 0) or not np.all(np.isfinite(flux)):
        raise ForecastInputError("flux_flam: must be finite and >= 0 erg s^-1 cm^-2 A^-1")
    b_spec, b_spat = binning
    check_range("spectral binning", b_spec, 1, 16)
    check_range("spatial binning", b_spat, 1, 16)
    disp = grid.dispersion_A_per_pix * b_spec
    ppr = lam / grid.resolving_power / disp
    photons = flam_to_photons(flux, lam) * grid.area_cm2 * disp
    if ideal:
        zero = np.zeros_like(lam)
        src = photons * grid.on_detector
        return Rates(lam, src, zero, zero, zero, np.ones_like(lam), ppr, disp, src, np.full_like(lam, np.inf),
                     grid.on_detector, np.ones_like(lam), zero)
    x = conditions.airmass
    atm = 10.0 ** (-0.4 * conditions.atmosphere.k_mag(lam) * x)
    fwhm = slit.seeing_fwhm_arcsec(conditions.seeing_arcsec, x, lam)
    pix = grid.pixel_scale_arcsec * b_spat
    fibre = grid.fibre.astype(bool)
    n_sp = np.where(fibre, np.maximum(1.0, np.ceil(grid.slit_width_arcsec / pix)),
                    slit.extraction_pixels(fwhm, grid.pixel_scale_arcsec, extraction_fwhm, b_spat))
    frac = np.where(fibre, slit.fibre_fraction(grid.slit_width_arcsec, fwhm, profile),
                    slit.slit_fraction(grid.slit_width_arcsec, n_sp * pix, fwhm, profile))
    src = photons * grid.throughput * atm * np.asarray(telluric, dtype=float) * frac
    sky_area = np.where(fibre, np.pi * grid.slit_width_arcsec ** 2 / 4.0 / n_sp, grid.slit_width_arcsec * pix)
    sky_z = _zenith_deg(x)
    if conditions.sky is not None:
        sky_ph = conditions.sky.photons(lam)
    else:
        k_v = float(conditions.atmosphere.k_mag(5500.0))
        sky_ph = sky_photons(lam, sky_z, k_v, conditions.moon, conditions.atmosphere.dark_sky_offset_mag)
    sky = sky_ph * grid.area_cm2 * grid.throughput * disp * sky_area
    dark = grid.dark_e_per_s * b_spec * b_spat * grid.on_detector
    read_var = ccd.noise_per_read(grid.read_noise_e, grid.gain_e_per_adu)
    # brightest spatial pixel: Gaussian-core share of the extracted light (common practice)
    core = slit.gaussian_slit_fraction(pix, fwhm) / slit.gaussian_slit_fraction(n_sp * pix, fwhm)
    peak = np.where(fibre, src / n_sp, src * core) + sky + dark
    return Rates(lam, src, sky, dark, read_var * np.ones_like(lam), n_sp * np.ones_like(lam), ppr, disp, peak,
                 grid.full_well_e, grid.on_detector, frac * np.ones_like(lam), fwhm * np.ones_like(lam))


def scale_source(r: Rates, scale) -> Rates:
    """``r`` with the source multiplied by ``scale`` (e.g. (D / D_draw)^2 for a distance draw), an array
    broadcasting as (n_draws, *rates shape) when it has more axes than the rates (a leading draws axis);
    the sky, dark and read-noise terms are unchanged, the brightest pixel gains the source's share."""
    import dataclasses

    s = np.asarray(scale, dtype=float)
    src = r.source_e_per_s[None] * s if s.ndim > np.ndim(r.source_e_per_s) else r.source_e_per_s * s
    lead = (None,) if s.ndim > np.ndim(r.source_e_per_s) else ()
    source_peak = np.clip(r.peak_e_per_s_pix - r.sky_e_per_s_pix - r.dark_e_per_s_pix, 0.0, None)
    return dataclasses.replace(r, source_e_per_s=src,
                               peak_e_per_s_pix=r.peak_e_per_s_pix[lead] + (s - 1.0) * source_peak[lead],
                               wavelength_A=np.broadcast_to(r.wavelength_A, src.shape),
                               on_detector=np.broadcast_to(r.on_detector, src.shape))


def _zenith_deg(airmass):
    from kncast.forecast.airmass import zenith_from_airmass

    return zenith_from_airmass(airmass)


@dataclass(frozen=True)
class ExposureResult:
    """S/N spectra for a total time split into n_exp equal exposures (arrays (..., n_wave))."""

    wavelength_A: np.ndarray
    time_s: float                 # or an array broadcasting with the rates
    n_exp: int                    # or an array broadcasting with the rates
    source_e: np.ndarray          # per spectral pixel, in the aperture, all exposures
    sky_e: np.ndarray             # per spectral pixel, in the aperture, all exposures
    snr_per_pixel: np.ndarray
    snr_per_resel: np.ndarray
    snr_per_A: np.ndarray
    saturated: np.ndarray         # a single exposure fills the brightest pixel's full well
    systematics_limited: np.ndarray  # source < 1% of the sky in the aperture
    on_detector: np.ndarray


def expose(r: Rates, time_s, n_exp=1) -> ExposureResult:
    """S/N per pixel, per resolution element and per A for ``time_s`` seconds in ``n_exp`` exposures.

    ``time_s`` and ``n_exp`` are numbers or arrays broadcasting against the rates (..., n_wave);
    the result keeps them as float / int when they are numbers.
    """
    check_range("exposure time", time_s, 0.0, 1e6, low_open=True, unit=" s")
    check_range("number of exposures", n_exp, 1, 10_000)
    t = np.asarray(time_s, dtype=float) if np.ndim(time_s) else float(time_s)
    n_exp = np.asarray(n_exp, dtype=int) if np.ndim(n_exp) else int(n_exp)
    s_pix = ccd.snr_from_rates(t, n_exp, r.source_e_per_s, r.n_spatial, r.sky_e_per_s_pix, r.dark_e_per_s_pix,
                               r.read_var_e2)
    s_pix = np.where(r.on_detector, s_pix, 0.0)
    src_e = r.source_e_per_s * t
    sky_e = r.sky_e_per_s * t
    return ExposureResult(
        wavelength_A=r.wavelength_A, time_s=t, n_exp=n_exp, source_e=src_e, sky_e=sky_e,
        snr_per_pixel=s_pix, snr_per_resel=ccd.snr_per_resel(s_pix, r.pixels_per_resel),
        snr_per_A=ccd.snr_per_angstrom(s_pix, r.dispersion_A_per_pix),
        saturated=r.on_detector & (r.peak_e_per_s_pix * t / n_exp > r.full_well_e),
        systematics_limited=r.on_detector & (src_e < SYSTEMATICS_RATIO * sky_e),
        on_detector=r.on_detector,
    )


def time_for_snr(r: Rates, target_snr_per_resel, max_exposure_s=3600.0):
    """(total time s, n_exp) reaching ``target_snr_per_resel`` at every sample of ``r``.

    The CCD equation summed over one resolution element (pixels_per_resel
    pixels) is solved in closed form for each n_exp (kncast.forecast.ccd.time_and_exposures).
    Off-detector or sourceless samples give infinite time.
    """
    ppr = r.pixels_per_resel
    src = np.where(r.on_detector, r.source_e_per_s * ppr, 0.0)
    return ccd.time_and_exposures(target_snr_per_resel, src, r.n_spatial * ppr, r.sky_e_per_s_pix,
                                  r.dark_e_per_s_pix, r.read_var_e2, max_exposure_s)


def sample_at(values, wavelength_A, at_A):
    """Values of a (..., n_wave) array at the samples nearest to ``at_A`` (array) on the last axis."""
    lam = np.asarray(wavelength_A)
    idx = np.abs(lam[..., None, :] - np.asarray(at_A, dtype=float)[..., :, None]).argmin(axis=-1)
    return np.take_along_axis(np.asarray(values), idx, axis=-1), idx
