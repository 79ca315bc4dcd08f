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

    file_cfg = dict(getattr(event, "model", None) or {})
    if file_cfg:
        build_model(file_cfg, where=f"{event.source}: [model]")
    overrides = dict(overrides or {})
    name = model or overrides.pop("name", None) or file_cfg.get("name", "powerlaw")
    overrides.pop("name", None)
    base = {k: v for k, v in file_cfg.items() if k != "name"} if file_cfg.get("name", "powerlaw") == name else {}
    merged = {"name": name, **base, **overrides}
    return merged, ("model options" if overrides or model else f"{event.source}: [model]")


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


__all__ = ["transient_for_event", "model_config"]
