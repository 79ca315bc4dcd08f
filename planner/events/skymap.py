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
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np

from kncast.forecast.datafiles import MIB, check_input_file
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
PIXEL_BLOCK = 1 << 20  # pixel centres, densities, columns read this many at a time
CREDIBLE_BINS = 8  # credible regions: histogram bins per factor 2 in density, to find a threshold
CREDIBLE_SLACK = 1e-9  # ... plus this much probability (more than the running sum's rounding)


class SkymapWarning(UserWarning):
    """A sky map was accepted after a correction (e.g. renormalised)."""


class _PerPixel:
    """A per-pixel array field that a flat map leaves None: pixel k is then NESTED index k at the map's order
    (``flat_level``), and the array is built from that order when read (never kept), so a flat map holds no
    level, index or centre arrays of its own."""

    def __set_name__(self, owner, name):
        self.name, self.slot = name, "_" + name

    def __get__(self, obj, owner=None):
        if obj is None:
            raise AttributeError(self.name)  # no class default: a required dataclass field
        value = obj.__dict__[self.slot]
        return getattr(obj, "_implied_" + self.name)() if value is None else value

    def __set__(self, obj, value):
        obj.__dict__[self.slot] = value


@dataclass(frozen=True)
class SkyMap:
    """A probability sky map as pixels: ICRS centres, probabilities (sum 1), areas.

    Flat and multi-order maps share this form: every pixel carries its HEALPix
    ``level`` and NESTED index ``ipix`` (so ``nside = 2**level``).  A flat map stores only its
    probabilities (``xyz``, ``level``, ``ipix`` given as None and ``flat_level`` set): those arrays are
    built when read, and the kernels take the centres block by block (:meth:`pixel_vectors`).
    Whole-map quantities (density, credible regions, peak, distance moments, summary) are computed once
    and kept.
    """

    path: str
    ordering: str  # as in the file: NESTED, RING or NUNIQ
    coordsys: str
    xyz: np.ndarray = _PerPixel()  # ICRS unit vectors, (3, n_pixels)
    prob: np.ndarray  # probability per pixel, sums to 1 (float64)
    level: np.ndarray = _PerPixel()  # HEALPix order per pixel
    ipix: np.ndarray = _PerPixel()  # NESTED index per pixel at its level
    distmu_mpc: np.ndarray | None = None  # float32 copies of the file's columns (the moments use float64)
    distsigma_mpc: np.ndarray | None = None
    distnorm_per_mpc2: np.ndarray | None = None
    header_distance_mpc: tuple[float | None, float | None] = (None, None)  # DISTMEAN, DISTSTD keywords
    renormalised_from: float | None = None
    flat_level: int | None = None  # order of a flat map whose xyz, level, ipix are implied (None)
    distance_moments_at_load: tuple[float, float] | None = None  # from the float64 columns, while reading

    @property
    def npix(self) -> int:
        return int(self.prob.size)

    @property
    def max_level(self) -> int:
        return self.implied_level if self.implied_level is not None else int(self.level.max())

    @property
    def implied_level(self) -> int | None:
        """The order of a flat map whose pixel k is NESTED index k (nothing stored per pixel), else None."""
        return self.flat_level if self.__dict__["_ipix"] is None and self.__dict__["_level"] is None else None

    def _implied_level(self):
        return np.broadcast_to(np.int64(self.flat_level), (self.npix,))

    def _implied_ipix(self):
        return np.arange(self.npix, dtype=np.int64)

    def _implied_xyz(self):
        return self.pixel_vectors(slice(0, self.npix))

    def pixel_vectors(self, sl: slice) -> np.ndarray:
        """ICRS unit vectors (3, m) of the pixels ``sl`` (a slice), float64."""
        stored = self.__dict__["_xyz"]
        if stored is not None:
            return stored[:, sl]
        lo, hi, _ = sl.indices(self.npix)
        return _pixel_vectors(np.full(1, self.flat_level), np.arange(lo, hi, dtype=np.int64), self.coordsys,
                              single_level=True)

    @cached_property
    def area_sr(self) -> np.ndarray:
        """Solid angle of every pixel, steradian (4 pi / (12 * 4^level)); one broadcast value for a flat map."""
        if self.implied_level is not None:
            return np.broadcast_to(4.0 * math.pi / (12.0 * 4.0 ** np.full(1, self.flat_level)), (self.npix,))
        return 4.0 * math.pi / (12.0 * 4.0 ** self.level)

    @cached_property
    def density_per_sr(self) -> np.ndarray:
        return self.prob / self.area_sr

    def _density(self, sl: slice) -> np.ndarray:
        """Probability density (per sr) of the pixels ``sl``, as :attr:`density_per_sr` without keeping it."""
        return self.prob[sl] / self.area_sr[sl]

    def _blocks(self):
        return (slice(lo, min(lo + PIXEL_BLOCK, self.npix)) for lo in range(0, self.npix, PIXEL_BLOCK))

    @property
    def ra_dec_deg(self):
        x, y, z = self.xyz
        return np.degrees(np.arctan2(y, x)) % 360.0, np.degrees(np.arcsin(np.clip(z, -1.0, 1.0)))

    def credible_mask(self, level: float = 0.9) -> np.ndarray:
        """Pixels of the smallest region holding ``level`` of the probability (highest density first).

        The pixel that carries the cumulative probability across ``level`` is included.
        """
        mask = np.zeros(self.npix, dtype=bool)
        mask[self._credible_pixels(level)] = True
        return mask

    def _credible_pixels(self, level: float) -> np.ndarray:
        """Indices of the pixels of :meth:`credible_mask` (kept per level)."""
        if level not in self._credible_cache:
            order, before = self._denser_prefix(level)
            self._credible_cache[level] = np.sort(order[before < level])
        return self._credible_cache[level]

    @cached_property
    def _credible_cache(self) -> dict:
        return {}

    def _denser_prefix(self, level: float):
        """(pixels, probability before each) over the densest pixels, in decreasing density (stable order), far
        enough that every later pixel has more than ``level`` before it.

        Only the pixels down to a density threshold are sorted: a probability-weighted histogram of
        log2(density) (CREDIBLE_BINS per octave) gives a threshold whose pixels hold more than ``level``; it is
        halved until the running sum of those pixels exceeds ``level`` + CREDIBLE_SLACK.  Their order and
        running sum are those of the whole sorted map (the prefix of a stable sort).
        """
        if level in self._prefix_cache:
            return self._prefix_cache[level]
        cut = self._density_cut(level)
        while True:
            idx = np.concatenate([np.flatnonzero(self._density(sl) >= cut) + sl.start for sl in self._blocks()])
            order = idx[np.argsort(-self._density(idx), kind="stable")]
            p = self.prob[order]
            total = np.cumsum(p)
            if cut < 0 or (total.size and total[-1] > level + CREDIBLE_SLACK):
                self._prefix_cache[level] = result = (order, total - p)
                return result
            cut = cut * 0.5 if cut > np.finfo(float).tiny else -1.0  # -1: every pixel

    def _density_cut(self, level: float) -> float:
        """A density above which the pixels hold about ``level`` + 1e-6 (from a histogram), or -1 for all."""
        span = 1100 * CREDIBLE_BINS  # log2 of float64 densities lies within +-1100
        hist = np.zeros(2 * span + 1)
        for sl in self._blocks():
            d, p = self._density(sl), self.prob[sl]
            pos = d > 0
            key = np.clip(np.floor(np.log2(d[pos]) * CREDIBLE_BINS).astype(np.int64) + span, 0, 2 * span)
            hist += np.bincount(key, weights=p[pos], minlength=hist.size)
        above = np.cumsum(hist[::-1])[::-1]  # probability in each bin and the bins above it
        ok = np.flatnonzero(above > level + 1e-6)
        if not ok.size:
            return -1.0
        return float(2.0 ** ((ok[-1] - span) / CREDIBLE_BINS))

    @cached_property
    def _prefix_cache(self) -> dict:
        return {}

    def credible_area_deg2(self, level: float = 0.9) -> float:
        return float(np.sum(self.area_sr[self.credible_mask(level)]) * SR_TO_DEG2)

    def peak_radec_deg(self):
        """(ra, dec) in degrees of the pixel of highest probability density."""
        return self._peak

    @cached_property
    def _peak(self):
        best, k = -1.0, 0
        for sl in self._blocks():  # the first pixel of the highest density, as np.argmax over the map
            d = self._density(sl)
            j = int(np.argmax(d))
            if d[j] > best:
                best, k = float(d[j]), sl.start + j
        x, y, z = self.pixel_vectors(slice(k, k + 1))
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
        if self.distance_moments_at_load is not None:
            return self.distance_moments_at_load
        sums = np.zeros(3)
        for sl in self._blocks():  # blocks of pixels: the moments' temporaries stay small
            sums += _moment_sums(self.prob[sl], self.distmu_mpc[sl], self.distsigma_mpc[sl])
        return _moments(sums, self.header_distance_mpc)

    def density_at(self, level: int) -> np.ndarray:
        """Probability density (per sr) averaged over each pixel of the flat NESTED grid of HEALPix order
        ``level``: for a flat map at least as fine, the probability inside it over its area, without a
        whole-map density array; otherwise :meth:`resample_nested` of :attr:`density_per_sr`."""
        flat = self.implied_level
        if flat is not None and level <= flat:
            prob = self.prob.reshape(-1, 4 ** (flat - level)).sum(axis=1)
            return prob / (4.0 * np.pi / prob.size)
        return self.resample_nested(self.density_per_sr, level)

    def resample_nested(self, values, level: int) -> np.ndarray:
        """An intensive per-pixel quantity (density, fraction) on the flat NESTED grid of ``level``.

        Coarser pixels are repeated over their children; finer ones are averaged
        (area-weighted) into their parent.
        """
        flat = self.implied_level
        if flat is not None:  # pixel k is NESTED k: its children (or its parent's group) are contiguous
            values = np.asarray(values)  # flags stay bool: averaged into float64 at the coarse level only
            if level >= flat:
                return np.repeat(values.astype(float, copy=False), 4 ** (level - flat))
            return values.reshape(-1, 4 ** (flat - level)).mean(axis=1, dtype=float)
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


def _moment_sums(prob, mu, sigma) -> np.ndarray:
    """Sums over the pixels with a usable distance: probability, probability x <r>, probability x <r^2>."""
    mu, sigma = np.asarray(mu, float), np.asarray(sigma, float)
    good = np.isfinite(mu) & np.isfinite(sigma) & (sigma > 0) & (prob > 0)
    m = truncated_power_moments(mu[good], sigma[good], 4)
    p = prob[good]
    return np.array([p.sum(), np.sum(p * m[3] / m[2]), np.sum(p * m[4] / m[2])])


def _moments(sums, fallback):
    """(mean, std) Mpc from :func:`_moment_sums` totals; ``fallback`` when no pixel has a usable distance."""
    if not sums[0] > 0:
        return fallback
    first, second = float(sums[1] / sums[0]), float(sums[2] / sums[0])
    return first, float(math.sqrt(max(second - first * first, 0.0)))


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
    """Read and validate a HEALPix probability map (flat NESTED/RING or multi-order NUNIQ) from FITS.

    Columns are read from the file in blocks of rows, only those used; a flat map keeps no per-pixel
    level, index or centre arrays (see :class:`SkyMap`).
    """
    path = Path(path)
    with _open_table(path) as (header, table):
        ordering = _ordering(header, table.units, path)
        coordsys = _coordsys(header, path)
        hdist = (_keyword_float(header, "DISTMEAN"), _keyword_float(header, "DISTSTD"))
        if ordering == "NUNIQ":
            level, ipix, prob, extra = _multi_order(header, table, path)
            present, blocks = list(extra), lambda: _array_blocks(extra, prob.size)
            pixels = dict(level=level, ipix=ipix)
        else:
            flat_level, prob, present, blocks = _flat(header, table, ordering, path)
            pixels = dict(level=None, ipix=None, xyz=None, flat_level=flat_level)
        prob, renorm = _normalise(prob, path)
        if ordering == "NUNIQ":
            pixels["xyz"] = _pixel_vectors(level, ipix, coordsys)
        dist, moments = _distance_columns(present, blocks, prob, path, hdist)
    return SkyMap(path=str(path), ordering=ordering, coordsys=coordsys, prob=prob, distmu_mpc=dist[0],
                  distsigma_mpc=dist[1], distnorm_per_mpc2=dist[2], header_distance_mpc=hdist,
                  renormalised_from=renorm, distance_moments_at_load=moments, **pixels)


@dataclass(frozen=True)
class _Table:
    """The columns of the HEALPix binary table, read on demand: whole or in blocks of rows."""

    units: dict  # UPPER name -> unit
    dtypes: dict  # UPPER name -> dtype of the values
    repeat: dict  # UPPER name -> values per row
    rows: int
    read: object  # (names, first row, end row) -> {name: flat native array}

    def size(self, name) -> int:
        return self.rows * self.repeat[name]

    def column(self, name) -> np.ndarray:
        if self.rows <= PIXEL_BLOCK:
            return self.read([name], 0, self.rows)[name]
        out = np.empty(self.size(name), dtype=self.dtypes[name])
        for lo, cols in self.blocks([name]):
            out[lo:lo + cols[name].size] = cols[name]
        return out

    def blocks(self, names):
        """(first value, {name: native values}) per block of rows; the columns must share their repeat."""
        rep = self.repeat[names[0]] if names else 1
        step = max(1, PIXEL_BLOCK // rep)
        for r0 in range(0, self.rows, step):
            yield r0 * rep, self.read(names, r0, min(r0 + step, self.rows))


def _array_blocks(arrays: dict, n: int):
    """Blocks of whole in-memory columns, as :meth:`_Table.blocks`."""
    for lo in range(0, n, PIXEL_BLOCK):
        yield lo, {k: v[lo:lo + PIXEL_BLOCK] for k, v in arrays.items()}


@contextmanager
def _open_table(path: Path):
    """(header, :class:`_Table`) of the first HEALPix binary table; the file stays open inside the block."""
    from astropy.io import fits

    with ExitStack() as stack:
        raw, f, size = _fits_source(path, stack)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # header-style notices from astropy are not our concern here
                warnings.filterwarnings("error", message=".*(truncated|corrupt).*")  # a damaged file is
                hdul = stack.enter_context(fits.open(io.BytesIO(raw) if raw is not None else f, memmap=False))
                tables = [h for h in hdul[1:] if isinstance(h, fits.BinTableHDU)]
                if not tables:
                    raise DataFileError(path, "", "no binary table extension; a HEALPix map is a BINTABLE "
                                                  "with PIXTYPE = 'HEALPIX'")
                hdu = next((h for h in tables if str(h.header.get("PIXTYPE", "")).strip().upper() == "HEALPIX"),
                           tables[0])
                header = hdu.header.copy()
                table = _raw_table(hdu, raw, f, size, path) or _astropy_table(hdu)
        except DataFileError:
            raise
        except (OSError, ValueError, TypeError, KeyError, IndexError, UnicodeDecodeError, Warning) as err:
            raise _unreadable(path, err) from None
        if table.rows == 0:
            raise DataFileError(path, "", "the HEALPix table has no rows")
        yield header, table


def _unreadable(path, err) -> DataFileError:
    reason = str(err).splitlines()[0] if str(err) else type(err).__name__
    return DataFileError(path, "", f"not a readable FITS file ({reason})")


def _fits_source(path: Path, stack):
    """(decompressed bytes, None, size) of a gzip/bzip2 file, else (None, open binary file, size).

    A regular file of at most MAX_MAP_BYTES (before and after decompression), a whole number of 2880-byte
    blocks (FITS Standard 4.0, sec. 3.1); opened without blocking and checked again once open, so a path
    that turns into a FIFO or device meanwhile cannot hang the program.
    """
    import os
    import stat

    check_input_file(path, "a FITS sky map", MAX_MAP_BYTES)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    except OSError as err:
        raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    f = stack.enter_context(os.fdopen(fd, "rb"))
    st = os.fstat(f.fileno())
    if not stat.S_ISREG(st.st_mode):
        raise DataFileError(path, "", "is not a regular file, expected a FITS sky map (a regular file)")
    if st.st_size > MAX_MAP_BYTES:
        raise DataFileError(path, "", "file too large (it grew while being checked)",
                            f"at most {MAX_MAP_BYTES / MIB:g} MiB for a FITS sky map")
    try:
        magic = f.read(3)
        f.seek(0)
        raw = None
        if magic[:2] == b"\x1f\x8b" or magic[:3] == b"BZh":
            raw = _decompress(f.read(MAX_MAP_BYTES + 1), path)
    except OSError as err:
        raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
    size = len(raw) if raw is not None else st.st_size
    if size % FITS_BLOCK:
        raise DataFileError(path, "", f"not a readable FITS file ({size} bytes is not a whole number of "
                                      f"{FITS_BLOCK}-byte blocks: truncated or not FITS)")
    return raw, (None if raw is not None else f), size


RAW_FORMATS = "BIJKED"  # FITS binary-table codes read straight from the rows (no scaling): integers, reals


def _raw_table(hdu, raw, f, size, path):
    """The table read row block by row block from the file (or the decompressed bytes), or None when a column
    needs astropy's conversions (scaling, strings, logicals, variable-length arrays)."""
    cols = list(hdu.columns)
    if any(c.format.format not in RAW_FORMATS or c.bscale is not None or c.bzero is not None for c in cols):
        return None
    rec = hdu.columns.dtype.newbyteorder(">")  # FITS stores big-endian rows
    width, rows = int(hdu.header.get("NAXIS1", 0)), int(hdu.header.get("NAXIS2", 0))
    if rec.itemsize != width or len(rec.names) != len(cols):
        return None
    start = int(hdu.fileinfo()["datLoc"])
    if start + width * rows > size:
        raise DataFileError(path, "", f"not a readable FITS file (the table needs {width * rows} bytes of data, "
                                      f"the file holds {max(size - start, 0)}: truncated)")
    field = {c.name.strip().upper(): c.name for c in cols}
    native = {k: rec[v].base.newbyteorder("=") for k, v in field.items()}

    def read(names, r0, r1):
        if raw is not None:
            block = np.frombuffer(raw, dtype=rec, count=r1 - r0, offset=start + r0 * width)
        else:
            try:
                f.seek(start + r0 * width)
                buf = f.read((r1 - r0) * width)
            except OSError as err:
                raise DataFileError(path, "", f"cannot be read ({err.strerror})") from None
            if len(buf) != (r1 - r0) * width:
                raise DataFileError(path, "", "not a readable FITS file (it shrank while being read)")
            block = np.frombuffer(buf, dtype=rec)
        return {n: block[field[n]].reshape(-1).astype(native[n]) for n in names}

    return _Table(units={k: (c.unit or "").strip() for k, c in zip(field, cols)}, dtypes=native,
                  repeat={k: max(1, int(np.prod(rec[v].shape))) for k, v in field.items()}, rows=rows, read=read)


def _astropy_table(hdu) -> _Table:
    """The table through astropy's reading (whole columns, native copies)."""
    data = hdu.data
    rows = 0 if data is None else len(data)
    arrays, units = {}, {}
    for c in hdu.columns if rows else ():
        arr = np.asarray(data[c.name]).reshape(-1)
        if arr.dtype.kind in "fiu":  # a native copy: the file's buffer is freed on return
            arr = arr.astype(arr.dtype.newbyteorder("="))
        arrays[c.name.strip().upper()], units[c.name.strip().upper()] = arr, (c.unit or "").strip()
    return _Table(units=units, dtypes={k: v.dtype for k, v in arrays.items()},
                  repeat={k: max(1, v.size // rows) for k, v in arrays.items()}, rows=rows,
                  read=lambda names, r0, r1: {n: arrays[n][r0 * (arrays[n].size // rows):r1 * (arrays[n].size // rows)]
                                              for n in names})


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


def _flat(header, table, ordering, path):
    """(order, probability per NESTED pixel, distance columns present, their blocks in NESTED order)."""
    name = _probability_column(table.units, ("PROB", "PROBABILITY"), path)
    prob = _floats(table, name, path)
    n = prob.size
    nside = _nside(header, n, path)
    present = [k for k in DISTANCE_COLUMNS if k in table.units]
    if any(table.size(k) != n for k in present):
        raise DataFileError(path, "DISTMU", "distance columns differ in length from the probability column")
    for k in present:
        _check_numbers(table.dtypes[k], path, k)
    if ordering == "RING":  # pixels in NESTED order, so flat maps compare index by index
        from astropy_healpix.core import nested_to_ring

        ring = np.asarray(nested_to_ring(np.arange(n, dtype=np.int64), nside), dtype=np.int64)
        prob = prob[ring]
        extra = {k: _floats(table, k, path)[ring] for k in present}
        blocks = lambda: _array_blocks(extra, n)  # noqa: E731
    else:
        blocks = lambda: table.blocks(present)  # noqa: E731
    return int(round(math.log2(nside))), prob, present, blocks


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


def _multi_order(header, table, path):
    from astropy_healpix import uniq_to_level_ipix

    if "UNIQ" not in table.units:
        raise DataFileError(path, "UNIQ", "column missing (ORDERING = 'NUNIQ')")
    uniq = table.column("UNIQ")
    if not np.issubdtype(uniq.dtype, np.integer):
        raise DataFileError(path, "UNIQ", f"column of type {uniq.dtype}, expected integers")
    uniq = uniq.astype(np.int64)
    if np.any(uniq < 4):
        raise DataFileError(path, "UNIQ", f"value {int(uniq[uniq < 4][0])} is not a valid index", ">= 4")
    level, ipix = (np.asarray(a, dtype=np.int64) for a in uniq_to_level_ipix(uniq))
    if level.max() > MAX_LEVEL:
        raise DataFileError(path, "UNIQ", f"level {int(level.max())} too deep", f"<= {MAX_LEVEL}")
    _check_tiling(level, ipix, path)
    name = next((n for n in ("PROBDENSITY", "PROB_DENSITY") if n in table.units), None)
    if name is None:
        raise DataFileError(path, "PROBDENSITY", "column missing (ORDERING = 'NUNIQ')")
    density, unit = _floats(table, name, path), table.units[name].lower().replace(" ", "")
    if unit in ("deg-2", "deg**-2", "1/deg2", "1/deg**2", "deg^-2"):
        density = density * SR_TO_DEG2
    elif unit not in ("", "sr-1", "sr**-1", "1/sr", "sr^-1"):
        raise DataFileError(path, f"{name} unit", f"{unit!r} not recognised", "sr-1 | deg-2")
    prob = density * (4.0 * math.pi / (12.0 * 4.0 ** level))
    extra = {k: _floats(table, k, path) for k in DISTANCE_COLUMNS if k in table.units}
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


def _check_numbers(dtype, path, name) -> None:
    if not (np.issubdtype(dtype, np.floating) or np.issubdtype(dtype, np.integer)):
        raise DataFileError(path, name, f"column of type {dtype}, expected numbers")


def _floats(table, name, path) -> np.ndarray:
    """A whole column as float64, refused unless numeric."""
    _check_numbers(table.dtypes[name], path, name)
    return np.asarray(table.column(name), dtype=np.float64)


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


def _distance_columns(present, blocks, prob, path, header_distance):
    """Validated distance columns as float32 (DISTMU, DISTSIGMA, DISTNORM or None) and the distance moments
    from their float64 values, read block by block in pixel order."""
    if ("DISTMU" in present) != ("DISTSIGMA" in present):
        raise DataFileError(path, "DISTSIGMA" if "DISTMU" in present else "DISTMU",
                            "column missing (DISTMU and DISTSIGMA go together)")
    out = {k: np.empty(prob.size, dtype=np.float32) for k in present}
    sums, bad_norm = np.zeros(3), False
    for lo, cols in (blocks() if present else ()):
        mu, sigma, norm = (cols.get(k) for k in DISTANCE_COLUMNS)
        p = prob[lo:lo + next(iter(cols.values())).size]
        if mu is not None:
            mu, sigma = np.asarray(mu, float), np.asarray(sigma, float)
            used = (p > 0) & np.isfinite(mu)
            if np.any(used & ~(np.isfinite(sigma) & (sigma > 0))):
                raise DataFileError(path, "DISTSIGMA", "must be finite and > 0 where DISTMU is finite", "> 0 Mpc")
            sums += _moment_sums(p, mu, sigma)
        if norm is not None:
            norm = np.asarray(norm, float)
            bad_norm |= bool(np.any(np.isfinite(norm) & (norm < 0)))
        for k, v in cols.items():
            out[k][lo:lo + v.size] = v
    if bad_norm:
        raise DataFileError(path, "DISTNORM", "negative values", ">= 0 Mpc^-2")
    moments = _moments(sums, header_distance) if "DISTMU" in present else None
    return tuple(out.get(k) for k in DISTANCE_COLUMNS), moments


def _keyword_float(header, key):
    try:
        v = float(header[key])
    except (KeyError, TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _pixel_vectors(level, ipix, coordsys, single_level=False) -> np.ndarray:
    """ICRS unit vectors (3, n) of the pixel centres; ``single_level``: every pixel at order ``level[0]``."""
    from astropy_healpix import healpix_to_xyz

    xyz = np.empty((3, ipix.size))
    if single_level:
        for lo in range(0, ipix.size, PIXEL_BLOCK):  # in blocks (memory)
            part = slice(lo, lo + PIXEL_BLOCK)
            xyz[:, part] = np.stack(healpix_to_xyz(ipix[part], 2 ** int(level[0]), order="nested"))
    else:
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
