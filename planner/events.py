"""Events: the transient's position, time of the merger or alert, and distance.

An event comes from a TOML file (schema in README.md, section "Event
files") or from command-line options.  Coordinates accept degrees or
sexagesimal strings ("10:21:05.3" / "10h21m05.3s" for RA in hours,
"-35:12:00" / "-35d12m00s" for Dec).
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field as dc_field
from datetime import datetime, timezone
from pathlib import Path

import astropy.units as u
from astropy.coordinates import Angle, SkyCoord
from astropy.time import Time

from forecast.datafiles import field, read_toml, table
from forecast.errors import DataFileError
from planner.errors import InputError

# DE421 (skyfield-data) spans 1899-07-28 .. 2053-10-08; keep a margin for the nights after t0.
T0_MIN, T0_MAX = "1900-01-01", "2053-01-01"


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

    @property
    def coord(self) -> SkyCoord:
        """ICRS position of the (primary) target."""
        return SkyCoord(self.ra_deg * u.deg, self.dec_deg * u.deg, frame="icrs")

    def targets(self) -> tuple[Candidate, ...]:
        """All candidate positions, or the single event position if none are listed."""
        return self.candidates or (Candidate(self.id, self.ra_deg, self.dec_deg),)

    def summary(self) -> dict:
        """JSON-ready description used as the ``event`` member of every document."""
        from planner.output import iso_utc

        doc = {
            "id": self.id, "ra_deg": self.ra_deg, "dec_deg": self.dec_deg, "t0_utc": iso_utc(self.t0),
            "distance_mpc": self.distance_mpc, "redshift": self.redshift,
            "distance_err_mpc": self.distance_err_mpc, "ebv_mw": self.ebv_mw, "source": self.source,
        }
        if self.candidates:
            doc["candidates"] = [{"id": c.id, "ra_deg": c.ra_deg, "dec_deg": c.dec_deg} for c in self.candidates]
        return doc


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


def check_distance(distance_mpc, redshift, where: str):
    """Validate distance (Mpc, (0, 1e5]) and redshift ((0, 10])."""
    if distance_mpc is not None and not 0.0 < distance_mpc <= 1e5:
        raise InputError(f"{where}: distance {distance_mpc:g} Mpc out of range (allowed: 0 < D <= 100000 Mpc)")
    if redshift is not None and not 0.0 < redshift <= 10.0:
        raise InputError(f"{where}: redshift {redshift:g} out of range (allowed: 0 < z <= 10)")


def event_from_options(ra, dec, t0, distance_mpc=None, *, event_id: str = "cli-event", redshift=None,
                       ebv_mw: float = 0.0) -> Event:
    """Build an Event from command-line values (already split into strings/numbers)."""
    ra_deg, dec_deg = parse_ra(ra, "--ra"), parse_dec(dec, "--dec")
    t = parse_time_utc(t0, "--t0")
    check_distance(distance_mpc, redshift, "--distance-mpc" if distance_mpc is not None else "--redshift")
    if not 0.0 <= ebv_mw <= 10.0:
        raise InputError(f"--ebv-mw {ebv_mw:g}: out of range (allowed: 0 to 10 mag)")
    return Event(event_id, ra_deg, dec_deg, t, distance_mpc=distance_mpc, redshift=redshift, ebv_mw=ebv_mw)


def load_event(path) -> Event:
    """Load an event file; TOML by default, VOEvent XML when the file is XML."""
    path = Path(path)
    if path.suffix.lower() == ".xml":
        from planner.voevent import load_voevent  # arrives with the alert-packet reader

        return load_voevent(path)
    return event_from_toml(read_toml(path), path)


def event_from_toml(doc: dict, path) -> Event:
    """Validate the ``[event]`` table (and optional ``[model]``, ``[[candidate]]``) of an event file."""
    ev = table(doc, "event", path)
    event_id = field(ev, "id", path, prefix="event", kind=str)
    ra_deg = _file_angle(ev, "ra", path, parse_ra)
    dec_deg = _file_angle(ev, "dec", path, parse_dec)
    if "t0" not in ev:
        raise DataFileError(path, "event.t0", "required key missing", "ISO 8601 UTC, e.g. 2027-03-14T02:17:00Z")
    t0 = _wrap(lambda: parse_time_utc(ev["t0"], "t0"), path, "event.t0")
    distance = field(ev, "distance_mpc", path, prefix="event", default=None, low=0, high=1e5, low_open=True, unit="Mpc")
    redshift = field(ev, "redshift", path, prefix="event", default=None, low=0, high=10, low_open=True)
    if distance is None and redshift is None:
        raise DataFileError(path, "event.distance_mpc", "required key missing (or give event.redshift)", "(0, 100000] Mpc")
    return Event(
        id=event_id, ra_deg=ra_deg, dec_deg=dec_deg, t0=t0, distance_mpc=distance, redshift=redshift,
        distance_err_mpc=field(ev, "distance_err_mpc", path, prefix="event", default=None, low=0, unit="Mpc"),
        ebv_mw=field(ev, "ebv_mw", path, prefix="event", default=0.0, low=0, high=10, unit="mag"),
        ebv_host=field(ev, "ebv_host", path, prefix="event", default=0.0, low=0, high=10, unit="mag"),
        error_radius_deg=field(ev, "error_radius_deg", path, prefix="event", default=None, low=0, high=180, low_open=True),
        model=table(doc, "model", path, required=False),
        candidates=_candidates(doc, path),
        source=str(path),
    )


def _file_angle(ev: dict, key: str, path, parser) -> float:
    if key not in ev:
        raise DataFileError(path, f"event.{key}", "required key missing", "degrees or a sexagesimal string")
    return _wrap(lambda: parser(ev[key], key), path, f"event.{key}")


def _wrap(fn, path, key):
    """Re-raise an InputError from a value parser as a DataFileError naming file and key."""
    try:
        return fn()
    except InputError as err:
        problem = str(err).split(": ", 1)[-1]
        raise DataFileError(path, key, problem) from None


def _candidates(doc: dict, path) -> tuple[Candidate, ...]:
    rows = doc.get("candidate", [])
    if not isinstance(rows, list):
        raise DataFileError(path, "candidate", "expected an array of [[candidate]] tables")
    out = []
    for i, row in enumerate(rows):
        where = f"candidate[{i}]"
        if not isinstance(row, dict):
            raise DataFileError(path, where, "expected a [[candidate]] table")
        cid = field(row, "id", path, prefix=where, kind=str)
        ra = _wrap(lambda: parse_ra(row["ra"], "ra"), path, f"{where}.ra") if "ra" in row else None
        dec = _wrap(lambda: parse_dec(row["dec"], "dec"), path, f"{where}.dec") if "dec" in row else None
        if ra is None or dec is None:
            raise DataFileError(path, f"{where}.{'ra' if ra is None else 'dec'}", "required key missing")
        out.append(Candidate(cid, ra, dec))
    return tuple(out)
