"""Text from files (ids, names, paths) in figure titles and legends, shown as written.

Matplotlib reads a pair of ``$`` as mathtext; a ``$`` from a file is escaped so that an id such as
``kn$1$`` is drawn as written instead of being typeset (or failing to parse).
"""
from __future__ import annotations


def plain(text) -> str:
    """``text`` with every ``$`` escaped for matplotlib (``\\$`` is drawn as a dollar sign)."""
    return str(text).replace("$", r"\$")


__all__ = ["plain"]
