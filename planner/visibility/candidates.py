"""Several candidate positions: which to observe first, per site and night.

An event file may list ``[[candidate]]`` positions (see docs/formats.md, section "Candidates").  For
every site and night, :func:`rank_candidates` orders them by observable hours
in that night (sum of the window lengths from
:func:`kncast.planner.visibility.core.compute_visibility`, all its rules applied, compared
to 0.1 h), then by the best airmass reached, then by file order.  Candidates with no window
come last and keep the reason the visibility code gives.
"""
from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field

from astropy.time import Time


@dataclass
class RankedCandidate:
    """One candidate's standing in one site/night."""

    rank: int  # 1 = observe first
    candidate: object  # kncast.planner.events.eventfile.Candidate
    index: int  # position in event.targets()
    hours: float
    best_airmass: float | None
    best_mjd: float | None  # UTC; ``best_time`` is its astropy Time
    moon_sep_deg: float | None  # at best_time
    windows: list = field(default_factory=list)  # kncast.planner.visibility.core.Window
    note: str = ""

    @property
    def observable(self) -> bool:
        return self.hours > 0

    @property
    def best_time(self) -> Time | None:
        """The time of the best airmass (that of the best window's ``best_time``), or None."""
        return None if self.best_mjd is None else Time(self.best_mjd, format="mjd", scale="utc")

    def summary(self, best_utc: str | None = None) -> dict:
        """JSON dict; ``best_utc``: ``best_time`` already formatted (:func:`kncast.planner.output.iso_utc_mjds`)."""
        if best_utc is None and self.best_mjd is not None:
            from kncast.planner.output import iso_utc_mjd

            best_utc = iso_utc_mjd(self.best_mjd)
        return {"rank": self.rank, "id": self.candidate.id, "ra_deg": self.candidate.ra_deg,
                "dec_deg": self.candidate.dec_deg, "hours": round(self.hours, 4),
                "best_airmass": None if self.best_airmass is None else round(self.best_airmass, 4),
                "best_utc": best_utc,
                "moon_sep_deg": None if self.moon_sep_deg is None else round(self.moon_sep_deg, 3),
                "windows": len(self.windows), "note": self.note}


@dataclass
class CandidateNight:
    """The candidates ranked for one site and one local night."""

    site: object  # kncast.planner.sites.Site
    night: dt.date
    dusk: Time | None
    dawn: Time | None
    ranking: list[RankedCandidate]

    @property
    def first(self) -> RankedCandidate | None:
        """The candidate to observe first, or None when none is observable."""
        return self.ranking[0] if self.ranking and self.ranking[0].observable else None

    def summary(self) -> dict:
        from kncast.planner.output import iso_utc, iso_utc_mjds

        best = iso_utc_mjds([r.best_mjd for r in self.ranking])  # every candidate's in one pass
        return {"site": self.site.id, "night": self.night.isoformat(), "dusk_utc": iso_utc(self.dusk),
                "dawn_utc": iso_utc(self.dawn), "candidates": [r.summary(b) for r, b in zip(self.ranking, best)]}


def rank_candidates(event, sites, nights: int = 3, **visibility_options) -> list[CandidateNight]:
    """Per site and night (site by site, night by night), ``event.targets()`` ranked for observing.

    ``visibility_options`` go to :func:`kncast.planner.visibility.core.compute_visibility`
    (``twilight``, ``min_altitude_deg``, ``max_airmass``, ``min_moon_sep_deg``).
    """
    from kncast.planner.visibility.core import compute_visibility_many

    visibility_options.pop("target_index", None)
    ephemeris = visibility_options.pop("ephemeris", None)  # e.g. the plan's own, built for every target
    targets = event.targets()
    # every candidate in one vectorized pass (targets x sites x times), one ephemeris (all targets)
    per_target = [r.nights for r in compute_visibility_many(event, sites, nights=nights, ephemeris=ephemeris,
                                                            **visibility_options)]
    out = []
    for k, base in enumerate(per_target[0]):  # the same site/night order for every target
        entries = [_entry(targets[i], i, per_target[i][k]) for i in range(len(targets))]
        entries.sort(key=_order)
        for r, e in enumerate(entries, start=1):
            e.rank = r
        out.append(CandidateNight(site=base.site, night=base.night, dusk=base.dusk, dawn=base.dawn, ranking=entries))
    return out


def _entry(candidate, index: int, record) -> RankedCandidate:
    wins = list(record.windows)
    if not wins:
        return RankedCandidate(0, candidate, index, 0.0, None, None, None, [], record.note)
    best = min(wins, key=lambda w: w.best_airmass)
    return RankedCandidate(0, candidate, index, float(sum(w.hours for w in wins)), float(best.best_airmass),
                           best.best_mjd, float(best.moon_sep_deg), wins, record.note)


def _order(e: RankedCandidate):
    airmass = e.best_airmass if e.best_airmass is not None and math.isfinite(e.best_airmass) else math.inf
    return (-round(e.hours, 1), airmass, e.index)  # hours within 0.05 h tie: airmass decides
