"""What a proposal quotes, per telescope, from a ``plan.json`` document.

Every number here is read from the document (the ``blocks``, ``nights``, ``event`` and ``settings``
members) and printed at a stated precision, so a test can parse the words and find each number in
plan.json again: the summary of what to ask for, the time request (nights, hours including overheads)
and a paste-ready technical-justification paragraph.
"""
from __future__ import annotations

from datetime import datetime

__all__ = ["telescope_requests", "justification_paragraph", "target_rows", "feature_name", "PERCENT_RANGE"]

PERCENT_RANGE = "16-84%"  # the ensemble percentiles quoted (kncast.planner.plan.ensemble.PERCENTILES)


def _seconds(a: str, b: str) -> float:
    """Seconds from ISO UTC ``a`` to ``b`` ('2027-03-14T02:17:00Z')."""
    fmt = "%Y-%m-%dT%H:%M:%SZ"
    return (datetime.strptime(b, fmt) - datetime.strptime(a, fmt)).total_seconds()


def _night(doc: dict, site: str, night: str) -> dict | None:
    return next((n for n in doc["nights"] if n["site"] == site and n["night"] == night), None)


def _outcome(doc: dict, block: dict) -> dict | None:
    n = _night(doc, block["site"], block["night"])
    return None if n is None else next((o for o in n["setups"] if o["setup"] == block["setup"]), None)


def feature_name(rec: dict) -> str:
    """'Sr II 7880 A' for a feature record (species and the observed trough it is measured at)."""
    lam = rec.get("measured_A") if rec.get("measured_A") is not None else rec.get("trough_A")
    return rec["species"] if lam is None else f"{rec['species']} {lam:.0f} A"


def telescope_requests(doc: dict) -> list[dict]:
    """One request per telescope, in the order of its first block: its blocks, nights and hours.

    ``on_source_h`` = sum of N x t; ``overhead_h`` = one overhead (settings.overhead_s) per block;
    ``total_h`` = the blocks' scheduled length (start to end), which is their sum."""
    by_tel: dict[str, list] = {}
    for b in sorted(doc.get("blocks") or [], key=lambda b: b["start_utc"]):
        by_tel.setdefault(b["telescope"], []).append(b)
    names = {s["id"]: s["name"] for s in doc["sites"]}
    out = []
    for tel, blocks in by_tel.items():
        site = blocks[0]["site"]
        out.append({
            "telescope": tel, "site": site, "site_name": names.get(site, site), "blocks": blocks,
            "setups": list(dict.fromkeys(b["setup"] for b in blocks)),
            "nights": list(dict.fromkeys(b["night"] for b in blocks)),
            "phases_d": [b["phase_d"] for b in blocks],
            "on_source_h": sum(b["n_exp"] * b["exp_s"] for b in blocks) / 3600.0,
            "overhead_h": len(blocks) * doc["settings"]["overhead_s"] / 3600.0,
            "total_h": sum(_seconds(b["start_utc"], b["end_utc"]) for b in blocks) / 3600.0,
            "features": _features(doc, blocks),
        })
    return out


def _features(doc: dict, blocks: list) -> list[dict]:
    """The diagnostic features the telescope's blocks detect: name at the first epoch, arms, the observed
    trough wavelengths over the epochs (A) and the largest fraction of a trough in telluric bands."""
    found: dict[str, dict] = {}
    for b in blocks:
        o = _outcome(doc, b)
        if o is None:
            continue
        recs = {f["id"]: f for f in o["features"]}
        for fid in b["detected"]:
            rec = recs.get(fid)
            if rec is None or rec.get("measured_A") is None:
                continue
            f = found.setdefault(fid, {"id": fid, "species": rec["species"], "arms": [], "lambda_A": [],
                                       "telluric": 0.0})
            f["lambda_A"].append(rec["measured_A"])
            if rec.get("arm") and rec["arm"] not in f["arms"]:
                f["arms"].append(rec["arm"])
            f["telluric"] = max(f["telluric"], rec.get("telluric_correctable_trough") or 0.0)
    return list(found.values())


def _exposure_words(b: dict) -> str:
    words = f"day {b['phase_d']:.2f}, {b['n_exp']} x {b['exp_s']:.0f} s"
    r = b.get("exposure_range_s")
    if r:
        words += f" ({PERCENT_RANGE} range of the total {r['p16']:.0f}-{r['p84']:.0f} s)"
    return words


def _lambda_words(f: dict) -> str:
    lo, hi = min(f["lambda_A"]), max(f["lambda_A"])
    where = f"{lo:.0f} A" if f"{lo:.0f}" == f"{hi:.0f}" else f"{hi:.0f}-{lo:.0f} A"
    return f"{f['species']} (trough at {where})"


def _distance_words(ev: dict) -> str:
    if ev.get("distance_mpc") is None:
        return f"at redshift {ev['redshift']:g}"
    err = f" +/- {ev['distance_err_mpc']:g}" if ev.get("distance_err_mpc") else ""
    return f"at {ev['distance_mpc']:g}{err} Mpc"


def justification_paragraph(doc: dict, req: dict) -> str:
    """A paste-ready technical justification for one telescope request (:func:`telescope_requests`)."""
    ev, st = doc["event"], doc["settings"]
    blocks = req["blocks"]
    b0 = blocks[0]
    n = len(blocks)
    temps = [t for t in (_temperature(doc, b) for b in blocks) if t is not None]
    words = [
        f"We request {n} epoch{'s' if n > 1 else ''} of spectroscopy of the kilonova candidate {b0['target']} "
        f"(RA {b0['ra_hms']}, Dec {b0['dec_dms']} ICRS; {b0['ra_deg']:.5f} deg, {b0['dec_deg']:+.5f} deg) "
        f"{_distance_words(ev)}, with {', '.join(req['setups'])} on {req['telescope']} at {req['site_name']}, "
        f"on the night{'s' if len(req['nights']) > 1 else ''} of {', '.join(req['nights'])} "
        f"(days {', '.join(f'{p:.2f}' for p in req['phases_d'])} after t0 = {ev['t0_utc']}).",
    ]
    if temps:
        words.append(f"The {doc['model']['name']} photosphere model has the source at {temps[0]:.0f} K at the "
                     f"first epoch and {temps[-1]:.0f} K at the last.")
    words.append(f"Exposure per epoch (number x length of the single exposures): "
                 f"{'; '.join(_exposure_words(b) for b in blocks)}. Each is the time for a {st['sigma']:g} sigma "
                 f"detection of the best-measured diagnostic absorption trough"
                 + (" (a classification spectrum where no trough is reachable)"
                    if any(b["kind"] != "detection" for b in blocks) else "")
                 + (f"; the {PERCENT_RANGE} range is over {st['draws']} draws of the distance and model inputs."
                    if any(b.get("exposure_range_s") for b in blocks) else "."))
    feats = req["features"]
    if feats:
        arms = list(dict.fromkeys(a for f in feats for a in f["arms"]))
        words.append(f"The {'setups place' if len(req['setups']) > 1 else 'setup places'} the troughs of {', '.join(_lambda_words(f) for f in feats)} inside the "
                     f"coverage of the {' and '.join(arms)} arm{'s' if len(arms) > 1 else ''} as the ejecta slow, "
                     f"clear of the opaque telluric bands (at most {100 * max(f['telluric'] for f in feats):.0f}% "
                     f"of a trough in a correctable band): each is detected at >= {st['sigma']:g} sigma in "
                     f"at least one requested epoch.")
    words.append(f"Including {st['overhead_s'] / 60:.0f} min of acquisition and readout per epoch, the request is "
                 f"{req['total_h']:.1f} h ({req['on_source_h']:.1f} h on source) over {len(req['nights'])} "
                 f"night{'s' if len(req['nights']) > 1 else ''}.")
    return " ".join(words)


def _temperature(doc: dict, b: dict):
    n = _night(doc, b["site"], b["night"])
    ep = n and n.get("epoch")
    return ep["photosphere"].get("temperature_K") if ep else None


def target_rows(doc: dict) -> list[dict]:
    """Target id, RA and Dec in sexagesimal (ICRS) and degrees: the event, or its candidates."""
    from kncast.planner.plan.blocks import sexagesimal

    ev = doc["event"]
    targets = ev.get("candidates") or [{"id": ev["id"], "ra_deg": ev["ra_deg"], "dec_deg": ev["dec_deg"]}]
    rows = []
    for t in targets:
        hms, dms = sexagesimal(t["ra_deg"], t["dec_deg"])
        rows.append({"id": t["id"], "ra_hms": str(hms), "dec_dms": str(dms), "ra_deg": f"{t['ra_deg']:.5f}",
                     "dec_deg": f"{t['dec_deg']:+.5f}"})
    return rows
