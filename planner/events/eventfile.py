"""Reading events: TOML event files (schema in docs/formats.md) and command-line values;
VOEvent packets are read by :mod:`kncast.planner.events.voevent`."""
from __future__ import annotations

from pathlib import Path

from kncast.forecast.datafiles import check_keys, field, read_toml, table
from kncast.forecast.distance import DISTANCE_RANGE_MPC, REDSHIFT_RANGE
from kncast.forecast.errors import DataFileError
from kncast.planner.errors import InputError, ParameterError
from kncast.planner.events.model import (MAX_CANDIDATES, Candidate, Event, check_distance, check_id,
                                         parse_dec, parse_ra, parse_time_utc)

FILE_KEYS = ("event", "model", "candidate")  # the top-level tables of an event file
EVENT_KEYS = ("id", "ra", "dec", "t0", "distance_mpc", "redshift", "distance_err_mpc", "ebv_mw", "ebv_host",
              "error_radius_deg")
CANDIDATE_KEYS = ("id", "ra", "dec")


def event_from_values(ra, dec, t0, distance_mpc=None, *, event_id: str = "cli-event", redshift=None,
                      ebv_mw: float = 0.0) -> Event:
    """Build an Event from plain values: RA/Dec in degrees or sexagesimal strings, t0 an ISO 8601 UTC
    string, distance in Mpc, E(B-V) in mag.  A bad value raises a ParameterError naming its parameter."""
    _named("event_id", lambda: check_id(event_id, "event_id"))
    ra_deg = _named("ra", lambda: parse_ra(ra, "ra"))
    dec_deg = _named("dec", lambda: parse_dec(dec, "dec"))
    t = _named("t0", lambda: parse_time_utc(t0, "t0"))
    which = "distance_mpc" if distance_mpc is not None else "redshift"
    _named(which, lambda: check_distance(distance_mpc, redshift, which))
    if not 0.0 <= ebv_mw <= 10.0:
        raise ParameterError("ebv_mw", message=f"ebv_mw {ebv_mw:g}: out of range (allowed: 0 to 10 mag)")
    return Event(event_id, ra_deg, dec_deg, t, distance_mpc=distance_mpc, redshift=redshift, ebv_mw=ebv_mw)


def _named(parameter: str, fn):
    """Run a value parser; its InputError becomes a ParameterError naming ``parameter``."""
    try:
        return fn()
    except InputError as err:
        raise ParameterError(parameter, message=str(err)) from None


def load_event(path) -> Event:
    """Load an event file; TOML by default, VOEvent XML when the file is XML."""
    path = Path(path)
    if path.suffix.lower() == ".xml":
        from kncast.planner.events.voevent import load_voevent  # arrives with the alert-packet reader

        return load_voevent(path)
    return event_from_toml(read_toml(path), path)


def event_from_toml(doc: dict, path) -> Event:
    """Validate the ``[event]`` table (and optional ``[model]``, ``[[candidate]]``) of an event file."""
    ev = table(doc, "event", path)
    check_keys(doc, FILE_KEYS, path)
    check_keys(ev, EVENT_KEYS, path, "event")
    event_id = _wrap(lambda: check_id(field(ev, "id", path, prefix="event", kind=str), "id"), path, "event.id")
    ra_deg = _file_angle(ev, "ra", path, parse_ra)
    dec_deg = _file_angle(ev, "dec", path, parse_dec)
    if "t0" not in ev:
        raise DataFileError(path, "event.t0", "required key missing", "ISO 8601 UTC, e.g. 2027-03-14T02:17:00Z")
    t0 = _wrap(lambda: parse_time_utc(ev["t0"], "t0"), path, "event.t0")
    d_lo, d_hi = DISTANCE_RANGE_MPC
    distance = field(ev, "distance_mpc", path, prefix="event", default=None, low=d_lo, high=d_hi, low_open=True,
                     unit="Mpc")
    redshift = field(ev, "redshift", path, prefix="event", default=None, low=REDSHIFT_RANGE[0],
                     high=REDSHIFT_RANGE[1], low_open=True)
    if distance is None and redshift is None:
        raise DataFileError(path, "event.distance_mpc", "required key missing (or give event.redshift)",
                            f"({d_lo:g}, {d_hi:g}] Mpc")
    return Event(
        id=event_id, ra_deg=ra_deg, dec_deg=dec_deg, t0=t0, distance_mpc=distance, redshift=redshift,
        distance_err_mpc=field(ev, "distance_err_mpc", path, prefix="event", default=None, low=0, high=d_hi,
                               unit="Mpc"),
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
    if len(rows) > MAX_CANDIDATES:
        raise DataFileError(path, "candidate", f"{len(rows)} candidates are too many",
                            f"at most {MAX_CANDIDATES} [[candidate]] tables")
    out, seen = [], {}
    for i, row in enumerate(rows):
        where = f"candidate[{i}]"
        if not isinstance(row, dict):
            raise DataFileError(path, where, "expected a [[candidate]] table")
        check_keys(row, CANDIDATE_KEYS, path, where)
        cid = _wrap(lambda: check_id(field(row, "id", path, prefix=where, kind=str), "id"), path, f"{where}.id")
        if cid in seen:
            raise DataFileError(path, f"{where}.id", f"duplicate id {cid!r} (also candidate[{seen[cid]}])",
                                "a different id for every candidate")
        seen[cid] = i
        ra = _wrap(lambda: parse_ra(row["ra"], "ra"), path, f"{where}.ra") if "ra" in row else None
        dec = _wrap(lambda: parse_dec(row["dec"], "dec"), path, f"{where}.dec") if "dec" in row else None
        if ra is None or dec is None:
            raise DataFileError(path, f"{where}.{'ra' if ra is None else 'dec'}", "required key missing")
        out.append(Candidate(cid, ra, dec))
    return tuple(out)
