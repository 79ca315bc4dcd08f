"""The one root finder behind every event in time (dusk, dawn, window edges).

A condition is written as a continuous *margin* function of time that is
positive where the condition holds (e.g. twilight altitude minus Sun
altitude).  :func:`positive_intervals` samples it on a coarse grid for many
rows (sites) at once, brackets every sign change and refines all brackets
together with :func:`bisect`, a vectorized bisection with a final
linear-interpolation step.  Times are MJD (UTC) floats.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

SECONDS_PER_DAY = 86400.0
DEFAULT_TOL_S = 1.0

# fn(mjd[n], rows[n]) -> margin[n]: the margin of row rows[i] at time mjd[i].
MarginFn = Callable[[np.ndarray, np.ndarray], np.ndarray]


def bisect(fn: MarginFn, rows: np.ndarray, lo_mjd: np.ndarray, hi_mjd: np.ndarray,
           tol_s: float = DEFAULT_TOL_S) -> np.ndarray:
    """Roots of ``fn`` inside the brackets [lo, hi] (one per element), all refined together.

    Each bracket must hold a sign change of ``fn``; the result is within
    ``tol_s`` seconds of a root.  The number of iterations is set by the
    widest bracket, so every call costs a fixed, small number of ``fn``
    evaluations over all brackets at once.
    """
    rows = np.asarray(rows)
    lo, hi = np.array(lo_mjd, dtype=float), np.array(hi_mjd, dtype=float)
    if lo.size == 0:
        return lo
    f_lo, f_hi = fn(lo, rows), fn(hi, rows)
    width_s = float(np.max(hi - lo)) * SECONDS_PER_DAY
    n_iter = max(0, int(np.ceil(np.log2(max(width_s, tol_s) / tol_s))))
    for _ in range(n_iter):  # iterations of the bisection, each vectorized over every bracket
        mid = 0.5 * (lo + hi)
        f_mid = fn(mid, rows)
        same = (f_mid > 0) == (f_lo > 0)  # "positive" as in positive_intervals: a zero is not positive
        lo, f_lo = np.where(same, mid, lo), np.where(same, f_mid, f_lo)
        hi, f_hi = np.where(same, hi, mid), np.where(same, f_hi, f_mid)
    # linear interpolation inside the final bracket (falls back to its middle for a flat margin)
    denom = f_lo - f_hi
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(denom != 0, f_lo / denom, 0.5)
    return lo + np.clip(w, 0.0, 1.0) * (hi - lo)


def positive_intervals(fn: MarginFn, grid_mjd: np.ndarray, values: np.ndarray,
                       tol_s: float = DEFAULT_TOL_S):
    """Maximal intervals where the margin is positive, for every row of ``values``.

    ``values`` (n_rows, n_grid) is ``fn`` sampled on ``grid_mjd``.  Returns
    ``(rows, start_mjd, end_mjd, open_start, open_end)``, sorted by row then time;
    ``open_*`` flags intervals that run past the grid's ends (their edge is the
    grid end, not a root).  Sign changes closer together than one grid step
    can be missed: choose the grid step accordingly.
    """
    grid_mjd = np.asarray(grid_mjd, dtype=float)
    pos = np.asarray(values) > 0
    padded = np.zeros((pos.shape[0], pos.shape[1] + 2), dtype=np.int8)
    padded[:, 1:-1] = pos
    step = np.diff(padded, axis=1)  # +1 where an interval starts, -1 after it ends
    s_row, s_idx = np.nonzero(step == 1)  # s_idx: first positive sample
    e_row, e_idx = np.nonzero(step == -1)  # e_idx - 1: last positive sample
    last = grid_mjd.size - 1
    open_start, open_end = s_idx == 0, e_idx == last + 1
    roots = bisect(fn, np.concatenate([s_row[~open_start], e_row[~open_end]]),
                   np.concatenate([grid_mjd[s_idx[~open_start] - 1], grid_mjd[e_idx[~open_end] - 1]]),
                   np.concatenate([grid_mjd[s_idx[~open_start]], grid_mjd[np.minimum(e_idx[~open_end], last)]]),
                   tol_s)
    n_s = int(np.count_nonzero(~open_start))
    start = grid_mjd[np.minimum(s_idx, last)].astype(float)
    end = grid_mjd[np.minimum(e_idx - 1, last)].astype(float)
    start[~open_start] = roots[:n_s]
    end[~open_end] = roots[n_s:]
    return s_row, start, end, open_start, open_end
