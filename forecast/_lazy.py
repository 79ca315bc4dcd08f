"""Lazy public names for a package's ``__init__`` (PEP 562): a name's module is imported on first use,
so importing the package itself stays cheap (the command line starts without loading the physics)."""
from __future__ import annotations

import importlib


def lazy_exports(package: str, where: dict[str, str]):
    """(``__getattr__``, ``__dir__``) for ``package`` exporting each name of ``where`` (name -> module)."""

    def __getattr__(name: str):
        module = where.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        importlib.import_module(package).__dict__[name] = value  # later look-ups skip __getattr__
        return value

    def __dir__():
        return sorted(set(importlib.import_module(package).__dict__) | set(where))

    return __getattr__, __dir__
