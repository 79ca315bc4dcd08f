"""Defaults and thresholds of the forecast library, each defined once and light to import.

The command line reads them for its option defaults and help texts without loading the physics.
"""
from __future__ import annotations

STRONG_TAU = 1.0                 # Sobolev optical depth above which a feature counts as strong (common practice: tau ~ 1)
DEFAULT_MAX_EXPOSURE_S = 1800.0  # longest single exposure: cosmic rays, sky variation (common practice)
SNR_BASIS = "per resolution element"
DEFAULT_BANDS = ("bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I",
                 "twomass-J", "twomass-H", "twomass-Ks")  # speclite filter names

# per-feature detectability (kncast.forecast.detect)
DEFAULT_BIN_KMS = 1500.0   # velocity bin for the S/N across a trough, km/s (common practice for 0.1-0.3 c features)
DEFAULT_SIGMA = 5.0        # detection significance a feature must reach (common practice: 5 sigma)
DEFAULT_MIN_DEPTH = 0.1    # expected depth from which a feature is a diagnostic target by default
UV_CUTOFF_MAG_PER_AIRMASS = 1.0  # troughs where the atmosphere extinguishes more than this do not count
CORRECTABLE_TRANSMISSION = 0.3   # telluric bands transmitting at least this much are divided out, not lost (common practice)

# the photospheric temperatures and rest wavelengths the bundled line list was chosen for
# (forecast/data/make_lines.py; docs/methods.md, "Line selection"), and the epochs `kncast lines`
# forecasts by default: DEFAULT_LINE_EPOCHS log-spaced phases over the time the event's photosphere
# spends in that temperature range (kncast.forecast.epochs)
LINE_RULE_TEMPERATURE_K = (2500.0, 6000.0)
LINE_RULE_WAVELENGTH_A = (3000.0, 25000.0)
DEFAULT_LINE_EPOCHS = 4

__all__ = ["STRONG_TAU", "DEFAULT_MAX_EXPOSURE_S", "SNR_BASIS", "DEFAULT_BANDS", "DEFAULT_BIN_KMS", "DEFAULT_SIGMA",
           "DEFAULT_MIN_DEPTH", "UV_CUTOFF_MAG_PER_AIRMASS", "CORRECTABLE_TRANSMISSION", "LINE_RULE_TEMPERATURE_K", "LINE_RULE_WAVELENGTH_A",
           "DEFAULT_LINE_EPOCHS"]
