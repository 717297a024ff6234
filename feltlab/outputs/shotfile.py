"""``shot.json``: the per-shot summary, enough to reproduce the run.

Holds the clip's name and SHA-256, frame count, the frame rate used and where
it came from, the table preset, a calibration summary, the balls found, every
contact, the fitted cloth friction coefficients with sigmas, the software
version and the full settings. Numbers keep their units in their key names;
missing values are ``null`` (never NaN, which is not JSON).
"""
from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

SCHEMA = "feltlab-shot/1"


def jsonable(v: Any) -> Any:
    """Plain-JSON copy of ``v``: numpy scalars/arrays to Python, NaN/inf to None, paths to str.

    >>> jsonable({"a": np.float64("nan"), "b": np.arange(2)})
    {'a': None, 'b': [0, 1]}
    """
    if isinstance(v, dict):
        return {str(k): jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [jsonable(x) for x in v]
    if isinstance(v, np.ndarray):
        return [jsonable(x) for x in v.tolist()]
    if isinstance(v, (np.bool_, bool)):
        return bool(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else None
    if isinstance(v, Path):
        return str(v)
    if v is None or isinstance(v, (int, str)):
        return v
    if v is pd.NA or v is pd.NaT:
        return None
    return str(v)


def records(df: pd.DataFrame | None) -> list[dict]:
    """DataFrame rows as JSON-safe dicts ([] for None)."""
    if df is None or len(df) == 0:
        return []
    return [jsonable(r) for r in df.to_dict(orient="records")]


def calibration_summary(cal) -> dict:
    """The parts of a :class:`tracking.calibration.Calibration` a reader checks first, plus the camera."""
    return jsonable({
        "method": cal.method,
        "residual_px": cal.residual_px,
        "residual_mm": cal.residual_mm,
        "px_per_mm": cal.px_per_mm,
        "ball_diameter_mm": cal.ball_diameter_mm,
        "table": cal.table.name,
        "notes": list(cal.notes),
        "camera": cal.camera.to_dict(),
    })


def build_shot(
    *,
    clip_path: Path,
    sha256: str,
    n_frames: int,
    fps: float,
    fps_source: str,
    table,
    calibration,
    balls: pd.DataFrame | list,
    contacts: pd.DataFrame,
    friction: dict,
    ball_mass_kg: float,
    settings: dict,
    version: str,
    files: list[str],
    timings_s: dict | None = None,
) -> dict:
    """Assemble the shot summary (pure: no I/O)."""
    if isinstance(balls, pd.DataFrame):
        ball_list = records(balls)
    else:
        ball_list = [{"ball": str(b)} for b in balls]
    return jsonable({
        "schema": SCHEMA,
        "clip": {"name": Path(clip_path).name, "path": str(clip_path), "sha256": sha256},
        "n_frames": int(n_frames),
        "fps": float(fps),
        "fps_source": fps_source,
        "duration_s": n_frames / fps if fps else None,
        "table": {
            "preset": table.name,
            "length_mm": table.length_mm,
            "width_mm": table.width_mm,
            "source": table.source,
        },
        "ball": {"diameter_mm": calibration.ball_diameter_mm, "mass_kg": ball_mass_kg},
        "calibration": calibration_summary(calibration),
        "balls": ball_list,
        "n_contacts": int(len(contacts)),
        "contacts": records(contacts),
        "friction": friction,
        "software": {"name": "feltlab", "version": version},
        "settings": settings,
        "files": sorted(files),
        "timings_s": timings_s or {},
    })


def write_shot(shot: dict, path: Path) -> Path:
    """Write ``shot.json`` (indented, UTF-8, no NaN)."""
    path = Path(path)
    path.write_text(json.dumps(jsonable(shot), indent=2, allow_nan=False, ensure_ascii=False) + "\n",
                    encoding="utf-8")
    return path
