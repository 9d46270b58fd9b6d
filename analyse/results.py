"""Machine-readable results: result.json and frames.ecsv (FOLDER-FORMAT.md).

The contract's keys are always present (null where not measurable, with the reason in
``notes``); everything else is added beside them, never instead of them.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from analyse.measure import CHANNELS
from analyse.observation import format_utc

__all__ = ["SCHEMA", "MODEL_VERSION", "result_document", "write_result_json",
           "write_frames_ecsv"]

SCHEMA = 1
MODEL_VERSION = "limbtrace-model-1 (linear layer over USSA 1976; Ciddor 1996; RK4 ray trace)"


def _num(x: Any, digits: int = 4) -> float | None:
    """A JSON number, or None for NaN/inf/None."""
    if x is None:
        return None
    x = float(x)
    return round(x, digits) if math.isfinite(x) else None


def _utc(t: float) -> str | None:
    return format_utc(t) if t is not None and math.isfinite(t) else None


def result_document(measurement, inference=None, *, layer_top_m: float,
                    extra_notes: tuple[str, ...] = ()) -> dict:
    """Build result.json's content from a Measurement and an optional inference result."""
    ob = measurement.observables
    last = ob.last
    from analyse._offline import offline_notes

    notes = list(measurement.notes) + list(extra_notes) + offline_notes()
    doc: dict[str, Any] = {
        "schema": SCHEMA,
        "observables": {
            "green_duration_s": _num(ob.green_duration_s, 3),
            "green_duration_err_s": _num(ob.green_duration_err_s, 3),
            "last_red_utc": _utc(last["r"].t_unix_s),
            "last_green_utc": _utc(last["g"].t_unix_s),
            "rg_offset_arcsec": _num(ob.rg_offset_arcsec, 2),
            "rg_offset_err_arcsec": _num(ob.rg_offset_err_arcsec, 2),
            # additions beyond the contract
            "last_blue_utc": _utc(last["b"].t_unix_s),
            "last_light_err_s": {c: _num(last[c].err_s, 3) for c in CHANNELS},
            "last_light_method": {c: last[c].method for c in CHANNELS},
            "rg_offset_frames": ob.rg_offset_frames,
            "plate_scale_arcsec_per_px": _num(ob.plate_scale_arcsec_per_px, 4),
            "plate_scale_source": ob.plate_scale_source,
            "colour_offset_dy_px": {c: _num(v, 3) for c, v in ob.colour_offset_dy_px.items()},
            "colour_offset_source": ob.colour_offset_source,
            "colour_offset_dy_err_px": {c: _num(v, 3)
                                        for c, v in ob.colour_offset_dy_err_px.items()},
            "disc_flattening": _num(ob.geometry.flattening, 4),
            "disc_flattening_err": _num(ob.geometry.flattening_err, 4),
        },
        "inference": {
            "lapse_rate_K_per_km": None,
            "lapse_rate_err_K_per_km": None,
            "layer_top_m": layer_top_m,
        },
        "recording": {
            "frames": len(measurement.table),
            "kind": measurement.frameset.kind,
            "time_source": measurement.frameset.time_source,
            "first_frame_utc": _utc(float(measurement.table.t_unix_s[0])),
            "last_frame_utc": _utc(float(measurement.table.t_unix_s[-1])),
            "frames_without_horizon": int(np.count_nonzero(~measurement.table.horizon_found)),
            "chroma_subsampling": measurement.frameset.chroma_subsampling,
            "colour_matrix": measurement.frameset.colour_matrix,
            "transfer": measurement.frameset.transfer,
        },
        "model_version": MODEL_VERSION,
        "notes": notes,
    }
    if inference is None:
        notes.append("inference not run: the lapse rate is left null")
    else:
        doc["inference"].update(inference.as_json())
        notes.extend(inference.notes)
    return doc


def write_result_json(doc: dict, path: Path) -> None:
    """Write result.json (strict JSON: no NaN)."""
    Path(path).write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n", encoding="utf-8")


def write_frames_ecsv(measurement, path: Path) -> None:
    """One row per frame, with units, as astropy ECSV."""
    import astropy.units as u
    from astropy.table import Table

    t = measurement.table
    rows = Table()
    rows["frame"] = np.arange(len(t))
    rows["source"] = list(t.sources)
    rows["time_utc"] = [format_utc(x) for x in t.t_unix_s]
    rows["t_unix"] = t.t_unix_s * u.s
    rows["sun_altitude"] = measurement.sun_altitude_deg * u.deg
    rows["horizon_found"] = t.horizon_found
    rows["horizon_row"] = t.horizon_row_px * u.pix
    rows["horizon_row_err"] = t.horizon_row_err_px * u.pix
    rows["roll"] = t.roll_deg * u.deg
    rows["roll_err"] = t.roll_err_deg * u.deg
    for c in CHANNELS:
        rows[f"apex_height_{c}"] = t.apex_height_px[c] * u.pix
        rows[f"apex_height_err_{c}"] = t.apex_height_err_px[c] * u.pix
        rows[f"width_{c}"] = t.width_px[c] * u.pix
        rows[f"height_{c}"] = t.height_px[c] * u.pix
        rows[f"visible_{c}"] = t.visible[c]
        rows[f"flux_{c}"] = t.flux[c]
        rows[f"flux_err_{c}"] = t.flux_err[c]
        rows[f"saturated_{c}"] = t.saturated[c]
    rows["flags"] = [";".join(f) for f in t.flags]
    rows.meta["comments"] = ["limbtrace per-frame measurements; heights are perpendicular to "
                             "the horizon line, positive above it; flux in linear units "
                             "(sky subtracted)"]
    rows.write(path, format="ascii.ecsv", overwrite=True)
