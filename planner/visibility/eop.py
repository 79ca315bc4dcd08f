"""UT1 - UTC from the IERS tables bundled with ``astropy-iers-data``, read without ``astropy.table``.

The values are those of astropy's default Earth-orientation table (``astropy.utils.iers.IERS_Auto``
with downloads off, as :mod:`kncast.planner._offline` configures it), built the same way from the
same two files:

* ``finals2000A.all`` (IERS Bulletin A, fixed-width format of its ReadMe): rows with a Bulletin A
  UT1 - UTC and a polar-motion flag;
* the Bulletin B value of a row replaced by the EOP 20 C04 series (``eopc04.1962-now``) over the
  span where the Bulletin A file has B values, then B used where present, A elsewhere;
* linear interpolation between daily rows with the leap-second jump removed, the first or last
  value outside the table.

Reading the two files with numpy takes milliseconds; astropy's own reader (``astropy.io.ascii``
CDS format, then the table combination) takes 0.4-1 s and is the largest single cost of a plan's
sky geometry.  ``tests/planner/test_ephemeris_erfa.py`` checks the values against astropy's.
Times are UTC Julian dates split in two doubles (``jd1 + jd2``), as astropy's ``Time`` keeps them.
"""
from __future__ import annotations

import functools
import os

import numpy as np

MJD_ZERO = 2400000.5
# finals2000A.all columns (1-based byte ranges of its ReadMe, as Python slices)
FINALS_MJD, FINALS_PM_FLAG, FINALS_UT1_A, FINALS_UT1_B = slice(7, 15), slice(16, 17), slice(58, 68), slice(154, 165)
# eopc04.1962-now columns (ReadMe.eopc04)
C04_MJD, C04_UT1 = slice(16, 26), slice(50, 62)


def _data_dir() -> str:
    import astropy_iers_data

    return os.path.join(os.path.dirname(astropy_iers_data.__file__), "data")


def _number(field: bytes) -> float:
    field = field.strip()
    return float(field) if field else np.nan


def _finals(path: str):
    """(MJD, UT1-UTC A, UT1-UTC B) of the rows astropy keeps (finite A value, polar-motion flag set)."""
    with open(path, "rb") as fh:
        lines = fh.read().splitlines()
    mjd, a, b = [], [], []
    for line in lines:  # one pass over the file's rows (daily values), not over time samples
        ut1_a = _number(line[FINALS_UT1_A])
        if not np.isfinite(ut1_a) or not line[FINALS_PM_FLAG].strip():
            continue
        mjd.append(float(line[FINALS_MJD]))
        a.append(ut1_a)
        b.append(_number(line[FINALS_UT1_B]))
    return np.array(mjd), np.array(a), np.array(b)


def _c04(path: str):
    """(MJD, UT1-UTC) of the EOP 20 C04 series (comment lines start with '#')."""
    with open(path, "rb") as fh:
        rows = [line for line in fh.read().splitlines() if line.strip() and not line.startswith(b"#")]
    return (np.array([float(r[C04_MJD]) for r in rows]), np.array([_number(r[C04_UT1]) for r in rows]))


@functools.lru_cache(maxsize=1)
def _bulletin_a():
    return _finals(os.path.join(_data_dir(), "finals2000A.all"))


@functools.lru_cache(maxsize=1)
def ut1_table():
    """(MJD, UT1 - UTC in s) per daily row, combined as astropy's ``IERS_Auto`` does."""
    mjd, ut1_a, ut1_b = _bulletin_a()
    mjd_b = mjd[np.isfinite(ut1_b)]
    if mjd_b.size:
        c04_mjd, c04_ut1 = _c04(os.path.join(_data_dir(), "eopc04.1962-now"))
        i0 = np.searchsorted(c04_mjd, mjd_b[0], side="left")
        i1 = np.searchsorted(c04_mjd, mjd_b[-1], side="right")
        n = i1 - i0
        if n > 0:
            if not np.allclose(mjd[:n], c04_mjd[i0:i1]):
                raise ValueError("unexpected mismatch between the bundled IERS A and IERS B tables")
            ut1_b = ut1_b.copy()
            ut1_b[:n] = c04_ut1[i0:i1]
    return mjd, np.where(np.isnan(ut1_b), ut1_a, ut1_b)


def table_end_mjd() -> float:
    """Last MJD of the bundled table (observed + predicted values)."""
    return float(_bulletin_a()[0][-1])


def ut1_minus_utc(jd1, jd2) -> np.ndarray:
    """UT1 - UTC (s) at UTC Julian dates ``jd1 + jd2``, interpolated as astropy's IERS tables do.

    Rows past the last Bulletin B value hold Bulletin A values only, so the C04 series is read
    only when a time needs a row that has a B value.
    """
    table_mjd, value, ut1_b = _bulletin_a()
    jd1, jd2 = np.asarray(jd1, dtype=float), np.asarray(jd2, dtype=float)
    mjd = np.floor(jd1 - MJD_ZERO + jd2)
    frac = jd1 - (MJD_ZERO + mjd) + jd2
    i = np.searchsorted(table_mjd, mjd, side="right")
    i1 = np.clip(i, 1, table_mjd.size - 1)
    i0 = i1 - 1
    if np.isfinite(ut1_b[i0]).any() or np.isfinite(ut1_b[i1]).any():
        value = ut1_table()[1]
    step = value[i1] - value[i0]
    step -= np.round(step)  # a leap second between the two rows
    out = value[i0] + (mjd - table_mjd[i0] + frac) / (table_mjd[i1] - table_mjd[i0]) * step
    out = np.where(i == 0, value[0], out)
    return np.where(i == table_mjd.size, value[-1], out)
