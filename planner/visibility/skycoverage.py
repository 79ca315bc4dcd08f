"""How much of a probability sky map each site can observe, night by night.

For every site and local night, the dark interval (dusk to dawn of the chosen
twilight, from :func:`kncast.planner.visibility.core.compute_visibility`, and not before
t0) is sampled every ``step_min`` minutes at the middle of equal sub-intervals.
A pixel is *observable* at a sample when it stands above the site's floor
(pointing limit or ``--min-altitude``, the altitude of ``max_airmass``, the
horizon profile at the pixel's azimuth -- the rules of :mod:`kncast.planner.visibility.windows`)
and, with a Moon rule, lies farther than ``min_moon_sep_deg`` from the
topocentric Moon.  Per site and night:

* ``observable_probability``: sum of the probability of the pixels observable
  at one sample at least;
* ``weighted_hours``: sum over pixels of probability x hours observable;
* ``area90_observable_deg2``: area of the pixels of the 90 % credible region
  that are observable.

The kernel is one matrix product per chunk of pixels: sin(altitude) is the dot
product of the pixel's unit vector with the local zenith, and cos(Moon
separation) its dot product with the Moon's direction.  The pixels stay in
ICRS; the zenith and Moon vectors of date are rotated back to ICRS by the
precession-nutation matrix (IAU 2006/2000A, ``erfa.pnm06a``; Capitaine & Wallace
2006, A&A 450, 855) evaluated once per night, which is the same as precessing
every pixel to the true equator of that night.  Annual aberration (< 21 arcsec) and refraction are neglected, as
in :mod:`kncast.planner.visibility.sky`.
"""
from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np
from astropy.time import Time

from kncast.forecast.references import CAPITAINE_WALLACE_2006
from kncast.planner.visibility import sky
from kncast.planner.errors import ParameterError
from kncast.planner.events.skymap import SR_TO_DEG2, SkyMap

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (CAPITAINE_WALLACE_2006,)

DEFAULT_STEP_MIN = 10.0
CHUNK_ELEMENTS = 4_000_000  # pixels x samples per block: bounds memory to a few tens of MB
CREDIBLE_LEVEL = 0.9
HIER_DEPTH = 4  # coarse-to-fine test: parents 4 orders above the map (256 children each)
HIER_SUB_DEPTH = 2  # ... then groups 2 orders above the map (16 children each) inside the undecided parents
HIER_MIN_LEVEL = 8  # ... for flat maps from nside 256 (coarser maps: every pixel tested)
HIER_EPS_RAD = 1e-5  # 2 arcsec: more than float32 rounding of the child-by-child test
HIER_CHUNK_PIXELS = 1 << 18  # children per block: bounds memory to a few tens of MB
COVERAGE_THREADS = 2  # blocks of parents in flight at once (numpy releases the GIL)


@dataclass
class CoverageNight:
    """Coverage of the map from one site in one local night."""

    site: object  # kncast.planner.sites.Site
    night: dt.date
    dusk: Time | None
    dawn: Time | None
    note: str
    dark_hours: float  # sampled dark time after t0
    samples: int
    observable_probability: float = 0.0
    weighted_hours: float = 0.0
    area90_observable_deg2: float = 0.0

    def summary(self) -> dict:
        from kncast.planner.output import iso_utc

        return {"site": self.site.id, "night": self.night.isoformat(), "dusk_utc": iso_utc(self.dusk),
                "dawn_utc": iso_utc(self.dawn), "dark_hours": round(self.dark_hours, 4), "samples": self.samples,
                "observable_probability": round(self.observable_probability, 6),
                "weighted_hours": round(self.weighted_hours, 5),
                "area90_observable_deg2": round(self.area90_observable_deg2, 4), "note": self.note}


@dataclass
class CoverageResult:
    """Per site/night coverage and, per pixel, whether each site/night can observe it."""

    skymap: SkyMap
    sites: list
    nights: list[CoverageNight]
    observable: np.ndarray | None  # bool (n_pixels, len(flag_nights)); None with pixel_flags=False
    settings: dict
    flag_nights: tuple = ()  # the index in ``nights`` of each column of ``observable``

    def flags_of(self, night_index: int) -> np.ndarray:
        """Per pixel, whether night record ``night_index`` can observe it (kept by ``pixel_flags``)."""
        return self.observable[:, self.flag_nights.index(night_index)]

    def best(self) -> CoverageNight | None:
        return max(self.nights, key=lambda n: n.observable_probability, default=None)


@dataclass(frozen=True)
class _Columns:
    """The sample times of every site/night, as flat columns."""

    site: np.ndarray  # site row per sample
    mjd: np.ndarray
    record: np.ndarray  # index into the night records per sample
    night: np.ndarray  # night index per sample
    dt_h: np.ndarray  # hours per sample, per record


def compute_coverage(skymap: SkyMap, sites, t0: Time, nights: int = 1, twilight: str = "nautical",
                     min_altitude_deg=None, max_airmass=None, min_moon_sep_deg=None,
                     step_min: float = DEFAULT_STEP_MIN, pixel_flags: bool = True,
                     start_date=None) -> CoverageResult:
    """Observable probability, probability-weighted hours and observable 90 % area per site and night.

    ``pixel_flags``: which per-pixel observable flags to keep (only charts need them): True, every
    night record's; ``"first"`` (FIRST_NIGHTS), each site's first night with dark time (what the sky
    chart draws; at nside 1024 each kept night holds 12.6 MB); False, none (``observable`` is None).
    """
    from kncast.planner.events.model import Event
    from kncast.planner.visibility.core import compute_visibility

    if not 1.0 <= float(step_min) <= 60.0:
        raise ParameterError("step_min", step_min, "1 to 60 minutes")
    ra, dec = skymap.peak_radec_deg()
    probe = Event(id="map-peak", ra_deg=ra, dec_deg=dec, t0=t0, source=skymap.path)
    vis = compute_visibility(probe, sites, nights=nights, twilight=twilight, start_date=start_date,
                             min_altitude_deg=min_altitude_deg,
                             max_airmass=max_airmass, min_moon_sep_deg=min_moon_sep_deg)
    sites = vis.sites
    cols, records = sample_dark_time(vis, step_min)
    kept = _flag_nights(records, pixel_flags)
    obs = _PixelFlags(np.zeros((skymap.npix, len(kept)), dtype=bool), kept, len(records)) if pixel_flags else None
    if cols.mjd.size:
        _accumulate(skymap, vis, cols, records, obs)
    settings = vis.settings()
    settings.pop("target", None)
    settings.update(step_min=float(step_min), credible_level=CREDIBLE_LEVEL)
    return CoverageResult(skymap=skymap, sites=sites, nights=records, observable=None if obs is None else obs.array,
                          settings=settings, flag_nights=tuple(kept))


FIRST_NIGHTS = "first"  # pixel_flags: each site's first night record with dark time


def first_nights(records) -> dict:
    """Per site id, the index of its first night record with dark time (samples > 0)."""
    out: dict = {}
    for k, rec in enumerate(records):
        if rec.samples > 0 and rec.site.id not in out:
            out[rec.site.id] = k
    return out


def _flag_nights(records, pixel_flags) -> list[int]:
    if pixel_flags == FIRST_NIGHTS:
        return sorted(first_nights(records).values())
    if pixel_flags is True:
        return list(range(len(records)))
    if pixel_flags is False:
        return []
    raise ParameterError("pixel_flags", pixel_flags, f"True, False or {FIRST_NIGHTS!r}")


class _PixelFlags:
    """Per-pixel observable flags of the kept night records (``array`` columns in ``kept`` order)."""

    def __init__(self, array: np.ndarray, kept: list[int], n_records: int):
        self.array = array
        self.column = np.full(n_records, -1)
        self.column[kept] = np.arange(len(kept))

    def put(self, sl, seg_record: np.ndarray, seen: np.ndarray) -> None:
        """Store the flags of pixels ``sl`` from ``seen`` (n_segments, m) for the segments whose night is kept."""
        column = self.column[seg_record]
        wanted = column >= 0
        self.array[sl, column[wanted]] = seen[wanted].T


def sample_dark_time(vis, step_min: float):
    """Sample columns inside each night's dark interval after t0, and the empty night records."""
    bounds, t0 = vis.night_bounds_mjd, vis.t0_mjd
    index = {s.id: i for i, s in enumerate(vis.sites)}
    seen_nights: dict[str, int] = {}
    site, mjd, rec_of, night_of, dt_h, records = [], [], [], [], [], []
    for rec in vis.nights:  # one block of samples per site and night
        i = index[rec.site.id]
        j = seen_nights[rec.site.id] = seen_nights.get(rec.site.id, -1) + 1  # records run night by night
        lo = rec.dusk.utc.mjd if rec.dusk is not None else bounds[i, j]
        hi = rec.dawn.utc.mjd if rec.dawn is not None else bounds[i, j + 1]
        lo = max(lo, t0)
        note, n = "", 0
        if rec.dark_hours <= 0:
            note = f"no {vis.twilight} darkness"
        elif hi <= lo:
            note = "dark time over before t0"
        else:
            n = max(1, int(math.ceil((hi - lo) * 1440.0 / step_min)))
            k = len(records)
            site.append(np.full(n, i))
            mjd.append(lo + (np.arange(n) + 0.5) * (hi - lo) / n)
            rec_of.append(np.full(n, k))
            night_of.append(np.full(n, j))
        records.append(_record(rec, note, (hi - lo) * 24.0 if n else 0.0, n))
        dt_h.append(records[-1].dark_hours / n if n else 0.0)
    cat = lambda parts, kind: np.concatenate(parts).astype(kind) if parts else np.zeros(0, kind)  # noqa: E731
    cols = _Columns(cat(site, int), cat(mjd, float), cat(rec_of, int), cat(night_of, int), np.asarray(dt_h, float))
    # polar cases (dark from local noon on): keep only samples with the Sun below the twilight limit
    if cols.mjd.size:
        arrays = sky.SiteArrays.of(vis.sites)
        here = sky.SiteArrays(arrays.lat_deg[cols.site, 0], arrays.lon_deg[cols.site, 0], arrays.elevation_m[cols.site, 0])
        dark = sky.sun_altitude_deg(vis.ephemeris, here, cols.mjd) <= vis.rules.twilight_deg
        if not np.all(dark):
            cols = _Columns(cols.site[dark], cols.mjd[dark], cols.record[dark], cols.night[dark], cols.dt_h)
            counts = np.bincount(cols.record, minlength=len(records))
            for k, r in enumerate(records):
                r.samples, r.dark_hours = int(counts[k]), float(counts[k] * cols.dt_h[k])
    return cols, records


def _record(rec, note, dark_hours, samples) -> CoverageNight:
    return CoverageNight(site=rec.site, night=rec.night, dusk=rec.dusk, dawn=rec.dawn, note=note,
                         dark_hours=float(dark_hours), samples=int(samples))


def _night_rotations(vis, cols: _Columns) -> np.ndarray:
    """One precession-nutation matrix (GCRS -> true equator and equinox of date) per night index, (n, 3, 3)."""
    import erfa

    n_nights = vis.night_bounds_mjd.shape[1] - 1
    mid = np.array([cols.mjd[cols.night == j].mean() if np.any(cols.night == j) else cols.mjd[0]
                    for j in range(n_nights)])
    tt = Time(mid, format="mjd", scale="utc").tt
    return erfa.pnm06a(tt.jd1, tt.jd2)


def frame_vectors(vis, cols: _Columns):
    """ICRS unit vectors (3, n_samples) of the zenith, north, east and topocentric Moon at each sample."""
    eph = vis.ephemeris
    arrays = sky.SiteArrays.of(vis.sites)
    lat = np.radians(arrays.lat_deg[cols.site, 0])
    here = sky.SiteArrays(arrays.lat_deg[cols.site, 0], arrays.lon_deg[cols.site, 0], arrays.elevation_m[cols.site, 0])
    lst = np.radians(eph.gast(cols.mjd) + here.lon_deg)
    zen = np.stack([np.cos(lat) * np.cos(lst), np.cos(lat) * np.sin(lst), np.sin(lat)])
    north = np.stack([-np.sin(lat) * np.cos(lst), -np.sin(lat) * np.sin(lst), np.cos(lat)])
    east = np.stack([-np.sin(lst), np.cos(lst), np.zeros_like(lst)])
    moon = sky.moon_topocentric(eph, here, cols.mjd)[0]
    rot = _night_rotations(vis, cols)[cols.night]  # (n_samples, 3, 3)
    back = lambda v: np.einsum("cji,jc->ic", rot, v)  # noqa: E731  -- R^T v: of date -> ICRS
    return back(zen), back(north), back(east), back(moon)


def _accumulate(skymap: SkyMap, vis, cols: _Columns, records, obs: np.ndarray | None) -> None:
    """Fill the per-record totals and the per-pixel observable flags.

    Flat maps of HEALPix order >= HIER_MIN_LEVEL are tested coarse to fine: in NESTED order the
    4^HIER_DEPTH children of a parent pixel are contiguous, and all lie within an angle r (measured
    on the map) of the parent's centre.  At a sample, a parent whose centre stands more than r (+
    HIER_EPS_RAD) above the floor and away from the Moon limit passes all its children; one more than
    r below them fails them all.  In the other (parent, sample) pairs the same test runs on groups of
    4^HIER_SUB_DEPTH children, and only the children of the groups still undecided are tested one by
    one, exactly as :func:`_accumulate_direct` tests every pixel.  Blocks of parents run on up to
    COVERAGE_THREADS threads and are summed in block order.  Other maps go to that function.
    """
    level = _hier_level(skymap)
    if level is None or level < HIER_MIN_LEVEL:
        _accumulate_direct(skymap, vis, cols, records, obs)
        return
    rules = vis.rules
    zen, north, east, moon = (np.ascontiguousarray(v.T) for v in frame_vectors(vis, cols))  # (n_samples, 3)
    f32 = lambda v: v.astype(np.float32)  # noqa: E731
    floor = np.maximum(rules.min_altitude_deg[cols.site], rules.airmass_altitude_deg)
    hz_site = list(rules.horizons)
    cut = np.flatnonzero((cols.site[1:] != cols.site[:-1]) | (floor[1:] != floor[:-1])) + 1
    row_blocks = [(int(a), int(b), hz_site[cols.site[a]]) for a, b in zip(np.r_[0, cut], np.r_[cut, floor.size])]
    seg_start = np.flatnonzero(np.r_[True, cols.record[1:] != cols.record[:-1]])
    seg_end = np.r_[seg_start[1:], cols.mjd.size]
    seg_record = cols.record[seg_start]
    ctx = _Hier(f32(zen), f32(north), f32(east), f32(moon), np.sin(np.radians(floor)).astype(np.float32)[:, None],
                rules.min_moon_sep_deg, seg_start, seg_end, (zen, north, east, moon), np.radians(floor)[:, None],
                row_blocks)
    dt_h = cols.dt_h[seg_record]
    mask90 = skymap.credible_mask(CREDIBLE_LEVEL)
    kids = 4 ** HIER_DEPTH
    n_par = skymap.npix // kids
    step = max(1, HIER_CHUNK_PIXELS // kids)
    seg_hz = [hz_site[i] for i in cols.site[seg_start]]

    def chunk(lo):  # one block of parents: (probability, 90 % area, probability x samples) per site/night
        sl = slice(lo * kids, min(lo + step, n_par) * kids)
        return _hier_chunk(skymap, sl, mask90, ctx, seg_hz, seg_record, obs)

    totals = np.zeros((seg_start.size, 3))
    for part in _map_threads(chunk, range(0, n_par, step)):  # summed in block order: as a sequential loop
        totals[:, :2] += part[:, :2]
        totals[:, 2] += part[:, 2] * dt_h
    prob_obs, area, hours = totals[:, 0], totals[:, 1], totals[:, 2]
    for s, k in enumerate(seg_record):
        records[k].observable_probability = float(min(prob_obs[s], 1.0))
        records[k].weighted_hours = float(hours[s])
        records[k].area90_observable_deg2 = float(area[s])


def _parent_bounds(centre, margin, ctx):
    """(inside, outside) per sample and parent: all children within ``margin`` (rad) of the centre pass, or
    all fail.  Row blocks of one site and floor at a time (small temporaries); above the floor by sines:
    alt - margin >= floor iff sin(alt) >= sin(floor + margin) on [-pi/2, pi/2]."""
    zen, north, east, moon = ctx.frames64
    shape = (zen.shape[0], centre.shape[1])
    inside, outside = np.empty(shape, dtype=bool), np.empty(shape, dtype=bool)
    half = 0.5 * math.pi
    threshold = lambda x: np.where(np.abs(x) <= half, np.sin(x), np.where(x > half, 2.0, -2.0))  # noqa: E731
    if ctx.moon_rule:
        limit = math.radians(ctx.moon_rule)
        cos_in, cos_out = np.cos(np.minimum(limit + margin, math.pi)), np.cos(np.maximum(limit - margin, 0.0))
    for a, b, hz in ctx.row_blocks:
        sin_alt = dot_rows(zen[a:b], centre)
        floor = float(ctx.floor_rad[a, 0])
        inside[a:b] = sin_alt >= threshold(floor + margin)
        outside[a:b] = sin_alt < threshold(floor - margin)
        if hz is not None:  # children pass where alt >= the profile at their azimuth too
            r, c = _profile_band(sin_alt, margin, outside[a:b], hz)
            alt, m = np.arcsin(np.clip(sin_alt[r, c], -1.0, 1.0)), margin[c]
            on = lambda v: np.einsum("ij,ji->i", v[a + r], centre[:, c])  # noqa: E731
            lo_rad, hi_rad = _profile_bounds(hz, alt, m, on(east), on(north))
            inside[a + r, c] &= alt - m >= hi_rad
            outside[a + r, c] |= alt + m < lo_rad
        if ctx.moon_rule:
            cos_sep = dot_rows(moon[a:b], centre)
            inside[a:b] &= cos_sep < cos_in
            outside[a:b] |= cos_sep > cos_out
    return inside, outside


def _map_threads(fn, items):
    """``fn`` over ``items`` on up to COVERAGE_THREADS threads (numpy releases the GIL), results in order."""
    import os
    from concurrent.futures import ThreadPoolExecutor

    items = list(items)
    workers = min(COVERAGE_THREADS, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else
                  (os.cpu_count() or 1), len(items))
    if workers <= 1:
        return [fn(x) for x in items]
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(fn, items))


def _hier_chunk(skymap, sl, mask90, ctx, seg_hz, seg_record, obs) -> np.ndarray:
    """Coarse-to-fine sums of one block of whole parents ``sl``: (n_seg, 3) probability seen, 90 % area
    seen, probability x samples; fills ``obs[sl]`` when given."""
    kids = 4 ** HIER_DEPTH
    xyz = skymap.pixel_vectors(sl)
    centre, radius = _parents(xyz, kids)
    inside, outside = _parent_bounds(centre, radius + HIER_EPS_RAD, ctx)
    in_count = np.stack([inside[a:b].view(np.uint8).sum(axis=0, dtype=np.uint16)  # (n_seg, n_parents)
                         for a, b in zip(ctx.seg_start, ctx.seg_end)])
    area90 = np.where(mask90[sl], skymap.area_sr[sl] * SR_TO_DEG2, 0.0)
    weights = np.stack([skymap.prob[sl], area90], axis=1)  # (m, 2): probability, 90 % area
    count = np.repeat(in_count, kids, axis=1) if obs is not None else None  # per pixel only for the flags
    # parents passed at some sample: all their children seen; the children of the others by the refinement
    sub = _parents(xyz, 4 ** HIER_SUB_DEPTH)  # groups of 4^HIER_SUB_DEPTH children inside each parent
    sums = _refine(count, in_count, ~(inside | outside), xyz.astype(np.float32), sub, weights, ctx, seg_hz)
    parent_w = weights.reshape(-1, kids, 2).sum(axis=1)  # (n_parents, 2)
    seen_parent = np.einsum("sp,pc->sc", (in_count > 0).astype(np.float64), parent_w)
    if obs is not None:
        obs.put(sl, seg_record, count > 0)
    return np.stack([seen_parent[:, 0] + sums[:, 0], seen_parent[:, 1] + sums[:, 1],
                     np.einsum("sp,p->s", in_count.astype(np.float64), parent_w[:, 0]) + sums[:, 2]], axis=1)


@dataclass(frozen=True)
class _Hier:
    """Per-sample float32 frames of the child-by-child test, and the site/night blocks of rows."""

    zen: np.ndarray  # (n_samples, 3), ICRS
    north: np.ndarray
    east: np.ndarray
    moon: np.ndarray
    sin_floor: np.ndarray  # (n_samples, 1)
    moon_rule: float | None
    seg_start: np.ndarray
    seg_end: np.ndarray
    frames64: tuple  # float64 zenith, north, east, Moon (n_samples, 3): the bounds of parents and groups
    floor_rad: np.ndarray  # (n_samples, 1)
    row_blocks: list  # (first, end, horizon profile or None): runs of samples of one site and floor


def _hier_level(skymap: SkyMap):
    """The order of a single-order map whose pixels run in whole NESTED groups of 4^HIER_DEPTH children
    (a flat map, or whole parents of one), else None."""
    kids = 4 ** HIER_DEPTH
    if skymap.implied_level is not None:  # a flat map: pixel k is NESTED index k
        return skymap.implied_level if skymap.npix % kids == 0 else None
    if skymap.npix % kids or np.any(skymap.level != skymap.level[0]):
        return None
    groups = skymap.ipix.reshape(-1, kids)
    if np.any(groups[:, 0] % kids) or np.any(np.diff(groups, axis=1) != 1):
        return None
    return int(skymap.level[0])


def _profile_band(sin_alt, margin, outside, hz):
    """(rows, columns) of the points whose bound the horizon profile can change: not already below the floor,
    and less than ``margin`` above the profile's highest point (higher up, every child clears the profile)."""
    top = math.radians(float(hz.altitude_deg.max()))
    return np.nonzero(~outside & (sin_alt < np.sin(np.minimum(top + margin, 0.5 * math.pi))))


def _profile_bounds(hz, alt, margin, east, north):
    """(low, high) bounds, rad, of a horizon profile over the azimuths of points within ``margin`` of a centre
    at altitude ``alt`` and (east, north) components: sin|d az| <= sin(margin) / cos(alt) (spherical triangle
    zenith-centre-point), and the profile changes by at most its steepest slope times |d az|."""
    az = np.degrees(np.arctan2(east, north))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.sin(margin) / np.cos(alt)
    spread = np.where((ratio < 1.0) & (np.abs(alt) + margin < 0.5 * math.pi),
                      np.degrees(np.arcsin(np.clip(ratio, 0.0, 1.0))), 180.0)
    order = np.argsort(np.mod(hz.azimuth_deg, 360.0))
    az_s, alt_s = np.mod(hz.azimuth_deg, 360.0)[order], hz.altitude_deg[order]
    az_pts, alt_pts = np.r_[az_s, az_s[0] + 360.0], np.r_[alt_s, alt_s[0]]  # periodic, as np.interp(period=360)
    slope = float(np.max(np.abs(np.diff(alt_pts) / np.maximum(np.diff(az_pts), 1e-9))))
    prof = hz.min_altitude_deg(az)
    low = np.maximum(prof - slope * spread, float(hz.altitude_deg.min()))
    high = np.minimum(prof + slope * spread, float(hz.altitude_deg.max()))
    return np.radians(low), np.radians(high)


def _parents(xyz: np.ndarray, kids: int):
    """Unit centre (3, n) of each run of ``kids`` contiguous pixels, and the largest angle (rad) to one of them."""
    groups = xyz.reshape(3, -1, kids)
    centre = groups.sum(axis=2)
    centre /= np.linalg.norm(centre, axis=0, keepdims=True)
    cos_max = np.einsum("jpk,jp->pk", groups, centre).min(axis=1)
    return centre, np.arccos(np.clip(cos_max, -1.0, 1.0))


def _refine(count, in_count, mixed, pix, sub, weights, ctx: _Hier, seg_hz) -> np.ndarray:
    """Test the children of the (sample, parent) pairs ``mixed``: by groups (``sub``: centres and radii of
    the runs of 4^HIER_SUB_DEPTH children), then the children of the groups neither passed nor failed one by one.

    Returns per site/night (n_seg, 3): the probability and 90 % area of the children seen only through
    these tests (their parent passed at no sample), and the probability x samples they add.  ``count``
    (n_seg, m), when given, gets the samples added per child.
    """
    n_seg, n_par = in_count.shape
    kids = pix.shape[1] // n_par
    n_sub = sub[1].size // n_par
    per = kids // n_sub
    sub = (sub[0].reshape(3, n_par, n_sub), sub[1].reshape(n_par, n_sub))
    groups = pix.reshape(3, n_par, n_sub, per)
    w_kid = weights.reshape(n_par, n_sub, per, 2)
    w_group = w_kid.sum(axis=2)  # (n_par, n_sub, 2)
    out = np.zeros((n_seg, 3))
    for s in range(n_seg):
        a, b = int(ctx.seg_start[s]), int(ctx.seg_end[s])
        parent, k = np.nonzero(mixed[a:b].T)  # grouped by parent
        if not parent.size:
            continue
        par, whole, (h, j, ok) = _test_pairs(parent, k + a, groups, sub, ctx, seg_hz[s])
        fresh = in_count[s, par] == 0  # parents passed at no sample of this night
        w_par = w_group[par]  # (n_parents hit, n_sub, 2)
        out[s, :2] = w_par[(whole > 0) & fresh[:, None]].sum(axis=0)  # groups passed whole at some sample
        out[s, 2] = np.sum(whole * w_par[:, :, 0]) + np.sum(w_kid[par[h], j, :, 0][ok])
        at = ((h * n_sub + j) * per)[:, None] + np.arange(per)  # (parent hit, child) of each child tested
        new = fresh[h] & (whole[h, j] == 0)  # groups seen only child by child
        seen = np.unique(at[new][ok[new]])  # their children observable at one sample at least
        hh, rest = np.divmod(seen, n_sub * per)
        out[s, :2] += w_kid[par[hh], rest // per, rest % per].sum(axis=0)
        if count is not None:
            added = np.repeat(whole, per, axis=1).astype(np.int64)
            added += np.bincount(at[ok], minlength=added.size).reshape(added.shape)
            count.reshape(n_seg, -1, kids)[s, par] += added.astype(np.uint16)
    return out


def _test_pairs(parent, k, groups, sub, ctx: _Hier, hz):
    """The parents hit by the (parent, sample k) pairs (grouped by parent), the samples at which each of their
    groups passes whole (n_parents hit, n_sub), and the groups tested child by child: parent hit, group, children
    observable (n_tested, children per group).  A group of children clear of the limits by its radius
    (+ HIER_EPS_RAD) passes or fails whole, as a parent does in :func:`_accumulate`; the children of the other
    groups are tested one by one, in float32 as :func:`_accumulate_direct` does."""
    zen, north, east, moon = ctx.frames64
    centre, radius = sub[0][:, parent, :], sub[1][parent]  # (3, n_pairs, n_sub), (n_pairs, n_sub)
    dot = lambda v: np.einsum("pj,jpk->pk", v[k], centre)  # noqa: E731
    alt = np.arcsin(np.clip(dot(zen), -1.0, 1.0))
    margin = radius + HIER_EPS_RAD
    floor = ctx.floor_rad[k]
    inside = alt - margin >= floor
    outside = alt + margin < floor
    if hz is not None:
        r, c = _profile_band(np.sin(alt), margin, outside, hz)
        m = margin[r, c]
        on = lambda v: np.einsum("ij,ji->i", v[k[r]], centre[:, r, c])  # noqa: E731
        lo_rad, hi_rad = _profile_bounds(hz, alt[r, c], m, on(east), on(north))
        inside[r, c] &= alt[r, c] - m >= hi_rad
        outside[r, c] |= alt[r, c] + m < lo_rad
    if ctx.moon_rule:
        cos_sep, limit = dot(moon), math.radians(ctx.moon_rule)
        inside &= cos_sep < np.cos(np.minimum(limit + margin, math.pi))
        outside |= cos_sep > np.cos(np.maximum(limit - margin, 0.0))
    first = np.r_[True, parent[1:] != parent[:-1]]
    local = np.cumsum(first) - 1  # the pair's parent among those hit
    whole = np.add.reduceat(inside.view(np.uint8), np.flatnonzero(first), axis=0, dtype=np.uint16)
    q, j = np.nonzero(~(inside | outside))
    child, kq = groups[:, parent[q], j, :], k[q]  # (3, n_tested, per)
    sin_alt = np.einsum("pj,jpk->pk", ctx.zen[kq], child)
    ok = sin_alt >= ctx.sin_floor[kq]
    if hz is not None and q.size:
        _apply_horizon_pairs(ok, sin_alt, ctx.sin_floor[kq], child, ctx.north[kq], ctx.east[kq], hz)
    if ctx.moon_rule:
        ok &= np.einsum("pj,jpk->pk", ctx.moon[kq], child) <= np.float32(math.cos(math.radians(ctx.moon_rule)))
    return parent[first], whole, (local[q], j, ok)


def _apply_horizon_pairs(ok, sin_alt, sin_floor, child, north, east, hz) -> None:
    """As :func:`_apply_horizon`, on (pair, child) arrays: the profile at each child's azimuth."""
    top = np.float32(math.sin(math.radians(float(hz.altitude_deg.max()))))
    band = ok & (sin_alt < top)
    if not band.any():
        return
    pair, kid = np.nonzero(band)
    v = child[:, pair, kid]  # (3, n_band): only the children in the band
    az = np.degrees(np.arctan2(np.einsum("pj,jp->p", east[pair], v), np.einsum("pj,jp->p", north[pair], v)))
    ok[band] = sin_alt[band] >= np.sin(np.radians(hz.min_altitude_deg(az)))


def _accumulate_direct(skymap: SkyMap, vis, cols: _Columns, records, obs: np.ndarray | None) -> None:
    """As :func:`_accumulate`, every pixel tested at every sample (the reference for the closed form).

    Arrays are laid out samples x pixels, so each site/night is a contiguous block of rows.
    """
    rules = vis.rules
    zen, north, east, moon = (np.ascontiguousarray(v.T, dtype=np.float32) for v in frame_vectors(vis, cols))
    floor = np.maximum(rules.min_altitude_deg[cols.site], rules.airmass_altitude_deg)
    sin_floor = np.sin(np.radians(floor)).astype(np.float32)[:, None]
    horizons = [(_row_range(cols.site, i), hz) for i, hz in enumerate(rules.horizons)
                if hz is not None and np.any(cols.site == i)]
    moon_rule = rules.min_moon_sep_deg
    seg_start = np.flatnonzero(np.r_[True, cols.record[1:] != cols.record[:-1]])
    seg_end = np.r_[seg_start[1:], cols.mjd.size]
    seg_record = cols.record[seg_start]
    moon_reach = _moon_reach(moon, seg_start, seg_end, moon_rule) if moon_rule else None
    dt_h = cols.dt_h[seg_record]
    mask90 = skymap.credible_mask(CREDIBLE_LEVEL)
    chunk = max(1024, CHUNK_ELEMENTS // cols.mjd.size)
    prob_obs, hours, area = np.zeros(seg_start.size), np.zeros(seg_start.size), np.zeros(seg_start.size)
    for lo in range(0, skymap.npix, chunk):  # blocks of pixels (memory bound), each vectorized over all samples
        sl = slice(lo, min(lo + chunk, skymap.npix))
        pix = skymap.pixel_vectors(sl).astype(np.float32)  # (3, m)
        sin_alt = dot_rows(zen, pix)  # (n_samples, m)
        ok = sin_alt >= sin_floor
        for (a, b), hz in horizons:  # sites with a horizon profile: the floor depends on azimuth
            _apply_horizon(ok[a:b], sin_alt[a:b], sin_floor[a:b], pix, north[a:b], east[a:b], hz)
        if moon_rule:
            _apply_moon(ok, pix, moon, moon_reach, seg_start, seg_end, moon_rule)
        # samples observable per site/night, (n_segments, m): one contiguous block of rows each
        count = np.stack([ok[a:b].view(np.uint8).sum(axis=0, dtype=np.uint16) for a, b in zip(seg_start, seg_end)])
        seen = count > 0
        if obs is not None:
            obs.put(sl, seg_record, seen)
        p = skymap.prob[sl]
        prob_obs += np.where(seen, p, 0.0).sum(axis=1)
        hours += (count * p).sum(axis=1) * dt_h
        area += np.where(seen, np.where(mask90[sl], skymap.area_sr[sl] * SR_TO_DEG2, 0.0), 0.0).sum(axis=1)
    for s, k in enumerate(seg_record):
        records[k].observable_probability = float(min(prob_obs[s], 1.0))
        records[k].weighted_hours = float(hours[s])
        records[k].area90_observable_deg2 = float(area[s])


def dot_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """(n, 3) x (3, m) product by einsum: a 3-term sum is memory-bound, and multithreaded BLAS
    slows it several-fold on a busy machine."""
    return np.einsum("ij,jk->ik", a, b)


def _row_range(site_of_sample: np.ndarray, i: int) -> tuple[int, int]:
    """The contiguous block of samples of site ``i`` (samples run site by site)."""
    rows = np.flatnonzero(site_of_sample == i)
    assert rows[-1] - rows[0] + 1 == rows.size, "samples of a site must be contiguous"
    return int(rows[0]), int(rows[-1]) + 1


def _apply_horizon(ok, sin_alt, sin_floor, pix, north, east, hz) -> None:
    """Refuse samples below the horizon profile at the pixel's azimuth (views on one site's rows)."""
    top = np.float32(math.sin(math.radians(float(hz.altitude_deg.max()))))
    band = ok & (sin_alt < top)  # above the site floor but not above the profile's highest point
    if not band.any():
        return
    az = np.degrees(np.arctan2(dot_rows(east, pix)[band], dot_rows(north, pix)[band]))
    ok[band] = sin_alt[band] >= np.sin(np.radians(hz.min_altitude_deg(az)))


def _moon_reach(moon, seg_start, seg_end, min_sep_deg):
    """Per site/night: mean Moon direction (n_segments, 3) and cos(min_sep + the Moon's spread about it)."""
    mean = np.add.reduceat(moon.astype(float), seg_start, axis=0)
    mean /= np.linalg.norm(mean, axis=1, keepdims=True)
    spread = np.array([sky.separation_deg(moon[a:b].T.astype(float), mean[s][:, None]).max()
                       for s, (a, b) in enumerate(zip(seg_start, seg_end))])
    reach = np.minimum(min_sep_deg + spread + 0.01, 180.0)
    return mean.astype(np.float32), np.cos(np.radians(reach)).astype(np.float32)[:, None]


def _apply_moon(ok, pix, moon, reach, seg_start, seg_end, min_sep_deg) -> None:
    """Refuse samples closer than ``min_sep_deg`` to the Moon (only pixels within reach are tested)."""
    mean, cos_reach = reach
    near = dot_rows(mean, pix) > cos_reach  # (n_segments, m): the Moon can come that close this night
    cos_sep = np.float32(math.cos(math.radians(min_sep_deg)))
    for s, (a, b) in enumerate(zip(seg_start, seg_end)):  # per site/night, vectorized over its samples x pixels
        k = np.flatnonzero(near[s])
        if k.size:
            ok[a:b, k] &= dot_rows(moon[a:b], pix[:, k]) <= cos_sep
