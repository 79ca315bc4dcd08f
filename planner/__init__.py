"""kncast planner: when, and from where, can a kilonova candidate be observed.

The application package: sites, events, sky geometry, night windows, the
campaign plan, the command line and the reports.  It uses the physics
library :mod:`forecast`; ``forecast`` never imports ``planner``.

The public names below (documented in docs/api.md) are imported on first use,
so ``import kncast.planner`` (and the command line's start) stays light.
"""
from importlib.metadata import PackageNotFoundError, version as _version

from kncast.planner._early import guard_start as _guard_start

_guard_start()  # the kncast command only: a Ctrl-C while astropy loads is one line, not a traceback

from kncast.planner import _offline  # noqa: F401, E402  (configures astropy/skyfield for offline use)
from kncast.forecast._lazy import lazy_exports

try:
    __version__ = _version("kncast")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+source"

_WHERE = {
    **dict.fromkeys(["Event", "Candidate"], "kncast.planner.events.model"),
    **dict.fromkeys(["load_event"], "kncast.planner.events.eventfile"),
    **dict.fromkeys(["SkyMap", "load_skymap"], "kncast.planner.events.skymap"),
    **dict.fromkeys(["Site", "SiteRegistry", "load_site"], "kncast.planner.sites"),
    **dict.fromkeys(["SetupRef", "all_setups", "resolve_setup"], "kncast.planner.setups"),
    **dict.fromkeys(["transient_for_event"], "kncast.planner.source"),
    **dict.fromkeys(["compute_visibility", "VisibilityResult", "NightRecord", "Window"],
                    "kncast.planner.visibility.core"),
    **dict.fromkeys(["rank_candidates"], "kncast.planner.visibility.candidates"),
    **dict.fromkeys(["compute_coverage"], "kncast.planner.visibility.skycoverage"),
    **dict.fromkeys(["build_plan", "Plan", "NightPlan", "SetupOutcome"], "kncast.planner.plan.core"),
    **dict.fromkeys(["InputError", "ParameterError", "UnknownNameError"], "kncast.planner.errors"),
}

__all__ = ["__version__", *_WHERE]
__getattr__, __dir__ = lazy_exports(__name__, _WHERE)
