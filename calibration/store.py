"""calibration.json: written by ``limbtrace calibrate``, read by ``report`` and ``verify``.

FOLDER-FORMAT.md fixes the keys every calibration has:

- ``plate_scale_arcsec_per_px`` (> 0);
- ``roll_deg``: the horizon's angle in the image, counter-clockwise positive (x right,
  y down), i.e. positive when the horizon rises to the right;
- ``channel_offset_px``: ``{"r": [dx, dy], "b": [dx, dy]}``, the displacement of that
  channel's image relative to green [px, x right, y down], at the image centre when a
  radial model is fitted (``radial_model``);
- ``effective_wavelength_nm``: ``{"r", "g", "b"}`` for the Sun as recorded [nm].

``calibrate`` adds (validated here when present): ``schema`` (1),
``plate_scale_err_arcsec_per_px`` (>= 0, read by the inference), ``roll_err_deg``,
``roll_source``, ``channel_offset_err_px`` (same shape as ``channel_offset_px``),
``radial_model`` (``{"centre_px": [cx, cy], "k": {"r", "b"}, ...}``: the offset at
``p`` is ``channel_offset_px + k (p - centre_px)``), ``motion_plate_scale_arcsec_per_px``,
``effective_wavelength_table`` (``{"altitude_deg": [...], "r": [...], "g": [...],
"b": [...]}``), ``bands``, ``dispersion_check`` (``{"agree": true/false/null,
"detail": "..."}``), ``frames_used``, ``sensitivity_csv`` (a file name, relative to the
calibration's folder) and ``notes``. Other keys are kept as they are.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from analyse.errors import InputError

__all__ = ["SCHEMA", "CALIBRATION_FILE", "write_calibration", "read_calibration",
           "validate_calibration", "channel_offset_at"]

SCHEMA = 1
CALIBRATION_FILE = "calibration.json"
_WAVELENGTH_RANGE_NM = (200.0, 1200.0)  # nm; as accepted for a band CSV (calibration.bands)
_ROLL_LIMIT_DEG = 45.0  # |roll| beyond this is not a horizon-levelled camera
_CHANNELS = ("r", "g", "b")


def _json_safe(value: Any) -> Any:
    """NaN and infinities as null; tuples as lists; numpy scalars as Python numbers."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_calibration(doc: dict, path: str | Path) -> Path:
    """Validate ``doc`` and write it as JSON (NaN as null, 2-space indent).

    Parameters
    ----------
    doc : dict
        The calibration (module docstring).
    path : str or Path
        The file to write.

    Returns
    -------
    Path
        ``path``.
    """
    path = Path(path)
    data = _json_safe(doc)
    validate_calibration(data, path)
    path.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return path


def read_calibration(path: str | Path) -> dict:
    """Read and validate calibration.json.

    Raises
    ------
    InputError
        Unreadable file, invalid JSON, or a key missing or malformed (the key is named).
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("calibration file does not exist", path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the calibration: {exc}", path) from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON (line {exc.lineno}): {exc.msg}", path) from None
    validate_calibration(data, path)
    return data


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _pair(value: Any) -> bool:
    return isinstance(value, list) and len(value) == 2 and all(_number(v) for v in value)


def _require(ok: bool, key: str, expected: str, path: Path | None) -> None:
    if not ok:
        raise InputError(f"key {key} must be {expected}", path)


def validate_calibration(data: Any, path: str | Path | None = None) -> None:
    """Check the required keys and the shape of the optional ones (module docstring).

    Raises
    ------
    InputError
        Naming the first key at fault and what it must be.
    """
    path = None if path is None else Path(path)
    if not isinstance(data, dict):
        raise InputError("a calibration must be a JSON object", path)
    for key in ("plate_scale_arcsec_per_px", "roll_deg", "channel_offset_px",
                "effective_wavelength_nm"):
        if key not in data:
            raise InputError(f"key {key} is missing (written by limbtrace calibrate)", path)
    if "schema" in data:
        _require(data["schema"] == SCHEMA, "schema", f"{SCHEMA}", path)
    scale = data["plate_scale_arcsec_per_px"]
    _require(_number(scale) and scale > 0, "plate_scale_arcsec_per_px", "a number > 0", path)
    roll = data["roll_deg"]
    _require(_number(roll) and abs(roll) <= _ROLL_LIMIT_DEG, "roll_deg",
             f"a number within +-{_ROLL_LIMIT_DEG:g} deg", path)
    for key in ("channel_offset_px", "channel_offset_err_px"):
        if key in data:
            v = data[key]
            _require(isinstance(v, dict) and set(v) == {"r", "b"} and all(map(_pair, v.values())),
                     key, 'an object {"r": [dx, dy], "b": [dx, dy]} of numbers [px]', path)
    lo, hi = _WAVELENGTH_RANGE_NM
    lam = data["effective_wavelength_nm"]
    _require(isinstance(lam, dict) and all(_number(lam.get(c)) and lo <= lam[c] <= hi
                                           for c in _CHANNELS),
             "effective_wavelength_nm",
             f'an object {{"r", "g", "b"}} of numbers in {lo:g}-{hi:g} nm',
             path)
    _validate_optional(data, path)


def _validate_optional(data: dict, path: Path | None) -> None:
    for key in ("plate_scale_err_arcsec_per_px", "roll_err_deg"):
        if data.get(key) is not None:
            _require(_number(data[key]) and data[key] >= 0, key, "a number >= 0 or null", path)
    model = data.get("radial_model")
    if model is not None:
        ok = (isinstance(model, dict) and _pair(model.get("centre_px"))
              and isinstance(model.get("k"), dict)
              and all(_number(model["k"].get(c)) for c in ("r", "b")))
        _require(ok, "radial_model", 'null or {"centre_px": [cx, cy], "k": {"r": k, "b": k}}',
                 path)
    table = data.get("effective_wavelength_table")
    if table is not None:
        alt = table.get("altitude_deg") if isinstance(table, dict) else None
        ok = isinstance(alt, list) and all(_number(a) for a in alt) and all(
            isinstance(table.get(c), list) and len(table[c]) == len(alt)
            and all(v is None or _number(v) for v in table[c]) for c in _CHANNELS)
        _require(ok, "effective_wavelength_table",
                 '{"altitude_deg": [...], "r": [...], "g": [...], "b": [...]} of equal length',
                 path)
    check = data.get("dispersion_check")
    if check is not None:
        ok = isinstance(check, dict) and check.get("agree") in (True, False, None) and isinstance(
            check.get("detail"), str)
        _require(ok, "dispersion_check", '{"agree": true/false/null, "detail": "..."}', path)
    csv = data.get("sensitivity_csv")
    if csv is not None:
        _require(isinstance(csv, str) and csv.strip() != "", "sensitivity_csv",
                 "a file name relative to the calibration", path)


def channel_offset_at(calibration: dict, x_px: float, y_px: float
                      ) -> dict[str, tuple[float, float]]:
    """Lateral colour offset of r and b from green at an image position [px].

    Parameters
    ----------
    calibration : dict
        A validated calibration.
    x_px, y_px : float
        Image position (x right, y down) [px].

    Returns
    -------
    dict
        ``{"r": (dx, dy), "b": (dx, dy)}`` [px]: ``channel_offset_px`` plus, with a
        radial model, ``k (p - centre_px)``.
    """
    offsets = calibration["channel_offset_px"]
    model = calibration.get("radial_model")
    out = {}
    for c in ("r", "b"):
        dx, dy = offsets[c]
        if model is not None:
            k = model["k"][c]
            cx, cy = model["centre_px"]
            dx, dy = dx + k * (x_px - cx), dy + k * (y_px - cy)
        out[c] = (float(dx), float(dy))
    return out
