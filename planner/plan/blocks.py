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

__all__ = ["Block", "plan_blocks", "block_record", "block_records", "GUIDE_A", "STANDARD_DAIRMASS"]


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
    on_source_s: float = 0.0            # exposure time on the source (the N x t total), s


def plan_blocks(plan) -> list[Block]:
    """Every planned block of ``plan``, in time order."""
    refs = {r.id: r for r in plan.setup_refs}
    chosen = [(p, o) for p in plan.nights for o in getattr(p, "choices", []) or []]
    fluxes = _reference_fluxes(plan, chosen)
    out = [_timed_block(plan, p, o) for p, o in chosen]
    _through_the_blocks(plan, out)
    _exposure_figures(plan, out, refs, fluxes)
    _refractions(out, refs)
    _standard_hints(plan, out)
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


def _timed_block(plan, p, o) -> Block:
    """The block of choice ``o`` on night ``p``: its place in the window and its exposures."""
    w = p.window
    # a detection block holds the exposures reaching the target significance; a classification block
    # (nothing detected yet) takes the usable time
    on_source = o.time_to_sigma_s if (o.detected and o.time_to_sigma_s) else p.hours_available * 3600.0
    n_exp = max(1, int(np.ceil(on_source / DEFAULT_MAX_EXPOSURE_S - 1e-9)))
    length_d = min(on_source + plan.settings["overhead_s"], plan.settings["max_hours"] * 3600.0) / 86400.0
    start, end, best = w.start.utc.mjd, w.end.utc.mjd, w.best_time.utc.mjd
    length_d = min(length_d, end - start)
    t0 = float(np.clip(best - 0.5 * length_d, start, end - length_d))
    return Block(night=p, outcome=o, start_mjd=t0, end_mjd=t0 + length_d, n_exp=n_exp, exp_s=on_source / n_exp,
                 kind="detection" if o.detected else "classification", on_source_s=on_source)


def _targets_at(plan, blocks: list, mjd: np.ndarray):
    """(altitude deg, airmass, parallactic angle deg) of the plan's target from each block's site at the
    times ``mjd`` (shape (n_blocks, n_times), a row per block), all in one evaluation."""
    from kncast.forecast.airmass import airmass_from_altitude
    from kncast.planner.visibility import sky
    from kncast.planner.visibility.parallactic import parallactic_angle_ephemeris_deg

    sites = sky.SiteArrays.of([b.night.site for b in blocks])
    alt, _az = sky.target_altaz_deg(plan.visibility.ephemeris, sites, mjd)
    q = parallactic_angle_ephemeris_deg(plan.visibility.ephemeris, sites, mjd)
    with np.errstate(invalid="ignore"):
        x = np.where(alt > 0, airmass_from_altitude(np.clip(alt, 1e-3, 90.0)), np.inf)
    return alt, x, q


def _through_the_blocks(plan, blocks: list) -> None:
    """Altitude, airmass and parallactic angle at the start, middle and end of every block."""
    if not blocks:
        return
    start, end = (np.array([getattr(b, k) for b in blocks]) for k in ("start_mjd", "end_mjd"))
    alt, x, q = _targets_at(plan, blocks, np.stack([start, 0.5 * (start + end), end], axis=1))
    for b, a_row, x_row, q_row in zip(blocks, alt.tolist(), x.tolist(), q.tolist()):
        b.altitude_deg = [round(a, 2) for a in a_row]
        b.airmass = [round(v, 3) for v in x_row]
        b.parallactic_angle_deg = [round(v, 1) for v in q_row]


def _exposure_figures(plan, blocks: list, refs: dict, fluxes: list) -> None:
    """Continuum S/N per bin and significance of each block's exposure at its reference trough, where the
    source has F_lambda ``fluxes[i]`` (None: no reference trough to measure); one evaluation per setup,
    its blocks along the wavelength axis (each sample with its own night's conditions)."""
    groups: dict[str, list] = {}
    for b, flux in zip(blocks, fluxes):
        rec = _reference_record(b.outcome)
        if rec is not None:
            groups.setdefault(b.outcome.setup, []).append((b, rec, flux))
    for setup_id, members in groups.items():
        _setup_exposures(plan, refs[setup_id], members)


def _setup_exposures(plan, ref, members: list) -> None:
    """:func:`_exposure_figures` for the (block, reference record, flux) ``members`` of one setup."""
    from kncast.forecast import exposure
    from kncast.forecast.detect import bin_width_A, significance, snr_per_bin
    from kncast.planner.observation import batched_conditions

    blocks = [m[0] for m in members]
    lam = np.array([m[1]["measured_A"] for m in members], dtype=float)
    cond = batched_conditions([b.night.window for b in blocks], plan.atmospheres[ref.site.id])
    grid = exposure.setup_grid(ref.telescope, ref.instrument, ref.setup, wavelength_A=lam)
    telluric = plan.tellurics.transmission(lam, cond.airmass, cond.pwv_mm)
    r = exposure.rates(np.array([[m[2] for m in members]], dtype=float), grid, cond, telluric)
    res = exposure.expose(r, np.array([b.on_source_s for b in blocks]), np.array([b.n_exp for b in blocks]))
    s_bin = np.ravel(snr_per_bin(res.snr_per_pixel, r.dispersion_A_per_pix, bin_width_A(lam, plan.settings["bin_kms"])))
    depth = np.array([m[1]["depth"] or 0.0 for m in members], dtype=float)
    n_bins = np.array([m[1]["n_bins"] or 0.0 for m in members], dtype=float)
    sig = np.ravel(significance(depth, s_bin, n_bins))
    for b, s, g in zip(blocks, s_bin.tolist(), sig.tolist()):
        b.snr_bin, b.significance = s, g


def _refractions(blocks: list, refs: dict) -> None:
    """Differential refraction across each block's setup and against the guide wavelength at the middle of
    the block (typical air at the site's elevation), and the slit advice it implies; all blocks at once."""
    shown = [b for b in blocks if np.isfinite(b.airmass[1])]
    if not shown:
        return
    from kncast.forecast.airmass import zenith_from_airmass
    from kncast.forecast.refraction import differential_refraction_arcsec, slit_advice, typical_conditions

    setups = [refs[b.outcome.setup] for b in shown]
    air = typical_conditions(np.array([b.night.site.elevation_m for b in shown]))
    z = zenith_from_airmass(np.array([b.airmass[1] for b in shown]))
    ends = np.clip([[r.setup.min_A, r.setup.max_A] for r in setups], 2000.0, 25000.0)  # the index formula's range

    def adr(lam, ref_A):
        return np.asarray(differential_refraction_arcsec(lam, ref_A, z, air.pressure_hpa, air.temperature_C,
                                                         air.water_vapour_hpa))

    across = np.abs(adr(ends[:, 0], ends[:, 1]))
    guide = np.maximum(np.abs(adr(ends[:, 0], GUIDE_A)), np.abs(adr(ends[:, 1], GUIDE_A)))
    for b, r, a_across, a_guide in zip(shown, setups, across.tolist(), guide.tolist()):
        b.adr_arcsec = round(a_across, 3)
        b.adr_guide_arcsec = round(a_guide, 3)
        if getattr(r.instrument, "kind", "slit") == "fibre":
            b.slit_advice = (f"fibre of {r.instrument.slit_width_arcsec:g} arcsec: guide at {GUIDE_A:.0f} A; the "
                             f"ends of the setup sit up to {b.adr_guide_arcsec:g} arcsec from the guided position")
        else:
            b.slit_advice = slit_advice(b.adr_arcsec, r.instrument.slit_width_arcsec)


def _standard_hints(plan, blocks: list) -> None:
    """For every block with a finite airmass: the airmass to match and the latest time (MJD) the target's
    airmass stays within STANDARD_DAIRMASS of it, on STEP_D steps from the block's end to the window's."""
    hinted = [b for b in blocks if np.isfinite(b.airmass[1])]
    if not hinted:
        return
    w_end = np.array([b.night.window.end.utc.mjd for b in hinted])
    b_end = np.array([b.end_mjd for b in hinted])
    # the times np.arange(b_end, w_end + STEP_D, STEP_D) gives each block, as rows padded with the last one
    steps = np.maximum(np.ceil((w_end + STEP_D - b_end) / STEP_D).astype(int), 1)
    k = np.arange(steps.max())
    delta = (b_end + STEP_D) - b_end  # numpy's arange steps by the difference of its first two values
    times = b_end[:, None] + k * delta[:, None]
    _alt, x, _q = _targets_at(plan, hinted, np.minimum(times, (b_end + (steps - 1) * delta)[:, None]))
    x_mid = np.array([b.airmass[1] for b in hinted])
    far = (np.abs(x - x_mid[:, None]) > STANDARD_DAIRMASS) & (k < steps[:, None])
    for i, b in enumerate(hinted):
        hits = np.flatnonzero(far[i])
        last = float(times[i, steps[i] - 1])
        b.standard_airmass = round(float(x_mid[i]), 2)
        b.standard_latest_mjd = float(times[i, hits[0]] if hits.size else min(last, w_end[i]))


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


def block_records(plan, blocks: list) -> list[dict]:
    """The plan.json records of ``blocks`` (keys in docs/json.md, section "blocks"); their UTC times
    converted in one pass."""
    from kncast.planner.output import iso_utc_mjds

    mjds = [m for b in blocks for m in (b.start_mjd, b.end_mjd, b.standard_latest_mjd)]
    utc = iter(iso_utc_mjds(mjds))
    target = plan.event.targets()[0]
    ra_dec = sexagesimal(target.ra_deg, target.dec_deg)
    return [block_record(plan, b, (next(utc), next(utc), next(utc)), ra_dec) for b in blocks]


def block_record(plan, b: Block, utc: tuple, ra_dec: tuple) -> dict:
    """The plan.json record of one block (keys in docs/json.md, section "blocks"); ``utc``: the ISO UTC of
    its start, end and telluric-standard time, ``ra_dec``: the target's sexagesimal RA and Dec."""
    p, o = b.night, b.outcome
    target = plan.event.targets()[0]
    ra_hms, dec_dms = ra_dec
    start_utc, end_utc, latest_utc = utc
    return {
        "site": p.site.id, "telescope": o.telescope, "setup": o.setup, "night": p.record.night.isoformat(),
        "kind": b.kind, "phase_d": round(0.5 * (b.start_mjd + b.end_mjd) - float(plan.event.t0.utc.mjd), 4),
        "start_utc": start_utc, "end_utc": end_utc,
        "start_local": _local(b.start_mjd, p.site.tz), "end_local": _local(b.end_mjd, p.site.tz),
        "n_exp": b.n_exp, "exp_s": round(b.exp_s, 1), "snr": _round(b.snr_bin, 2),
        "significance": _round(b.significance, 2), "feature": o.feature, "detected": list(o.detected),
        "airmass": [_round(v, 3) for v in b.airmass], "altitude_deg": b.altitude_deg,
        "parallactic_angle_deg": b.parallactic_angle_deg, "adr_arcsec": b.adr_arcsec,
        "adr_guide_arcsec": b.adr_guide_arcsec, "guide_A": GUIDE_A, "slit_advice": b.slit_advice,
        "ra_hms": ra_hms, "dec_dms": dec_dms, "ra_deg": target.ra_deg, "dec_deg": target.dec_deg,
        "exposure_range_s": _exposure_range(p, b),
        "target": target.id,
        "telluric_standard": {"airmass": b.standard_airmass, "latest_utc": latest_utc,
                              "within_airmass": STANDARD_DAIRMASS},
    }
