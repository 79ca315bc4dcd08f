"""HEALPix probability sky maps read from FITS, validated on load.

Two layouts are read (the HEALPix FITS conventions of Gorski et al. 2005,
ApJ 622, 759, and the multi-order coverage scheme of the IVOA MOC 1.1
Recommendation, 2019, for ``NUNIQ`` indices):

* **flat all-sky maps**: a BINTABLE with header ``PIXTYPE = 'HEALPIX'``,
  ``ORDERING = 'NESTED' | 'RING'``, ``NSIDE`` (a power of 2, 12 NSIDE^2 rows
  of values) and a ``PROB`` column (probability per pixel; else
  ``PROBABILITY``, else the first column).  Optional per-pixel distance
  columns ``DISTMU``, ``DISTSIGMA`` (Mpc) and ``DISTNORM`` (Mpc^-2), the
  ansatz of Singer et al. 2016, ApJL 829, L15.
* **multi-order maps**: ``ORDERING = 'NUNIQ'`` with a ``UNIQ`` column
  (uniq = 4 * 4^level + ipix, NESTED ipix) and ``PROBDENSITY`` (per
  steradian, or per square degree when its unit says so), plus the same
  optional distance columns.

``COORDSYS`` must be celestial (``C``, the default) or Galactic (``G``,
converted to ICRS).  Probabilities must be finite and non-negative and sum
to 1: within :data:`NORM_QUIET` they are renormalised silently, within
:data:`NORM_TOLERANCE` with a :class:`SkymapWarning`, beyond it the map is
refused.  Every failure is one :class:`DataFileError` line naming the file.
"""
from __future__ import annotations

import io
import math
import warnings
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np

from kncast.forecast.datafiles import MIB, read_input_bytes
from kncast.forecast.errors import DataFileError
from kncast.forecast.references import GORSKI_2005, SINGER_2016

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (GORSKI_2005, SINGER_2016)

NORM_QUIET = 1e-4  # |sum - 1| below this: float rounding, renormalised silently
NORM_TOLERANCE = 0.01  # |sum - 1| up to this: renormalised with a warning; beyond: refused
MAX_LEVEL = 29  # HEALPix order limit of 64-bit indices (nside = 2^29)
MAX_FLAT_NSIDE = 2048  # flat maps: 50 million pixels at most (finer maps: use the multi-order form)
MAX_MAP_BYTES = 2 * 1024 ** 3  # a sky-map file, and its content after gzip/bzip2 decompression: 2 GiB
SR_TO_DEG2 = (180.0 / math.pi) ** 2
FITS_BLOCK = 2880  # bytes
FLAT_ORDERINGS = ("NESTED", "RING")
ORDERINGS = FLAT_ORDERINGS + ("NUNIQ",)
DISTANCE_COLUMNS = ("DISTMU", "DISTSIGMA", "DISTNORM")
PIXEL_BLOCK = 1 << 20  # pixel centres computed this many at a time


class SkymapWarning(UserWarning):
    """A sky map was accepted after a correction (e.g. renormalised)."""


@dataclass(frozen=True)
class SkyMap:
    """A probability sky map as pixels: ICRS centres, probabilities (sum 1), areas.

    Flat and multi-order maps share this form: every pixel carries its HEALPix
    ``level`` and NESTED index ``ipix`` (so ``nside = 2**level``).  Whole-map quantities
    (density, credible regions, peak, distance moments, summary) are computed once and kept.
    """

    path: str
    ordering: str  # as in the file: NESTED, RING or NUNIQ
    coordsys: str
    xyz: np.ndarray  # ICRS unit vectors, (3, n_pixels)
    prob: np.ndarray  # probability per pixel, sums to 1
    level: np.ndarray  # HEALPix order per pixel
    ipix: np.ndarray  # NESTED index per pixel at its level
    distmu_mpc: np.ndarray | None = None
    distsigma_mpc: np.ndarray | None = None
    distnorm_per_mpc2: np.ndarray | None = None
    header_distance_mpc: tuple[float | None, float | None] = (None, None)  # DISTMEAN, DISTSTD keywords
    renormalised_from: float | None = None

    @property
    def npix(self) -> int:
        return int(self.prob.size)

    @property
    def max_level(self) -> int:
        return int(self.level.max())

    @cached_property
    def area_sr(self) -> np.ndarray:
        """Solid angle of every pixel, steradian (4 pi / (12 * 4^level))."""
        return 4.0 * math.pi / (12.0 * 4.0 ** self.level)

    @cached_property
    def density_per_sr(self) -> np.ndarray:
        return self.prob / self.area_sr

    @property
    def ra_dec_deg(self):
        x, y, z = self.xyz
        return np.degrees(np.arctan2(y, x)) % 360.0, np.degrees(np.arcsin(np.clip(z, -1.0, 1.0)))

    def credible_mask(self, level: float = 0.9) -> np.ndarray:
        """Pixels of the smallest region holding ``level`` of the probability (highest density first).

        The pixel that carries the cumulative probability across ``level`` is included.
        """
        return self._probability_denser < level

    @cached_property
    def _probability_denser(self) -> np.ndarray:
        """Per pixel: the probability of the pixels before it in decreasing density (stable order)."""
        order = np.argsort(-self.density_per_sr, kind="stable")
        p = self.prob[order]
        before = np.empty(self.npix)
        before[order] = np.cumsum(p) - p
        return before

    def credible_area_deg2(self, level: float = 0.9) -> float:
        return float(np.sum(self.area_sr[self.credible_mask(level)]) * SR_TO_DEG2)

    def peak_radec_deg(self):
        """(ra, dec) in degrees of the pixel of highest probability density."""
        return self._peak

    @cached_property
    def _peak(self):
        k = int(np.argmax(self.density_per_sr))
        x, y, z = self.xyz[:, k:k + 1]
        return (float(np.degrees(np.arctan2(y, x))[0] % 360.0),
                float(np.degrees(np.arcsin(np.clip(z, -1.0, 1.0)))[0]))

    def distance_moments_mpc(self):
        """Mean and standard deviation (Mpc) of the all-sky distance, or (None, None).

        From the per-pixel ansatz p(r | pixel) ~ r^2 N(r; DISTMU, DISTSIGMA) on r > 0
        (Singer et al. 2016), marginalised over pixels; else the DISTMEAN/DISTSTD keywords.
        """
        return self._distance_moments

    @cached_property
    def _distance_moments(self):
        if self.distmu_mpc is None or self.distsigma_mpc is None:
            return self.header_distance_mpc
        mu, sigma = self.distmu_mpc, self.distsigma_mpc
        good = np.isfinite(mu) & np.isfinite(sigma) & (sigma > 0) & (self.prob > 0)
        if not np.any(good):
            return self.header_distance_mpc
        total = float(self.prob[good].sum())
        first = second = 0.0
        for lo in range(0, self.npix, PIXEL_BLOCK):  # blocks of pixels: the moments' temporaries stay small
            sl = slice(lo, lo + PIXEL_BLOCK)
            g = good[sl]
            m = truncated_power_moments(mu[sl][g], sigma[sl][g], 4)
            w = self.prob[sl][g] / total
            first += float(np.sum(w * m[3] / m[2]))
            second += float(np.sum(w * m[4] / m[2]))
        return first, float(math.sqrt(max(second - first * first, 0.0)))

    def resample_nested(self, values, level: int) -> np.ndarray:
        """An intensive per-pixel quantity (density, fraction) on the flat NESTED grid of ``level``.

        Coarser pixels are repeated over their children; finer ones are averaged
        (area-weighted) into their parent.
        """
        values = np.asarray(values, dtype=float)
        out = np.zeros(12 * 4 ** level)
        weight = np.zeros_like(out)
        coarse = self.level <= level
        if np.any(coarse):
            shift = 2 * (level - self.level[coarse])
            start = self.ipix[coarse] << shift
            count = np.int64(1) << shift
            idx = np.repeat(start, count) + (np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count))
            out[idx] = np.repeat(values[coarse], count)
            weight[idx] = 1.0
        fine = ~coarse
        if np.any(fine):
            parent = self.ipix[fine] >> (2 * (self.level[fine] - level))
            w = 4.0 ** (level - self.level[fine])  # area relative to the parent
            np.add.at(out, parent, values[fine] * w)
            np.add.at(weight, parent, w)
        return out / np.where(weight > 0, weight, 1.0)

    def summary(self) -> dict:
        """JSON-ready description (the ``map`` member of the coverage document)."""
        return dict(self._summary)

    @cached_property
    def _summary(self) -> dict:
        mean, std = self.distance_moments_mpc()
        return {"path": self.path, "ordering": self.ordering, "coordsys": self.coordsys,
                "nside": 2 ** self.max_level, "npix": self.npix, "multi_order": self.ordering == "NUNIQ",
                "area90_deg2": round(self.credible_area_deg2(0.9), 3),
                "area50_deg2": round(self.credible_area_deg2(0.5), 3),
                "peak_ra_deg": round(self.peak_radec_deg()[0], 4), "peak_dec_deg": round(self.peak_radec_deg()[1], 4),
                "has_distance": self.distmu_mpc is not None,
                "distance_mean_mpc": None if mean is None else round(mean, 3),
                "distance_std_mpc": None if std is None else round(std, 3),
                "renormalised_from": self.renormalised_from}


def truncated_power_moments(mu, sigma, kmax: int):
    """I_k = int_0^inf r^k exp(-(r - mu)^2 / (2 sigma^2)) dr for k = 0..kmax (arrays over pixels).

    Integration by parts gives I_0 = sigma sqrt(2 pi) Phi(mu / sigma),
    I_1 = mu I_0 + sigma^2 exp(-mu^2 / 2 sigma^2), I_k = mu I_(k-1) + (k-1) sigma^2 I_(k-2).
    """
    from scipy.special import ndtr

    mu, sigma = np.asarray(mu, float), np.asarray(sigma, float)
    out = [sigma * math.sqrt(2 * math.pi) * ndtr(mu / sigma)]
    out.append(mu * out[0] + sigma ** 2 * np.exp(-0.5 * (mu / sigma) ** 2))
    for k in range(2, kmax + 1):
        out.append(mu * out[k - 1] + (k - 1) * sigma ** 2 * out[k - 2])
    return out


# --- reading -------------------------------------------------------------
def load_skymap(path) -> SkyMap:
    """Read and validate a HEALPix probability map (flat NESTED/RING or multi-order NUNIQ) from FITS."""
    path = Path(path)
    header, columns = _read_table(path)
    ordering = _ordering(header, columns, path)
    coordsys = _coordsys(header, path)
    if ordering == "NUNIQ":
        level, ipix, prob, extra = _multi_order(header, columns, path)
    else:
        level, ipix, prob, extra = _flat(header, columns, ordering, path)
    prob, renorm = _normalise(prob, path)
    xyz = _pixel_vectors(level, ipix, coordsys)
    dist = _distance_columns(extra, prob, path)
    return SkyMap(path=str(path), ordering=ordering, coordsys=coordsys, xyz=xyz, prob=prob, level=level,
                  ipix=ipix, distmu_mpc=dist[0], distsigma_mpc=dist[1], distnorm_per_mpc2=dist[2],
                  header_distance_mpc=(_keyword_float(header, "DISTMEAN"), _keyword_float(header, "DISTSTD")),
                  renormalised_from=renorm)


def _read_table(path: Path):
    """(header, {UPPER name: flat float/int array}) of the first HEALPix binary table."""
    from astropy.io import fits

    data_bytes = _fits_bytes(path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # header-style notices from astropy are not our concern here
            warnings.filterwarnings("error", message=".*(truncated|corrupt).*")  # a damaged file is
            with fits.open(io.BytesIO(data_bytes), memmap=False) as hdul:
                tables = [h for h in hdul[1:] if isinstance(h, fits.BinTableHDU)]
                if not tables:
                    raise DataFileError(path, "", "no binary table extension; a HEALPix map is a BINTABLE "
                                                  "with PIXTYPE = 'HEALPIX'")
                hdu = next((h for h in tables if str(h.header.get("PIXTYPE", "")).strip().upper() == "HEALPIX"),
                           tables[0])
                header = hdu.header.copy()
                data = hdu.data
                if data is None or len(data) == 0:
                    raise DataFileError(path, "", "the HEALPix table has no rows")
                cols = {}
                for c in hdu.columns:
                    arr = np.asarray(data[c.name]).reshape(-1)
                    if arr.dtype.kind in "fiu":  # a native copy: the file's buffer is freed on return
                        arr = arr.astype(arr.dtype.newbyteorder("="))
                    cols[c.name.strip().upper()] = (arr, (c.unit or "").strip())
    except DataFileError:
        raise
    except (OSError, ValueError, TypeError, KeyError, IndexError, UnicodeDecodeError, Warning) as err:
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise DataFileError(path, "", f"not a readable FITS file ({reason})") from None
    return header, cols


def _fits_bytes(path: Path) -> bytes:
    """The (decompressed) bytes of a sky-map file: a regular file, at most MAX_MAP_BYTES before and after
    gzip/bzip2 decompression, a whole number of 2880-byte blocks (FITS Standard 4.0, sec. 3.1)."""
    raw = read_input_bytes(path, "a FITS sky map", MAX_MAP_BYTES)
    if raw[:2] == b"\x1f\x8b" or raw[:3] == b"BZh":
        raw = _decompress(raw, path)
    if len(raw) % FITS_BLOCK:
        raise DataFileError(path, "", f"not a readable FITS file ({len(raw)} bytes is not a whole number of "
                                      f"{FITS_BLOCK}-byte blocks: truncated or not FITS)")
    return raw


def _decompress(raw: bytes, path: Path) -> bytes:
    """gzip or bzip2 content, read up to one byte past MAX_MAP_BYTES (never more) and refused beyond it."""
    import bz2
    import gzip
    import zlib

    source = io.BytesIO(raw)
    try:
        with (gzip.GzipFile(fileobj=source) if raw[:2] == b"\x1f\x8b" else bz2.BZ2File(source)) as f:
            out = f.read(MAX_MAP_BYTES + 1)
    except (OSError, EOFError, ValueError, zlib.error) as err:
        raise DataFileError(path, "", f"not a readable compressed file ({err})") from None
    if len(out) > MAX_MAP_BYTES:
        raise DataFileError(path, "", "decompressed size too large", f"at most {MAX_MAP_BYTES / MIB:g} MiB decompressed")
    return out


def _ordering(header, columns, path) -> str:
    raw = header.get("ORDERING")
    if raw is None:
        raise DataFileError(path, "ORDERING", "header keyword missing", " | ".join(ORDERINGS))
    ordering = str(raw).strip().upper()
    if ordering not in ORDERINGS:
        raise DataFileError(path, "ORDERING", f"value {raw!r} not recognised", " | ".join(ORDERINGS))
    if ordering != "NUNIQ" and "UNIQ" in columns:
        raise DataFileError(path, "ORDERING", f"value {raw!r} but the table has a UNIQ column", "NUNIQ for UNIQ tables")
    pixtype = str(header.get("PIXTYPE", "HEALPIX")).strip().upper()
    if pixtype != "HEALPIX":
        raise DataFileError(path, "PIXTYPE", f"value {pixtype!r} is not a HEALPix map", "HEALPIX")
    if ordering != "NUNIQ" and str(header.get("INDXSCHM", "IMPLICIT")).strip().upper() != "IMPLICIT":
        raise DataFileError(path, "INDXSCHM", f"value {header.get('INDXSCHM')!r}: partial-sky maps are not read",
                            "IMPLICIT (all-sky) or ORDERING = 'NUNIQ'")
    return ordering


def _coordsys(header, path) -> str:
    raw = str(header.get("COORDSYS", "C")).strip().upper()
    if raw in ("C", "CELESTIAL", "EQUATORIAL", "ICRS", "Q"):
        return "C"
    if raw in ("G", "GALACTIC"):
        return "G"
    raise DataFileError(path, "COORDSYS", f"value {raw!r} not supported", "C (celestial) | G (Galactic)")


def _probability_column(columns, names, path):
    for name in names:
        if name in columns:
            return name
    skip = set(DISTANCE_COLUMNS) | {"UNIQ"}
    first = next((n for n in columns if n not in skip), None)
    if first is None:
        raise DataFileError(path, names[0], "column missing")
    return first


def _flat(header, columns, ordering, path):
    name = _probability_column(columns, ("PROB", "PROBABILITY"), path)
    prob = _floats(columns[name][0], path, name)
    n = prob.size
    nside = _nside(header, n, path)
    level = np.full(n, int(round(math.log2(nside))), dtype=np.int64)
    index = np.arange(n, dtype=np.int64)
    if ordering == "RING":
        from astropy_healpix.core import ring_to_nested

        ipix = np.asarray(ring_to_nested(index, nside), dtype=np.int64)
    else:
        ipix = index
    extra = {k: _floats(columns[k][0], path, k) for k in DISTANCE_COLUMNS if k in columns}
    if any(v.size != n for v in extra.values()):
        raise DataFileError(path, "DISTMU", "distance columns differ in length from the probability column")
    if ordering == "RING":  # keep pixels in NESTED order so flat maps compare index by index
        order = np.argsort(ipix)
        prob, ipix = prob[order], ipix[order]
        extra = {k: v[order] for k, v in extra.items()}
    return level, ipix, prob, extra


def _nside(header, n: int, path) -> int:
    inferred = math.isqrt(n // 12)
    raw = header.get("NSIDE")
    if raw is None:
        if 12 * inferred * inferred != n:
            raise DataFileError(path, "NSIDE", f"keyword missing and {n} rows is not 12 * NSIDE^2")
        nside = inferred
    else:
        try:
            nside = int(raw)
        except (TypeError, ValueError):
            raise DataFileError(path, "NSIDE", f"value {raw!r} is not a whole number") from None
        if 12 * nside * nside != n:
            raise DataFileError(path, "NSIDE", f"value {nside} needs {12 * nside * nside} pixels, the table has {n}",
                                "12 * NSIDE^2 rows")
    if nside < 1 or nside & (nside - 1) or nside > MAX_FLAT_NSIDE:
        raise DataFileError(path, "NSIDE", f"value {nside} is not a power of 2 up to {MAX_FLAT_NSIDE}",
                            f"1, 2, 4, ... {MAX_FLAT_NSIDE} for a flat map")
    return nside


def _multi_order(header, columns, path):
    from astropy_healpix import uniq_to_level_ipix

    if "UNIQ" not in columns:
        raise DataFileError(path, "UNIQ", "column missing (ORDERING = 'NUNIQ')")
    uniq = columns["UNIQ"][0]
    if not np.issubdtype(uniq.dtype, np.integer):
        raise DataFileError(path, "UNIQ", f"column of type {uniq.dtype}, expected integers")
    uniq = uniq.astype(np.int64)
    if np.any(uniq < 4):
        raise DataFileError(path, "UNIQ", f"value {int(uniq[uniq < 4][0])} is not a valid index", ">= 4")
    level, ipix = (np.asarray(a, dtype=np.int64) for a in uniq_to_level_ipix(uniq))
    if level.max() > MAX_LEVEL:
        raise DataFileError(path, "UNIQ", f"level {int(level.max())} too deep", f"<= {MAX_LEVEL}")
    _check_tiling(level, ipix, path)
    name = next((n for n in ("PROBDENSITY", "PROB_DENSITY") if n in columns), None)
    if name is None:
        raise DataFileError(path, "PROBDENSITY", "column missing (ORDERING = 'NUNIQ')")
    density, unit = _floats(columns[name][0], path, name), columns[name][1].lower().replace(" ", "")
    if unit in ("deg-2", "deg**-2", "1/deg2", "1/deg**2", "deg^-2"):
        density = density * SR_TO_DEG2
    elif unit not in ("", "sr-1", "sr**-1", "1/sr", "sr^-1"):
        raise DataFileError(path, f"{name} unit", f"{unit!r} not recognised", "sr-1 | deg-2")
    prob = density * (4.0 * math.pi / (12.0 * 4.0 ** level))
    extra = {k: _floats(columns[k][0], path, k) for k in DISTANCE_COLUMNS if k in columns}
    return level, ipix, prob, extra


def _check_tiling(level, ipix, path) -> None:
    """Multi-order pixels must cover the sphere once: no overlaps, no gaps."""
    top = int(level.max())
    start = ipix << (2 * (top - level))
    end = (ipix + 1) << (2 * (top - level))
    order = np.argsort(start)
    start, end = start[order], end[order]
    if np.any(start[1:] < end[:-1]):
        k = int(np.argmax(start[1:] < end[:-1]))
        raise DataFileError(path, "UNIQ", f"pixels overlap (sorted rows {k} and {k + 1})", "a tiling of the sphere")
    covered = int(np.sum(end - start))
    if covered != 12 * 4 ** top:
        raise DataFileError(path, "UNIQ", f"pixels cover {covered / (12 * 4 ** top):.4%} of the sky",
                            "an all-sky tiling")


def _floats(arr, path, name) -> np.ndarray:
    if not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
        raise DataFileError(path, name, f"column of type {arr.dtype}, expected numbers")
    return np.asarray(arr, dtype=np.float64)


def _normalise(prob, path):
    """Probabilities scaled to sum 1, and the original sum when the change was more than rounding."""
    bad = ~np.isfinite(prob)
    if np.any(bad):
        raise DataFileError(path, "PROB", f"{int(bad.sum())} pixels hold non-finite values (e.g. {prob[bad][0]})",
                            "finite probabilities >= 0")
    if np.any(prob < 0):
        raise DataFileError(path, "PROB", f"{int((prob < 0).sum())} pixels hold negative values "
                                          f"(e.g. {prob[prob < 0][0]:g})", "probabilities >= 0")
    total = float(prob.sum())
    if not abs(total - 1.0) <= NORM_TOLERANCE:
        raise DataFileError(path, "PROB", f"probabilities sum to {total:.6g}, not 1",
                            f"1 +- {NORM_TOLERANCE:g} (renormalised within that tolerance)")
    renorm = None
    if abs(total - 1.0) > NORM_QUIET:
        warnings.warn(f"{path}: probabilities sum to {total:.6g}; renormalised to 1", SkymapWarning, stacklevel=3)
        renorm = total
    return prob / total, renorm


def _distance_columns(extra, prob, path):
    mu, sigma, norm = (extra.get(k) for k in DISTANCE_COLUMNS)
    if (mu is None) != (sigma is None):
        raise DataFileError(path, "DISTMU" if mu is None else "DISTSIGMA", "column missing (DISTMU and DISTSIGMA go together)")
    if mu is not None:
        used = (prob > 0) & np.isfinite(mu)
        if np.any(used & ~(np.isfinite(sigma) & (sigma > 0))):
            raise DataFileError(path, "DISTSIGMA", "must be finite and > 0 where DISTMU is finite", "> 0 Mpc")
    if norm is not None and np.any(np.isfinite(norm) & (norm < 0)):
        raise DataFileError(path, "DISTNORM", "negative values", ">= 0 Mpc^-2")
    return mu, sigma, norm


def _keyword_float(header, key):
    try:
        v = float(header[key])
    except (KeyError, TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _pixel_vectors(level, ipix, coordsys) -> np.ndarray:
    """ICRS unit vectors (3, n) of the pixel centres."""
    from astropy_healpix import healpix_to_xyz

    xyz = np.empty((3, level.size))
    for lv in np.unique(level):  # one vectorized call per HEALPix order present, in blocks (memory)
        sel = np.flatnonzero(level == lv)
        for lo in range(0, sel.size, PIXEL_BLOCK):
            part = sel[lo:lo + PIXEL_BLOCK]
            xyz[:, part] = np.stack(healpix_to_xyz(ipix[part], 2 ** int(lv), order="nested"))
    if coordsys == "G":
        xyz = _galactic_to_icrs(xyz)
    return xyz


def _galactic_to_icrs(xyz: np.ndarray) -> np.ndarray:
    import astropy.units as u
    from astropy.coordinates import Galactic, ICRS

    # The Galactic -> ICRS rotation is a fixed matrix: take it from astropy on the three axes.
    axes = Galactic(l=[0.0, 90.0, 0.0] * u.deg, b=[0.0, 0.0, 90.0] * u.deg).transform_to(ICRS())
    rot = axes.cartesian.xyz.value  # columns: images of the Galactic x, y, z axes
    return rot @ xyz
