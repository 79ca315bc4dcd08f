"""What a re-plan changed: nights gained or lost and exposure changes against the previous plan.json."""
from __future__ import annotations

__all__ = ["plan_changes"]


def _useful(doc: dict) -> dict:
    return {(n["site"], n["night"]): n["choice"]["setup"] for n in doc.get("nights", []) if n.get("choice")}


def _blocks(doc: dict) -> dict:
    return {(b["site"], b["night"], b["telescope"]): b for b in doc.get("blocks", [])}


def plan_changes(previous: dict, current: dict) -> dict:
    """Differences between two plan documents of the same event, in words and as lists.

    ``gained``/``lost``: site-nights useful now and not before (or the reverse); ``setup_changed``: useful in
    both with another setup; ``exposure_changed``: blocks at the same telescope and night whose total
    exposure changed by more than 1%.
    """
    before, now = _useful(previous), _useful(current)
    gained = sorted(set(now) - set(before))
    lost = sorted(set(before) - set(now))
    setup_changed = sorted(k for k in set(now) & set(before) if now[k] != before[k])
    b_old, b_new = _blocks(previous), _blocks(current)
    exposure = []
    for key in sorted(set(b_old) & set(b_new)):
        t_old = b_old[key]["n_exp"] * b_old[key]["exp_s"]
        t_new = b_new[key]["n_exp"] * b_new[key]["exp_s"]
        if abs(t_new - t_old) > 0.01 * max(t_old, 1.0):
            exposure.append({"site": key[0], "night": key[1], "telescope": key[2],
                             "before": f"{b_old[key]['n_exp']} x {b_old[key]['exp_s']:.0f} s",
                             "now": f"{b_new[key]['n_exp']} x {b_new[key]['exp_s']:.0f} s"})
    words = (f"{len(gained)} site-night(s) gained, {len(lost)} lost, {len(setup_changed)} with another setup, "
             f"{len(exposure)} exposure(s) changed since the previous plan")
    return {"summary": words,
            "gained": [{"site": s, "night": n} for s, n in gained],
            "lost": [{"site": s, "night": n} for s, n in lost],
            "setup_changed": [{"site": s, "night": n, "before": before[(s, n)], "now": now[(s, n)]}
                              for s, n in setup_changed],
            "exposure_changed": exposure}
