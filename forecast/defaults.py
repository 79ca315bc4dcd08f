"""Defaults and thresholds of the forecast library, each defined once and light to import.

The command line reads them for its option defaults and help texts without loading the physics.
"""
from __future__ import annotations

STRONG_TAU = 1.0                 # Sobolev optical depth above which a feature counts as strong (common practice: tau ~ 1)
DEFAULT_MAX_EXPOSURE_S = 1800.0  # longest single exposure: cosmic rays, sky variation (common practice)
SNR_BASIS = "per resolution element"
DEFAULT_BANDS = ("bessell-U", "bessell-B", "bessell-V", "bessell-R", "bessell-I",
                 "twomass-J", "twomass-H", "twomass-Ks")  # speclite filter names

__all__ = ["STRONG_TAU", "DEFAULT_MAX_EXPOSURE_S", "SNR_BASIS", "DEFAULT_BANDS"]
