"""The event record: position, merger/alert time and distance, with the value checks
shared by every reader (event files, VOEvent packets, command-line values).

Coordinates accept degrees or sexagesimal strings ("10:21:05.3" / "10h21m05.3s" for RA in
hours, "-35:12:00" / "-35d12m00s" for Dec).
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field as dc_field
from datetime import datetime, timezone
import astropy.units as u
from astropy.coordinates import Angle, SkyCoord
from astropy.time import Time

from kncast.planner.errors import InputError

# DE421 (skyfield-data) spans 1899-07-28 .. 2053-10-08; keep a margin for the nights after t0.
T0_MIN, T0_MAX = "1900-01-01", "2053-01-01"
MAX_ID_CHARS = 100  # event and candidate ids (shown in tables, titles and folder names)
MAX_CANDIDATES = 1000  # candidate positions of one event (each is planned per site and night; 100 rank in ~0.5 s)
# control characters, line separators and bidirectional overrides/isolates: never in an id
_UNSAFE_ID_CHARS = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


@dataclass(frozen=True)
class Candidate:
    """One possible counterpart position of an event."""

    id: str
    ra_deg: float
    dec_deg: float


@dataclass(frozen=True)
class Event:
    """A transient to observe.  Angles in degrees, distance in Mpc, t0 a UTC Time."""

    id: str
    ra_deg: float
    dec_deg: float
    t0: Time
    distance_mpc: float | None = None
    redshift: float | None = None
    distance_err_mpc: float | None = None
    ebv_mw: float = 0.0
    ebv_host: float = 0.0
    error_radius_deg: float | None = None
    model: dict = dc_field(default_factory=dict)
    candidates: tuple[Candidate, ...] = ()
    source: str = "command line"

    @classmethod
    def from_coord(cls, id: str, coord: SkyCoord, t0: Time, distance=None, *, redshift: float | None = None,
                   ebv_mw: float = 0.0, ebv_host: float = 0.0, model: dict | None = None) -> "Event":
        """An event from Python values: ``coord`` a SkyCoord (any frame), ``t0`` a Time (any scale),
        ``distance`` a length Quantity (luminosity distance) and/or ``redshift``; ``model`` a
        ``[model]``-style dict (docs/formats.md).  A bad value raises ParameterError naming it."""
        from kncast.planner.errors import ParameterError

        if not isinstance(coord, SkyCoord) or not coord.isscalar:
            raise ParameterError("coord", coord, "one position as an astropy SkyCoord")
        if not isinstance(t0, Time) or not t0.isscalar:
            raise ParameterError("t0", t0, "one moment as an astropy Time")
        t = Time(t0.utc, format="isot")
        if not Time(T0_MIN) <= t <= Time(T0_MAX):
            raise ParameterError("t0", t.isot, f"{T0_MIN} to {T0_MAX} (the ephemeris span)")
        distance_mpc = None
        if distance is not None:
            try:
                distance_mpc = float(u.Quantity(distance).to_value(u.Mpc))
            except (u.UnitConversionError, TypeError, ValueError):
                raise ParameterError("distance", distance, "a length Quantity, e.g. 40 * u.Mpc") from None
        if distance_mpc is None and redshift is None:
            raise ParameterError("distance", None, "a length Quantity, e.g. 40 * u.Mpc (or give redshift)")
        check_distance(distance_mpc, redshift, "distance" if distance_mpc is not None else "redshift")
        for name, value in (("ebv_mw", ebv_mw), ("ebv_host", ebv_host)):
            if not 0.0 <= float(value) <= 10.0:
                raise ParameterError(name, value, "0 to 10 mag")
        try:
            id = check_id(str(id), "id")
        except InputError as err:
            raise ParameterError("id", message=str(err)) from None
        icrs = coord.icrs
        return cls(id, float(icrs.ra.deg), float(icrs.dec.deg), t, distance_mpc=distance_mpc,
                   redshift=None if redshift is None else float(redshift), ebv_mw=float(ebv_mw),
                   ebv_host=float(ebv_host), model=dict(model or {}), source="Python")

    @property
    def coord(self) -> SkyCoord:
        """ICRS position of the (primary) target."""
        return SkyCoord(self.ra_deg * u.deg, self.dec_deg * u.deg, frame="icrs")

    def targets(self) -> tuple[Candidate, ...]:
        """All candidate positions, or the single event position if none are listed."""
        return self.candidates or (Candidate(self.id, self.ra_deg, self.dec_deg),)

    def summary(self) -> dict:
        """JSON-ready description used as the ``event`` member of every document."""
        from kncast.planner.output import iso_utc

        doc = {
            "id": self.id, "ra_deg": self.ra_deg, "dec_deg": self.dec_deg, "t0_utc": iso_utc(self.t0),
            "distance_mpc": self.distance_mpc, "redshift": self.redshift,
            "distance_err_mpc": self.distance_err_mpc, "ebv_mw": self.ebv_mw, "source": self.source,
        }
        if self.candidates:
            doc["candidates"] = [{"id": c.id, "ra_deg": c.ra_deg, "dec_deg": c.dec_deg} for c in self.candidates]
        return doc


def check_id(value, where: str) -> str:
    """An event or candidate id: non-empty, at most MAX_ID_CHARS characters, no control characters, stripped."""
    text = value.strip() if isinstance(value, str) else ""
    if not text:
        raise InputError(f"{where}: expected a non-empty id, got {value!r}")
    if len(text) > MAX_ID_CHARS:
        raise InputError(f"{where}: id of {len(text)} characters is too long (allowed: at most {MAX_ID_CHARS})")
    bad = _UNSAFE_ID_CHARS.search(text)
    if bad:
        raise InputError(f"{where}: id holds the control character U+{ord(bad.group()):04X} "
                         f"(allowed: printable text on one line)")
    return text


def parse_ra(value, where: str) -> float:
    """Right ascension in degrees [0, 360) from a number (deg) or a sexagesimal string (hours)."""
    deg = _parse_angle(value, where, u.hourangle)
    if not 0.0 <= deg < 360.0:
        raise InputError(f"{where}: right ascension {value!r} out of range (allowed: 0 <= RA < 360 deg, or 0h-24h)")
    return deg


def parse_dec(value, where: str) -> float:
    """Declination in degrees [-90, 90] from a number or a sexagesimal string (degrees)."""
    deg = _parse_angle(value, where, u.deg)
    if not -90.0 <= deg <= 90.0:
        raise InputError(f"{where}: declination {value!r} out of range (allowed: -90 to +90 deg)")
    return deg


def _parse_angle(value, where: str, string_unit) -> float:
    if isinstance(value, bool):
        raise InputError(f"{where}: expected an angle, got {value!r}")
    if isinstance(value, (int, float)):
        return float(value)
    text = str(value).strip()
    try:
        if re.fullmatch(r"[+-]?\d+(\.\d*)?([eE][+-]?\d+)?", text):
            return float(text)
        return float(Angle(text, unit=string_unit).deg)
    except (ValueError, u.UnitsError):
        raise InputError(f"{where}: cannot read angle {value!r} (allowed: degrees, or sexagesimal like "
                         f"'10:21:05.3' / '10h21m05s' for RA, '-35:12:00' for Dec)") from None


def parse_time_utc(value, where: str) -> Time:
    """A UTC Time from an ISO 8601 string that states its zone (``Z`` or ``+hh:mm``)."""
    if isinstance(value, datetime):
        dt = value
    else:
        text = str(value).strip()
        if len(text) > 64:
            raise InputError(f"{where}: cannot read time of {len(text)} characters (allowed: ISO 8601 UTC, "
                             f"e.g. 2027-03-14T02:17:00Z)")
        if _LEAP.match(text):
            return _leap_second(text, value, where)
        try:
            dt = datetime.fromisoformat(text.replace("Z", "+00:00").replace("z", "+00:00"))
        except ValueError:
            raise InputError(f"{where}: cannot read time {value!r} (allowed: ISO 8601 UTC, "
                             f"e.g. 2027-03-14T02:17:00Z)") from None
    if dt.tzinfo is None:
        raise InputError(f"{where}: time {value!r} has no time zone; write it in UTC with a Z, "
                         f"e.g. {dt.strftime('%Y-%m-%dT%H:%M:%S')}Z")
    t = Time(dt.astimezone(timezone.utc).replace(tzinfo=None), scale="utc", format="datetime")
    t.format = "isot"
    if not Time(T0_MIN) <= t <= Time(T0_MAX):
        raise InputError(f"{where}: time {value!r} outside the ephemeris span (allowed: {T0_MIN} to {T0_MAX})")
    return t


# a time in a leap second: 23:59:60[.fff] UTC (Z or +00:00 only: leap seconds are defined in UTC)
_LEAP = re.compile(r"^(\d{4}-\d{2}-\d{2})[Tt ]23:59:60(\.\d{1,9})?([Zz]|\+00:?00)$")


def _leap_second(text: str, value, where: str) -> Time:
    """A UTC Time inside a leap second, checked against astropy's leap-second table (IERS Bulletin C)."""
    import warnings

    from erfa import ErfaWarning

    m = _LEAP.match(text)
    stamp = f"{m.group(1)}T23:59:60{m.group(2) or ''}"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", ErfaWarning)
            t = Time(stamp, scale="utc", format="isot")
    except (ErfaWarning, ValueError):
        raise InputError(f"{where}: time {value!r}: no leap second ends that day (allowed: 23:59:60 only on "
                         f"the days IERS Bulletin C lists)") from None
    if not Time(T0_MIN) <= t <= Time(T0_MAX):
        raise InputError(f"{where}: time {value!r} outside the ephemeris span (allowed: {T0_MIN} to {T0_MAX})")
    return t


def check_distance(distance_mpc, redshift, where: str):
    """Validate distance (Mpc, DISTANCE_RANGE_MPC) and redshift (REDSHIFT_RANGE)."""
    from kncast.forecast.distance import (DISTANCE_RANGE_MPC, REDSHIFT_RANGE, distance_range_text,
                                          redshift_range_text)

    if distance_mpc is not None and not DISTANCE_RANGE_MPC[0] < distance_mpc <= DISTANCE_RANGE_MPC[1]:
        raise InputError(f"{where}: distance {distance_mpc:g} Mpc out of range (allowed: {distance_range_text()})")
    if redshift is not None and not REDSHIFT_RANGE[0] < redshift <= REDSHIFT_RANGE[1]:
        raise InputError(f"{where}: redshift {redshift:g} out of range (allowed: {redshift_range_text()})")
