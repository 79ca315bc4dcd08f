"""Offline configuration of astropy and skyfield.

Imported by ``planner/__init__.py`` so that nothing in kncast ever reaches
for the network:

* astropy reads Earth-orientation data only from the tables bundled with
  ``astropy-iers-data``; automatic downloads are off and predictions older
  than astropy's default age are accepted.  Times beyond the end of the
  bundled predictions trigger *one* short warning line (see
  :func:`warn_if_beyond_iers`), never astropy's multi-line messages.
  The settings are written into astropy's configuration for
  ``astropy.utils.iers`` without importing that module (it pulls in
  ``astropy.table``), so ``import kncast.planner`` stays light.
* skyfield loads its ephemeris (DE421) from ``skyfield-data`` and builds its
  timescale from the *same* ``finals2000A.all`` file astropy uses, so UT1
  agrees between the two libraries.
"""
from __future__ import annotations

import functools
import os
import sys
import warnings

from astropy.config.configuration import get_config
from astropy.utils.exceptions import AstropyWarning
from erfa import ErfaWarning

# The same section ``iers.conf.<item> = value`` writes to; read by astropy.utils.iers whenever it looks.
_IERS_CONF = get_config("astropy.utils.iers.iers")
_IERS_CONF["auto_download"] = False
_IERS_CONF["auto_max_age"] = None
_IERS_CONF["iers_degraded_accuracy"] = "ignore"
# The polar-motion fallback costs < 1 arcsec; our own one-line notice replaces it.
warnings.filterwarnings("ignore", message=r".*(polar motions|IERS data is valid|IERS).*", category=AstropyWarning)

# Dates past the bundled leap-second table's expiry are "dubious" to ERFA; no leap second can be
# announced for them yet, so UTC is as good as it gets.  Our one-line notice covers the IERS side.
warnings.filterwarnings("ignore", message=r".*dubious year.*", category=ErfaWarning)
# Leap-second table expiry notices would otherwise print at every start.
warnings.filterwarnings("ignore", message=r".*leap-second.*", category=AstropyWarning)

_warned = False


def iers_data_dir() -> str:
    """Folder of the IERS tables shipped by ``astropy-iers-data``."""
    import astropy_iers_data

    return os.path.join(os.path.dirname(astropy_iers_data.__file__), "data")


@functools.lru_cache(maxsize=1)
def iers_prediction_end_mjd() -> float:
    """Last MJD covered by the bundled IERS-A table (observed + predicted), as astropy's table has it."""
    from kncast.planner.visibility.eop import table_end_mjd

    return table_end_mjd()


def warn_if_beyond_iers(latest_mjd: float) -> None:
    """Print one warning line (once per process) if times pass the IERS table end."""
    global _warned
    if _warned or latest_mjd <= iers_prediction_end_mjd():
        return
    _warned = True
    print(
        "kncast: warning: times are past the bundled IERS predictions; "
        "UT1 and polar motion are extrapolated (error < 1 arcsec in pointing).",
        file=sys.stderr,
    )


@functools.lru_cache(maxsize=1)
def skyfield_timescale():
    """skyfield Timescale built from astropy-iers-data's finals2000A.all (no download)."""
    from skyfield.api import Loader

    return Loader(iers_data_dir(), verbose=False, expire=False).timescale(builtin=False)


@functools.lru_cache(maxsize=1)
def skyfield_ephemeris():
    """DE421 planetary ephemeris from ``skyfield-data`` (no download)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # skyfield-data's "file expired" notice concerns finals, not DE421
        import skyfield_data
        from skyfield.api import Loader

        return Loader(skyfield_data.get_skyfield_data_path(), verbose=False, expire=False)("de421.bsp")
