"""The ECSV tables of a plan folder: ``windows.ecsv``, ``features.ecsv``, ``exposures.ecsv``.

Written with astropy's ECSV writer so ``astropy.table.Table.read(path)`` gives them back with units,
column descriptions, ``Time`` columns (UTC, ISO) and the table meta: the kncast version, the event
(id, t0, RA/Dec, distance), the photosphere model and the settings that made the plan.  One
missing-value convention everywhere: a missing value is masked (an empty field in the file).
Column lists: docs/commands/plan.md, section "ECSV columns".
"""
from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

from kncast.planner.observation import forecast_airmass

__all__ = ["WINDOW_COLUMNS", "FEATURE_COLUMNS", "EXPOSURE_COLUMNS", "write_tables", "write_table",
           "table_meta", "window_rows", "exposure_rows"]

TIME = "time"  # column kind: an ISO UTC string in the rows, an astropy Time (scale utc, format isot) in the file

WINDOW_COLUMNS = {  # name: (kind, unit, description)
    "site": (str, None, "site id"),
    "night": (str, None, "local date of the evening the night starts"),
    "window": (int, None, "index of the window in the night"),
    "used": (bool, None, "the window the plan uses that night"),
    "start_utc": (TIME, None, "window start (UTC)"),
    "end_utc": (TIME, None, "window end (UTC)"),
    "hours": (float, "h", "window length"),
    "best_utc": (TIME, None, "time of the best airmass in the window (UTC)"),
    "best_airmass": (float, None, "best airmass in the window"),
    "best_altitude_deg": (float, "deg", "target altitude at the best-airmass time"),
    "moon_illumination": (float, None, "illuminated fraction of the Moon (0-1)"),
    "moon_sep_deg": (float, "deg", "Moon-target separation at the best-airmass time"),
    "moon_altitude_deg": (float, "deg", "Moon altitude at the best-airmass time"),
    "phase_start_d": (float, "d", "days since t0 at the window start"),
    "phase_end_d": (float, "d", "days since t0 at the window end"),
}
FEATURE_COLUMNS = {
    "site": (str, None, "site id"),
    "night": (str, None, "local date of the evening the night starts"),
    "phase_d": (float, "d", "epoch: days since t0 at the middle of the observing block"),
    "epoch_utc": (TIME, None, "UTC of the epoch (plan.json nights[].epoch.utc)"),
    "setup": (str, None, "setup id (site/telescope/instrument mode)"),
    "id": (str, None, "feature id"),
    "species": (str, None, "ion producing the feature"),
    "trough_A": (float, "Angstrom", "observed wavelength of the absorption trough"),
    "measured_A": (float, "Angstrom", "wavelength where the trough is measured (masked: off the detector)"),
    "arm": (str, None, "spectrograph arm covering the trough (masked: none)"),
    "depth": (float, None, "expected fractional depth of the trough (masked: no LTE estimate)"),
    "snr_bin": (float, None, "continuum S/N per velocity bin at the trough in the usable time"),
    "snr_resel": (float, None, "continuum S/N per resolution element at the trough in the usable time"),
    "n_bins": (float, None, "usable velocity bins across the trough"),
    "significance": (float, None, "detection significance of the trough in the usable time (sigma)"),
    "time_to_sigma_s": (float, "s", "on-source time for the target significance (masked: unreachable)"),
    "usable_trough": (float, None, "fraction of the trough on the detector and usable"),
    "telluric_loss_trough": (float, None, "fraction of the trough lost to telluric bands"),
    "telluric_correctable_trough": (float, None, "fraction of the trough in correctable telluric bands"),
    "telluric_loss_emission": (float, None, "fraction of the emission peak lost to telluric bands"),
    "below_cutoff": (bool, None, "the trough lies below the atmospheric cutoff"),
    "lte": (bool, None, "the feature has an LTE depth estimate"),
    "target": (bool, None, "a diagnostic feature of that epoch"),
}
EXPOSURE_COLUMNS = {
    "site": (str, None, "site id"),
    "night": (str, None, "local date of the evening the night starts"),
    "phase_d": (float, "d", "epoch: days since t0 at the middle of the observing block"),
    "epoch_utc": (TIME, None, "UTC of the epoch (plan.json nights[].epoch.utc)"),
    "setup": (str, None, "setup id (site/telescope/instrument mode)"),
    "airmass": (float, None, "forecast airmass of the block"),
    "moon_illumination": (float, None, "illuminated fraction of the Moon (0-1)"),
    "moon_sep_deg": (float, "deg", "Moon-target separation"),
    "available_s": (float, "s", "usable time of the night (window capped, minus overhead)"),
    "n_targets": (int, None, "diagnostic features of the epoch"),
    "n_detected": (int, None, "diagnostic features detected at the target significance"),
    "feature": (str, None, "reference feature: the best-measured diagnostic trough (masked: none)"),
    "trough_obs_A": (float, "Angstrom", "observed wavelength of the reference trough"),
    "arm": (str, None, "spectrograph arm covering the reference trough"),
    "significance": (float, None, "significance of the reference trough in the usable time (sigma)"),
    "snr_bin": (float, None, "continuum S/N per velocity bin at the reference trough"),
    "time_to_sigma_s": (float, "s", "on-source time for the target significance"),
    "nexp": (int, None, "number of single exposures (masked: none)"),
    "exposure_s": (float, "s", "length of each single exposure"),
    "detects": (bool, None, "at least one diagnostic feature at the target significance"),
    "score": (float, None, "features detected (the ranking score)"),
    "chosen": (bool, None, "the night's best choice (plan.json nights[].choice)"),
}


def _missing(v) -> bool:
    return v is None or (isinstance(v, float) and np.isnan(v))


def _column(rows: list[dict], name: str, kind, unit, description):
    """A masked column (or a Time column) of ``rows[*][name]``; None and NaN are masked.

    A column with nothing missing is a plain Column (the ECSV text is the same either way).
    """
    from astropy.table import Column, MaskedColumn
    from astropy.time import Time

    values = [r[name] for r in rows]
    if kind is float:
        data = np.array(values, dtype=float).reshape(len(values))  # None becomes NaN
        mask = np.isnan(data)
    else:
        mask = np.array([_missing(v) for v in values], dtype=bool)
    if kind is TIME:
        t = Time([("2000-01-01T00:00:00" if m else str(v).rstrip("Z")) for v, m in zip(values, mask)] or [],
                 format="isot", scale="utc", precision=0)
        if mask.any():
            t[mask] = np.ma.masked
        t.info.description = description
        return t
    if kind is not float:
        fill = {int: 0, bool: False, str: ""}[kind]
        dtype = {int: np.int64, bool: bool, str: str}[kind]
        data = np.array([fill if m else v for v, m in zip(values, mask)], dtype=dtype)
    if not mask.any():
        return Column(data, unit=unit, description=description)
    return MaskedColumn(data, mask=mask, unit=unit, description=description)


def table_meta(plan) -> dict:
    """What made the table: kncast version, event (id, t0, RA/Dec, distance), model and settings."""
    from kncast.planner import __version__

    ev = plan.event.summary()
    model = plan.model or {}
    return {"kncast": __version__, "event_id": ev["id"], "t0_utc": ev["t0_utc"], "ra_deg": ev["ra_deg"],
            "dec_deg": ev["dec_deg"], "distance_mpc": ev["distance_mpc"], "distance_err_mpc": ev.get("distance_err_mpc"),
            "redshift": ev["redshift"], "ebv_mw": ev.get("ebv_mw"),
            "model": {"name": model.get("name"), "parameters": model.get("parameters") or {}},
            "settings": _plain(dict(plan.settings))}


def _plain(value):
    """``value`` with numpy scalars and tuples made plain (YAML in the ECSV header)."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def write_table(columns: dict, units: dict, path: Path, description: str, meta: dict | None = None) -> None:
    """Write ``columns`` (name: array or column) as ECSV at ``path`` with ``units``, a description and ``meta``."""
    from astropy.table import Table

    from kncast.planner.output import atomic_path

    t = Table(columns)
    for name, unit in units.items():
        if name in t.colnames and unit:
            t[name].unit = unit
    t.meta["description"] = description
    t.meta.update(meta or {})
    text = ecsv_text(t)
    with atomic_path(path, suffix=".ecsv") as tmp:
        with open(tmp, "w", newline="") as f:  # the line ends as written (os.linesep), as astropy writes them
            f.write(text)


def ecsv_text(table) -> str:
    """The ECSV text of ``table``, byte for byte what ``table.write(path, format="ascii.ecsv")`` writes.

    astropy's ECSV writer formats every value on its own (``str(column[i])``), through numpy.ma for a
    masked column (~10 us a value: 0.2 s for a plan's tables).  Its writer class is kept, header and all;
    only the data values of 1-d float64, integer, boolean and text columns are formatted a column at a
    time: ``str`` of the Python value is the same text as ``str`` of the numpy scalar for these types,
    and a masked value is an empty field, as astropy writes it (tested against astropy's writer)."""
    import os

    from astropy.table import Table

    lines = _writer_class()().write(Table(table, copy=False))
    return os.linesep.join(lines) + os.linesep


_FAST_KINDS = frozenset("biuU")  # column kinds whose Python values print as their numpy scalars do


@functools.lru_cache(maxsize=1)
def _writer_class():
    """astropy's ECSV writer, its data values formatted a column at a time (see :func:`ecsv_text`)."""
    from astropy.io.ascii import ecsv

    class ColumnwiseData(ecsv.EcsvData):
        def str_vals(self):
            if not all(_columnwise(col) for col in self.cols):
                return super().str_vals()
            for col in self.cols:
                col.str_vals = [str(v) for v in np.asarray(col).tolist()]
                mask = getattr(col, "mask", None)
                if mask is not None:
                    for idx in np.flatnonzero(mask):
                        col.str_vals[idx] = ""
            return [col.str_vals for col in self.cols]

    class ColumnwiseEcsv(ecsv.Ecsv):
        data_class = ColumnwiseData

    return ColumnwiseEcsv


def _columnwise(col) -> bool:
    dtype = col.info.dtype
    return len(col.shape) == 1 and (dtype.kind in _FAST_KINDS or dtype == np.float64)


def _table(rows, spec, path, description, meta):
    cols = {name: _column(rows, name, *rest) for name, rest in spec.items()}
    write_table(cols, {}, path, description, meta)


def window_rows(plan) -> list[dict]:
    from kncast.planner.output import iso_utc

    rows = []
    for p in plan.nights:
        for k, w in enumerate(p.record.windows):
            rows.append({"site": p.site.id, "night": p.record.night.isoformat(), "window": k,
                         "used": k == p.window_index, "start_utc": iso_utc(w.start), "end_utc": iso_utc(w.end),
                         "hours": w.hours, "best_utc": iso_utc(w.best_time), "best_airmass": w.best_airmass,
                         "best_altitude_deg": w.best_altitude_deg, "moon_illumination": w.moon_illumination,
                         "moon_sep_deg": w.moon_sep_deg, "moon_altitude_deg": w.moon_altitude_deg,
                         "phase_start_d": w.phase_start_d, "phase_end_d": w.phase_end_d})
    return rows


def _epoch_utc(p) -> str | None:
    from kncast.planner.output import iso_utc

    return None if p.window is None else iso_utc(p.window.best_time)


def exposure_rows(plan) -> list[dict]:
    rows = []
    for p in plan.nights:
        w = p.window
        utc = _epoch_utc(p) if p.outcomes else None
        for o in p.outcomes:
            rows.append({"site": p.site.id, "night": p.record.night.isoformat(), "phase_d": p.phase_d,
                         "epoch_utc": utc,
                         "setup": o.setup, "airmass": forecast_airmass(w), "moon_illumination": w.moon_illumination,
                         "moon_sep_deg": w.moon_sep_deg, "available_s": p.hours_available * 3600.0,
                         "n_targets": len(o.targets), "n_detected": len(o.detected), "feature": o.feature or None,
                         "trough_obs_A": o.trough_obs_A, "arm": o.arm or None, "significance": o.significance,
                         "snr_bin": o.snr_bin, "time_to_sigma_s": o.time_to_sigma_s,
                         "nexp": o.nexp if o.nexp is not None and o.nexp >= 0 else None,
                         "exposure_s": o.exposure_s, "detects": bool(o.detected), "score": o.score,
                         "chosen": o is p.choice})
    return rows


def _feature_rows(plan) -> list:
    """plan.features as rows with empty text (no arm, say) read as missing, and the UTC of each epoch:
    views of the plan's own rows (a copy of each would hold ~1 KB a row: 30 MB at 60 nights x 8 sites)."""
    utc = {(p.site.id, p.record.night.isoformat()): _epoch_utc(p) for p in plan.nights if p.outcomes}
    return [_FeatureRow(r, utc.get((r["site"], r["night"]))) for r in plan.features]


class _FeatureRow:
    """One row of plan.features as features.ecsv reads it (see :func:`_feature_rows`)."""

    __slots__ = ("row", "epoch_utc")

    def __init__(self, row: dict, epoch_utc):
        self.row, self.epoch_utc = row, epoch_utc

    def __getitem__(self, name):
        if name == "epoch_utc":
            return self.epoch_utc
        value = self.row[name]
        return None if value == "" else value


def write_tables(plan, folder: Path) -> dict:
    """``windows.ecsv``, ``features.ecsv``, ``exposures.ecsv`` in ``folder``; returns their names."""
    meta = table_meta(plan)
    _table(window_rows(plan), WINDOW_COLUMNS, folder / "windows.ecsv",
           "kncast plan: every observing window per site and night (used = the window the plan uses)", meta)
    _table(_feature_rows(plan), FEATURE_COLUMNS, folder / "features.ecsv",
           "kncast plan: what each feature will show per site-night epoch and setup in the usable time "
           f"(significance of the trough, continuum S/N per {plan.settings['bin_kms']:g} km/s bin; target: a "
           "diagnostic feature of that epoch)", meta)
    _table(exposure_rows(plan), EXPOSURE_COLUMNS, folder / "exposures.ecsv",
           "kncast plan: per site-night epoch and setup, the best-measured diagnostic trough: its significance "
           f"in the usable time and the exposure reaching {plan.settings['sigma']:g} sigma", meta)
    return {"windows": "windows.ecsv", "features": "features.ecsv", "exposures": "exposures.ecsv"}
