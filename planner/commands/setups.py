"""``kncast setups``: every spectrograph setup id with its ranges, resolving power and aperture."""
from __future__ import annotations

from kncast.planner.commands._common import add_output_options, add_site_options, console, emit_json, split_list

HELP = "list spectrograph setups (SITE/TELESCOPE/INSTRUMENT[:SETUP]) with ranges and resolving power"


def add_arguments(p) -> None:
    add_site_options(p)
    add_output_options(p, plot=False)


def run(args) -> int:
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    registry = SiteRegistry.load(args.sites_dir)
    wanted = {s.id for s in registry.select(split_list(args.sites))}
    refs = [r for r in all_setups(registry) if r.site.id in wanted]
    doc = setups_document(refs)
    if args.json:
        emit_json(args.json, doc)
    if args.json != "-":
        print_table(refs)
    return 0


def setup_summary(ref) -> dict:
    """JSON record of one setup (schema in docs/json.md, section "setups")."""
    return {
        "setup": ref.id,
        "site": ref.site.id,
        "telescope": ref.telescope.id,
        "instrument": ref.instrument.id,
        "kind": ref.instrument.kind,
        "description": ref.setup.description,
        "aperture_m": ref.telescope.aperture_m,
        "central_obstruction": ref.telescope.central_obstruction,
        "collecting_area_cm2": ref.telescope.collecting_area_cm2,
        "slit_width_arcsec": ref.instrument.slit_width_arcsec,
        "arms": [
            {"name": a.name, "min_A": a.min_A, "max_A": a.max_A, "resolving_power": a.resolving_power,
             "dispersion_A_per_pix": a.dispersion_A_per_pix, "gaps_A": [list(g) for g in a.gaps_A]}
            for a in ref.setup.arms
        ],
    }


def setups_document(refs) -> dict:
    from kncast.planner.output import document

    return document("setups", setups=[setup_summary(r) for r in refs],
                    note="wavelengths are vacuum Angstrom; example instruments carry invented parameters")


def print_table(refs) -> None:
    from rich.table import Table

    table = Table(title=f"{len(refs)} spectrograph setups (vacuum A)")
    for name, kw in [("setup", {}), ("aperture", {"justify": "right"}), ("arm", {}),
                     ("range (A)", {"justify": "right"}), ("R", {"justify": "right"}),
                     ("A/pix", {"justify": "right"}), ("gaps (A)", {}), ("description", {})]:
        table.add_column(name, **kw)
    for ref in refs:
        for k, arm in enumerate(ref.setup.arms):
            first = k == 0
            table.add_row(ref.id if first else "", f"{ref.telescope.aperture_m:g} m" if first else "", arm.name,
                          f"{arm.min_A:.0f}-{arm.max_A:.0f}", f"{arm.resolving_power:.0f}",
                          f"{arm.dispersion_A_per_pix:g}",
                          ", ".join(f"{g0:.0f}-{g1:.0f}" for g0, g1 in arm.gaps_A) or "-",
                          ref.setup.description if first else "")
    console().print(table)
