"""Quantity entry points for observing a transient: airmass, Moon and conditions, sky, tellurics,
line features, the S/N spectrum of a setup and the exposure time for a target S/N.

Each function converts its Quantity inputs once (:func:`kncast.forecast.units.value_in`)
and calls the float kernels named in its docstring; the numbers are the kernels' own.
"""
from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from kncast.forecast import exposure as ex
from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S
from kncast.forecast.errors import ForecastInputError, check_range
from kncast.forecast.extinction_atm import Atmosphere
from kncast.forecast.skybright import MoonGeometry
from kncast.forecast.units import PHOTON_FLUX_SB, value_in

__all__ = ["airmass_at", "moon_geometry", "observing_conditions", "sky_brightness", "telluric_transmission",
           "features_at", "SNRSpectrum", "snr_spectrum", "exposure_time_for_snr"]


def airmass_at(altitude):
    """Relative airmass (Kasten & Young 1989, :func:`kncast.forecast.airmass.airmass_from_altitude`)
    at ``altitude`` (angle Quantity above the horizon); NaN below the horizon."""
    from kncast.forecast.airmass import airmass_from_altitude

    alt = value_in(altitude, u.deg, "altitude")
    check_range("altitude", alt, -90.0, 90.0, unit=" deg")
    x = airmass_from_altitude(alt)
    return float(x) if np.ndim(x) == 0 else x


def moon_geometry(illumination, separation, altitude) -> MoonGeometry:
    """A :class:`~kncast.forecast.skybright.MoonGeometry` from the illuminated fraction (0..1) and
    the Moon-target ``separation`` and Moon ``altitude`` (angle Quantities)."""
    return MoonGeometry(illumination=value_in(illumination, u.dimensionless_unscaled, "illumination"),
                        sep_deg=value_in(separation, u.deg, "separation"),
                        altitude_deg=value_in(altitude, u.deg, "altitude"))


def observing_conditions(airmass=1.2, seeing=None, pwv=None, moon: MoonGeometry | None = None,
                         atmosphere: Atmosphere | None = None, sky=None) -> ex.Conditions:
    """:class:`~kncast.forecast.exposure.Conditions` from Quantities.

    ``seeing`` (angle: zenith FWHM at 5000 A) and ``pwv`` (length: precipitable water)
    default to the ``atmosphere``'s values (an :class:`~kncast.forecast.extinction_atm.Atmosphere`,
    by default the common-practice one; a site's via
    :func:`kncast.forecast.extinction_atm.atmosphere_for_site`).  ``moon`` None: a dark sky.
    ``sky``: a user sky spectrum (:func:`kncast.forecast.skybright.load_sky_spectrum`).
    """
    atm = atmosphere if atmosphere is not None else Atmosphere()
    seeing_arcsec = atm.seeing_arcsec if seeing is None else value_in(seeing, u.arcsec, "seeing")
    pwv_mm = atm.pwv_mm if pwv is None else value_in(pwv, u.mm, "pwv")
    return ex.Conditions(airmass=value_in(airmass, u.dimensionless_unscaled, "airmass"), seeing_arcsec=seeing_arcsec,
                         moon=moon, pwv_mm=pwv_mm, atmosphere=atm, sky=sky)


def sky_brightness(wavelength, airmass=1.0, moon: MoonGeometry | None = None,
                   atmosphere: Atmosphere | None = None) -> u.Quantity:
    """Model sky photon surface brightness at the target (photon s^-1 cm^-2 A^-1 arcsec^-2).

    Dark sky plus moonlight (:func:`kncast.forecast.skybright.sky_photons`), seen at
    ``airmass`` with the V-band extinction and dark-sky offset of ``atmosphere``;
    ``wavelength`` a length Quantity (vacuum).
    """
    from kncast.forecast.airmass import zenith_from_airmass
    from kncast.forecast.skybright import sky_photons

    lam_A = value_in(wavelength, u.AA, "wavelength")
    check_range("wavelength", lam_A, 0.0, None, low_open=True, unit=" A")
    x = value_in(airmass, u.dimensionless_unscaled, "airmass")
    check_range("airmass", x, 1.0, 10.0)
    atm = atmosphere if atmosphere is not None else Atmosphere()
    k_v = float(atm.k_mag(5500.0))  # V-band extinction, as the exposure model uses it
    return sky_photons(lam_A, zenith_from_airmass(x), k_v, moon, atm.dark_sky_offset_mag) * PHOTON_FLUX_SB


def telluric_transmission(wavelength, airmass=1.0, pwv=None, model=None):
    """Telluric transmission (0..1) at vacuum ``wavelength`` (length Quantity) for ``airmass`` and
    precipitable water ``pwv`` (length Quantity; default that of the band table), from ``model``
    (a :class:`~kncast.forecast.tellurics.TelluricModel`, default the bundled bands)."""
    from kncast.forecast.tellurics import REFERENCE_PWV_MM, TelluricModel

    model = model if model is not None else TelluricModel.load()
    pwv_mm = REFERENCE_PWV_MM if pwv is None else value_in(pwv, u.mm, "pwv")
    lam_A = value_in(wavelength, u.AA, "wavelength")
    return model.transmission(lam_A, value_in(airmass, u.dimensionless_unscaled, "airmass"), pwv_mm)


def features_at(transient, phase, setups=(), *, tellurics=None, airmass=1.0, pwv=None, linelist=None,
                setup_ids=None):
    """The feature forecast (:func:`kncast.forecast.features.forecast_features`) at ``phase``
    (time Quantity since t0, scalar or 1-d) for ``setups`` (instruments ``Setup`` objects).

    ``tellurics`` None: no atmosphere; give a TelluricModel to count telluric losses at
    ``airmass`` and ``pwv`` (length Quantity, default 2.5 mm).  Returns the FeatureForecast
    (arrays in the kernel units named in its fields; :meth:`epoch_rows` for JSON-ready rows).
    """
    from kncast.forecast.features import forecast_features
    from kncast.forecast.tellurics import REFERENCE_PWV_MM

    phase_d = np.atleast_1d(value_in(phase, u.day, "phase"))
    pwv_mm = REFERENCE_PWV_MM if pwv is None else value_in(pwv, u.mm, "pwv")
    return forecast_features(transient, phase_d, linelist=linelist, setups=setups, tellurics=tellurics,
                             airmass=value_in(airmass, u.dimensionless_unscaled, "airmass"), pwv_mm=pwv_mm,
                             setup_ids=setup_ids)


@dataclass(frozen=True)
class SNRSpectrum:
    """S/N of one setup's spectrum for one exposure plan; arrays over the wavelength samples.

    ``source`` and ``sky`` are electrons per spectral pixel in the extraction aperture,
    all exposures together.  S/N values are 0 off the detector.
    """

    wavelength: u.Quantity          # vacuum, observed frame, A
    snr_per_resel: np.ndarray       # per resolution element (lambda / R)
    snr_per_pixel: np.ndarray
    source: u.Quantity
    sky: u.Quantity
    on_detector: np.ndarray
    saturated: np.ndarray           # one exposure fills the brightest pixel's well
    systematics_limited: np.ndarray  # source below 1% of the sky in the aperture
    exposure_time: u.Quantity       # total
    n_exp: int

    def at(self, wavelength) -> np.ndarray:
        """S/N per resolution element at the samples nearest to ``wavelength`` (length Quantity)."""
        at_A = value_in(wavelength, u.AA, "wavelength")
        values, _ = ex.sample_at(self.snr_per_resel, self.wavelength.to_value(u.AA), np.atleast_1d(at_A))
        return float(values[0]) if np.ndim(at_A) == 0 else values


def snr_spectrum(transient, phase, exposure_time, telescope, spectrograph, setup=None, *, n_exp: int = 1,
                 conditions: ex.Conditions | None = None, tellurics=None, wavelength=None, n_samples: int = 2000,
                 ideal: bool = False, profile: str = "moffat") -> SNRSpectrum:
    """S/N spectrum of ``transient`` at ``phase`` (time Quantity) in ``exposure_time`` (total, time Quantity)
    split into ``n_exp`` equal exposures with ``setup`` (default: the spectrograph's default setup).

    Kernels: :func:`kncast.forecast.exposure.setup_grid`, :func:`~kncast.forecast.exposure.rates`,
    :func:`~kncast.forecast.exposure.expose`.  ``conditions`` default:
    :func:`observing_conditions` ().  ``tellurics`` None: no telluric bands (give
    ``TelluricModel.load()`` for the bundled ones).  ``wavelength`` (length Quantity): evaluate
    there instead of ``n_samples`` points across the arms.  ``ideal``: unit throughput, no
    atmosphere, sky, detector noise or slit loss.
    """
    time_s = value_in(exposure_time, u.s, "exposure_time")
    check_range("exposure_time", time_s, 0.0, 1e6, low_open=True, unit=" s")
    lam_A = None if wavelength is None else value_in(wavelength, u.AA, "wavelength")
    r = _rates(transient, phase, telescope, spectrograph, setup, conditions, tellurics, lam_A, n_samples,
               ideal, profile)
    res = ex.expose(r, time_s, n_exp)
    return SNRSpectrum(wavelength=res.wavelength_A * u.AA, snr_per_resel=res.snr_per_resel,
                       snr_per_pixel=res.snr_per_pixel, source=res.source_e * u.electron, sky=res.sky_e * u.electron,
                       on_detector=res.on_detector, saturated=res.saturated,
                       systematics_limited=res.systematics_limited, exposure_time=time_s * u.s, n_exp=int(n_exp))


def exposure_time_for_snr(transient, phase, snr, at, telescope, spectrograph, setup=None, *,
                          conditions: ex.Conditions | None = None, tellurics=None,
                          max_exposure=DEFAULT_MAX_EXPOSURE_S * u.s,
                          ideal: bool = False, profile: str = "moffat"):
    """(total time Quantity, number of exposures) reaching ``snr`` per resolution element at ``at``.

    ``at`` is a vacuum wavelength (length Quantity, scalar or array, on the setup's detector);
    ``max_exposure`` (time Quantity) is the longest single exposure (default
    :data:`kncast.forecast.defaults.DEFAULT_MAX_EXPOSURE_S`).  Kernel:
    :func:`kncast.forecast.exposure.time_for_snr`.  An unreachable target (no source signal)
    gives an infinite time.  Other parameters as :func:`snr_spectrum`.
    """
    at_A = value_in(at, u.AA, "at")
    check_range("snr", snr, 0.0, 1e4, low_open=True)
    max_s = value_in(max_exposure, u.s, "max_exposure")
    r = _rates(transient, phase, telescope, spectrograph, setup, conditions, tellurics, at_A, 0, ideal, profile)
    if not np.all(r.on_detector):
        bad = float(np.atleast_1d(at_A)[~r.on_detector][0])
        covered = ", ".join(f"{lo:g}-{hi:g}" for lo, hi in _setup(spectrograph, setup).covered_intervals_A())
        raise ForecastInputError(f"at = {bad:g} A: not on the detector of this setup (allowed: {covered} A)")
    t, n = ex.time_for_snr(r, snr, max_s)
    if np.ndim(at_A) == 0:
        return float(t[0]) * u.s, int(n[0])
    return np.reshape(t, np.shape(at_A)) * u.s, np.reshape(n, np.shape(at_A))


def _setup(spectrograph, setup):
    return setup if setup is not None else spectrograph.default_setup


def _rates(transient, phase, telescope, spectrograph, setup, conditions, tellurics, wavelength_A, n_samples, ideal,
           profile):
    """Electron rates (:func:`kncast.forecast.exposure.rates`) of one epoch on the setup's grid or at ``wavelength_A``."""
    phase_d = value_in(phase, u.day, "phase")
    if np.ndim(phase_d) != 0:
        raise ForecastInputError("phase: one epoch (a scalar time Quantity), got an array")
    lam_A = None if wavelength_A is None else np.atleast_1d(np.asarray(wavelength_A, dtype=float)).ravel()
    grid = ex.setup_grid(telescope, spectrograph, _setup(spectrograph, setup), n_samples, wavelength_A=lam_A)
    cond = conditions if conditions is not None else observing_conditions()
    flux = transient.flux_flam(phase_d, grid.wavelength_A)[0]
    tell = 1.0 if tellurics is None or ideal else tellurics.transmission(grid.wavelength_A, cond.airmass, cond.pwv_mm)
    return ex.rates(flux, grid, cond, tell, ideal=ideal, profile=profile)
