"""The references of a plan: the published sources of the models that run used, collected by import.

Every model module declares ``REFERENCES``, a tuple of
:class:`kncast.forecast.references.Citation`.  :data:`MODELS` maps each model kncast can
use to its label in the report and to the modules that implement it -- an explicit list,
nothing is searched for in docstrings.  :func:`models_used` says which models a plan used
(the photosphere model of its Transient, dust only with a non-zero E(B-V), the line and
exposure models only when some night had a window, a sky map only when one was read);
:func:`references` turns those into the ``references`` rows of plan.json,
``{"model", "module", "reference"}``, each work once with its fullest record.

Parts whose method has no published source (the power-law cooling, blackbody, coverage,
feature ranking, exposure bookkeeping, nights and candidate ranking: common practice) are
not listed or list no module.
"""
from __future__ import annotations

from kncast.forecast import (airmass, airvac, ccd, distance, doppler, extinction, extinction_atm, heating, linelist,
                             lte, photometry, skybright, slit, tellurics)
from kncast.forecast.references import unique
from kncast.planner.events import skymap
from kncast.planner.visibility import core as visibility
from kncast.planner.visibility import sky, skycoverage

LINE_LIST_DATA = "forecast/data/lines.ecsv"  # the "module" of the line list's row sources

# model -> (label in the report, modules whose REFERENCES it cites)
MODELS = {
    "sky geometry": ("Sky geometry (Sun, Moon, target)", (sky,)),
    "airmass": ("Airmass", (airmass,)),
    "windows": ("Nights, twilight and observing windows", (visibility,)),
    "powerlaw": ("Photosphere (power-law cooling)", ()),  # empirical cooling law: common practice
    "heating": ("Photosphere (radioactive heating)", (heating,)),
    "distance": ("Distance and redshift", (distance,)),
    "dust": ("Dust extinction", (extinction,)),
    "magnitudes": ("Synthetic magnitudes", (photometry,)),
    "air/vacuum": ("Air/vacuum wavelengths", (airvac,)),
    "line list": ("Line list", (linelist,)),  # plus the works behind its rows (LineList.references)
    "doppler": ("Feature windows (Doppler)", (doppler,)),
    "lte": ("LTE ionization, excitation and Sobolev optical depth", (lte,)),
    "tellurics": ("Telluric bands", (tellurics,)),
    "atmospheric extinction": ("Atmospheric extinction", (extinction_atm,)),
    "sky background": ("Sky background and moonlight", (skybright,)),
    "slit": ("Slit losses and seeing", (slit,)),
    "ccd": ("Detector noise (CCD equation)", (ccd,)),
    "sky map": ("Sky map (HEALPix) and its coverage", (skymap, skycoverage)),
}
# models behind the feature forecast and the exposure times
SPECTRUM_MODELS = ("air/vacuum", "line list", "doppler", "lte", "tellurics", "atmospheric extinction",
                   "sky background", "slit", "ccd")


def models_used(plan, skymap_used: bool = False) -> list[str]:
    """Keys of :data:`MODELS` that ``plan`` (a :class:`kncast.planner.plan.core.Plan`) used, in report order."""
    tr = plan.transient
    used = ["sky geometry", "airmass", "windows", tr.photosphere.name, "distance"]
    if tr.ebv_mw > 0 or tr.ebv_host > 0:
        used.append("dust")
    used.append("magnitudes")
    if plan.tellurics is not None:  # set when the feature forecast ran (some night had a window)
        used += SPECTRUM_MODELS
    if skymap_used:
        used.append("sky map")
    return used


def references(models, lines=None) -> list[dict]:
    """plan.json ``references`` rows for ``models`` (keys of :data:`MODELS`); each work once.

    ``lines`` (a :class:`kncast.forecast.linelist.LineList`) adds the works behind its rows
    when "line list" is among the models.  A work cited by several models is listed under the
    first, with its fullest record.
    """
    rows = []
    for key in models:
        label, modules = MODELS[key]
        rows += [(label, mod.__name__, c) for mod in modules for c in mod.REFERENCES]
        if key == "line list" and lines is not None:
            rows += [(label, LINE_LIST_DATA, c) for c in lines.references()]
    fullest = {c.work: c for c in unique(c for _, _, c in rows)}
    out, seen = [], set()
    for label, module, c in rows:
        if c.work not in seen:
            seen.add(c.work)
            out.append({"model": label, "module": module, "reference": fullest[c.work].text})
    return out


def plan_references(plan, skymap_used: bool = False) -> list[dict]:
    """The ``references`` rows of ``plan``: the models it used (the bundled line list's sources included)."""
    used = models_used(plan, skymap_used)
    return references(used, linelist.LineList.load() if "line list" in used else None)


__all__ = ["MODELS", "SPECTRUM_MODELS", "models_used", "references", "plan_references"]
