"""The figure palette stays distinguishable under simulated colour-vision deficiencies.

Simulation: Machado, Oliveira & Fernandes (2009, IEEE TVCG 15, 1291), Table 1, severity 1.0 matrices
for protanopia, deuteranopia and tritanopia, applied to linear RGB (recalled from memory; each row sums
to 1, which the test checks as the paper's normalisation: white stays white).  Distance: CIE 1976
L*a*b* colour difference Delta E*ab (CIE 15:2004), from sRGB via IEC 61966-2-1 (linearisation and the
D65 RGB -> XYZ matrix).
"""
from __future__ import annotations

import itertools

import numpy as np
import pytest

from kncast.planner.figures.palette import SERIES, series

# Machado et al. 2009, Table 1, severity 1.0 (recalled from memory)
MACHADO = {
    "protanopia": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                   [-0.003882, -0.048116, 1.051998]],
    "deuteranopia": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                     [-0.011820, 0.042940, 0.968881]],
    "tritanopia": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602],
                   [0.004733, 0.691367, 0.303900]],
}
# IEC 61966-2-1 (sRGB), linear RGB -> CIE XYZ, D65
RGB_TO_XYZ = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
WHITE_D65 = RGB_TO_XYZ.sum(axis=1)
# common practice: Delta E*ab of about 10 and more reads as a clearly different colour in a small line
# or marker; this is the minimum asked of every pair, in every vision.
MIN_DELTA_E = 10.0


def _linear(hex_colour: str) -> np.ndarray:
    c = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)  # IEC 61966-2-1


def _lab(linear_rgb: np.ndarray) -> np.ndarray:
    t = (RGB_TO_XYZ @ np.clip(linear_rgb, 0.0, 1.0)) / WHITE_D65
    d = 6.0 / 29.0  # CIE 15:2004
    f = np.where(t > d ** 3, np.cbrt(t), t / (3 * d * d) + 4.0 / 29.0)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_lab_of_white_and_a_primary():
    # CIE 15:2004: the reference white is L* = 100, a* = b* = 0; sRGB pure red is L* about 53.2
    # (IEC 61966-2-1 primaries; value recalled from memory)
    assert np.allclose(_lab(_linear("#FFFFFF")), [100, 0, 0], atol=1e-6)
    assert _lab(_linear("#FF0000"))[0] == pytest.approx(53.2, abs=0.3)


@pytest.mark.parametrize("kind", sorted(MACHADO))
def test_simulation_keeps_white_and_grey(kind):
    m = np.array(MACHADO[kind])
    assert np.allclose(m.sum(axis=1), 1.0, atol=1e-5)  # Machado et al. 2009: achromatic colours unchanged


@pytest.mark.parametrize("kind", ["normal", *sorted(MACHADO)])
def test_every_pair_of_palette_colours_stays_apart(kind):
    m = np.eye(3) if kind == "normal" else np.array(MACHADO[kind])
    labs = {c: _lab(m @ _linear(c)) for c in SERIES}
    worst = min((float(np.linalg.norm(labs[a] - labs[b])), a, b) for a, b in itertools.combinations(SERIES, 2))
    assert worst[0] >= MIN_DELTA_E, f"{kind}: {worst[1]} and {worst[2]} differ by Delta E {worst[0]:.1f}"


def test_no_colour_is_recycled():
    assert len(set(SERIES)) == len(SERIES)
    with pytest.raises(ValueError, match="small multiples"):
        series(len(SERIES) + 1)
