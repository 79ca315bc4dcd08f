"""JSON Schema (draft 2020-12) of ``plan.json``, the document ``kncast plan`` writes.

Kept as a Python dict (package data is limited to TOML/ECSV/... files).
docs/json.md, section "plan" describes every member in words.
"""
from __future__ import annotations

from kncast.forecast.defaults import SNR_BASIS
from kncast.planner.visibility.nights import TWILIGHT_DEG

_num = {"type": "number"}
_num_or_null = {"type": ["number", "null"]}
_int_or_null = {"type": ["integer", "null"]}
_str_or_null = {"type": ["string", "null"]}
_utc = {"type": "string", "pattern": r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z$"}
_utc_or_null = {"anyOf": [_utc, {"type": "null"}]}
_date = {"type": "string", "pattern": r"^\d{4}-\d{2}-\d{2}$"}
_strings = {"type": "array", "items": {"type": "string"}}


def _obj(required: dict, optional: dict | None = None, extra: bool = False) -> dict:
    return {"type": "object", "required": list(required), "properties": {**required, **(optional or {})},
            "additionalProperties": extra}


WINDOW = _obj({
    "start_utc": _utc, "end_utc": _utc, "hours": {"type": "number", "minimum": 0}, "best_airmass": _num,
    "best_utc": _utc, "moon_illumination": {"type": "number", "minimum": 0, "maximum": 1},
    "moon_sep_deg": _num, "phase_start_d": _num, "phase_end_d": _num,
}, extra=True)

_bool = {"type": "boolean"}
_fraction = {"type": "number", "minimum": 0, "maximum": 1}

FEATURE = _obj({
    "id": {"type": "string"}, "species": {"type": "string"}, "trough_A": _num_or_null, "measured_A": _num_or_null,
    "arm": _str_or_null,
    "snr_bin": _num_or_null, "snr_resel": _num_or_null, "depth": _num_or_null, "n_bins": _num_or_null,
    "significance": _num_or_null, "time_to_sigma_s": _num_or_null, "usable_trough": _fraction,
    "telluric_loss_trough": _fraction, "telluric_correctable_trough": _fraction,
    "telluric_loss_emission": _fraction, "below_cutoff": _bool, "lte": _bool,
})

SETUP_OUTCOME = _obj({
    "setup": {"type": "string"}, "aperture_m": _num, "n_targets": {"type": "integer", "minimum": 0},
    "n_detected": {"type": "integer", "minimum": 0}, "targets": _strings, "detected": _strings,
    "feature": _str_or_null, "species": _str_or_null, "trough_obs_A": _num_or_null, "arm": _str_or_null,
    "tau_sobolev": _num_or_null, "depth": _num_or_null, "snr_bin": _num_or_null, "significance": _num_or_null,
    "time_to_sigma_s": _num_or_null, "nexp": _int_or_null, "exposure_s": _num_or_null, "detects": _bool,
    "snr_at": _num_or_null, "score": {"type": "number", "minimum": 0}, "verdict": {"type": "string"},
    "features": {"type": "array", "items": FEATURE},
})

REFERENCE = {"anyOf": [{"type": "null"}, _obj({
    "setup": {"type": "string"}, "feature": {"type": "string"}, "species": {"type": "string"},
    "trough_A": _num_or_null, "arm": _str_or_null, "depth": _num_or_null, "snr_bin": _num_or_null,
    "significance": _num_or_null, "sigma_target": _num, "basis": {"type": "string"}})]}

EPOCH = _obj({
    "phase_d": _num, "utc": _utc, "window_index": {"type": "integer", "minimum": 0},
    "window_start_utc": _utc, "window_end_utc": _utc, "window_hours": _num, "hours_available": _num,
    "airmass": _num, "altitude_deg": _num, "moon_illumination": _num, "moon_sep_deg": _num,
    "moon_altitude_deg": _num,
    "photosphere": _obj({"phase_d": _num, "temperature_K": _num, "radius_cm": _num, "luminosity_erg_s": _num,
                         "v_phot_c": _num}, extra=True),
})

CHOICE = _obj({
    "setup": {"type": "string"}, "score": _num, "feature": _str_or_null, "species": _str_or_null,
    "trough_obs_A": _num_or_null, "arm": _str_or_null, "significance": _num_or_null, "snr_bin": _num_or_null,
    "time_to_sigma_s": _num_or_null, "nexp": _int_or_null, "exposure_s": _num_or_null,
    "n_detected": {"type": "integer"}, "n_targets": {"type": "integer"}, "detected": _strings,
    "telescope": {"type": "string"}, "kind": {"enum": ["detection", "classification"]}, "snr_at": _num_or_null,
})

TELESCOPE_CHOICE = _obj({
    "telescope": {"type": "string"}, "setup": {"type": "string"}, "score": _num, "feature": _str_or_null,
    "significance": _num_or_null, "detected": _strings, "kind": {"enum": ["detection", "classification"]},
})

_three = {"type": "array", "items": _num_or_null, "minItems": 3, "maxItems": 3}

BLOCK = _obj({
    "site": {"type": "string"}, "telescope": {"type": "string"}, "setup": {"type": "string"}, "night": _date,
    "kind": {"enum": ["detection", "classification"]}, "phase_d": _num, "start_utc": _utc, "end_utc": _utc,
    "start_local": {"type": "string"}, "end_local": {"type": "string"},
    "n_exp": {"type": "integer", "minimum": 1}, "exp_s": {"type": "number", "exclusiveMinimum": 0},
    "snr": _num_or_null, "significance": _num_or_null, "feature": _str_or_null, "detected": _strings,
    "airmass": _three, "altitude_deg": _three, "parallactic_angle_deg": _three, "adr_arcsec": _num_or_null,
    "adr_guide_arcsec": _num_or_null, "guide_A": _num, "slit_advice": {"type": "string"},
    "ra_hms": {"type": "string"}, "dec_dms": {"type": "string"}, "ra_deg": _num, "dec_deg": _num,
    "target": {"type": "string"},
    "exposure_range_s": {"anyOf": [{"type": "null"}, _obj({"p16": _num, "p50": _num, "p84": _num})]},
    "telluric_standard": _obj({"airmass": _num_or_null, "latest_utc": _utc_or_null, "within_airmass": _num}),
})

STATUS = {"enum": ["observe", "no-window", "no-spectrograph", "too-short", "hidden", "no-targets", "too-faint"]}

NIGHT = _obj({
    "site": {"type": "string"}, "night": _date, "dusk_utc": _utc_or_null, "dawn_utc": _utc_or_null,
    "note": {"type": "string"}, "windows": {"type": "array", "items": WINDOW}, "status": STATUS,
    "reason": {"type": "string", "minLength": 1}, "epoch": {"anyOf": [EPOCH, {"type": "null"}]},
    "setups": {"type": "array", "items": SETUP_OUTCOME}, "choice": {"anyOf": [CHOICE, {"type": "null"}]},
    "detected": _strings, "reference": REFERENCE, "choices": {"type": "array", "items": TELESCOPE_CHOICE},
    "ensemble": {"anyOf": [{"type": "null"}, {"type": "object"}]},
}, {"dark_hours": _num})

POINT = {"anyOf": [{"type": "null"}, _obj({"site": {"type": "string"}, "night": _date, "phase_d": _num,
                                            "setup": {"type": "string"}})]}

CAMPAIGN = _obj({
    "useful_nights": {"type": "integer", "minimum": 0},
    "sites": {"type": "array", "items": _obj({
        "site": {"type": "string"}, "useful_phases_d": {"type": "array", "items": _num},
        "useful_nights": {"type": "array", "items": _date}, "last_useful_night": {"anyOf": [_date, {"type": "null"}]},
        "last_useful_phase_d": _num_or_null})},
    "setups": {"type": "array", "items": _obj({
        "setup": {"type": "string"}, "epochs_evaluated": {"type": "integer"}, "note": {"type": "string"},
        "last_reaches_target_phase_d": _num_or_null, "too_faint_from_phase_d": _num_or_null,
        "too_faint_from_night": {"anyOf": [_date, {"type": "null"}]}})},
    "first_useful": POINT, "last_useful": POINT,
}, {"why_nothing": {"type": "string"}})

PLAN_SCHEMA = {
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "title": "kncast plan.json",
    **_obj({
        "kncast": {"type": "string"}, "kind": {"const": "plan"}, "schema": {"type": "integer", "minimum": 1},
        "event": _obj({"id": {"type": "string"}, "ra_deg": _num, "dec_deg": _num, "t0_utc": _utc,
                       "distance_mpc": _num_or_null, "redshift": _num_or_null}, extra=True),
        "settings": _obj({
            "nights": {"type": "integer", "minimum": 1}, "twilight": {"enum": list(TWILIGHT_DEG)},
            "snr_target": {"type": "number", "exclusiveMinimum": 0}, "snr_per": {"const": SNR_BASIS.removeprefix("per ")},
            "max_hours": {"type": "number", "exclusiveMinimum": 0}, "overhead_s": {"type": "number", "minimum": 0},
            "sites": _strings, "sigma": {"type": "number", "exclusiveMinimum": 0},
            "bin_kms": {"type": "number", "exclusiveMinimum": 0}, "min_depth": _num,
            "features": {"anyOf": [_strings, {"type": "null"}]}, "snr_at_A": _num_or_null,
            "telluric_threshold": _fraction, "night_rules": {"type": "object"}, "classification_A": _num,
            "draws": {"type": "integer", "minimum": 1}, "seed": {"type": ["integer", "null"]},
            "model_overridden": {"type": "boolean"},
            "classification_days": _num,
"setups": _strings, "target": {"type": "string"},
            "score": {"type": "string"}}, {"mag_bands": _strings}),
        "model": _obj({"name": {"type": "string"}, "parameters": {"type": "object"}}, extra=True),
        "sites": {"type": "array", "items": _obj({
            "id": {"type": "string"}, "name": {"type": "string"}, "latitude_deg": _num, "longitude_deg": _num,
            "elevation_m": _num, "setups": _strings})},
        "nights": {"type": "array", "items": NIGHT},
        "campaign": CAMPAIGN,
        "candidates": {"type": "array", "items": _obj({
            "site": {"type": "string"}, "night": _date, "dusk_utc": _utc_or_null, "dawn_utc": _utc_or_null,
            "candidates": {"type": "array", "items": _obj({
                "rank": {"type": "integer", "minimum": 1}, "id": {"type": "string"}, "ra_deg": _num,
                "dec_deg": _num, "hours": {"type": "number", "minimum": 0}, "best_airmass": _num_or_null,
                "best_utc": _utc_or_null, "moon_sep_deg": _num_or_null, "windows": {"type": "integer"},
                "note": {"type": "string"}})}})},
        "files": _obj({"plan": {"const": "plan.json"}, "windows": {"const": "windows.ecsv"},
                       "features": {"const": "features.ecsv"}, "exposures": {"const": "exposures.ecsv"},
                       "figures": _strings, "report_md": {"const": "report.md"},
                       "report_html": {"const": "report.html"}}, {"blocks": {"const": "blocks.txt"},
                                                             "previous": {"const": "plan.previous.json"}}),
        "assumptions": _strings,
        "references": {"type": "array", "items": _obj({"model": {"type": "string"}, "module": {"type": "string"},
                                                       "reference": {"type": "string"}})},
        "cautions": {**_strings, "minItems": 3},
        "blocks": {"type": "array", "items": BLOCK},
    }, {"ensemble": {"anyOf": [{"type": "null"}, {"type": "object"}]}, "changes": _obj({"summary": {"type": "string"}, "gained": {"type": "array"}, "lost": {"type": "array"},
                         "setup_changed": {"type": "array"}, "exposure_changed": {"type": "array"}})}),
}
