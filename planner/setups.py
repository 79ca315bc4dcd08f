"""Spectrograph setups by id: ``SITE/TELESCOPE/INSTRUMENT[:SETUP]``.

The default setup of an instrument (every arm at its full range) has the
id without ``:SETUP``; ``SITE/TELESCOPE/INSTRUMENT:default`` means the same.
Ids are case-insensitive.
"""
from __future__ import annotations

from dataclasses import dataclass

from kncast.forecast.instruments import DEFAULT_SETUP
from kncast.planner.errors import UnknownNameError

__all__ = ["SetupRef", "all_setups", "resolve_setup", "setup_id"]


@dataclass(frozen=True, eq=False)
class SetupRef:
    """One setup with everything around it: the Site, Telescope, Spectrograph and Setup objects."""

    id: str
    site: object        # kncast.planner.sites.Site
    telescope: object   # kncast.forecast.instruments.Telescope
    instrument: object  # kncast.forecast.instruments.Spectrograph
    setup: object       # kncast.forecast.instruments.Setup


def setup_id(site_id: str, telescope_id: str, instrument_id: str, setup: str = DEFAULT_SETUP) -> str:
    """The id string ``SITE/TELESCOPE/INSTRUMENT[:SETUP]`` (no suffix for the default setup)."""
    base = f"{site_id}/{telescope_id}/{instrument_id}"
    return base if setup == DEFAULT_SETUP else f"{base}:{setup}"


def all_setups(registry) -> list[SetupRef]:
    """Every setup of every instrument on every site of ``registry``, in file order."""
    out = []
    for site in registry:
        for tel in site.telescopes:
            for inst in tel.instruments:
                for s in inst.setups:
                    out.append(SetupRef(setup_id(site.id, tel.id, inst.id, s.id), site, tel, inst, s))
    return out


def resolve_setup(text: str, registry) -> SetupRef:
    """The SetupRef for an id; UnknownNameError (suggesting close ids) if there is none."""
    refs = all_setups(registry)
    key = str(text).strip().lower()
    if key.endswith(f":{DEFAULT_SETUP}"):
        key = key[: -len(DEFAULT_SETUP) - 1]
    for ref in refs:
        if ref.id.lower() == key:
            return ref
    raise UnknownNameError("setup", str(text), [r.id for r in refs])
