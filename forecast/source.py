"""A transient as the observer sees it: photosphere model + distance, redshift and dust.

:class:`Transient` is the one object the later forecasts (line features,
exposure times, the campaign plan) use.  Phases are observer-frame days
since t0; the model is evaluated at the rest-frame age phase_d / (1 + z).
Observed flux density at observed vacuum wavelength lambda:

    F_lambda,obs(lambda) = L_lambda,rest(lambda / (1 + z)) / (4 pi D_L^2 (1 + z))
                           * T_host(lambda / (1 + z)) * T_MW(lambda)

with host extinction applied in the rest frame and Milky Way extinction
in the observer frame, both Fitzpatrick (1999) with R_V = 3.1
(``kncast.forecast.extinction``).
"""
from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from kncast.forecast.blackbody import C_CGS, SIGMA_SB_CGS, planck_sum_flam
from kncast.forecast.distance import (DISTANCE_RANGE_MPC, MPC_CM, REDSHIFT_RANGE, distance_for_redshift,
                                      redshift_for_distance)
from kncast.forecast.errors import ForecastInputError, ParameterError, check_range
from kncast.forecast.extinction import transmission
from kncast.forecast.photometry import ab_minus_vega, band_set
from kncast.forecast.units import FLAM, value_in


@dataclass(frozen=True)
class _StateRows:
    """The per-component temperatures and radii of some epochs: what the spectrum needs of a state."""

    comp_temperature_K: np.ndarray
    comp_radius_cm: np.ndarray


@dataclass(frozen=True)
class PhotosphereState:
    """The photosphere at a set of epochs (arrays over epochs; per-component arrays (n_comp, n_epoch)).

    For several components the totals are: ``luminosity_erg_s`` the sum;
    ``temperature_K`` the luminosity-weighted mean of the component
    temperatures; ``radius_cm`` the radius that gives L = 4 pi R^2 sigma T^4
    with those; ``v_phot_c`` the luminosity-weighted mean photospheric
    velocity (R_i / t of each component, in c).  ``v_max_c`` is the outer
    ejecta velocity (the fastest component's velocity for ``heating``).
    ``v_line_c`` is the line-forming velocity, where the spectral features form
    (luminosity-weighted mean of the components' ``line_velocities``; see
    ``kncast.forecast.photosphere``): it differs from ``v_phot_c`` once a
    temperature floor or the heating cap shrinks the blackbody radius.
    """

    phase_d: np.ndarray
    age_d: np.ndarray
    temperature_K: np.ndarray
    radius_cm: np.ndarray
    luminosity_erg_s: np.ndarray
    v_phot_c: np.ndarray
    v_max_c: np.ndarray
    component_names: tuple[str, ...]
    comp_temperature_K: np.ndarray
    comp_radius_cm: np.ndarray
    comp_luminosity_erg_s: np.ndarray
    comp_v_phot_c: np.ndarray
    v_line_c: np.ndarray
    comp_v_line_c: np.ndarray


ROWS_BLOCK = 32  # epochs per spectrum call in Transient.flux_flam_rows


class Transient:
    """A photosphere model placed at a distance, redshifted and reddened.

    Give ``distance_mpc`` (luminosity distance) or ``redshift`` (or both,
    used as given); the other follows from ``cosmology`` (None: Planck18,
    by :mod:`kncast.forecast.distance`; else an astropy ``Cosmology``).  ``ebv_mw``/``ebv_host`` are colour excesses E(B-V) in mag.
    From Python, give the distance as a Quantity with ``distance=`` (e.g. ``40 * u.Mpc``).
    """

    def __init__(self, photosphere, distance_mpc=None, redshift=None, ebv_mw=0.0, ebv_host=0.0,
                 cosmology=None, *, distance=None):
        if distance is not None:
            if distance_mpc is not None:
                raise ForecastInputError("distance and distance_mpc: give one of them, not both")
            distance_mpc = value_in(distance, u.Mpc, "distance")
        if distance_mpc is None and redshift is None:
            raise ParameterError("distance_mpc", message="distance needed: give {distance_mpc} (in an event file: distance_mpc) or a redshift")
        if redshift is None:
            redshift = redshift_for_distance(distance_mpc, cosmology)
        elif distance_mpc is None:
            distance_mpc = distance_for_redshift(redshift, cosmology)
        check_range("distance_mpc", distance_mpc, *DISTANCE_RANGE_MPC, low_open=True, unit=" Mpc")
        check_range("redshift", redshift, *REDSHIFT_RANGE, low_open=True)
        check_range("ebv_mw", ebv_mw, 0.0, 10.0, unit=" mag")
        check_range("ebv_host", ebv_host, 0.0, 10.0, unit=" mag")
        self.photosphere = photosphere
        self.distance_mpc = float(distance_mpc)
        self.redshift = float(redshift)
        self.ebv_mw = float(ebv_mw)
        self.ebv_host = float(ebv_host)
        self.cosmology = cosmology
        self.luminosity_distance_cm = self.distance_mpc * MPC_CM

    @property
    def ejecta_mass_msun(self) -> float:
        """Total ejecta mass of the model, Msun."""
        return float(self.photosphere.ejecta_mass_msun)

    @property
    def component_names(self) -> tuple[str, ...]:
        return tuple(self.photosphere.component_names)

    def _phases(self, phase_d) -> np.ndarray:
        p = np.atleast_1d(np.asarray(phase_d, dtype=float))
        if p.ndim != 1:
            p = p.ravel()
        check_range("phase_d", p, 0.0, None, low_open=True, unit=" d")
        return p

    def state(self, phase_d) -> PhotosphereState:
        """The photosphere at observer-frame phases (days since t0, > 0)."""
        phase = self._phases(phase_d)
        age = phase / (1.0 + self.redshift)
        temp, radius, lum, v_phot = (np.asarray(a, float) for a in self.photosphere.components(age))
        total = lum.sum(axis=0)
        weights = lum / np.where(total > 0, total, 1.0)
        t_eff = (weights * temp).sum(axis=0)
        v_line = np.asarray(self.photosphere.line_velocities(age), float)
        r_eff = np.sqrt(total / (4.0 * np.pi * SIGMA_SB_CGS * t_eff**4))
        return PhotosphereState(
            phase_d=phase, age_d=age, temperature_K=t_eff, radius_cm=r_eff, luminosity_erg_s=total,
            v_phot_c=(weights * v_phot).sum(axis=0), v_max_c=np.asarray(self.photosphere.v_max(age), float),
            component_names=self.component_names, comp_temperature_K=temp, comp_radius_cm=radius,
            comp_luminosity_erg_s=lum, comp_v_phot_c=v_phot, v_line_c=(weights * v_line).sum(axis=0),
            comp_v_line_c=v_line)

    def flux_flam(self, phase_d, wavelength_A) -> np.ndarray:
        """Observed F_lambda (erg s^-1 cm^-2 A^-1), shape (n_epoch, n_wave), at observed vacuum wavelengths."""
        phase = self._phases(phase_d)
        lam_obs = np.atleast_1d(np.asarray(wavelength_A, dtype=float)).ravel()
        check_range("wavelength_A", lam_obs, 0.0, None, low_open=True, unit=" A")
        st = self.state(phase)
        return self._flux_from_state(st, lam_obs)

    def flux_flam_rows(self, phase_d, wavelength_A) -> np.ndarray:
        """Observed F_lambda at each epoch's own wavelengths: ``wavelength_A`` (n_epoch, n_wave) -> (n_epoch, n_wave).

        The photosphere is evaluated once for all epochs; the spectrum block by block of ROWS_BLOCK epochs
        (each block at the block's wavelengths, the diagonal kept), so time and memory grow linearly with
        the epochs, and every value equals ``flux_flam`` at the same epochs.
        """
        phase = self._phases(phase_d)
        lam = np.asarray(wavelength_A, dtype=float)
        if lam.ndim != 2 or lam.shape[0] != phase.size:
            raise ForecastInputError(f"wavelength_A: shape {lam.shape}, expected ({phase.size}, n_wave)")
        check_range("wavelength_A", lam, 0.0, None, low_open=True, unit=" A")
        st = self.state(phase)
        out = np.empty(lam.shape)
        for lo in range(0, phase.size, ROWS_BLOCK):
            hi = min(lo + ROWS_BLOCK, phase.size)
            part = _StateRows(st.comp_temperature_K[:, lo:hi], st.comp_radius_cm[:, lo:hi])
            every = self._flux_from_state(part, lam[lo:hi].ravel()).reshape(hi - lo, hi - lo, -1)
            out[lo:hi] = every[np.arange(hi - lo), np.arange(hi - lo)]
        return out

    def _flux_from_state(self, st: PhotosphereState, lam_obs: np.ndarray) -> np.ndarray:
        z1 = 1.0 + self.redshift
        lam_rest = lam_obs / z1
        # L_lambda = 4 pi R^2 * pi B_lambda  ->  per unit area at the observer / (4 pi D_L^2 (1+z))
        scale = np.pi * st.comp_radius_cm**2 / (self.luminosity_distance_cm**2 * z1)  # (n_comp, n_epoch)
        out = planck_sum_flam(lam_rest, st.comp_temperature_K, scale)
        dust = transmission(lam_obs, self.ebv_mw)
        if self.ebv_host:
            dust = dust * transmission(lam_rest, self.ebv_host)
        out *= dust[None, :]
        return out

    def mag_ab(self, phase_d, bands) -> dict[str, np.ndarray]:
        """Synthetic AB magnitudes per band (speclite names) at each phase: {band: array (n_epoch,)}."""
        bands = (bands,) if isinstance(bands, str) else tuple(bands)
        bs = band_set(bands)
        flux = self.flux_flam(phase_d, bs.wavelength_A)
        mags = bs.mag_ab(flux)
        return {b: mags[:, j] for j, b in enumerate(bands)}

    def mag_vega(self, phase_d, bands) -> dict[str, np.ndarray]:
        """Vega magnitudes, from the AB ones and tabulated Vega zero points."""
        bands = (bands,) if isinstance(bands, str) else tuple(bands)
        offsets = {b: ab_minus_vega(b) for b in bands}  # validate before computing
        return {b: m - offsets[b] for b, m in self.mag_ab(phase_d, bands).items()}

    # ---------------------------------------------------------------- Quantity entry points

    def spectrum(self, phase, wavelength) -> u.Quantity:
        """Observed F_lambda at ``phase`` (time since t0, observer frame) and observed vacuum ``wavelength``.

        Both are Quantities (any time / length unit), scalars or arrays; the result, in
        erg s^-1 cm^-2 A^-1, has shape ``phase.shape + wavelength.shape`` (same numbers as
        :meth:`flux_flam`).
        """
        phase_d, lam_A = value_in(phase, u.day, "phase"), value_in(wavelength, u.AA, "wavelength")
        flux = self.flux_flam(phase_d, lam_A)
        return (flux.reshape(np.shape(phase_d) + np.shape(lam_A))) * FLAM

    def magnitudes(self, phase, bands, system: str = "AB") -> dict[str, u.Quantity]:
        """Synthetic magnitudes per band (speclite names) at ``phase`` (Quantity): {band: Quantity}.

        ``system`` "AB" gives ``u.ABmag``; "Vega" gives ``u.mag`` in the Vega system
        (tabulated zero points).  Each value has the shape of ``phase``.
        """
        phase_d = value_in(phase, u.day, "phase")
        key = str(system).strip().lower()
        if key not in ("ab", "vega"):
            raise ForecastInputError(f"system = {system!r}: allowed AB | Vega")
        mags = (self.mag_ab if key == "ab" else self.mag_vega)(phase_d, bands)
        unit = u.ABmag if key == "ab" else u.mag
        return {b: m.reshape(np.shape(phase_d)) * unit for b, m in mags.items()}

    def photosphere_at(self, phase) -> dict[str, u.Quantity]:
        """The photosphere at ``phase`` (Quantity, observer frame) as Quantities of the shape of ``phase``.

        Keys: ``phase``, ``age`` (rest frame) in d; ``temperature`` in K; ``radius`` in cm;
        ``luminosity`` in erg/s; ``v_phot``, ``v_max`` in km/s (totals as in :meth:`state`).
        """
        phase_d = value_in(phase, u.day, "phase")
        st = self.state(phase_d)
        c_kms = C_CGS / 1e5
        shape = np.shape(phase_d)
        values = {"phase": (st.phase_d, u.day), "age": (st.age_d, u.day), "temperature": (st.temperature_K, u.K),
                  "radius": (st.radius_cm, u.cm), "luminosity": (st.luminosity_erg_s, u.erg / u.s),
                  "v_phot": (st.v_phot_c * c_kms, u.km / u.s), "v_max": (st.v_max_c * c_kms, u.km / u.s)}
        return {k: np.asarray(v, float).reshape(shape) * unit for k, (v, unit) in values.items()}


__all__ = ["Transient", "PhotosphereState"]
