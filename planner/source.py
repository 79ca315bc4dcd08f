"""From an event (and command-line model options) to a :class:`kncast.forecast.source.Transient`."""
from __future__ import annotations

from kncast.forecast.errors import ForecastInputError
from kncast.planner.errors import InputError


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
    """A Transient for ``event``: its [model] table merged with CLI overrides, its distance and dust."""
    from kncast.forecast.photosphere import build_model
    from kncast.forecast.source import Transient

    config, where = model_config(event, model, overrides)
    if where == "model options":
        given = set(overrides or {}) - {"name"}
        try:
            photosphere = build_model(config, where=where)
        except ForecastInputError as err:
            raise InputError(_name_options(str(err), given)) from None
    else:
        photosphere = build_model(config, where=where)
    return Transient(photosphere, distance_mpc=event.distance_mpc, redshift=event.redshift,
                     ebv_mw=event.ebv_mw, ebv_host=getattr(event, "ebv_host", 0.0))


def _name_options(message: str, given: set) -> str:
    """Mention the command-line option beside a [model] key in an error message."""
    from kncast.planner.commands._model_options import option_for_key

    for key in sorted(given, key=len, reverse=True):
        if f" {key}" in message or f".{key}" in message:
            return f"{message} (option {option_for_key(key)})"
    return message


__all__ = ["transient_for_event", "model_config"]
