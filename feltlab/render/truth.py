"""The truth file written beside every rendered clip (``CLIP.truth.json``).

Layout (our own; all lengths mm, times s, speeds mm/s, pixels in the
distorted image with the origin at the centre of the top-left pixel)::

    {
      "kind": "feltlab-render-truth", "version": 1,
      "clip": "name.mp4", "codec": "mp4v", "seed": 1,
      "fps": 240.0, "n_frames": 360, "t0_s": 0.0,
      "exposure_fraction": 0.5, "exposure_s": 0.00208,
      "resolution": [1280, 720],
      "table": {"preset", "name" (same as preset), "length_mm", "width_mm", "nose_height_mm", "pockets"},
      "ball": {"diameter_mm", "mass_kg"},
      "balls": [{"label", "rgb", "pattern", "number"}],
      "camera": CameraModel.to_dict(),
      "corners_px": {"cloth": [[x, y] x4], "ball_centre": [...]}   # (0,0), (L,0), (L,W), (0,W)
      "frames_t_s": [...],                                          # mid-exposure time of frame k
      "tracks": {label: {"x_mm", "y_mm", "vx_mm_s", "vy_mm_s", "x_px", "y_px", "on_table"}},
      "contacts": [TrueContact.to_dict(), ...],
      "scenario": {... the validated scenario ...}
    }

``tracks`` are columns (one value per frame) for compactness; positions and
velocities are exact states at mid-exposure, ``x_px, y_px`` the projection of
the ball centre (z = R) through the camera (not the silhouette centre).
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from tracking.camera import CameraModel

KIND = "feltlab-render-truth"
VERSION = 1


def _clean(v):
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if isinstance(v, np.ndarray):
        return _clean(v.tolist())
    if isinstance(v, (np.floating, float)):
        f = float(v)
        return None if not math.isfinite(f) else float(f"{f:.10g}")
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, np.bool_):
        return bool(v)
    return v


def build_truth(*, clip_name: str, codec: str, seed: int, fps: float, t0_s: float, exposure: float,
                camera: CameraModel, table: dict, ball: dict, balls: list[dict], times_s: np.ndarray,
                pos: np.ndarray, vel: np.ndarray, on_table: np.ndarray, corners_mm: dict[str, np.ndarray],
                contacts: list[dict], scenario: dict) -> dict:
    """Assemble the truth dictionary (see the module docstring). pos/vel (T,N,2), on_table (T,N)."""
    R = ball["diameter_mm"] / 2.0
    tracks = {}
    T, N = pos.shape[:2]
    for i, b in enumerate(balls):
        px = camera.project(np.column_stack([pos[:, i], np.full(T, R)]))
        tracks[b["label"]] = {
            "x_mm": pos[:, i, 0], "y_mm": pos[:, i, 1],
            "vx_mm_s": vel[:, i, 0], "vy_mm_s": vel[:, i, 1],
            "x_px": px[:, 0], "y_px": px[:, 1],
            "on_table": [bool(x) for x in on_table[:, i]],
        }
    out = {
        "kind": KIND, "version": VERSION,
        "clip": clip_name, "codec": codec, "seed": int(seed),
        "fps": float(fps), "n_frames": int(T), "t0_s": float(t0_s),
        "exposure_fraction": float(exposure), "exposure_s": float(exposure / fps),
        "resolution": list(camera.image_size),
        "table": table, "ball": ball, "balls": balls,
        "camera": camera.to_dict(),
        "corners_px": {k: camera.project(v).tolist() for k, v in corners_mm.items()},
        "frames_t_s": np.asarray(times_s, float),
        "tracks": tracks,
        "contacts": contacts,
        "scenario": scenario,
    }
    return _clean(out)


def write_truth(truth: dict, path: str | Path) -> None:
    """Write JSON via a temporary name, then rename (never a half-written truth file)."""
    p = Path(path)
    tmp = p.with_name(f".{p.name}.partial")
    tmp.write_text(json.dumps(truth, separators=(",", ":")), encoding="utf-8")
    tmp.replace(p)


def read_truth(path: str | Path) -> dict:
    """Read a truth file and check its kind/version."""
    d = json.loads(Path(path).read_text(encoding="utf-8"))
    if d.get("kind") != KIND:
        raise ValueError(f"{path} is not a feltlab render truth file")
    return d


def truth_path_for(clip_path: str | Path) -> Path:
    """``clip.mp4`` -> ``clip.truth.json`` (a PNG folder ``frames`` -> ``frames.truth.json``)."""
    p = Path(clip_path)
    return p.with_name(p.stem + ".truth.json") if p.suffix else p.with_name(p.name + ".truth.json")


#: A true contact the outside scorer requires is "significant": normal velocity change of at least
#: this much (the shared scorer's definition, ../shared/score_footage.py docstring).
SIGNIFICANT_DVN_MM_S = 30.0


def footage_truth(truth: dict, name: str) -> dict:
    """Our truth (:data:`KIND`) in the layout of the outside footage truth files (../shared/footage).

    So ``score_footage.py --clips DIR`` can score our renders. Kept: clip/video names, fps, frames,
    table size, balls (``id`` = our label, ``moves`` = leaves its start by > 1 mm), per-frame
    positions and velocities, contacts. A contact's ``e`` is the simulator's measured e;
    ``required`` = normal velocity change >= :data:`SIGNIFICANT_DVN_MM_S`, not a micro contact and
    not a repeat of the same pair within one frame period; ``e_valid`` = required and no other
    contact of either ball within one frame period (its e is not separable in video).
    """
    fps = float(truth["fps"])
    pos, vel, balls = {}, {}, []
    for b in truth["balls"]:
        tr = truth["tracks"][b["label"]]
        P = np.column_stack([tr["x_mm"], tr["y_mm"]]).astype(float)
        pos[b["label"]] = np.round(P, 3).tolist()
        vel[b["label"]] = np.round(np.column_stack([tr["vx_mm_s"], tr["vy_mm_s"]]).astype(float), 2).tolist()
        moves = bool(np.nanmax(np.linalg.norm(P - P[0], axis=1)) > 1.0)
        balls.append(dict(id=b["label"], colour=b["label"].split("-")[0], rgb=b["rgb"], pattern=b["pattern"],
                          moves=moves))
    cs = []
    for i, c in enumerate(truth["contacts"]):
        n = np.asarray(c["normal"], float)
        dvn = abs(float((np.asarray(c["va_post"], float)[:2] - np.asarray(c["va_pre"], float)[:2]) @ n))
        cs.append(dict(id=i, kind=c["kind"], t_s=c["t_s"], ball_a=c["ball_a"], ball_b=c["ball_b"] or "",
                       cushion=c.get("cushion"), e=c.get("e_measured"), dvn_mm_s=round(dvn, 2),
                       micro=bool(c.get("micro", False))))
    per = 1.0 / fps
    for i, c in enumerate(cs):
        pair = {c["ball_a"], c["ball_b"]}
        repeat = any(d["kind"] == c["kind"] and {d["ball_a"], d["ball_b"]} == pair and 0 < c["t_s"] - d["t_s"] < per
                     for d in cs[:i])
        c["required"] = bool(c["dvn_mm_s"] >= SIGNIFICANT_DVN_MM_S and not c["micro"] and not repeat)
        crowded = any(j != i and abs(d["t_s"] - c["t_s"]) < per and ({d["ball_a"], d["ball_b"]} & (pair - {""}))
                      for j, d in enumerate(cs))
        c["e_valid"] = bool(c["required"] and c["e"] is not None and not crowded)
    return dict(clip=name, video=f"{name}.mp4", fps=int(fps) if fps.is_integer() else fps,
                n_frames=int(truth["n_frames"]), resolution=truth["resolution"],
                table=dict(name=truth["table"]["name"], length_mm=truth["table"]["length_mm"],
                           width_mm=truth["table"]["width_mm"]),
                ball=truth["ball"], balls=balls,
                frames=dict(t_s=truth["frames_t_s"], positions_mm=pos, velocities_mm_s=vel), contacts=cs,
                corners_px=truth.get("corners_px"), camera=truth.get("camera"),
                source=f"feltlab renderer ({KIND} v{truth.get('version')}), converted by footage_truth")
