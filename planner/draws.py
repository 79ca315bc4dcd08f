"""Draws of the source: distances from the event's distance error and [model] ranges from Latin-hypercube nodes.

The method is described in :mod:`kncast.planner.plan.ensemble` and docs/methods.md ("Ensembles"); this module
holds the draws and percentiles shared by the plan, ``kncast lightcurve`` and ``kncast exposure``.
"""
from __future__ import annotations

import math
import statistics

import numpy as np

DEFAULT_DRAWS = 200   # realisations of the source
DEFAULT_SEED = 1      # reproducible draws unless a seed is given
MAX_NODES = 16
PERCENTILES = (16.0, 50.0, 84.0)

__all__ = ["magnitude_draws", "source_draws", "percentiles", "draw_distances", "latin_nodes",
           "DEFAULT_DRAWS", "DEFAULT_SEED", "MAX_NODES", "PERCENTILES"]


def percentiles(values) -> dict | None:
    """{"p16", "p50", "p84"} of the finite values (None when there are none)."""
    v = np.asarray(values, dtype=float).ravel()
    v = v[np.isfinite(v)]
    if not v.size:
        return None
    q = np.percentile(v, PERCENTILES, method="nearest")  # order statistics: percentiles commute with monotonic maps
    return {f"p{int(p)}": float(x) for p, x in zip(PERCENTILES, q)}


def draw_distances(distance_mpc: float, sigma_mpc, n: int, rng) -> np.ndarray:
    """``n`` luminosity distances (Mpc): normal about ``distance_mpc`` with ``sigma_mpc``, truncated at > 0."""
    if not sigma_mpc:
        return np.full(n, float(distance_mpc))
    a = (1e-3 - distance_mpc) / sigma_mpc
    return distance_mpc + sigma_mpc * _truncated_normal_ppf(rng.uniform(size=n), a)


def _truncated_normal_ppf(q: np.ndarray, a: float) -> np.ndarray:
    """Quantiles ``q`` (in [0, 1)) of the standard normal truncated to [a, inf).

    The inverse-CDF draw scipy.stats.truncnorm.rvs makes (same uniforms, same formula; tested against it):
    Phi(x) = Phi(a) + q (1 - Phi(a)).  For a < 0 (a distance truncated at zero) with the standard library's
    normal distribution, each side of the median from its own tail, 1 - Phi(x) = (1 - q) Phi(-a), so no
    digits are lost near either end; otherwise, and where Phi(a) underflows, in log space with scipy.special
    (whose import costs ~0.1 s).
    """
    lower_a = 0.5 * math.erfc(-a / math.sqrt(2.0))  # Phi(a)
    if a < 0 and lower_a > 0.0:
        upper_a = 0.5 * math.erfc(a / math.sqrt(2.0))  # Phi(-a) = 1 - Phi(a)
        q = np.asarray(q, dtype=float)
        below = lower_a + q * upper_a      # Phi(x)
        lower_half = below < 0.5
        tail = np.where(lower_half, below, (1.0 - q) * upper_a)  # Phi(x), else 1 - Phi(x)
        return np.where(lower_half, 1.0, -1.0) * np.asarray(_NORMAL_PPF(tail), dtype=float)
    from scipy.special import log_ndtr, ndtri_exp

    if a < 0:
        return ndtri_exp(np.logaddexp(log_ndtr(a), np.log(q) + log_ndtr(-a)))
    return -ndtri_exp(np.log1p(-q) + log_ndtr(-a))


_NORMAL_PPF = np.frompyfunc(statistics.NormalDist().inv_cdf, 1, 1)  # the standard normal's quantile function


def latin_nodes(ranges: dict, k: int, rng) -> list[dict]:
    """``k`` parameter sets {path: value}: a Latin hypercube, uniform in log over each [lo, hi]."""
    nodes = [dict() for _ in range(k)]
    for path, (lo, hi) in ranges.items():
        x = (rng.permutation(k) + rng.random(k)) / k
        values = lo * (hi / lo) ** x
        for node, value in zip(nodes, values):
            node[path] = float(value)
    return nodes


def _node_transients(event, transient, ranges: dict, n_nodes: int, rng) -> list:
    """The photosphere of each node at the event's distance (``transient`` itself when there are no ranges)."""
    if not ranges:
        return [transient]
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient
    from kncast.planner.source import with_values

    config = dict(event.model)
    out = []
    for node in latin_nodes(ranges, n_nodes, rng):
        ph = build_model(with_values(config, node), where=f"{event.source}: [model] (ensemble node)")
        out.append(Transient(ph, distance_mpc=transient.distance_mpc, redshift=transient.redshift,
                             ebv_mw=transient.ebv_mw, ebv_host=transient.ebv_host))
    return out


def source_draws(event, transient, n_draws: int, seed, model_overridden: bool = False):
    """(distances (n,), node transients, node of each draw (n,), ranges): the draws of the source."""
    from kncast.planner.source import model_ranges

    rng = np.random.default_rng(seed)
    ranges = {} if model_overridden else model_ranges(dict(event.model or {}))
    distances = draw_distances(transient.distance_mpc, getattr(event, "distance_err_mpc", None), n_draws, rng)
    n_nodes = min(MAX_NODES, n_draws) if ranges else 1
    return distances, _node_transients(event, transient, ranges, n_nodes, rng), np.arange(n_draws) % n_nodes, ranges


def magnitude_draws(event, transient, phases, bands, n_draws: int, seed, model_overridden: bool = False) -> dict:
    """{band: (n_draws, n_epochs) AB magnitudes} over the draws of the source (no loop over draws)."""
    distances, transients, node_of, _ranges = source_draws(event, transient, n_draws, seed, model_overridden)
    out = {b: np.full((n_draws, len(phases)), np.nan) for b in bands}
    for j, t in enumerate(transients):
        mine = np.flatnonzero(node_of == j)
        shift = 5.0 * np.log10(distances[mine] / transient.distance_mpc)[:, None]
        mags = t.mag_ab(np.asarray(phases, float), list(bands))
        for b in bands:
            out[b][mine] = np.asarray(mags[b])[None, :] + shift
    return out


