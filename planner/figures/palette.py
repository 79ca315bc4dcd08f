"""The colours of every figure, defined once, chosen to stay apart for colour-vision deficiencies.

``SERIES``: the eight colours of Okabe & Ito (2008, "Color Universal Design", J*FLY), in an order
that puts the most distinct ones first.  Figures with more series than colours use small multiples
or direct labels, never a recycled colour.  ``tests/planner/test_palette.py`` checks the palette
under the simulations of Machado, Oliveira & Fernandes (2009, IEEE TVCG 15, 1291).
"""
from __future__ import annotations

SERIES = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")
TARGET_COLOR = "#000000"   # target lines (dashed)
MUTED = "#777777"          # secondary text and marks


def series(n: int) -> list[str]:
    """The first ``n`` palette colours; ValueError when more are asked for than there are."""
    if n > len(SERIES):
        raise ValueError(f"{n} series: at most {len(SERIES)} colours (use small multiples or direct labels)")
    return list(SERIES[:n])


__all__ = ["SERIES", "TARGET_COLOR", "MUTED", "series"]
