"""How sure each forecast is: draws of the distance and of the model parameters given as ranges.

Draws.  ``n`` realisations of the source, everything else (windows, Moon, airmass, setups) fixed:

* distance: normal with the event's ``distance_err_mpc`` (a VOEvent's ``distance_err`` or a sky map's
  distance sigma fill that field), truncated at D > 0 (scipy.stats.truncnorm); the source flux scales as
  (D / D_draw)^2 at the event's redshift (the redshift change over the distance spread, dz < 0.01 at
  100 Mpc, moves features by less than 1% and is neglected), so magnitudes move by exactly
  5 log10(D_draw / D);
* model parameters given as ranges ``[lo, hi]`` in the event's ``[model]`` table (top-level keys or keys
  of a ``[[model.component]]``): uniform in log between lo and hi, taken from at most ``MAX_NODES``
  Latin-hypercube nodes (each node's photosphere and feature forecast are evaluated once; draw k uses
  node k mod n_nodes with its own distance draw).

Every draw is evaluated in one broadcast call per node and site
(:func:`kncast.planner.measure.measure` with ``flux_scale``); no loop over draws.  Summaries are the
16th, 50th and 84th percentiles (``p16``, ``p50``, ``p84``) and the fraction of draws in which a night is
useful (a diagnostic feature at the target significance with some setup of the site).
"""
from __future__ import annotations

import numpy as np

DEFAULT_DRAWS = 200   # realisations of the source
DEFAULT_SEED = 1      # reproducible draws unless a seed is given
MAX_NODES = 16
PERCENTILES = (16.0, 50.0, 84.0)

__all__ = ["run_ensemble", "magnitude_draws", "source_draws", "percentiles", "draw_distances", "latin_nodes",
           "DEFAULT_DRAWS", "DEFAULT_SEED", "MAX_NODES"]


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
    from scipy.stats import truncnorm

    a = (1e-3 - distance_mpc) / sigma_mpc
    return truncnorm.rvs(a, np.inf, loc=distance_mpc, scale=sigma_mpc, size=n, random_state=rng)


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


def run_ensemble(plan, epochs: list, by_site: dict, n_draws: int, seed: int | None, bands, feature_forecast) -> dict:
    """Draws of the source for every planned epoch; returns {"settings", "nights": {id(NightPlan): summary}}.

    ``bands``: the magnitude bands quoted per epoch; ``feature_forecast(plan, epochs, refs, transient)``: the
    plan's feature forecast (passed in so that this module does not import the plan's core)."""
    from kncast.planner.measure import diagnostic_mask, measure
    from kncast.planner.observation import batched_conditions, forecast_airmass
    ev, st = plan.event, plan.settings
    d0 = plan.transient.distance_mpc
    sigma_d = getattr(ev, "distance_err_mpc", None)
    distances, transients, node_of, ranges = source_draws(ev, plan.transient, n_draws, seed,
                                                          bool(st.get("model_overridden")))
    n_nodes = len(transients)
    refs = [r for site_refs in by_site.values() for r in site_refs]
    column = {r.id: k for k, r in enumerate(refs)}
    site_of = np.array([p.site.id for p in epochs])
    phases = np.array([p.phase_d for p in epochs])
    useful = np.zeros((n_draws, len(epochs)), dtype=bool)
    chosen_sig = np.full((n_draws, len(epochs)), np.nan)
    chosen_time = np.full((n_draws, len(epochs)), np.nan)
    mags = {b: np.full((n_draws, len(epochs)), np.nan) for b in bands}
    for j, transient in enumerate(transients):  # at most MAX_NODES parameter sets; every draw is an array axis
        mine = np.flatnonzero(node_of == j)
        if not mine.size:
            continue
        shift = 5.0 * np.log10(distances[mine] / d0)[:, None]
        node_mags = transient.mag_ab(phases, list(bands))
        for b in bands:
            mags[b][mine] = np.asarray(node_mags[b])[None, :] + shift
        fc = feature_forecast(plan, epochs, refs, transient)
        ids = [f.id for f in fc.features]
        for site_id, site_refs in by_site.items():
            rows = np.flatnonzero(site_of == site_id)
            if not (site_refs and rows.size):
                continue
            windows = [epochs[i].window for i in rows]
            atm = plan.atmospheres[site_id]
            seconds = np.array([max(epochs[i].hours_available, 0.0) * 3600.0 for i in rows])
            m = measure(transient, fc, rows, [column[r.id] for r in site_refs], refs, batched_conditions(windows, atm),
                        np.array([forecast_airmass(w) for w in windows]), atm.pwv_mm, np.maximum(seconds, 1.0),
                        plan.tellurics, atm, sigma=st["sigma"], bin_kms=st["bin_kms"],
                        telluric_threshold=st["telluric_threshold"], flux_scale=(d0 / distances[mine]) ** 2)
            targets = diagnostic_mask(m, st.get("features"), ids, st["min_depth"])         # (R, F)
            hit = (m.draw_significance >= st["sigma"]) & targets[None, :, :, None]          # (n, R, F, C)
            ok = hit.any(axis=(2, 3)) & (seconds > 0)[None, :]
            useful[np.ix_(mine, rows)] = ok
            for k, i in enumerate(rows):
                o = epochs[i].choice
                if o is None or o.feature is None:
                    continue
                c = [r.id for r in site_refs].index(o.setup)
                f = ids.index(o.feature) if o.feature in ids else None
                if f is not None:
                    chosen_sig[mine, i] = m.draw_significance[:, k, f, c]
                    chosen_time[mine, i] = m.draw_time_to_sigma_s[:, k, f, c]
    nights = {}
    for i, p in enumerate(epochs):
        t = chosen_time[:, i]
        nights[id(p)] = {
            "draws": int(n_draws), "useful_fraction": float(useful[:, i].mean()),
            "significance": percentiles(chosen_sig[:, i]), "time_to_sigma_s": percentiles(t),
            "unreachable_fraction": float(np.mean(~np.isfinite(t))) if p.choice is not None else None,
            "mag_ab": {b: percentiles(mags[b][:, i]) for b in bands}}
    return {"settings": {"draws": int(n_draws), "seed": seed, "distance_err_mpc": sigma_d,
                         "model_ranges": {".".join(str(x) for x in path): list(v) for path, v in ranges.items()},
                         "nodes": n_nodes, "percentiles": list(PERCENTILES)},
            "distance_mpc": percentiles(distances), "nights": nights}
