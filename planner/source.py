"""From an event (and model overrides) to a :class:`kncast.forecast.source.Transient`."""
from __future__ import annotations

from kncast.forecast.errors import ForecastInputError
from kncast.planner.errors import InputError, ParameterError


def model_config(event, model: str | None = None, overrides: dict | None = None) -> tuple[dict, str]:
    """The merged ``[model]`` dict and a label naming where its values come from.

    The event file's ``[model]`` table is validated on its own first (errors
    name the file).  ``model`` (or ``overrides["name"]``) picks the model; if
    it differs from the file's, the file's parameters are not used.  Other
    override keys replace the file's values (``component`` as a whole list).
    """
    from kncast.forecast.photosphere import build_model

    file_cfg = central_config(dict(getattr(event, "model", None) or {}), path=event.source)
    if file_cfg:
        build_model(file_cfg, where=f"{event.source}: [model]")
    overrides = dict(overrides or {})
    name = model or overrides.pop("name", None) or file_cfg.get("name", "powerlaw")
    overrides.pop("name", None)
    base = {k: v for k, v in file_cfg.items() if k != "name"} if file_cfg.get("name", "powerlaw") == name else {}
    merged = {"name": name, **base, **overrides}
    return merged, ("model options" if overrides or model else f"{event.source}: [model]")


def is_range(value) -> bool:
    """A ``[lo, hi]`` pair of positive numbers (a parameter range of the ``[model]`` table)."""
    return (isinstance(value, list) and len(value) == 2 and all(isinstance(v, (int, float))
                                                               and not isinstance(v, bool) for v in value))


def model_ranges(config: dict) -> dict:
    """{path: (lo, hi)} of the ranges in a ``[model]`` dict: top-level keys (``("mass_msun",)``) and keys of
    ``[[model.component]]`` tables (``("component", i, "mass_msun")``)."""
    out = {}
    for key, value in config.items():
        if is_range(value):
            out[(key,)] = (float(value[0]), float(value[1]))
    for i, comp in enumerate(config.get("component", []) or []):
        if isinstance(comp, dict):
            for key, value in comp.items():
                if is_range(value):
                    out[("component", i, key)] = (float(value[0]), float(value[1]))
    return out


def with_values(config: dict, values: dict) -> dict:
    """A copy of ``config`` with each range path set to its value in ``values``."""
    import copy

    out = copy.deepcopy(config)
    for path, value in values.items():
        target = out
        for step in path[:-1]:
            target = target[step]
        target[path[-1]] = value
    return out


def central_config(config: dict, path) -> dict:
    """The ``[model]`` dict with every range [lo, hi] (0 < lo <= hi) replaced by its geometric mean, the
    central model of an ensemble whose draws are uniform in log between lo and hi."""
    ranges = model_ranges(config)
    for path, (lo, hi) in ranges.items():
        if not 0.0 < lo <= hi:
            from kncast.forecast.errors import DataFileError

            name = ".".join(str(p) for p in path)
            raise DataFileError(path, f"model.{name}", f"range [{lo:g}, {hi:g}]",
                                "two numbers 0 < lo <= hi, drawn uniformly in log")
    return with_values(config, {p: (lo * hi) ** 0.5 for p, (lo, hi) in ranges.items()})


def transient_for_event(event, model: str | None = None, overrides: dict | None = None):
    """A Transient for ``event``: its [model] table merged with ``overrides`` (``[model]`` keys), its
    distance and dust.  A bad override raises a ParameterError naming its key."""
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient

    config, where = model_config(event, model, overrides)
    if where == "model options":
        given = set(overrides or {}) - {"name"}
        try:
            photosphere = build_model(config, where=where)
        except ForecastInputError as err:
            raise _named_error(str(err), given) from None
    else:
        photosphere = build_model(config, where=where)
    return Transient(photosphere, distance_mpc=event.distance_mpc, redshift=event.redshift,
                     ebv_mw=event.ebv_mw, ebv_host=getattr(event, "ebv_host", 0.0))


def _named_error(message: str, given: set) -> InputError:
    """A ParameterError naming the overridden [model] key the message is about (if one is)."""
    for key in sorted(given, key=len, reverse=True):
        if f" {key}" in message or f".{key}" in message:
            return ParameterError(key, message=message)
    return InputError(message)


__all__ = ["transient_for_event", "model_config", "model_ranges", "with_values", "central_config", "is_range"]
