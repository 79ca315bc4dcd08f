"""kncast planner: when, and from where, can a kilonova candidate be observed.

The application package: sites, events, sky geometry, night windows, the
campaign plan, the command line and the reports.  It uses the physics
library :mod:`forecast`; ``forecast`` never imports ``planner``.
"""
from importlib.metadata import PackageNotFoundError, version as _version

from kncast.planner import _offline  # noqa: F401  (configures astropy/skyfield for offline use)

try:
    __version__ = _version("kncast")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+source"

__all__ = ["__version__"]
