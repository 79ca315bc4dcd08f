"""kncast forecast: what will the spectrum of a kilonova candidate show, and how well can we measure it.

A physics library.  It knows nothing of sites, time zones or the command
line: callers pass airmass, Moon geometry and instrument objects in.
Internal units: wavelength in Angstrom (vacuum), time in days, flux density
in erg s^-1 cm^-2 A^-1, temperature in K.

The public names below (documented in docs/api.md) take and return astropy
Quantities where a user calls in; each is imported on first use, so
``import kncast.forecast`` loads no physics.
"""
from kncast.forecast._lazy import lazy_exports

_WHERE = {
    **dict.fromkeys(["Transient", "PhotosphereState"], "kncast.forecast.source"),
    **dict.fromkeys(["build_model", "PowerLawPhotosphere", "HeatingPhotosphere", "EjectaComponent", "MODEL_NAMES"],
                    "kncast.forecast.photosphere"),
    **dict.fromkeys(["blackbody_intensity", "planck_flam"], "kncast.forecast.blackbody"),
    **dict.fromkeys(["known_bands"], "kncast.forecast.photometry"),
    **dict.fromkeys(["LineList", "Feature"], "kncast.forecast.linelist"),
    **dict.fromkeys(["forecast_features", "FeatureForecast"], "kncast.forecast.features"),
    **dict.fromkeys(["TelluricModel"], "kncast.forecast.tellurics"),
    **dict.fromkeys(["Telescope", "Spectrograph", "Arm", "Setup", "parse_telescopes", "load_telescopes"],
                    "kncast.forecast.instruments"),
    **dict.fromkeys(["Conditions"], "kncast.forecast.exposure"),
    **dict.fromkeys(["MoonGeometry", "SkySpectrum", "load_sky_spectrum"], "kncast.forecast.skybright"),
    **dict.fromkeys(["Atmosphere", "atmosphere_for_site"], "kncast.forecast.extinction_atm"),
    **dict.fromkeys(["airmass_at", "moon_geometry", "observing_conditions", "sky_brightness", "telluric_transmission",
                     "features_at", "SNRSpectrum", "snr_spectrum", "exposure_time_for_snr"], "kncast.forecast.observe"),
    **dict.fromkeys(["STRONG_TAU", "DEFAULT_MAX_EXPOSURE_S", "SNR_BASIS", "DEFAULT_BANDS"], "kncast.forecast.defaults"),
    **dict.fromkeys(["FLAM"], "kncast.forecast.units"),
    **dict.fromkeys(["ForecastInputError", "DataFileError"], "kncast.forecast.errors"),
}

__all__ = list(_WHERE)
__getattr__, __dir__ = lazy_exports(__name__, _WHERE)
