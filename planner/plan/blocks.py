"""Observing blocks: exactly when to take each planned spectrum, and what the observer needs for it.

One block per telescope and night that the plan chose (:attr:`kncast.planner.plan.core.NightPlan.choices`):

* timing: the acquisition overhead plus the exposures reaching the target significance on the
  best-measured trough (or, for a classification spectrum, the usable time), centred on the
  window's best-airmass time and kept inside the window and the night's time cap;
* the exposures: N x t with single exposures of at most the exposure cap, and the continuum
  S/N per velocity bin and the significance *this* exposure gives at the reference trough;
* the target through the block (start, middle, end): airmass (Kasten & Young 1989), altitude and
  parallactic angle (:mod:`kncast.planner.visibility.parallactic`);
* the atmospheric differential refraction across the setup and against the guide wavelength
  at the middle of the block (:mod:`kncast.forecast.refraction`), and the slit advice it implies;
* a telluric-standard hint: the airmass to match and the latest time to take one while the
  target's airmass is still within ``STANDARD_DAIRMASS`` of the block's (common practice).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S

GUIDE_A = 6000.0          # guide-camera wavelength assumed for the refraction offsets, vacuum A (common practice)
STANDARD_DAIRMASS = 0.1   # a telluric standard within 0.1 airmass of the target (common practice)
STEP_D = 2.0 / 1440.0     # time step for the telluric-standard limit, days (2 min)

__all__ = ["Block", "plan_blocks", "block_record", "GUIDE_A", "STANDARD_DAIRMASS"]


@dataclass
class Block:
    """One planned spectrum at one telescope (times MJD UTC; angles deg; refraction arcsec)."""

    night: object                       # kncast.planner.plan.core.NightPlan
    outcome: object                     # its SetupOutcome at this telescope
    start_mjd: float
    end_mjd: float
    n_exp: int
    exp_s: float
    kind: str                           # "detection" or "classification"
    snr_bin: float | None = None        # continuum S/N per velocity bin at the reference trough, this exposure
    significance: float | None = None   # of the reference trough, this exposure
    airmass: list = field(default_factory=list)        # start, middle, end
    altitude_deg: list = field(default_factory=list)
    parallactic_angle_deg: list = field(default_factory=list)
    adr_arcsec: float | None = None     # blue to red end of the setup, middle of the block
    adr_guide_arcsec: float | None = None  # largest offset of either end from the guide wavelength
    slit_advice: str = ""
    standard_airmass: float | None = None
    standard_latest_mjd: float | None = None


def plan_blocks(plan) -> list[Block]:
    """Every planned block of ``plan``, in time order."""
    refs = {r.id: r for r in plan.setup_refs}
    chosen = [(p, o) for p in plan.nights for o in getattr(p, "choices", []) or []]
    fluxes = _reference_fluxes(plan, chosen)
    out = [_block(plan, p, o, refs[o.setup], f) for (p, o), f in zip(chosen, fluxes)]
    return sorted(out, key=lambda b: b.start_mjd)


def _reference_record(o) -> dict | None:
    """The feature record of ``o``'s reference feature, when it has a place to measure it."""
    if o.feature is None:
        return None
    rec = next(f for f in o.features if f["id"] == o.feature)
    return rec if rec["measured_A"] is not None else None


def _reference_fluxes(plan, chosen: list) -> list:
    """Source F_lambda (erg s^-1 cm^-2 A^-1) at each choice's reference trough and epoch (None without one),
    all in one evaluation of the source."""
    rows = [(k, p.phase_d, rec["measured_A"]) for k, (p, o) in enumerate(chosen)
            if (rec := _reference_record(o)) is not None]
    out = [None] * len(chosen)
    if rows:
        k, phase, lam = (np.array(v) for v in zip(*rows))
        flux = plan.transient.flux_flam_rows(phase.astype(float), lam.astype(float)[:, None])
        for i, f in zip(k, flux[:, 0]):
            out[int(i)] = float(f)
    return out


def _block(plan, p, o, ref, flux) -> Block:
    w = p.window
    # a detection block holds the exposures reaching the target significance; a classification block
    # (nothing detected yet) takes the usable time
    on_source = o.time_to_sigma_s if (o.detected and o.time_to_sigma_s) else p.hours_available * 3600.0
    n_exp = max(1, int(np.ceil(on_source / DEFAULT_MAX_EXPOSURE_S - 1e-9)))
    length_d = min(on_source + plan.settings["overhead_s"], plan.settings["max_hours"] * 3600.0) / 86400.0
    start, end, best = w.start.utc.mjd, w.end.utc.mjd, w.best_time.utc.mjd
    length_d = min(length_d, end - start)
    t0 = float(np.clip(best - 0.5 * length_d, start, end - length_d))
    b = Block(night=p, outcome=o, start_mjd=t0, end_mjd=t0 + length_d, n_exp=n_exp, exp_s=on_source / n_exp,
              kind="detection" if o.detected else "classification")
    _through_the_block(plan, p, b)
    _exposure_figures(plan, p, o, ref, b, on_source, flux)
    _refraction(p, ref, b)
    _standard_hint(plan, p, b)
    return b


def _target_at(plan, site, mjd):
    """(altitude deg, airmass, parallactic angle deg) of the plan's target at ``mjd`` (array) from ``site``."""
    from kncast.forecast.airmass import airmass_from_altitude
    from kncast.planner.visibility import sky
    from kncast.planner.visibility.parallactic import parallactic_angle_ephemeris_deg

    mjd = np.asarray(mjd, dtype=float)
    sites = sky.SiteArrays.of([site])
    alt, _az = sky.target_altaz_deg(plan.visibility.ephemeris, sites, mjd)
    alt = np.ravel(alt)
    q = parallactic_angle_ephemeris_deg(plan.visibility.ephemeris, sites, mjd)
    with np.errstate(invalid="ignore"):
        x = np.where(alt > 0, airmass_from_altitude(np.clip(alt, 1e-3, 90.0)), np.inf)
    return alt, x, np.ravel(q)


def _through_the_block(plan, p, b: Block) -> None:
    mid = 0.5 * (b.start_mjd + b.end_mjd)
    alt, x, q = _target_at(plan, p.site, [b.start_mjd, mid, b.end_mjd])
    b.altitude_deg = [round(float(a), 2) for a in alt]
    b.airmass = [round(float(v), 3) for v in x]
    b.parallactic_angle_deg = [round(float(v), 1) for v in q]


def _exposure_figures(plan, p, o, ref, b: Block, on_source: float, flux) -> None:
    """Continuum S/N per bin and significance of this exposure at the reference trough, where the source
    has F_lambda ``flux`` (None: no reference trough to measure)."""
    rec = _reference_record(o)
    if rec is None:
        return
    from kncast.forecast import exposure
    from kncast.forecast.detect import bin_width_A, significance, snr_per_bin
    from kncast.planner.observation import batched_conditions

    lam = np.array([rec["measured_A"]])
    atm = plan.atmospheres[p.site.id]
    cond = batched_conditions([p.window], atm)
    grid = exposure.setup_grid(ref.telescope, ref.instrument, ref.setup, wavelength_A=lam)
    r = exposure.rates(np.array([[flux]]), grid, cond, plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm))
    res = exposure.expose(r, on_source, b.n_exp)
    s_bin = float(np.ravel(snr_per_bin(res.snr_per_pixel, r.dispersion_A_per_pix, bin_width_A(
        lam, plan.settings["bin_kms"])))[0])
    b.snr_bin = s_bin
    b.significance = float(significance(rec["depth"] or 0.0, s_bin, rec["n_bins"] or 0.0))


def _refraction(p, ref, b: Block) -> None:
    from kncast.forecast.airmass import zenith_from_airmass
    from kncast.forecast.refraction import differential_refraction_arcsec, slit_advice, typical_conditions

    x = b.airmass[1]
    if not np.isfinite(x):
        return
    air = typical_conditions(p.site.elevation_m)
    z = float(zenith_from_airmass(x))
    ends = np.clip([ref.setup.min_A, ref.setup.max_A], 2000.0, 25000.0)  # the index formula's range

    def adr(lam, ref_A):
        return differential_refraction_arcsec(lam, ref_A, z, air.pressure_hpa, air.temperature_C,
                                              air.water_vapour_hpa)

    across = adr(ends[0], ends[1])
    guide = [adr(lam, GUIDE_A) for lam in ends]
    b.adr_arcsec = round(abs(float(across)), 3)
    b.adr_guide_arcsec = round(max(abs(float(g)) for g in guide), 3)
    if getattr(ref.instrument, "kind", "slit") == "fibre":
        b.slit_advice = (f"fibre of {ref.instrument.slit_width_arcsec:g} arcsec: guide at {GUIDE_A:.0f} A; the ends "
                         f"of the setup sit up to {b.adr_guide_arcsec:g} arcsec from the guided position")
    else:
        b.slit_advice = slit_advice(b.adr_arcsec, ref.instrument.slit_width_arcsec)


def _standard_hint(plan, p, b: Block) -> None:
    """Airmass to match and the latest time (MJD) the target's airmass stays within STANDARD_DAIRMASS of it."""
    x_mid = b.airmass[1]
    if not np.isfinite(x_mid):
        return
    w_end = p.window.end.utc.mjd
    times = np.arange(b.end_mjd, w_end + STEP_D, STEP_D)
    _alt, x, _q = _target_at(plan, p.site, times)
    far = np.flatnonzero(np.abs(x - x_mid) > STANDARD_DAIRMASS)
    b.standard_airmass = round(float(x_mid), 2)
    b.standard_latest_mjd = float(times[far[0]] if far.size else min(times[-1], w_end))


def _iso(mjd):
    from astropy.time import Time

    from kncast.planner.output import iso_utc

    return None if mjd is None else iso_utc(Time(mjd, format="mjd", scale="utc"))


def _local(mjd, tz) -> str:
    import datetime as dt

    from kncast.planner.visibility.nights import MJD_UNIX_EPOCH

    moment = dt.datetime.fromtimestamp((mjd - MJD_UNIX_EPOCH) * 86400.0, tz=tz)
    return moment.isoformat(timespec="seconds")


def sexagesimal(ra_deg: float, dec_deg: float) -> tuple[str, str]:
    """('10:42:30.00', '-35:12:00.0') : RA in hours, Dec in degrees."""
    import astropy.units as u
    from astropy.coordinates import Angle

    ra = Angle(ra_deg, u.deg).to_string(unit=u.hourangle, sep=":", precision=2, pad=True)
    dec = Angle(dec_deg, u.deg).to_string(unit=u.deg, sep=":", precision=1, pad=True, alwayssign=True)
    return ra, dec


def _round(v, nd):
    return None if v is None or not np.isfinite(v) else round(float(v), nd)


def _exposure_range(p, b: Block) -> dict | None:
    """16/50/84 percentiles over the ensemble of the time reaching the target significance (detections)."""
    ens = getattr(p, "ensemble", None)
    if b.kind != "detection" or not ens or not ens.get("time_to_sigma_s"):
        return None
    return {k: round(v, 1) for k, v in ens["time_to_sigma_s"].items()}


def block_record(plan, b: Block) -> dict:
    """The plan.json record of one block (keys in docs/json.md, section "blocks")."""
    p, o = b.night, b.outcome
    target = plan.event.targets()[0]
    ra_hms, dec_dms = sexagesimal(target.ra_deg, target.dec_deg)
    return {
        "site": p.site.id, "telescope": o.telescope, "setup": o.setup, "night": p.record.night.isoformat(),
        "kind": b.kind, "phase_d": round(0.5 * (b.start_mjd + b.end_mjd) - float(plan.event.t0.utc.mjd), 4),
        "start_utc": _iso(b.start_mjd), "end_utc": _iso(b.end_mjd),
        "start_local": _local(b.start_mjd, p.site.tz), "end_local": _local(b.end_mjd, p.site.tz),
        "n_exp": b.n_exp, "exp_s": round(b.exp_s, 1), "snr": _round(b.snr_bin, 2),
        "significance": _round(b.significance, 2), "feature": o.feature, "detected": list(o.detected),
        "airmass": [_round(v, 3) for v in b.airmass], "altitude_deg": b.altitude_deg,
        "parallactic_angle_deg": b.parallactic_angle_deg, "adr_arcsec": b.adr_arcsec,
        "adr_guide_arcsec": b.adr_guide_arcsec, "guide_A": GUIDE_A, "slit_advice": b.slit_advice,
        "ra_hms": ra_hms, "dec_dms": dec_dms, "ra_deg": target.ra_deg, "dec_deg": target.dec_deg,
        "exposure_range_s": _exposure_range(p, b),
        "target": target.id,
        "telluric_standard": {"airmass": b.standard_airmass, "latest_utc": _iso(b.standard_latest_mjd),
                              "within_airmass": STANDARD_DAIRMASS},
    }
