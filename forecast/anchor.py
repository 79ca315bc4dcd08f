"""Re-anchoring a photosphere model to measured AB magnitudes.

Method.  The model's photosphere is rescaled, not re-parameterized: a
:class:`ScaledPhotosphere` wraps the model and multiplies, at every epoch and for
every component, the luminosity by ``s`` (luminosity scale) and the temperature by
``f`` (temperature scale), keeping each component a blackbody with
L = 4 pi R^2 sigma T^4, so R -> R sqrt(s) / f^2.  The scaling acts on the model's
output, after the power law's heating cap and the temperature floors, so it is
exact and the same at every epoch: with f = 1 every F_lambda is multiplied by s and
every AB magnitude shifts by exactly -2.5 log10 s (m_AB = -2.5 log10 of a flux
integral, Oke & Gunn 1983, ApJ 266, 713).  A temperature scale applies to floored
epochs too (they sit at f T_floor).  Line-forming velocities, the outer ejecta
velocity and the ejecta mass are left as the model has them.

Fit.  Least squares over the anchors (band, m_AB, phase), all weighted equally
(the anchors carry no errors), of the residuals in magnitudes
r_i = m_obs,i - m_model,i(s, f):

* luminosity only (no colour among the anchors, or fit_temperature=False):
  m_model(s) = m_model(1) - 2.5 log10 s is
  linear in log s, so the least-squares solution is exact and closed-form,
  -2.5 log10 s = mean(m_obs - m_model(1));
* luminosity and temperature, when two or more different bands fall within
  :data:`COLOUR_EPOCH_D` of each other (a colour): (ln s, ln f) fitted jointly by
  ``scipy.optimize.least_squares`` (trust-region reflective, bounded by
  :data:`LUMINOSITY_SCALE_BOUNDS` and :data:`TEMPERATURE_SCALE_BOUNDS`), started
  from the closed-form s at f = 1.

Phases are observer-frame days since t0, as in :class:`kncast.forecast.source.Transient`.
"""
from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from kncast.forecast.errors import ParameterError
from kncast.forecast.references import OKE_GUNN_1983
from kncast.forecast.source import Transient

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (OKE_GUNN_1983,)

COLOUR_EPOCH_D = 0.25                    # bands this close in time make a colour (one night; common practice)
LUMINOSITY_SCALE_BOUNDS = (1e-4, 1e4)    # +-10 mag: a fit beyond this is a wrong model, not a scale
TEMPERATURE_SCALE_BOUNDS = (0.5, 2.0)    # colour temperature within a factor 2 of the model's
MAG_RANGE = (0.0, 40.0)                  # AB magnitudes accepted as anchors


@dataclass(frozen=True)
class Anchor:
    """One measured AB magnitude: ``band`` (speclite name), ``mag_ab`` (mag), ``phase_d`` (observer days since t0)."""

    band: str
    mag_ab: float
    phase_d: float


@dataclass(frozen=True)
class ScaledPhotosphere:
    """A photosphere model with every component's L multiplied by ``luminosity_scale`` and T by
    ``temperature_scale`` at every epoch (R follows from L = 4 pi R^2 sigma T^4).

    Speaks the photosphere interface that :class:`~kncast.forecast.source.Transient` uses;
    ``name`` is the wrapped model's.
    """

    base: object
    luminosity_scale: float = 1.0
    temperature_scale: float = 1.0

    def __post_init__(self):
        for key in ("luminosity_scale", "temperature_scale"):
            value = getattr(self, key)
            if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
                raise ParameterError(key, value, "a finite number > 0")

    @property
    def name(self) -> str:
        return self.base.name

    @property
    def component_names(self) -> tuple[str, ...]:
        return tuple(self.base.component_names)

    @property
    def ejecta_mass_msun(self) -> float:
        return float(self.base.ejecta_mass_msun)

    def parameters(self) -> dict:
        """The wrapped model's parameters plus ``anchor``: {luminosity_scale, temperature_scale}."""
        return {**self.base.parameters(),
                "anchor": {"luminosity_scale": self.luminosity_scale, "temperature_scale": self.temperature_scale}}

    def components(self, age_d):
        """(T_K, R_cm, L_erg_s, v_phot_c), each (n_comp, n_epoch): the model's, scaled."""
        temp, radius, lum, v_phot = (np.asarray(a, float) for a in self.base.components(age_d))
        # L' = s L, T' = f T at L' = 4 pi R'^2 sigma T'^4  ->  R' = R sqrt(s) / f^2 (Stefan-Boltzmann)
        factor = np.sqrt(self.luminosity_scale) / self.temperature_scale**2
        return temp * self.temperature_scale, radius * factor, lum * self.luminosity_scale, v_phot * factor

    def line_velocities(self, age_d):
        return self.base.line_velocities(age_d)

    def v_max(self, age_d):
        return self.base.v_max(age_d)


@dataclass(frozen=True)
class AnchorFit:
    """The anchored transient and the fit summary (magnitudes AB, per anchor in the order given).

    ``residual_mag`` = measured - anchored model; ``prior_mag`` is the model before anchoring.
    ``luminosity_scale`` and ``temperature_scale`` are relative to the transient given (for a
    transient already anchored, ``transient.photosphere`` holds the combined scales).
    ``at_bound`` names the scales that ended on their fit bound.
    """

    transient: Transient
    anchors: tuple[Anchor, ...]
    luminosity_scale: float
    temperature_scale: float
    temperature_fitted: bool
    prior_mag: np.ndarray
    model_mag: np.ndarray
    at_bound: tuple[str, ...] = ()

    @property
    def residual_mag(self) -> np.ndarray:
        return np.array([a.mag_ab for a in self.anchors]) - self.model_mag

    @property
    def rms_mag(self) -> float:
        return float(np.sqrt(np.mean(self.residual_mag**2)))

    @property
    def n_anchors(self) -> int:
        return len(self.anchors)

    @property
    def delta_mag(self) -> float:
        """Magnitude shift of the luminosity scale, -2.5 log10 s (mag; negative = brighter)."""
        return float(-2.5 * np.log10(self.luminosity_scale))

    def to_dict(self) -> dict:
        """Plain JSON-ready summary: the scales, the method and one row per anchor."""
        rows = [{"band": a.band, "phase_d": a.phase_d, "mag_ab": a.mag_ab, "prior_mag_ab": float(p),
                 "model_mag_ab": float(m), "residual_mag": float(r)}
                for a, p, m, r in zip(self.anchors, self.prior_mag, self.model_mag, self.residual_mag)]
        return {"luminosity_scale": self.luminosity_scale, "delta_mag": self.delta_mag,
                "temperature_scale": self.temperature_scale, "temperature_fitted": self.temperature_fitted,
                "rms_mag": self.rms_mag, "n_anchors": self.n_anchors, "at_bound": list(self.at_bound),
                "anchors": rows}


def anchor_transient(transient: Transient, anchors, *, fit_temperature: bool | None = None) -> AnchorFit:
    """Rescale ``transient``'s photosphere to the measured ``anchors`` (module docstring: method).

    ``anchors``: (band, mag_ab, phase) items or :class:`Anchor`; mag_ab a number or ``u.ABmag``
    Quantity, phase in days or a time Quantity (observer frame, since t0).
    ``fit_temperature``: None fits the temperature scale when the anchors contain a colour
    (two bands within :data:`COLOUR_EPOCH_D`), True requires one, False never fits it.
    """
    if not isinstance(transient, Transient):
        raise ParameterError("transient", message=f"{{transient}}: expected a kncast.forecast.Transient, "
                                                  f"got {type(transient).__name__}")
    rows = parse_anchors(anchors)
    colour = has_colour(rows)
    if fit_temperature is True and not colour:
        raise ParameterError("fit_temperature", message=f"{{fit_temperature}}: needs two different bands "
                                                        f"within {COLOUR_EPOCH_D:g} d of each other (a colour)")
    fit_t = colour if fit_temperature is None else bool(fit_temperature)
    base, s_prev, f_prev = _unwrapped(transient.photosphere)
    obs = np.array([a.mag_ab for a in rows])
    prior = model_magnitudes(transient, rows)
    if fit_t:
        s, f = _fit_joint(transient, base, s_prev, f_prev, rows, obs, prior)
    else:
        s, f = _fit_closed_form(obs, prior)
    anchored = _placed(transient, ScaledPhotosphere(base, s_prev * s, f_prev * f))
    model = model_magnitudes(anchored, rows)
    return AnchorFit(anchored, rows, s, f, fit_t, prior, model, _at_bounds(s, f, fit_t))


def parse_anchors(anchors) -> tuple[Anchor, ...]:
    """Validated anchors: known speclite band, AB magnitude finite in [0, 40], phase > 0 days."""
    from kncast.forecast.photometry import known_bands

    if isinstance(anchors, (str, bytes)) or not hasattr(anchors, "__iter__"):
        raise ParameterError("anchors", message="{anchors}: expected a list of (band, mag_ab, phase) items")
    items = list(anchors)
    if not items:
        raise ParameterError("anchors", message="{anchors}: empty (allowed: one or more (band, mag_ab, phase))")
    out = []
    for i, item in enumerate(items):
        where = f"{{anchors}} {i + 1} of {len(items)}"
        if isinstance(item, Anchor):
            item = (item.band, item.mag_ab, item.phase_d)
        if isinstance(item, (str, bytes)) or not hasattr(item, "__len__") or len(item) != 3:
            raise ParameterError("anchors", message=f"{where}: expected (band, mag_ab, phase), got {item!r:.40}")
        band, mag, phase = item
        if not isinstance(band, str) or band not in known_bands():
            raise ParameterError("anchors", message=f"{where}: band {band!r} unknown (allowed: speclite band "
                                                    f"names such as bessell-V, sdss2010-r, twomass-Ks)")
        mag = _number(mag, u.ABmag, "mag_ab", where)
        if not (np.isfinite(mag) and MAG_RANGE[0] <= mag <= MAG_RANGE[1]):
            raise ParameterError("anchors", message=f"{where}: mag_ab = {mag:g}: allowed [{MAG_RANGE[0]:g}, "
                                                    f"{MAG_RANGE[1]:g}] AB mag")
        phase = _number(phase, u.day, "phase", where)
        if not (np.isfinite(phase) and phase > 0):
            raise ParameterError("anchors", message=f"{where}: phase = {phase:g} d: allowed (0, inf) d "
                                                    f"(after t0)")
        out.append(Anchor(band, mag, phase))
    return tuple(out)


def has_colour(anchors) -> bool:
    """True when two different bands lie within :data:`COLOUR_EPOCH_D` days of each other."""
    phase = np.array([a.phase_d for a in anchors])
    band = np.array([a.band for a in anchors])
    near = np.abs(phase[:, None] - phase[None, :]) <= COLOUR_EPOCH_D
    return bool(np.any(near & (band[:, None] != band[None, :])))


def model_magnitudes(transient: Transient, anchors) -> np.ndarray:
    """The transient's AB magnitude at each anchor's band and phase (array in anchor order)."""
    phases = np.array([a.phase_d for a in anchors])
    bands = tuple(dict.fromkeys(a.band for a in anchors))
    mags = transient.mag_ab(phases, bands)
    out = np.array([mags[a.band][i] for i, a in enumerate(anchors)])
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        a = anchors[bad[0]]
        raise ParameterError("anchors", message=f"{{anchors}} {bad[0] + 1} of {len(anchors)}: the model gives no "
                                                f"flux in {a.band} at {a.phase_d:g} d (too cold for that band)")
    return out


# ---------------------------------------------------------------------------- internals

def _fit_closed_form(obs, prior) -> tuple[float, float]:
    # m_model(s) = m_model(1) - 2.5 log10 s: linear in log s, the mean offset is the least-squares solution
    log_s = -0.4 * float(np.mean(obs - prior))
    lo, hi = np.log10(LUMINOSITY_SCALE_BOUNDS)
    return float(10.0 ** np.clip(log_s, lo, hi)), 1.0


def _fit_joint(transient, base, s_prev, f_prev, rows, obs, prior) -> tuple[float, float]:
    from scipy.optimize import least_squares

    s0, _ = _fit_closed_form(obs, prior)
    lo = np.log([LUMINOSITY_SCALE_BOUNDS[0], TEMPERATURE_SCALE_BOUNDS[0]])
    hi = np.log([LUMINOSITY_SCALE_BOUNDS[1], TEMPERATURE_SCALE_BOUNDS[1]])
    x0 = np.clip([np.log(s0), 0.0], lo + 1e-9, hi - 1e-9)

    def residuals(x):
        trial = _placed(transient, ScaledPhotosphere(base, s_prev * np.exp(x[0]), f_prev * np.exp(x[1])))
        return obs - model_magnitudes(trial, rows)

    fit = least_squares(residuals, x0, bounds=(lo, hi), method="trf", ftol=1e-12, xtol=1e-12, gtol=1e-12)
    return float(np.exp(fit.x[0])), float(np.exp(fit.x[1]))


def _at_bounds(s, f, fit_t) -> tuple[str, ...]:
    hits = []
    if not np.all(np.abs(np.log(np.divide(s, LUMINOSITY_SCALE_BOUNDS))) > 1e-6):
        hits.append("luminosity_scale")
    if fit_t and not np.all(np.abs(np.log(np.divide(f, TEMPERATURE_SCALE_BOUNDS))) > 1e-6):
        hits.append("temperature_scale")
    return tuple(hits)


def _unwrapped(photosphere):
    """(model, s, f): an anchored model is re-anchored from its base, the scales combined (no nesting)."""
    if isinstance(photosphere, ScaledPhotosphere):
        return photosphere.base, photosphere.luminosity_scale, photosphere.temperature_scale
    return photosphere, 1.0, 1.0


def _placed(transient: Transient, photosphere) -> Transient:
    """``photosphere`` at the distance, redshift, dust and cosmology of ``transient``."""
    return Transient(photosphere, distance_mpc=transient.distance_mpc, redshift=transient.redshift,
                     ebv_mw=transient.ebv_mw, ebv_host=transient.ebv_host, cosmology=transient.cosmology)


def _number(value, unit, name, where) -> float:
    if isinstance(value, u.Quantity):
        try:
            return float(value.to_value(unit))
        except (u.UnitConversionError, u.UnitsError, TypeError):
            raise ParameterError("anchors", message=f"{where}: {name} unit {value.unit} is not "
                                                    f"{unit}") from None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ParameterError("anchors", message=f"{where}: {name} = {value!r:.40}: expected a number")
    return float(value)


__all__ = ["Anchor", "AnchorFit", "ScaledPhotosphere", "anchor_transient", "parse_anchors", "has_colour",
           "model_magnitudes", "COLOUR_EPOCH_D", "LUMINOSITY_SCALE_BOUNDS", "TEMPERATURE_SCALE_BOUNDS", "MAG_RANGE"]
