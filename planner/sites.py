"""Observing sites: location, pointing limits, horizon profile, telescopes.

One TOML file per site (schema in docs/formats.md, section "Site files").  The
bundled sites live in the top-level ``sites/`` folder (installed as the
``kncast.planner._sites`` package data); users add folders with ``--sites-dir``.
A site id in a user folder replaces a bundled site of the same id.
"""
from __future__ import annotations

import os
import re
import zoneinfo
from dataclasses import dataclass, field as dc_field
from importlib import resources
from pathlib import Path

import numpy as np

from kncast.forecast.datafiles import check_keys, field, read_toml, table
from kncast.forecast.errors import DataFileError
from kncast.planner.errors import ParameterError, UnknownNameError


@dataclass(frozen=True)
class Horizon:
    """Minimum altitude (deg) as a function of azimuth (deg, N=0, E=90), linearly interpolated."""

    azimuth_deg: np.ndarray
    altitude_deg: np.ndarray

    def min_altitude_deg(self, azimuth_deg):
        """Horizon altitude (deg) at the given azimuths (deg), periodic in 360 deg."""
        return np.interp(np.mod(azimuth_deg, 360.0), self.azimuth_deg, self.altitude_deg, period=360.0)


@dataclass(frozen=True)
class Site:
    """An observatory site.  Angles in degrees (longitude east positive), elevation in metres."""

    id: str
    name: str
    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    timezone: str
    min_altitude_deg: float
    horizon: Horizon | None = None
    telescopes: tuple = ()
    atmosphere: dict = dc_field(default_factory=dict)
    source: str = ""

    @property
    def tz(self) -> zoneinfo.ZoneInfo:
        return zoneinfo.ZoneInfo(self.timezone)


def bundled_dir(package: str, source_folder: str) -> Path:
    """Folder of bundled data installed as ``package`` (top-level ``source_folder`` in a checkout).

    An installed kncast maps ``sites/`` and ``demo_events/`` to ``kncast.planner._sites`` and
    ``kncast.planner._demo_events``; when a source checkout shadows the installed package (``python -m
    pytest`` from the project root), the folders are read from the checkout itself.
    """
    try:
        return Path(str(resources.files(package)))
    except ModuleNotFoundError:
        return Path(__file__).resolve().parents[1] / source_folder


def bundled_sites_dir() -> Path:
    """Folder of the sites shipped with kncast."""
    return bundled_dir("kncast.planner._sites", "sites")


SITE_FILE_KEYS = ("site", "telescope", "atmosphere")  # the top-level tables of a site file
SITE_KEYS = ("id", "name", "latitude_deg", "longitude_deg", "elevation_m", "timezone", "min_altitude_deg", "horizon")
HORIZON_KEYS = ("azimuth_deg", "altitude_deg")
MAX_HORIZON_POINTS = 3600  # one point per 0.1 deg of azimuth
_SITE_ID = re.compile(r"^[a-z0-9][a-z0-9._-]*$")  # as the telescope and instrument ids (no '/' or ':')


def load_site(path) -> Site:
    """Read and validate one site file."""
    doc = read_toml(path)
    st = table(doc, "site", path)
    check_keys(doc, SITE_FILE_KEYS, path)
    check_keys(st, SITE_KEYS, path, "site")
    f = lambda key, **kw: field(st, key, path, prefix="site", **kw)  # noqa: E731
    tzname = f("timezone", kind=str)
    try:
        zoneinfo.ZoneInfo(tzname)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise DataFileError(path, "site.timezone", f"unknown time zone {tzname!r}",
                            "an IANA name such as America/Santiago") from None
    return Site(
        id=_site_id(f("id", kind=str), path),
        name=f("name", kind=str),
        latitude_deg=f("latitude_deg", low=-90, high=90, unit="deg"),
        longitude_deg=f("longitude_deg", low=-180, high=360, unit="deg (east positive)"),
        elevation_m=f("elevation_m", low=-500, high=6000, unit="m"),
        timezone=tzname,
        min_altitude_deg=f("min_altitude_deg", low=0, high=89, unit="deg"),
        horizon=_horizon(st, path),
        telescopes=_telescopes(doc, path),
        atmosphere=table(doc, "atmosphere", path, required=False),
        source=str(path),
    )


def _site_id(value: str, path) -> str:
    text = value.strip()
    if len(text) > 64 or not _SITE_ID.match(text.lower()):
        raise DataFileError(path, "site.id", f"id {text[:80]!r} not allowed",
                            "at most 64 letters, digits, '.', '_' and '-', starting with a letter or digit")
    return text


def _horizon(st: dict, path) -> Horizon | None:
    hz = st.get("horizon")
    if hz is None:
        return None
    if not isinstance(hz, dict):
        raise DataFileError(path, "site.horizon", "expected a table with azimuth_deg and altitude_deg arrays")
    check_keys(hz, HORIZON_KEYS, path, "site.horizon")
    az = field(hz, "azimuth_deg", path, prefix="site.horizon", kind=list)
    alt = field(hz, "altitude_deg", path, prefix="site.horizon", kind=list)
    try:
        az, alt = np.asarray(az, dtype=float), np.asarray(alt, dtype=float)
    except (TypeError, ValueError):
        raise DataFileError(path, "site.horizon", "azimuth_deg and altitude_deg must hold numbers") from None
    if az.ndim != 1 or az.size > MAX_HORIZON_POINTS:
        raise DataFileError(path, "site.horizon.azimuth_deg", f"{az.size} values", f"2 to {MAX_HORIZON_POINTS} numbers")
    if az.size < 2 or az.shape != alt.shape:
        raise DataFileError(path, "site.horizon", "azimuth_deg and altitude_deg need the same length, at least 2")
    if np.any((az < 0) | (az >= 360)) or np.any(np.diff(az) <= 0):
        raise DataFileError(path, "site.horizon.azimuth_deg", "must increase strictly", "0 <= az < 360 deg")
    if np.any((alt < 0) | (alt > 89)):
        raise DataFileError(path, "site.horizon.altitude_deg", "out of range", "[0, 89] deg")
    return Horizon(az, alt)


def _telescopes(doc: dict, path) -> tuple:
    """Telescopes and their instruments (parsed by kncast.forecast.instruments)."""
    rows = doc.get("telescope", [])
    if not rows:
        return ()
    from kncast.forecast.instruments import parse_telescopes

    return parse_telescopes(rows, path)


class SiteRegistry:
    """Sites by id (case-insensitive), from the bundled folder plus user folders."""

    def __init__(self, sites: dict[str, Site]):
        self._sites = sites

    @classmethod
    def load(cls, extra_dirs=()) -> "SiteRegistry":
        sites: dict[str, Site] = {}
        for folder in [bundled_sites_dir(), *map(Path, extra_dirs)]:
            sites.update(_load_folder(folder))
        return cls(sites)

    def __iter__(self):
        return iter(self._sites.values())

    def __len__(self):
        return len(self._sites)

    def ids(self) -> list[str]:
        return [s.id for s in self._sites.values()]

    def get(self, site_id: str) -> Site:
        try:
            return self._sites[site_id.strip().lower()]
        except KeyError:
            raise UnknownNameError("site", site_id, self.ids()) from None

    def select(self, ids=None) -> list[Site]:
        """Sites named in ``ids`` (iterable of ids), or all sites in file order."""
        if not ids:
            return list(self._sites.values())
        return [self.get(i) for i in ids]


MAX_SITE_FILES = 500  # site files in one folder


def _load_folder(folder: Path) -> dict[str, Site]:
    if not folder.is_dir():
        raise ParameterError("extra_dirs", message=f"extra_dirs {str(folder)!r}: not a folder")
    try:
        with os.scandir(folder) as it:
            names = sorted(e.name for e in it if e.name.endswith(".toml"))
    except OSError as err:
        raise ParameterError("extra_dirs", message=f"extra_dirs {str(folder)!r}: cannot be read ({err.strerror})") from None
    if not os.access(folder, os.R_OK | os.X_OK):
        raise ParameterError("extra_dirs", message=f"extra_dirs {str(folder)!r}: cannot be read (no permission)")
    if len(names) > MAX_SITE_FILES:
        raise ParameterError("extra_dirs", message=f"extra_dirs {str(folder)!r}: {len(names)} site files "
                                                   f"(allowed: at most {MAX_SITE_FILES})")
    found: dict[str, Site] = {}
    for path in (folder / n for n in names):
        site = load_site(path)
        key = site.id.lower()
        if key in found:
            raise DataFileError(path, "site.id", f"duplicate id {site.id!r} (also in {found[key].source})")
        found[key] = site
    return found
