"""Photosphere models: temperature, radius and luminosity of each emitting component vs time.

Two models, both evaluated at rest-frame ages ``age_d`` (days since the
merger in the source frame), vectorized over epochs:

``powerlaw``  an empirical cooling, expanding blackbody, bounded by its radioactive power
    T_free(t) = T_ref (t / t_ref)^-alpha,   v(t) = min(v_ref (t / t_ref)^-beta, v_max),
    R = v t (homologous),   L_free = 4 pi R^2 sigma T_free^4,
    L = min(L_free, L_heat),   L_heat = M eps(t) eps_th(t)
    (the thermalized r-process heating of the model's own ejecta mass M: Korobkin
    et al. 2012, MNRAS 426, 1940, times the Barnes et al. 2016, ApJ 829, 110,
    thermalization for M and v_ref; ``kncast.forecast.heating``), and the same
    temperature floor as ``heating``: T = max(T_free, T_floor).  Wherever the
    luminosity is below 4 pi (v t)^2 sigma T^4 (capped, or at the floor) the
    blackbody radius recedes, R = (L / (4 pi sigma T^4))^1/2; T keeps its law.

    Why a cap rather than the heating model as default: the power laws are an
    empirical description of the colour temperature and the photospheric
    velocity that observers fit, and they stay the default so that users can
    match what they see; but unbounded, L_free falls only as t^-0.6 and by a
    week radiates more than the radioactive power its ejecta deposit (3.5x at
    7 d, 8x at 14 d for the defaults), which energy conservation forbids.
    After the diffusion peak a radioactively powered transient radiates close
    to its instantaneous deposition (Arnett 1982, ApJ 253, 785; for kilonova
    ejecta of low opacity from about a day on: Waxman et al. 2018, MNRAS 481,
    3423, from memory), so the thermalized heating is the upper bound.  Stated
    approximation: stored diffusion energy released after the peak (which can
    lift L above the deposition by up to ~2x near 2-4 d for kappa ~ 0.5 cm^2/g,
    and by < 10% after a week; Arnett's integral in ``kncast.forecast.heating``)
    is neglected, so capped epochs are, if anything, slightly faint.

    Line-forming velocity (``line_velocities``): v(t) above, the velocity where
    the spectral features form.  The cap and the floor shrink only the emitting
    area of the blackbody, not the velocity of the matter that makes the lines
    (published spectral fits find line-forming velocities of ~0.13-0.2 c at
    4-5 d; checked in ``tests/accuracy/test_accuracy_photosphere.py``).

``heating``  one or more ejecta components, each a one-zone radioactive
    model (``kncast.forecast.heating``): Korobkin et al. (2012) heating times the
    Barnes et al. (2016) thermalization, diffused with Arnett (1982), and a
    photosphere with a temperature floor (the floor prescription of multi-component
    kilonova light-curve fits; common practice):
    T = max[(L / (4 pi sigma v^2 t^2))^1/4, T_floor]; R = v t above the
    floor, R = (L / (4 pi sigma T_floor^4))^1/2 once the floor is reached.
    Components radiate as separate blackbodies.  Line-forming velocity of a
    component: its ejecta velocity v (a one-zone component has no other
    velocity; the receding floor radius is an emitting area, not matter
    slowing down); the features of the whole are taken at the luminosity-
    weighted mean over components (``kncast.forecast.source``).

Models are built from a plain dict (the event file's ``[model]`` table
merged with command-line overrides) by :func:`build_model`; every value
is validated and a bad one raises ForecastInputError naming it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kncast.forecast.blackbody import C_CGS, SIGMA_SB_CGS, stefan_boltzmann_luminosity
from kncast.forecast.errors import ForecastInputError
from kncast.forecast.heating import DAY_S, arnett_luminosity, input_luminosity_erg_s
from kncast.forecast.references import (ARNETT_1982, BARNES_2016, KOROBKIN_2012, METZGER_2010, METZGER_2019,
                                        TANAKA_2020, WAXMAN_2018)

# Published sources cited above, as data (records in kncast.forecast.references).
REFERENCES = (KOROBKIN_2012, BARNES_2016, ARNETT_1982, WAXMAN_2018, METZGER_2010, METZGER_2019, TANAKA_2020)

MODEL_NAMES = ("powerlaw", "heating")
V_LIMIT_C = 0.8  # ejecta velocities allowed in (0, 0.8) c


# (parameter, low, high, low_open, high_open, unit)
POWERLAW_RANGES = (
    ("t_ref_d", 0.0, 100.0, True, False, "d"),
    ("temperature_ref_K", 500.0, 1e5, False, False, "K"),
    ("temperature_index", 0.0, 3.0, False, False, ""),
    ("temperature_floor_K", 0.0, 2e4, True, False, "K"),
    ("velocity_ref_c", 0.0, V_LIMIT_C, True, True, "c"),
    ("velocity_index", 0.0, 2.0, False, False, ""),
    ("v_max_c", 0.0, V_LIMIT_C, True, True, "c"),
    ("mass_msun", 0.0, 1.0, True, False, "Msun"),
)
COMPONENT_RANGES = (
    ("mass_msun", 0.0, 1.0, True, False, "Msun"),
    ("velocity_c", 0.0, V_LIMIT_C, True, True, "c"),
    ("opacity_cm2_g", 0.0, 1000.0, True, False, "cm^2/g"),
    ("temperature_floor_K", 0.0, 2e4, True, False, "K"),
)



def _check(key, value, lo, hi, lo_open, hi_open, unit, where):
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and np.isfinite(value)
    if ok:
        ok = (value > lo if lo_open else value >= lo) and (value < hi if hi_open else value <= hi)
    if not ok:
        interval = f"{'(' if lo_open else '['}{lo:g}, {hi:g}{')' if hi_open else ']'}"
        shown = f"{value:g}" if isinstance(value, (int, float)) and not isinstance(value, bool) else repr(value)
        raise ForecastInputError(f"{where}.{key} = {shown}: allowed {interval}{(' ' + unit) if unit else ''}")


# Reference point of the default power laws, taken from a published model family: the one-zone
# radioactive kilonova (Metzger et al. 2010, MNRAS 406, 2650; reviewed by Metzger 2019, Living Rev.
# Relativ. 23, 1; from memory), i.e. Korobkin et al. 2012 heating, Barnes et al. 2016 thermalization
# and Arnett diffusion, whose photosphere moves with the ejecta (``kncast.forecast.heating``), for one
# lanthanide-poor component: the power law's own ejecta mass (0.04 Msun), the middle velocity of the
# Barnes et al. grid (0.2 c) and a lanthanide-free grey opacity of 1 cm^2/g (Tanaka et al. 2020,
# MNRAS 496, 1369; from memory).  At the reference age of 1 day (a round age where the one-zone
# photosphere has left its first, diffusion-dominated hours) that model's photosphere is at 6264 K:
# rounded to 6300 K.  tests/accuracy/test_accuracy_photosphere.py recomputes it independently.
REFERENCE_COMPONENT = {"mass_msun": 0.04, "velocity_c": 0.2, "opacity_cm2_g": 1.0}
REFERENCE_AGE_D = 1.0
REFERENCE_TEMPERATURE_K = 6300.0


@dataclass(frozen=True)
class PowerLawPhotosphere:
    """Empirical cooling blackbody, its luminosity capped at the thermalized heating of
    ``mass_msun`` (module docstring).  Default reference point: the one-zone radioactive model
    family at 1 day (``REFERENCE_COMPONENT`` above: 6300 K, photosphere at the ejecta velocity
    0.2 c); with T ~ t^-0.5 it reaches the 2500 K floor after 6.4 days."""

    t_ref_d: float = REFERENCE_AGE_D
    temperature_ref_K: float = REFERENCE_TEMPERATURE_K
    temperature_index: float = 0.5
    temperature_floor_K: float = 2500.0
    velocity_ref_c: float = REFERENCE_COMPONENT["velocity_c"]
    velocity_index: float = 0.3
    v_max_c: float = 0.35        # outer edge of the ejecta; the photosphere never lies outside it
    mass_msun: float = REFERENCE_COMPONENT["mass_msun"]  # total ejecta mass: line strengths and the heating cap on L

    name = "powerlaw"

    def __post_init__(self):
        for key, lo, hi, lo_open, hi_open, unit in POWERLAW_RANGES:
            _check(key, getattr(self, key), lo, hi, lo_open, hi_open, unit, "model")
        if self.velocity_ref_c > self.v_max_c:
            raise ForecastInputError(f"model.velocity_ref_c = {self.velocity_ref_c:g}: must not exceed "
                                     f"model.v_max_c = {self.v_max_c:g} (the outer ejecta velocity)")

    @property
    def component_names(self) -> tuple[str, ...]:
        return ("photosphere",)

    @property
    def ejecta_mass_msun(self) -> float:
        return self.mass_msun

    def parameters(self) -> dict:
        return {key: getattr(self, key) for key, *_ in POWERLAW_RANGES}

    def _velocity(self, t):
        return np.minimum(self.velocity_ref_c * (t / self.t_ref_d) ** -self.velocity_index, self.v_max_c)

    def heating_luminosity(self, age_d):
        """Thermalized r-process power of the ejecta (mass_msun at velocity_ref_c), erg s^-1: the cap on L."""
        return input_luminosity_erg_s(np.asarray(age_d, dtype=float), self.mass_msun, self.velocity_ref_c)

    def components(self, age_d):
        """(T_K, R_cm, L_erg_s, v_phot_c), each shaped (1, n_epoch); v_phot_c = R / (c t)."""
        t = np.asarray(age_d, dtype=float).reshape(1, -1)
        t_free = self.temperature_ref_K * (t / self.t_ref_d) ** -self.temperature_index
        r_free = self._velocity(t) * C_CGS * t * DAY_S
        l_free = stefan_boltzmann_luminosity(t_free, r_free)
        lum = np.minimum(l_free, self.heating_luminosity(t))
        # at the floor or the cap the photosphere recedes and keeps L (floor prescription, common practice)
        temp = np.maximum(t_free, self.temperature_floor_K)
        free = (t_free >= self.temperature_floor_K) & (l_free <= lum)
        radius = np.where(free, r_free, np.sqrt(lum / (4.0 * np.pi * SIGMA_SB_CGS * temp**4)))
        return temp, radius, lum, radius / (C_CGS * t * DAY_S)

    def line_velocities(self, age_d):
        """Line-forming velocity (c), shaped (1, n_epoch): the photospheric velocity law v(t)."""
        return self._velocity(np.asarray(age_d, dtype=float).reshape(1, -1))

    def v_max(self, age_d):
        return np.full(np.shape(age_d), self.v_max_c)


@dataclass(frozen=True)
class EjectaComponent:
    """One ejecta component of the ``heating`` model."""

    name: str
    mass_msun: float
    velocity_c: float
    opacity_cm2_g: float
    temperature_floor_K: float

    def __post_init__(self):
        for key, lo, hi, lo_open, hi_open, unit in COMPONENT_RANGES:
            _check(key, getattr(self, key), lo, hi, lo_open, hi_open, unit, f"model.component {self.name!r}")

    def parameters(self) -> dict:
        return {"name": self.name, **{key: getattr(self, key) for key, *_ in COMPONENT_RANGES}}


# Invented round values of our own (no fit to any real event; the same as the demo events): a light
# "fast" lanthanide-poor component with a low grey opacity and a heavier "slow" lanthanide-rich one
# with a high opacity (the two-component picture is common practice).  The floors follow the
# recombination temperatures used in such models (~2500 K lanthanide-rich, a little warmer for
# lanthanide-poor matter; common practice).
DEFAULT_COMPONENTS = (
    EjectaComponent("fast", 0.015, 0.3, 1.0, 3000.0),
    EjectaComponent("slow", 0.06, 0.12, 8.0, 2500.0),
)


@dataclass(frozen=True)
class HeatingPhotosphere:
    """Radioactively powered multi-component photosphere (see module docstring)."""

    ejecta: tuple[EjectaComponent, ...] = DEFAULT_COMPONENTS
    points_per_decade: int = 400

    name = "heating"

    def __post_init__(self):
        if not self.ejecta:
            raise ForecastInputError("model.component: no components (allowed: one or more [[model.component]])")
        names = [c.name for c in self.ejecta]
        if len(set(names)) != len(names):
            raise ForecastInputError(f"model.component names {names}: must be unique")

    @property
    def component_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.ejecta)

    @property
    def ejecta_mass_msun(self) -> float:
        return float(sum(c.mass_msun for c in self.ejecta))

    def parameters(self) -> dict:
        return {"component": [c.parameters() for c in self.ejecta], "points_per_decade": self.points_per_decade}

    def components(self, age_d):
        """(T_K, R_cm, L_erg_s, v_phot_c), each shaped (n_comp, n_epoch)."""
        t = np.asarray(age_d, dtype=float).ravel()
        lum = np.array([arnett_luminosity(t, c.mass_msun, c.velocity_c, c.opacity_cm2_g, self.points_per_decade)
                        for c in self.ejecta]).reshape(len(self.ejecta), t.size)
        vel = np.array([c.velocity_c for c in self.ejecta])[:, None]
        floor = np.array([c.temperature_floor_K for c in self.ejecta])[:, None]
        r_free = vel * C_CGS * t[None, :] * DAY_S
        t_free = (lum / (4.0 * np.pi * SIGMA_SB_CGS * r_free**2)) ** 0.25
        above = t_free >= floor
        temp = np.where(above, t_free, floor)
        radius = np.where(above, r_free, np.sqrt(lum / (4.0 * np.pi * SIGMA_SB_CGS * floor**4)))
        v_phot = radius / (C_CGS * t[None, :] * DAY_S)
        return temp, radius, lum, v_phot

    def line_velocities(self, age_d):
        """Line-forming velocity (c) of each component, shaped (n_comp, n_epoch): its ejecta velocity."""
        t = np.asarray(age_d, dtype=float).ravel()
        return np.repeat(np.array([[c.velocity_c] for c in self.ejecta]), t.size, axis=1)

    def v_max(self, age_d):
        return np.full(np.shape(age_d), max(c.velocity_c for c in self.ejecta))


def build_model(config: dict | None = None, where: str = "[model]"):
    """A photosphere model from a ``[model]``-style dict (see docs/formats.md, section "The [model] table" for the schema).

    ``config["name"]`` selects ``powerlaw`` (default) or ``heating``; other
    keys are that model's parameters.  ``where`` prefixes error messages
    (a file name, or "command line").
    """
    config = dict(config or {})
    name = config.pop("name", "powerlaw")
    if name not in MODEL_NAMES:
        raise ForecastInputError(f"{where}: name = {name!r}: allowed {' | '.join(MODEL_NAMES)}")
    try:
        if name == "powerlaw":
            allowed = {key for key, *_ in POWERLAW_RANGES}
            _no_unknown(config, allowed, where, name)
            return PowerLawPhotosphere(**{k: _number(config[k], k, where) for k in config})
        _no_unknown(config, {"component", "points_per_decade"}, where, name)
        ppd = config.get("points_per_decade", 400)
        if isinstance(ppd, bool) or not isinstance(ppd, int) or not 20 <= ppd <= 5000:
            raise ForecastInputError(f"{where}: points_per_decade = {ppd!r}: allowed a whole number in [20, 5000]")
        comps = config.get("component")
        if comps is None:
            return HeatingPhotosphere(DEFAULT_COMPONENTS, ppd)
        if not isinstance(comps, list) or not all(isinstance(c, dict) for c in comps):
            raise ForecastInputError(f"{where}: component: expected an array of [[model.component]] tables")
        return HeatingPhotosphere(tuple(_component(c, i, where) for i, c in enumerate(comps)), ppd)
    except ForecastInputError as err:
        text = str(err)
        raise ForecastInputError(text if text.startswith(where) else f"{where}: {text}") from None


def _component(row: dict, i: int, where: str) -> EjectaComponent:
    allowed = {"name"} | {key for key, *_ in COMPONENT_RANGES}
    unknown = sorted(set(row) - allowed)
    if unknown:
        raise ForecastInputError(f"{where}: component[{i}].{unknown[0]}: unknown key "
                                 f"(allowed: {', '.join(sorted(allowed))})")
    missing = [k for k, *_ in COMPONENT_RANGES if k not in row]
    if missing:
        raise ForecastInputError(f"{where}: component[{i}].{missing[0]}: required key missing "
                                 f"(keys: mass_msun, velocity_c, opacity_cm2_g, temperature_floor_K)")
    name = row.get("name", f"component{i + 1}")
    if not isinstance(name, str) or not name.strip():
        raise ForecastInputError(f"{where}: component[{i}].name = {name!r}: allowed a non-empty string")
    return EjectaComponent(name, *(_number(row[k], f"component[{i}].{k}", where) for k, *_ in COMPONENT_RANGES))


def _number(value, key, where):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ForecastInputError(f"{where}: {key} = {value!r}: expected a number")
    return float(value)


def _no_unknown(config, allowed, where, name):
    unknown = sorted(set(config) - set(allowed))
    if unknown:
        raise ForecastInputError(f"{where}: {unknown[0]}: not a parameter of the {name} model "
                                 f"(allowed: name, {', '.join(sorted(allowed))})")


__all__ = ["MODEL_NAMES", "REFERENCE_COMPONENT", "REFERENCE_AGE_D", "REFERENCE_TEMPERATURE_K", "PowerLawPhotosphere", "EjectaComponent", "HeatingPhotosphere", "DEFAULT_COMPONENTS",
           "build_model"]
