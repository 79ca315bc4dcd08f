"""Command-line options for the photosphere model, shared by every command that forecasts.

``add_model_options(parser)`` adds ``--model`` and the model parameters;
``overrides_from_args(args)`` turns whatever the user gave into a dict
for :func:`kncast.planner.source.transient_for_event` (keys as in the event
file's ``[model]`` table; options not given are left out).
"""
from __future__ import annotations

import argparse

from kncast.planner.commands._common import finite_float

# option -> [model] key, for the powerlaw model
# defaults: the one-zone radioactive model family (Metzger et al. 2010, MNRAS 406, 2650) at 1 day for
# 0.04 Msun at 0.2 c, kappa 1 cm^2/g (kncast.forecast.photosphere.REFERENCE_COMPONENT; docs/methods.md)
POWERLAW_OPTIONS = (
    ("--t-ref-d", "t_ref_d", "reference age of the power laws, days (default 1: where the default's "
                             "one-zone model family is anchored)"),
    ("--temperature-ref-k", "temperature_ref_K", "temperature at the reference age, K (default 6300: the "
                                                 "one-zone radioactive model of Metzger et al. 2010 at 1 d)"),
    ("--temperature-index", "temperature_index", "alpha in T ~ t^-alpha (default 0.5)"),
    ("--temperature-floor-k", "temperature_floor_K", "temperature floor, K (default 2500)"),
    ("--velocity-ref-c", "velocity_ref_c", "photospheric velocity at the reference age, c (default 0.2: "
                                           "that model's ejecta velocity)"),
    ("--velocity-index", "velocity_index", "beta in v ~ t^-beta (default 0.3)"),
    ("--v-max-c", "v_max_c", "outer ejecta velocity, c (default 0.35)"),
    ("--mass-msun", "mass_msun", "total ejecta mass, Msun (default 0.04)"),
)
COMPONENT_FLOOR_DEFAULT_K = 2500.0


def add_model_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("photosphere model (overrides the event file's [model] table)")
    g.add_argument("--model", choices=("powerlaw", "heating"),
                   help="powerlaw: empirical cooling blackbody; heating: radioactive ejecta components "
                        "(default: the event file's [model] name, else powerlaw)")
    for option, key, text in POWERLAW_OPTIONS:
        g.add_argument(option, dest=f"model_{key}", type=finite_float(option), metavar="X",
                       help=f"powerlaw: {text}")
    g.add_argument("--component", dest="model_component", action="append", type=parse_component,
                   metavar="NAME:MASS,V,KAPPA[,FLOOR]",
                   help="heating: one ejecta component (repeatable; replaces the file's components): "
                        "mass in Msun, velocity in c, grey opacity in cm^2/g, temperature floor in K "
                        f"(default {COMPONENT_FLOOR_DEFAULT_K:g}), e.g. fast:0.015,0.3,1,3000")


def parse_component(text: str) -> dict:
    """argparse ``type=`` for ``NAME:MASS,V,KAPPA[,FLOOR]``; ranges are checked by the model."""
    name, sep, rest = text.partition(":")
    values = rest.split(",") if sep else []
    if not sep or not name.strip() or len(values) not in (3, 4):
        raise argparse.ArgumentTypeError(f"{text!r}: expected NAME:MASS_MSUN,VELOCITY_C,OPACITY_CM2_G[,FLOOR_K], "
                                         f"e.g. slow:0.06,0.12,8,2500")
    try:
        numbers = [float(v) for v in values]
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r}: the values after ':' must be numbers") from None
    if len(numbers) == 3:
        numbers.append(COMPONENT_FLOOR_DEFAULT_K)
    keys = ("mass_msun", "velocity_c", "opacity_cm2_g", "temperature_floor_K")
    return {"name": name.strip(), **dict(zip(keys, numbers))}


def overrides_from_args(args) -> dict:
    """The model options the user gave, as ``[model]`` keys (``name`` for --model)."""
    out: dict = {}
    if getattr(args, "model", None):
        out["name"] = args.model
    for _option, key, _text in POWERLAW_OPTIONS:
        value = getattr(args, f"model_{key}", None)
        if value is not None:
            out[key] = value
    comps = getattr(args, "model_component", None)
    if comps:
        out["component"] = list(comps)
    return out


# [model] key -> the option's dest, so that a ParameterError naming a key shows its option
PARAMETER_DESTS = {key: f"model_{key}" for _option, key, _text in POWERLAW_OPTIONS} | {
    "name": "model", "component": "model_component"}


__all__ = ["add_model_options", "overrides_from_args", "parse_component", "PARAMETER_DESTS"]
