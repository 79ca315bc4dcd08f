"""Default forecast epochs: where the model photosphere is in the line list's temperature range.

The bundled line list was chosen for photospheres between 6000 K and 2500 K
(``kncast.forecast.defaults.LINE_RULE_TEMPERATURE_K``; forecast/data/make_lines.py).  The
useful range of a line forecast is therefore the time the event's own photosphere spends
there: from the first phase at which its temperature has fallen to the upper bound to the
first phase at which it has reached the lower bound (or, for a model that stays warmer, e.g.
one whose floor lies above it, the first phase within 1 % of its coolest temperature within
``SCAN_D``).  :func:`useful_phases` spaces ``n`` epochs logarithmically over that range (the
photosphere cools roughly as a power of time, so equal steps in log t are roughly equal steps
in temperature), rounded to 0.1 d (the first up, the last down, so both stay inside the range).
Phases are observer-frame days since t0; the model is evaluated with the transient's redshift.
"""
from __future__ import annotations

import numpy as np

from kncast.forecast.defaults import DEFAULT_LINE_EPOCHS, LINE_RULE_TEMPERATURE_K

__all__ = ["SCAN_D", "useful_range", "useful_phases"]

SCAN_D = (0.1, 30.0)       # observer-frame days searched for the temperature range
COOLEST_TOLERANCE = 0.01   # a model that stays warmer than the range ends within 1 % of its coolest temperature
_SCAN_POINTS = 600
_STEP_D = 0.1              # rounding of the default epochs


def useful_range(transient, temperature_K=LINE_RULE_TEMPERATURE_K) -> tuple[float, float]:
    """(first, last) observer-frame phase, d, of the photosphere's passage through ``temperature_K`` (low, high)."""
    low, high = (float(t) for t in temperature_K)
    phases = np.geomspace(*SCAN_D, _SCAN_POINTS)
    temp = np.asarray(transient.state(phases).temperature_K, dtype=float)
    start = phases[np.argmax(temp <= high)] if np.any(temp <= high) else phases[-1]
    coolest = float(temp.min())
    bound = low if coolest <= low else coolest * (1.0 + COOLEST_TOLERANCE)
    end = phases[np.argmax((temp <= bound) & (phases >= start))] if np.any(temp <= bound) else phases[-1]
    return float(start), float(max(end, start))


def useful_phases(transient, n: int = DEFAULT_LINE_EPOCHS, temperature_K=LINE_RULE_TEMPERATURE_K) -> list[float]:
    """``n`` epochs (observer-frame d) log-spaced over :func:`useful_range`, rounded to 0.1 d, distinct."""
    start, end = useful_range(transient, temperature_K)
    raw = np.geomspace(start, end, int(n)) if end > start else np.array([start])
    rounded = np.round(raw / _STEP_D)
    rounded[0], rounded[-1] = np.ceil(raw[0] / _STEP_D - 1e-9), np.floor(raw[-1] / _STEP_D + 1e-9)  # stay inside
    rounded = np.maximum(rounded, 1.0) * _STEP_D
    return [float(f"{x:.1f}") for x in dict.fromkeys(rounded.tolist())]
