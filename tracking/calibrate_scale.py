"""Working scale of the automatic calibration on large frames (2560x1440, 4K and up).

The calibration's pixel figures (``CalibrationSettings`` fields in px, the
single-edge fit windows and blur widths in :mod:`tracking._table_edges`, the
first pass's minimum counts) were measured on frames 960-1280 px wide: an
optical blur of about 1 px, a cushion-top plateau and face band of a few px,
codec blocks of 8 px, a nose within ~10 px of the line a fit predicts. A
frame k times larger in each direction that shows the same table shows all of
these k times wider in px (the table, the lens's blur as a share of the
table, a video that was upscaled), and the fixed windows then cut the edges
short: an upscaled 3840x2160 copy of a 1280x720 clip was refused ("too few
cushion-nose points" on its short sides) where the clip itself calibrates to
0.2 px.

Rather than scale each constant by hand, the frames are reduced by an integer
factor k to that working size before calibrating (the mean over k x k pixel
blocks: an exact box filter, ``cv2.resize`` INTER_AREA on a frame cropped to
a multiple of k), and the fitted camera is carried back to full resolution.
With OpenCV's convention (pixel centres at integer coordinates) working pixel
u covers full pixels k u .. k u + k - 1, so u_full = k u + (k - 1) / 2:
K_full = S K, S = [[k, 0, (k-1)/2], [0, k, (k-1)/2], [0, 0, 1]], while the
distortion (on normalised coordinates) and the pose are unchanged. Residuals
in px scale by k. The same reduction cuts the time and memory of the median
image and the edge profiles by about k^2.

k = floor(min(long side / REF_LONG_PX, short side / REF_SHORT_PX)), at least
1: frames up to 1920x1080 are calibrated as they are (unchanged figures).
"""
from __future__ import annotations

import dataclasses

import cv2
import numpy as np

from tracking.calibration import Calibration
from tracking.camera import CameraModel

#: The frame size (long x short side, px) the calibration's pixel figures
#: were measured on: the outside footage D1/D2 (1280x720) and our renders
#: (960x540 to 1280x720).
REF_LONG_PX = 1280
REF_SHORT_PX = 720


#: Largest move (working px, so x k at full size) of the table's corners
#: (cloth and nose planes) by the full-size refinement for it to be kept.
#: A working px is what the pixel figures' own tuning reached on clean
#: footage at the reference size (worst corners 0.2-1.4 px on D1/D2 and the
#: MuJoCo renders); an edge taken at another line moves a side by a face
#: band's width or more (6 working px on the upscaled D2's x0 side).
REFINE_AGREE_PX = 1.0


def corner_shift_px(a: Calibration, b: Calibration) -> float:
    """Largest distance (px) between the table corners (cloth and nose planes) of two calibrations."""
    t = a.table
    zn = float(a.camera.meta.get("nose_height_mm", 0.0) or 0.0)
    L, W = t.length_mm, t.width_mm
    P = np.array([[x, y, z] for z in (0.0, zn) for x, y in ((0, 0), (L, 0), (L, W), (0, W))], float)
    return float(np.max(np.linalg.norm(a.camera.project(P) - b.camera.project(P), axis=1)))


def work_factor(width: int, height: int) -> int:
    """Integer reduction factor k (>= 1) for a frame of width x height px."""
    long_side, short_side = max(width, height), min(width, height)
    return max(1, int(min(long_side / REF_LONG_PX, short_side / REF_SHORT_PX)))


def reduce_frame(frame: np.ndarray, k: int) -> np.ndarray:
    """Mean over k x k pixel blocks (float32), the frame first cropped to a multiple of k."""
    a = np.asarray(frame)
    if k <= 1:
        return a
    h, w = a.shape[:2]
    a = np.ascontiguousarray(a[: h - h % k, : w - w % k]).astype(np.float32, copy=False)
    return cv2.resize(a, ((w - w % k) // k, (h - h % k) // k), interpolation=cv2.INTER_AREA)


def full_camera(cam: CameraModel, k: int, image_size: tuple[int, int]) -> CameraModel:
    """The camera of a k-reduced working frame carried to the full frame of ``image_size`` (w, h)."""
    S = np.array([[k, 0.0, (k - 1) / 2.0], [0.0, k, (k - 1) / 2.0], [0.0, 0.0, 1.0]])
    meta = dict(cam.meta)
    for key in ("foot_rms_px",):
        if meta.get(key) is not None:
            meta[key] = float(meta[key]) * k
    if isinstance(meta.get("line_offsets_px"), dict):
        meta["line_offsets_px"] = {s: float(v) * k for s, v in meta["line_offsets_px"].items()}
    meta["work_factor"] = int(k)
    return CameraModel(K=S @ cam.K, dist=cam.dist.copy(), R=cam.R.copy(), t=cam.t.copy(),
                       image_size=(int(image_size[0]), int(image_size[1])), meta=meta)


def full_calibration(cal: Calibration, k: int, image_size: tuple[int, int]) -> Calibration:
    """A calibration fitted on k-reduced frames, for the full frames (residual_px x k)."""
    if k <= 1:
        return cal
    return dataclasses.replace(cal, camera=full_camera(cal.camera, k, image_size),
                               residual_px=float(cal.residual_px) * k, notes=list(cal.notes))
