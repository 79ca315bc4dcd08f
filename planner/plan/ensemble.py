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

from kncast.planner.draws import DEFAULT_DRAWS, DEFAULT_SEED, MAX_NODES, PERCENTILES, percentiles, source_draws

__all__ = ["run_ensemble", "DEFAULT_DRAWS", "DEFAULT_SEED", "MAX_NODES", "PERCENTILES", "percentiles"]


def run_ensemble(plan, epochs: list, by_site: dict, n_draws: int, seed: int | None, bands, feature_forecast) -> dict:
    """Draws of the source for every planned epoch; returns {"settings", "nights": {id(NightPlan): summary}}.

    ``bands``: the magnitude bands quoted per epoch; ``feature_forecast(plan, epochs, refs, transient)``: the
    plan's feature forecast (passed in so that this module does not import the plan's core)."""
    from kncast.planner.measure import diagnostic_mask, measure_sites
    ev, st = plan.event, plan.settings
    d0 = plan.transient.distance_mpc
    sigma_d = getattr(ev, "distance_err_mpc", None)
    distances, transients, node_of, ranges = source_draws(ev, plan.transient, n_draws, seed,
                                                          bool(st.get("model_overridden")))
    n_nodes = len(transients)
    refs = [r for site_refs in by_site.values() for r in site_refs]
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
        # the central model's forecast is the plan's own; other nodes get theirs
        fc = plan.forecast if transient is plan.transient else feature_forecast(plan, epochs, refs, transient)
        ids = [f.id for f in fc.features]
        for _site, site_refs, rows, seconds, m in measure_sites(plan, fc, epochs, by_site, refs, transient,
                                                                 flux_scale=(d0 / distances[mine]) ** 2):
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
            del m, hit  # before the next site is measured
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
