"""Visibility of an event from many sites over many nights, in one vectorized pass.

:func:`compute_visibility` builds the Ephemeris once (Sun, Moon and targets
are site-independent at the geocentric level), samples every rule of
:mod:`kncast.planner.visibility.windows` on a 5-minute grid for all sites at once, refines
dusk, dawn and window edges with the shared root finder (to ~1 s) and
summarises each window (best airmass and when, Moon at that moment).
"""
from __future__ import annotations

import datetime as dt
import functools
from dataclasses import dataclass, field

import numpy as np
from astropy.time import Time

from kncast.forecast.airmass import airmass_from_altitude
from kncast.forecast.references import KASTEN_YOUNG_1989
from kncast.planner.visibility import sky
from kncast.planner.errors import ParameterError
from kncast.planner.visibility.nights import dusk_dawn, night_bounds_mjd, twilight_altitude_deg
from kncast.planner.visibility.rootfind import positive_intervals
from kncast.planner.visibility.windows import (Rules, Sky, combined_margin, grid_margins, night_edges, night_notes,
                                              split_at_bounds, window_margin_fn)

# Published sources cited below (the ``max_airmass`` rule), as data (records in kncast.forecast.references).
REFERENCES = (KASTEN_YOUNG_1989,)

GRID_STEP_MIN = 5.0  # sampling step before root finding; windows shorter than this may be missed
BEST_SAMPLES = 97  # samples per window to locate the best airmass (refined by a parabola)
EDGE_TOL_S = 1.0


@dataclass
class Window:
    """One observing window.  Moon values are taken at ``best_time``.

    Times are kept as MJD (UTC) floats; ``start``, ``end`` and ``best_time`` are the astropy
    ``Time`` of each, built when first read.
    """

    start_mjd: float
    end_mjd: float
    hours: float
    best_airmass: float
    best_mjd: float
    best_altitude_deg: float
    moon_illumination: float
    moon_phase_angle_deg: float
    moon_sep_deg: float
    moon_altitude_deg: float
    phase_start_d: float
    phase_end_d: float

    @functools.cached_property
    def start(self) -> Time:
        return _time(self.start_mjd)

    @functools.cached_property
    def end(self) -> Time:
        return _time(self.end_mjd)

    @functools.cached_property
    def best_time(self) -> Time:
        return _time(self.best_mjd)

    def summary(self) -> dict:
        """JSON dict (times ISO 8601 UTC with Z)."""
        from kncast.planner.output import iso_utc_mjd as iso

        return {"start_utc": iso(self.start_mjd), "end_utc": iso(self.end_mjd), "hours": round(self.hours, 4),
                "best_airmass": round(self.best_airmass, 4), "best_utc": iso(self.best_mjd),
                "best_altitude_deg": round(self.best_altitude_deg, 3),
                "moon_illumination": round(self.moon_illumination, 4),
                "moon_phase_angle_deg": round(self.moon_phase_angle_deg, 2),
                "moon_sep_deg": round(self.moon_sep_deg, 3), "moon_altitude_deg": round(self.moon_altitude_deg, 3),
                "phase_start_d": round(self.phase_start_d, 5), "phase_end_d": round(self.phase_end_d, 5)}


@dataclass
class NightRecord:
    """One local night at one site: dusk/dawn (None when the Sun does not cross), windows, note.

    Dusk and dawn are kept as MJD (UTC) floats (NaN: no crossing); ``dusk`` and ``dawn`` are their
    astropy ``Time`` (or None), built when first read.
    """

    site: object  # kncast.planner.sites.Site
    night: dt.date
    dusk_mjd: float
    dawn_mjd: float
    note: str
    windows: list[Window] = field(default_factory=list)
    dark_hours: float = 0.0

    @functools.cached_property
    def dusk(self) -> Time | None:
        return _time(self.dusk_mjd)

    @functools.cached_property
    def dawn(self) -> Time | None:
        return _time(self.dawn_mjd)

    def summary(self) -> dict:
        from kncast.planner.output import iso_utc_mjd as iso

        return {"site": self.site.id, "night": self.night.isoformat(), "dusk_utc": iso(self.dusk_mjd),
                "dawn_utc": iso(self.dawn_mjd), "note": self.note, "dark_hours": round(self.dark_hours, 4),
                "windows": [w.summary() for w in self.windows]}


@dataclass
class VisibilityResult:
    """Everything :func:`compute_visibility` found, plus what plots need to resample the sky."""

    event: object
    sites: list
    nights: list[NightRecord]
    twilight: str
    rules: Rules
    ephemeris: sky.Ephemeris
    night_bounds_mjd: np.ndarray  # (n_sites, n_nights + 1), local noons
    target_index: int = 0
    start_date: dt.date | None = None  # local evening date of the first night, when given

    @property
    def t0_mjd(self) -> float:
        return self.rules.t0_mjd

    def for_site(self, site_id: str) -> list[NightRecord]:
        return [n for n in self.nights if n.site.id == site_id]

    def windows(self) -> list[tuple[NightRecord, Window]]:
        return [(n, w) for n in self.nights for w in n.windows]

    def settings(self) -> dict:
        r = self.rules
        return {"twilight": self.twilight, "twilight_sun_altitude_deg": r.twilight_deg,
                "min_altitude_deg": {s.id: float(a) for s, a in zip(self.sites, r.min_altitude_deg)},
                "max_airmass": r.max_airmass, "min_moon_sep_deg": r.min_moon_sep_deg,
                "nights": self.night_bounds_mjd.shape[1] - 1,
                "start_date": self.start_date.isoformat() if self.start_date else None,
                "target": self.event.targets()[self.target_index].id}


def _deg(value, name: str, low: float, high: float):
    """Plain float degrees from a float or an angle Quantity, range-checked."""
    if value is None:
        return None
    if hasattr(value, "to_value"):
        import astropy.units as u

        value = value.to_value(u.deg) if name != "max_airmass" else float(value)
    value = float(value)
    if not np.isfinite(value) or not low <= value <= high:
        raise ParameterError(name, value, f"[{low:g}, {high:g}]")
    return value


MAX_START_DAYS = 366  # a later first night at most this many days after t0


def _check_start(start_date, t0_mjd: float) -> None:
    """``start_date`` (local evening date of the first night) within [t0 - 1 d, t0 + MAX_START_DAYS]."""
    if start_date is None:
        return
    t0 = dt.date(1858, 11, 17) + dt.timedelta(days=int(t0_mjd))
    if not isinstance(start_date, dt.date) or not (t0 - dt.timedelta(days=1) <= start_date
                                                     <= t0 + dt.timedelta(days=MAX_START_DAYS)):
        raise ParameterError("start_date", str(start_date), f"a date from {t0 - dt.timedelta(days=1)} to "
                             f"{t0 + dt.timedelta(days=MAX_START_DAYS)} (t0 - 1 d to t0 + {MAX_START_DAYS} d)")


def compute_visibility(event, sites, nights: int = 3, twilight: str = "nautical", min_altitude_deg=None,
                       max_airmass=None, min_moon_sep_deg=None, target_index: int = 0,
                       ephemeris: sky.Ephemeris | None = None, start_date: dt.date | None = None) -> VisibilityResult:
    """Dusk, dawn and observing windows of ``event`` at each site for ``nights`` local nights from t0.

    ``min_altitude_deg`` replaces every site's own pointing limit; ``max_airmass``
    (Kasten & Young 1989) and ``min_moon_sep_deg`` add rules.  ``target_index``
    picks one of ``event.targets()``.  The Ephemeris (built for all targets) is
    reused from ``ephemeris`` (e.g. ``result.ephemeris`` of an earlier call for
    another target) when it covers the span, so a run builds it only once.
    """
    n_targets = len(event.targets())
    if not 0 <= target_index < n_targets:
        raise ParameterError("target_index", target_index, f"0 to {n_targets - 1}")
    return compute_visibility_many(event, sites, nights, twilight, min_altitude_deg, max_airmass, min_moon_sep_deg,
                                   targets=[target_index], ephemeris=ephemeris, start_date=start_date)[0]


MAX_CHUNK_SAMPLES = 2_000_000  # (target, site) rows x grid samples evaluated together: ~16 MB per margin array


def compute_visibility_many(event, sites, nights: int = 3, twilight: str = "nautical", min_altitude_deg=None,
                            max_airmass=None, min_moon_sep_deg=None, targets=None,
                            ephemeris: sky.Ephemeris | None = None,
                            start_date: dt.date | None = None) -> list[VisibilityResult]:
    """:func:`compute_visibility` for several of ``event.targets()`` at once: one result per index in
    ``targets`` (default: every target), in that order, equal to one call per target.

    All targets are evaluated together, on arrays of (target, site) rows x times (in groups of at
    most MAX_CHUNK_SAMPLES samples), with one Ephemeris; dusk and dawn, which do not depend on the
    target, are found once.
    """
    all_targets = event.targets()
    targets = list(range(len(all_targets))) if targets is None else [int(k) for k in targets]
    if not targets or not all(0 <= k < len(all_targets) for k in targets):
        raise ParameterError("targets", targets, f"indices from 0 to {len(all_targets) - 1}")
    sites, nights, rules, dates, bounds = _setup(event, sites, nights, twilight, min_altitude_deg, max_airmass,
                                                 min_moon_sep_deg, start_date)
    span = (bounds.min() - 0.05, bounds.max() + 0.05)
    eph = ephemeris
    if eph is None or eph.mjd[0] > span[0] or eph.mjd[-1] < span[1] or eph.target_xyz.shape[0] != len(all_targets):
        eph = sky.Ephemeris.build(*span, [t.ra_deg for t in all_targets], [t.dec_deg for t in all_targets])
    n_grid = int(np.ceil((bounds.max() - bounds.min()) * 1440.0 / GRID_STEP_MIN)) + 1
    grid = bounds.min() + np.arange(n_grid) * GRID_STEP_MIN / 1440.0
    site_rows = np.arange(len(sites))[:, None]

    # dusk and dawn: where the twilight margin changes sign (the same for every target)
    sun_sky = Sky(eph, sites, targets[0])
    sun = rules.twilight_deg - sun_sky.sun_altitude_deg(grid, site_rows)
    sun_fn = lambda t, r: rules.twilight_deg - sun_sky.sun_altitude_deg(t, r)  # noqa: E731
    dark = dusk_dawn(*positive_intervals(sun_fn, grid, sun, EDGE_TOL_S), bounds)

    edges = night_edges(grid, bounds)
    per_chunk = max(1, MAX_CHUNK_SAMPLES // (len(sites) * n_grid))
    out = []
    for c in range(0, len(targets), per_chunk):  # groups of targets, each evaluated in one pass
        skyq = Sky(eph, sites, targets=targets[c:c + per_chunk])
        records = _target_records(skyq, rules, grid, sun, edges, bounds, dates, dark, twilight, nights)
        out += [VisibilityResult(event=event, sites=sites, nights=recs, twilight=twilight, rules=rules,
                                 ephemeris=eph, night_bounds_mjd=bounds, target_index=int(k), start_date=start_date)
                for k, recs in zip(skyq.targets, records)]
    return out


def _setup(event, sites, nights, twilight, min_altitude_deg, max_airmass, min_moon_sep_deg, start_date):
    """Checked (sites, nights, Rules, night dates per site, night bounds (n_sites, nights + 1) MJD)."""
    sites = list(sites)
    if not sites:
        raise ParameterError("sites", "", "at least one site")
    if int(nights) < 1:
        raise ParameterError("nights", nights, "a whole number >= 1")
    nights = int(nights)
    twilight_deg = twilight_altitude_deg(twilight)
    override = _deg(min_altitude_deg, "min_altitude_deg", 0.0, 89.0)
    rules = Rules(
        twilight_deg=twilight_deg,
        min_altitude_deg=np.array([override if override is not None else s.min_altitude_deg for s in sites], float),
        horizons=tuple(s.horizon for s in sites),
        max_airmass=_deg(max_airmass, "max_airmass", 1.0, 38.0),
        min_moon_sep_deg=_deg(min_moon_sep_deg, "min_moon_sep_deg", 0.0, 180.0),
        t0_mjd=float(event.t0.utc.mjd))
    _check_start(start_date, rules.t0_mjd)
    dates, bounds = night_bounds_mjd(sites, rules.t0_mjd, nights, start_date)
    return sites, nights, rules, dates, bounds


def _target_records(skyq: Sky, rules: Rules, grid, sun, edges, bounds, dates, dark, twilight, nights):
    """NightRecords of every target of ``skyq`` (a list per target, site by site, night by night).

    ``sun`` (n_sites, n_grid) is the twilight margin on ``grid``, ``edges`` (n_sites, nights + 1)
    the grid index where each night begins (:func:`night_edges`); ``dark`` is (dusk, dawn, dark
    hours) per site and night.
    """
    n_targets, n_sites = skyq.targets.size, len(skyq.sites)
    m = grid_margins(skyq, rules, grid, sun)
    # windows: where the combined margin is positive, cut at the night bounds
    w_rows, w_start, w_end, *_ = positive_intervals(window_margin_fn(skyq, rules), grid, combined_margin(m), EDGE_TOL_S)
    w_rows, w_night, w_start, w_end = split_at_bounds(w_rows, w_start, w_end, bounds[skyq.site_of])
    details = _window_details(skyq, skyq.eph, w_rows, w_start, w_end)
    notes = night_notes(m, edges[skyq.site_of], rules, twilight, skyq.site_of)
    records = _records(skyq.sites, skyq.site_of, dates, *dark, notes, rules, w_rows, w_night, w_start, w_end, details)
    per_target = n_sites * nights
    return [records[k * per_target:(k + 1) * per_target] for k in range(n_targets)]


def _window_details(skyq: Sky, eph, rows, start, end) -> dict[str, np.ndarray]:
    """Best altitude/airmass and its time per window, and the Moon at that time (arrays per window)."""
    if rows.size == 0:
        return {}
    frac = np.linspace(0.0, 1.0, BEST_SAMPLES)
    t = start[:, None] + (end - start)[:, None] * frac  # (n_windows, BEST_SAMPLES)
    alt = skyq.target_altaz_deg(t, rows[:, None])[0]
    k = np.argmax(alt, axis=1)
    kk = np.clip(k, 1, BEST_SAMPLES - 2)
    i = np.arange(rows.size)
    a0, a1, a2 = alt[i, kk - 1], alt[i, kk], alt[i, kk + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where((a0 - 2 * a1 + a2) < 0, 0.5 * (a0 - a2) / (a0 - 2 * a1 + a2), 0.0)
    inner = (k > 0) & (k < BEST_SAMPLES - 1)
    step = (end - start) / (BEST_SAMPLES - 1)
    best_t = np.where(inner, t[i, kk] + np.clip(shift, -1, 1) * step, t[i, k])
    best_alt = skyq.target_altaz_deg(best_t, rows)[0]
    sep, moon_alt = skyq.moon(best_t, rows)
    illum, phase = sky.moon_illumination(eph, best_t)
    return {"best_t": best_t, "best_alt": best_alt, "best_airmass": airmass_from_altitude(best_alt),
            "sep": sep, "moon_alt": moon_alt, "illum": illum, "phase": phase}


def _time(mjd) -> Time | None:
    return None if not np.isfinite(mjd) else Time(mjd, format="mjd", scale="utc")


def _records(sites, site_of, dates, dusk, dawn, dark_h, notes, rules, w_rows, w_night, w_start, w_end, d):
    """NightRecords row by row (``site_of``: the site of each row), night by night; times stay MJD floats."""
    t0 = rules.t0_mjd
    per_night: dict[tuple[int, int], list[Window]] = {}
    if w_rows.size:
        columns = zip(w_rows.tolist(), w_night.tolist(), w_start.tolist(), w_end.tolist(),
                      *(d[k].tolist() for k in ("best_airmass", "best_t", "best_alt", "illum", "phase", "sep",
                                                "moon_alt")))
        for row, night, start, end, airmass, best, alt, illum, phase, sep, moon_alt in columns:  # one per window
            per_night.setdefault((row, night), []).append(Window(
                start_mjd=start, end_mjd=end, hours=(end - start) * 24.0, best_airmass=airmass, best_mjd=best,
                best_altitude_deg=alt, moon_illumination=illum, moon_phase_angle_deg=phase, moon_sep_deg=sep,
                moon_altitude_deg=moon_alt, phase_start_d=start - t0, phase_end_d=end - t0))
    dusk, dawn, dark_h = dusk.tolist(), dawn.tolist(), dark_h.tolist()
    out = []
    for row, i in enumerate(site_of.tolist()):
        site = sites[i]
        for j, night in enumerate(dates[i]):
            wins = per_night.get((row, j), [])
            note = "" if wins else str(notes[row, j])
            if wins and abs(wins[0].phase_start_d) * 86400.0 < 2 * EDGE_TOL_S:
                note = "night began before t0: first window starts at t0"
            if wins and not np.isfinite(dusk[i][j]) and dark_h[i][j] > 0:
                note = (note + "; " if note else "") + f"Sun below {rules.twilight_deg:g} deg from local noon on"
            out.append(NightRecord(site=site, night=night, dusk_mjd=dusk[i][j], dawn_mjd=dawn[i][j],
                                   note=note, windows=wins, dark_hours=dark_h[i][j]))
    return out
