"""The planned blocks in forms that travel: plain text for pasting and an iCalendar file (RFC 5545).

Both are made from the ``blocks`` records of ``plan.json`` (:func:`kncast.planner.plan.blocks.block_records`),
so they say exactly what the plan says.
"""
from __future__ import annotations

__all__ = ["blocks_text", "blocks_ics", "BLOCKS_TEXT_HEADER"]

BLOCKS_TEXT_HEADER = ("# kncast observing blocks: one line per block; UTC; RA (h:m:s) Dec (d:m:s) ICRS; "
                      "N x exposure (s); setup; the feature the block is for")


def _hm(iso: str) -> str:
    return iso[:16].replace("T", " ")


def blocks_text(doc: dict) -> str:
    """One line per block: target, RA, Dec, UTC start and end, N x t, telescope setup, what it is for."""
    lines = [BLOCKS_TEXT_HEADER, f"# event {doc['event']['id']}; model estimates: the observatory's own "
                                 "exposure-time tools and operating rules take precedence"]
    for b in doc.get("blocks", []):
        detection = b["kind"] == "detection" and b.get("feature") and b.get("significance") is not None
        what = f"{b['feature']} {b['significance']:.1f} sigma" if detection else b["kind"]
        lines.append(f"{b['target']:<16s} {b['ra_hms']:>12s} {b['dec_dms']:>12s}  {_hm(b['start_utc'])} - "
                     f"{b['end_utc'][11:16]}  {b['n_exp']} x {b['exp_s']:.0f} s  {b['setup']}  ({what})")
    return "\n".join(lines) + "\n"


def blocks_ics(doc: dict) -> bytes:
    """An iCalendar (RFC 5545) calendar with one event per block, times in UTC."""
    import datetime as dt

    from icalendar import Calendar, Event

    cal = Calendar()
    cal.add("prodid", "-//kncast//observing blocks//EN")
    cal.add("version", "2.0")
    ev = doc["event"]
    stamp = dt.datetime.now(dt.timezone.utc).replace(microsecond=0)
    for k, b in enumerate(doc.get("blocks", [])):
        e = Event()
        e.add("uid", f"{ev['id']}-{b['telescope']}-{b['start_utc']}-{k}@kncast")
        e.add("dtstamp", stamp)
        e.add("dtstart", _utc(b["start_utc"]))
        e.add("dtend", _utc(b["end_utc"]))
        e.add("summary", f"{b['target']} {b['telescope']} {b['setup'].split('/')[-1]} {b['n_exp']}x{b['exp_s']:.0f}s")
        e.add("location", b["site"])
        e.add("description", f"{b['setup']}; RA {b['ra_hms']} Dec {b['dec_dms']}; airmass "
                             f"{' / '.join(_x(v) for v in b['airmass'])} (start / middle / end); "
                             f"{b['kind']}" + (f" for {b['feature']}" if b["kind"] == "detection" else "")
                             + ". Model estimate: the observatory's own tools and rules take precedence.")
        cal.add_component(e)
    return cal.to_ical()


def _utc(iso: str):
    import datetime as dt

    return dt.datetime.strptime(iso, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=dt.timezone.utc)


def _x(v) -> str:
    return "-" if v is None else f"{v:.2f}"
