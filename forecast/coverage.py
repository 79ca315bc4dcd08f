"""How much of a wavelength window a spectrograph setup records, and how clearly.

For a window [lo, hi] (vacuum Angstrom) and a setup, every wavelength is in
exactly one of four places, so the fractions of the window add up to one:

* on the detector (``coverage``): inside an arm's [min_A, max_A] and not in a
  detector gap of that arm (the union over arms, so an overlapping arm fills
  another arm's gap);
* in a gap (``gap_loss``): inside the setup's overall span [min over arms,
  max over arms] but not on a detector (detector gaps, and dichroic or
  order gaps between arms);
* outside the span: ``1 - coverage - gap_loss``.

``telluric_loss`` is the part of the window lost to the atmosphere on the
detector: the integral of (1 - T) over the covered wavelengths divided by the
window width, so ``0 <= telluric_loss <= coverage`` and the usable fraction is
``coverage - telluric_loss``.  All kernels are array operations on interval
overlaps, vectorized over any shape of windows (and over setups).
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from kncast.forecast.errors import ForecastInputError
from kncast.forecast.tellurics import REFERENCE_PWV_MM, _window

__all__ = ["window_fractions", "verdict", "VERDICTS", "CLEAR_MIN_USABLE", "PARTLY_MIN_USABLE"]

CLEAR_MIN_USABLE = 0.9    # usable fraction at or above which a feature is "clear"
PARTLY_MIN_USABLE = 0.25  # ... at or above which it is "partly hidden"; below: the main loss is named
VERDICTS = ("clear", "partly hidden", "hidden by atmosphere", "in detector gap", "outside coverage")
_TOL = 1e-9


@lru_cache(maxsize=512)
def _layout(setup):
    """(covered intervals (n, 2), knots, cumulative covered length at the knots, span lo, span hi)."""
    cov = setup.covered_intervals_A()
    knots = cov.ravel()
    lengths = np.zeros_like(knots)
    lengths[1::2] = cov[:, 1] - cov[:, 0]
    return cov, knots, np.cumsum(lengths), setup.min_A, setup.max_A


def _one_setup(lo, hi, setup, tellurics, airmass, pwv_mm):
    cov, knots, cum, span_lo, span_hi = _layout(setup)
    width = hi - lo
    covered = (np.interp(hi, knots, cum) - np.interp(lo, knots, cum)) / width
    span = np.clip(np.minimum(hi, span_hi) - np.maximum(lo, span_lo), 0.0, None) / width
    gap = np.clip(span - covered, 0.0, None)
    if tellurics is None:
        tell = np.zeros(np.broadcast_shapes(lo.shape, np.shape(airmass), np.shape(pwv_mm)))
    else:
        tell = tellurics.absorbed_A(lo, hi, airmass, pwv_mm, covered_A=cov) / width
    shape = np.broadcast_shapes(lo.shape, tell.shape)
    return (np.broadcast_to(covered, shape), np.broadcast_to(gap, shape), np.minimum(tell, covered))


def window_fractions(lo_A, hi_A, setup, tellurics=None, airmass=1.0, pwv_mm=REFERENCE_PWV_MM) -> dict:
    """Fractions of each window [lo_A, hi_A] on the detector, in gaps, and lost to the atmosphere.

    Parameters
    ----------
    lo_A, hi_A : array_like, vacuum Angstrom, any broadcastable shape S (lo <= hi;
        a zero-width window is evaluated over 1e-3 A about the point).
    setup : kncast.forecast.instruments.Setup, or a sequence of them (then every output
        gets a trailing axis of length n_setups: shape S + (n_setups,)).
    tellurics : kncast.forecast.tellurics.TelluricModel or None (no atmosphere).
    airmass, pwv_mm : scalars or arrays broadcastable to S (one setup) or
        S + (n_setups,) (a sequence; e.g. shape (n_setups,) for one airmass per site).

    Returns ``{"coverage", "gap_loss", "telluric_loss"}``: float arrays in [0, 1]
    (definitions in the module docstring).
    """
    lo, hi = _window(lo_A, hi_A)
    if not isinstance(setup, (list, tuple)):
        c, g, t = _one_setup(lo, hi, setup, tellurics, airmass, pwv_mm)
        return {"coverage": np.array(c), "gap_loss": np.array(g), "telluric_loss": np.array(t)}
    n = len(setup)
    shape = lo.shape + (n,)
    x, w = (_per_setup_view(v, shape, name) for v, name in ((airmass, "airmass"), (pwv_mm, "pwv_mm")))
    out = {"coverage": np.empty(shape), "gap_loss": np.empty(shape), "telluric_loss": np.empty(shape)}
    for k, s in enumerate(setup):  # a loop over setups only; each step is vectorized over all windows
        xk = x if x.ndim == 0 else x[..., k if x.shape[-1] > 1 else 0]
        wk = w if w.ndim == 0 else w[..., k if w.shape[-1] > 1 else 0]
        c, g, t = _one_setup(lo, hi, s, tellurics, _scalar_or(xk), _scalar_or(wk))
        out["coverage"][..., k], out["gap_loss"][..., k], out["telluric_loss"][..., k] = c, g, t
    return out


def _per_setup_view(value, shape, name):
    """``value`` with as many axes as ``shape`` (windows + setup axis), singleton axes kept small."""
    a = np.asarray(value, dtype=float)
    if a.ndim == 0:
        return a
    try:
        np.broadcast_shapes(a.shape, shape)
    except ValueError:
        raise ForecastInputError(f"{name} of shape {a.shape} does not broadcast to windows x setups "
                                 f"{shape}") from None
    return a.reshape((1,) * (len(shape) - a.ndim) + a.shape)


def _scalar_or(a):
    """A constant array collapses to a scalar so the telluric kernel takes its fast path."""
    if np.ndim(a) == 0:
        return a
    flat = a.ravel()
    return float(flat[0]) if flat.size and np.all(flat == flat[0]) else a


def verdict(coverage, gap_loss, telluric_loss) -> np.ndarray:
    """Plain-words verdict per window (array of str, same shape as the inputs).

    usable = coverage - telluric_loss;
    usable >= 0.9 -> "clear"; usable >= 0.25 -> "partly hidden"; otherwise the
    largest loss names the verdict: outside the span -> "outside coverage",
    gaps -> "in detector gap", atmosphere -> "hidden by atmosphere"
    (ties in that order).
    """
    c, g, t = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (coverage, gap_loss, telluric_loss)))
    usable = c - t
    outside = np.clip(1.0 - c - g, 0.0, 1.0)
    worst = np.argmax(np.stack([outside, g, t]), axis=0)
    return np.select(
        [usable >= CLEAR_MIN_USABLE - _TOL, usable >= PARTLY_MIN_USABLE - _TOL, worst == 0, worst == 1],
        ["clear", "partly hidden", "outside coverage", "in detector gap"],
        default="hidden by atmosphere",
    )
