"""IVOA VOEvent 2.0 alert packets as kncast events.

A packet gives the position, its error circle and the time of the event in
``WhereWhen/ObsDataLocation/ObservationLocation/AstroCoords`` (the STC
profile of the VOEvent 2.0 Recommendation, IVOA 2011, section 3.5), the
event's identity in the ``ivorn`` attribute of the root element and, where
the author gives it, a distance as a ``What/Param``.  What is read:

* ``ivorn`` -> ``Event.id``: the part after ``#`` (or the last path segment), with
  characters other than letters, digits and ``._+-`` replaced by ``-``.
* ``AstroCoords/Position2D`` with ``unit="deg"``: ``Value2/C1`` (RA) and
  ``Value2/C2`` (Dec); ``Error2Radius`` (same unit) -> ``error_radius_deg``.
* ``AstroCoords/Time/TimeInstant/ISOTime`` -> ``t0``, in the time scale named
  by the coordinate system id (``coord_system_id`` of ``AstroCoords``, e.g.
  ``UTC-ICRS-GEO``): UTC, TT, TAI, GPS or TDB are converted to UTC.
  The spatial part must be ICRS or FK5 (J2000 equinox, converted to ICRS).
* ``What//Param`` (anywhere under ``What``, groups included; names are
  case-insensitive): distance from ``distance``, ``distmean``,
  ``distance_mpc`` or ``luminosity_distance``; its 1-sigma error from
  ``distance_err``, ``distance_error``, ``diststd`` or ``distance_err_mpc``;
  ``redshift``; Milky Way ``ebv_mw``.  Distances in pc, kpc, Mpc or Gpc
  (``unit`` attribute; Mpc when absent).

Anything missing or malformed ends in one :class:`DataFileError` line naming
the file and the element.
"""
from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

from kncast.forecast.datafiles import MAX_TEXT_BYTES, read_nonempty_bytes
from kncast.forecast.errors import DataFileError
from kncast.planner.errors import InputError
from kncast.planner.events.model import Event, T0_MAX, T0_MIN, check_distance, check_id

VOEVENT_NS = "http://www.ivoa.net/xml/VOEvent/v2.0"
LOCATION = "WhereWhen/ObsDataLocation/ObservationLocation"
TIME_SCALES = {"UTC": "utc", "TT": "tt", "TAI": "tai", "GPS": "tai", "TDB": "tdb"}
GPS_MINUS_TAI_S = -19.0  # GPS time runs a constant 19 s behind TAI (common practice)
SPATIAL_FRAMES = ("ICRS", "FK5")
DISTANCE_NAMES = ("distance", "distmean", "distance_mpc", "luminosity_distance")
DISTANCE_ERR_NAMES = ("distance_err", "distance_error", "diststd", "distance_err_mpc")
DISTANCE_UNITS_MPC = {"pc": 1e-6, "kpc": 1e-3, "mpc": 1.0, "gpc": 1e3}
MAX_XML_DEPTH = 32  # element nesting (a VOEvent 2.0 packet needs about 8)
MAX_XML_ELEMENTS = 100_000


def load_voevent(path) -> Event:
    """Read a VOEvent 2.0 packet into an :class:`~kncast.planner.events.eventfile.Event` (UTC t0, ICRS degrees)."""
    path = Path(path)
    root = _parse(path)
    system = _coord_system(root, path)
    coords = _find(root, f"{LOCATION}/AstroCoords", path)
    pos = coords.find("Position2D")
    if pos is None:
        raise DataFileError(path, f"{LOCATION}/AstroCoords/Position2D",
                            "required element missing: the packet gives no position (for an alert with only "
                            "a probability sky map, use the sky-coverage command with the map)")
    ra_deg, dec_deg, err_deg = _position(pos, system, path)
    t0 = _time(coords, system, path)
    params = _params(root)
    distance, distance_err = _distance(params, path)
    redshift = _number(params, ("redshift",), path)
    try:
        check_distance(distance, redshift, "distance")
    except InputError as err:
        raise DataFileError(path, "What/Param", str(err).split(": ", 1)[-1]) from None
    ebv = _number(params, ("ebv_mw",), path)
    if ebv is not None and not 0.0 <= ebv <= 10.0:
        raise DataFileError(path, "What/Param[@name='ebv_mw']", f"value {ebv:g} out of range", "[0, 10] mag")
    return Event(id=_event_id(root, path), ra_deg=ra_deg, dec_deg=dec_deg, t0=t0, distance_mpc=distance,
                 redshift=redshift, distance_err_mpc=distance_err, ebv_mw=ebv or 0.0,
                 error_radius_deg=err_deg, source=str(path))


# --- reading -------------------------------------------------------------
def _parse(path: Path) -> ET.Element:
    """The packet's root element, namespaces stripped from every tag.

    Parsed with ``defusedxml`` after decoding (any encoding the packet declares): a DOCTYPE, an
    entity declaration or an external reference is refused, so are an unknown encoding, nesting
    deeper than MAX_XML_DEPTH, more than MAX_XML_ELEMENTS elements and a root element outside the
    VOEvent 2.0 namespace.
    """
    raw = read_nonempty_bytes(path, "a VOEvent XML file", MAX_TEXT_BYTES)
    root = _parse_bytes(raw, path)
    namespace, _, local = root.tag.rpartition("}")
    if local != "VOEvent":
        raise DataFileError(path, "", f"root element is <{local}>, not a VOEvent packet",
                            f"a VOEvent 2.0 document ({VOEVENT_NS})")
    if namespace.lstrip("{") != VOEVENT_NS:
        raise DataFileError(path, "VOEvent", f"namespace {namespace.lstrip('{') or '(none)'!r} is not VOEvent 2.0",
                            VOEVENT_NS)
    for el in root.iter():
        if isinstance(el.tag, str):
            el.tag = el.tag.rsplit("}", 1)[-1]
    version = root.get("version", "").strip()
    if version and version != "2.0":
        raise DataFileError(path, "VOEvent/@version", f"version {version!r} not supported", "2.0")
    return root


def _parse_bytes(raw: bytes, path) -> ET.Element:
    import io

    import defusedxml.ElementTree as safe_et
    from defusedxml import DefusedXmlException

    depth = count = 0
    root = None
    try:
        for event, el in safe_et.iterparse(io.BytesIO(raw), events=("start", "end"), forbid_dtd=True):
            if event == "end":
                depth -= 1
                continue
            depth, count = depth + 1, count + 1
            root = el if root is None else root
            if depth > MAX_XML_DEPTH:
                raise DataFileError(path, "", "elements nested too deeply", f"at most {MAX_XML_DEPTH} levels")
            if count > MAX_XML_ELEMENTS:
                raise DataFileError(path, "", "too many elements", f"at most {MAX_XML_ELEMENTS}")
    except DataFileError:
        raise
    except DefusedXmlException as err:
        raise DataFileError(path, "", f"{type(err).__name__}: DOCTYPE, entity declarations and external "
                                      "references are not accepted in alert packets") from None
    except ET.ParseError as err:
        raise DataFileError(path, "", f"not well-formed XML ({err})") from None
    except (LookupError, ValueError, UnicodeError) as err:
        raise DataFileError(path, "", f"cannot be decoded ({str(err).splitlines()[0][:120]})",
                            "a known encoding such as UTF-8 or UTF-16") from None
    if root is None:
        raise DataFileError(path, "", "not well-formed XML (no element)")
    return root


def _find(parent: ET.Element, where: str, path, name: str | None = None) -> ET.Element:
    el = parent.find(where)
    if el is None:
        raise DataFileError(path, name or where, "required element missing (the packet lacks it)")
    return el


def _text(parent: ET.Element, where: str, path, name: str) -> str:
    el = parent.find(where)
    if el is None or not (el.text or "").strip():
        raise DataFileError(path, name, "required element missing or empty")
    return el.text.strip()


def _event_id(root: ET.Element, path) -> str:
    ivorn = (root.get("ivorn") or "").strip()
    if not ivorn.startswith("ivo://"):
        raise DataFileError(path, "VOEvent/@ivorn", f"missing or malformed ivorn {ivorn[:120]!r}",
                            "ivo://authority/path#local-id")
    local = ivorn.split("#", 1)[1] if "#" in ivorn else ivorn.rstrip("/").rsplit("/", 1)[-1]
    local = re.sub(r"[^A-Za-z0-9._+-]+", "-", local.strip()).strip("-.")  # safe in file and folder names
    if not local:
        raise DataFileError(path, "VOEvent/@ivorn", f"no local id in {ivorn[:120]!r}", "ivo://authority/path#local-id")
    try:
        return check_id(local, "local id")
    except InputError as err:
        raise DataFileError(path, "VOEvent/@ivorn", str(err)) from None


# --- where and when ------------------------------------------------------
def _coord_system(root: ET.Element, path) -> tuple[str, str]:
    """(time scale, spatial frame) from the STC coordinate system id, e.g. ('UTC', 'ICRS')."""
    loc = _find(root, LOCATION, path)
    coords = _find(loc, "AstroCoords", path, f"{LOCATION}/AstroCoords")
    sid = (coords.get("coord_system_id") or "").strip()
    if not sid:
        system = loc.find("AstroCoordSystem")
        sid = (system.get("id") or "").strip() if system is not None else ""
    parts = sid.upper().split("-")
    if len(parts) != 3:
        raise DataFileError(path, f"{LOCATION}/AstroCoords/@coord_system_id",
                            f"missing or unrecognised coordinate system {sid!r}",
                            "TIME-FRAME-CENTRE, e.g. UTC-ICRS-GEO")
    scale, frame = parts[0], parts[1]
    if scale not in TIME_SCALES:
        raise DataFileError(path, f"{LOCATION}/AstroCoords/@coord_system_id",
                            f"time system {scale!r} (in {sid!r}) not supported", " | ".join(TIME_SCALES))
    if frame not in SPATIAL_FRAMES:
        raise DataFileError(path, f"{LOCATION}/AstroCoords/@coord_system_id",
                            f"spatial frame {frame!r} (in {sid!r}) not supported", " | ".join(SPATIAL_FRAMES))
    return scale, frame


def _position(pos: ET.Element, system, path):
    """ICRS (ra, dec, error radius) in degrees from a Position2D element."""
    where = f"{LOCATION}/AstroCoords/Position2D"
    unit = (pos.get("unit") or "").strip().lower()
    if unit not in ("deg", "degree", "degrees"):
        raise DataFileError(path, f"{where}/@unit", f"unit {pos.get('unit')!r} not supported", "deg")
    c1 = _float(_text(pos, "Value2/C1", path, f"{where}/Value2/C1"), path, f"{where}/Value2/C1")
    c2 = _float(_text(pos, "Value2/C2", path, f"{where}/Value2/C2"), path, f"{where}/Value2/C2")
    if not 0.0 <= c1 <= 360.0:
        raise DataFileError(path, f"{where}/Value2/C1", f"right ascension {c1:g} deg out of range", "0 <= RA < 360 deg")
    if not -90.0 <= c2 <= 90.0:
        raise DataFileError(path, f"{where}/Value2/C2", f"declination {c2:g} deg out of range", "-90 to +90 deg")
    err = None
    if pos.find("Error2Radius") is not None:
        err = _float(_text(pos, "Error2Radius", path, f"{where}/Error2Radius"), path, f"{where}/Error2Radius")
        if not 0.0 < err <= 180.0:
            raise DataFileError(path, f"{where}/Error2Radius", f"value {err:g} deg out of range", "(0, 180] deg")
    ra, dec = c1 % 360.0, c2
    if system[1] == "FK5":
        ra, dec = _fk5_to_icrs(ra, dec)
    return ra, dec, err


def _fk5_to_icrs(ra_deg: float, dec_deg: float):
    import astropy.units as u
    from astropy.coordinates import FK5, SkyCoord

    c = SkyCoord(ra_deg * u.deg, dec_deg * u.deg, frame=FK5(equinox="J2000")).icrs
    return float(c.ra.deg) % 360.0, float(c.dec.deg)


def _time(coords: ET.Element, system, path):
    """The event time as a UTC astropy Time, from Time/TimeInstant/ISOTime."""
    from astropy.time import Time, TimeDelta

    where = f"{LOCATION}/AstroCoords/Time/TimeInstant/ISOTime"
    text = _text(coords, "Time/TimeInstant/ISOTime", path, where)
    if len(text) > 64:
        raise DataFileError(path, where, f"time of {len(text)} characters", "ISO 8601, e.g. 2027-03-14T02:17:00.00")
    stamp = text[:-1] if text[-1:] in "Zz" else text
    scale = TIME_SCALES[system[0]]
    try:
        t = Time(stamp, format="isot", scale=scale)
    except ValueError:
        raise DataFileError(path, where, f"cannot read time {text!r}", "ISO 8601 without zone, e.g. 2027-03-14T02:17:00.00") from None
    if system[0] == "GPS":
        t = t - TimeDelta(GPS_MINUS_TAI_S, format="sec")
    t = t.utc
    t.format = "isot"
    if not Time(T0_MIN, scale="utc") <= t <= Time(T0_MAX, scale="utc"):
        raise DataFileError(path, where, f"time {text!r} outside the ephemeris span", f"{T0_MIN} to {T0_MAX}")
    return t


# --- what ----------------------------------------------------------------
def _params(root: ET.Element) -> dict[str, ET.Element]:
    """Every Param under What, by lower-case name (the first one wins)."""
    what = root.find("What")
    out: dict[str, ET.Element] = {}
    if what is not None:
        for p in what.iter("Param"):
            name = (p.get("name") or "").strip().lower()
            if name and name not in out:
                out[name] = p
    return out


def _number(params, names, path) -> float | None:
    for name in names:
        if name in params:
            return _float(params[name].get("value"), path, f"What/Param[@name='{params[name].get('name')}']/@value")
    return None


def _distance(params, path):
    """(distance, 1-sigma error) in Mpc, None where the packet does not say."""
    out = []
    for names in (DISTANCE_NAMES, DISTANCE_ERR_NAMES):
        name = next((n for n in names if n in params), None)
        if name is None:
            out.append(None)
            continue
        p = params[name]
        where = f"What/Param[@name='{p.get('name')}']"
        value = _float(p.get("value"), path, f"{where}/@value")
        unit = (p.get("unit") or "Mpc").strip().lower()
        if unit not in DISTANCE_UNITS_MPC:
            raise DataFileError(path, f"{where}/@unit", f"unit {p.get('unit')!r} not supported", "pc | kpc | Mpc | Gpc")
        value *= DISTANCE_UNITS_MPC[unit]
        if value < 0:
            raise DataFileError(path, f"{where}/@value", f"negative distance {value:g} Mpc", ">= 0 Mpc")
        out.append(value)
    return out[0], out[1]


def _float(text, path, where: str) -> float:
    try:
        v = float(str(text).strip())
    except (TypeError, ValueError):
        raise DataFileError(path, where, f"expected a number, got {str(text)[:40]!r}") from None
    if not math.isfinite(v):
        raise DataFileError(path, where, f"expected a finite number, got {str(text)[:40]!r}")
    return v
