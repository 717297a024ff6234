"""Ball size from the free-radius photometric fit (detect.fit_ball_model(free_radius=True),
ball_size.model_radius_ratio) on closed-form ball images.

Each image is a Lambertian sphere seen from straight above (Lambert's cosine
law; tests/lambert_ball.py: exact disc of radius r px, 8x8 sub-sampled
coverage), blurred in linear light by a Gaussian point spread, sRGB-encoded
(IEC 61966-2-1) with 1 DN of noise. The true image radius is known exactly,
so the fitted one is checked against it. The silhouette fit (the colour
difference's steepest drop) reads these balls 1-3.5 % small: a dark limb and
the blur move the drop inwards.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from tracking.ball_size import model_radius_ratio
from tracking.detect import fit_ball_model, refine_centre
from tracking.settings import DetectionSettings

DS = DetectionSettings()

CASES = [
    # (ball BGR linear, cloth BGR linear, lamp direction (x right, y down, z to camera), ambient)
    ((0.02, 0.35, 0.60), (0.08, 0.25, 0.10), (1.0, 0.3, 0.8), 0.10),   # orange on green, low lamp
    ((0.05, 0.05, 0.50), (0.12, 0.20, 0.05), (-0.5, 1.0, 0.6), 0.15),  # red on teal
    ((0.60, 0.15, 0.05), (0.30, 0.12, 0.03), (0.2, -1.0, 0.7), 0.10),  # blue on blue
    ((0.03, 0.03, 0.45), (0.04, 0.04, 0.30), (0.6, 0.2, 0.8), 0.20),   # red on red
    ((0.80, 0.80, 0.80), (0.08, 0.25, 0.10), (0.0, 0.0, 1.0), 0.20),   # white, lamp overhead
]


def _ball(k: int, blur: float):
    ball, cloth, light, amb = CASES[k]
    rng = np.random.default_rng(200 + k)
    cx, cy = 31 + rng.uniform(-0.5, 0.5), 27 + rng.uniform(-0.5, 0.5)
    r = 11 + rng.uniform(-1, 1)
    frame, bg = encode_frame(lambert_ball(cx, cy, r, ball, cloth, light, amb), cloth, blur_px=blur, seed=k)
    return frame, bg, cx, cy, r


@pytest.mark.parametrize("blur", [0.6, 1.0])
@pytest.mark.parametrize("k", range(len(CASES)))
def test_free_radius_fit_finds_the_sphere_radius(k, blur):
    """Fitted radius within 1.2 % of the true one, started from the silhouette fit.

    Measured 0.991-1.002 over these cases (the residual is the shading
    model's a + b nz per sector standing in for Lambert's clipped n.l);
    1.2 % is our bound above that. The 57.15 mm ball's published tolerance
    (+-0.127 mm, 0.22 %) is finer than either fit resolves at r ~ 11 px.
    """
    frame, bg, cx, cy, r = _ball(k, blur)
    d = np.sqrt(((frame.astype(np.float32) - bg) ** 2).sum(axis=2))
    sil = refine_centre(d, 31.0, 27.0, r, DS, frame, 9.0)
    assert sil is not None
    m = fit_ball_model(frame, bg, sil["x"], sil["y"], r, DS, free_radius=True)
    assert m is not None
    assert abs(m["radius"] / r - 1) < 0.012, m["radius"] / r
    # centre and radius are fitted together: measured 0.02-0.21 px off here (0.1 px with the radius known,
    # tests/test_detect_model.py)
    assert np.hypot(m["x"] - cx, m["y"] - cy) < 0.3


def test_model_radius_ratio_beats_the_silhouette_ratio():
    """Median over balls: the model ratio lies nearer 1 than the silhouette ratio (detector's radius_px)."""
    frames, rows = {}, []
    for k in range(len(CASES)):
        frame, bg, cx, cy, r = _ball(k, 0.8)
        d = np.sqrt(((frame.astype(np.float32) - bg) ** 2).sum(axis=2))
        sil = refine_centre(d, 31.0, 27.0, r, DS, frame, 9.0)
        frames[k] = frame
        rows.append({"frame": k, "x_px": sil["x"], "y_px": sil["y"], "radius_px": sil["radius"],
                     "radius_expected_px": r, "smear_mm": 0.0})
    det = pd.DataFrame(rows)
    ratios = []  # each case has its own cloth colour: one background per frame
    for k in range(len(CASES)):
        _, bg, *_ = _ball(k, 0.8)
        ratio, n = model_radius_ratio({k: frames[k]}, det[det.frame == k], bg, DS)
        assert n == 1
        ratios.append(ratio)
    sil_ratio = np.median(det.radius_px / det.radius_expected_px)
    assert abs(np.median(ratios) - 1) < 0.01
    assert abs(np.median(ratios) - 1) < abs(sil_ratio - 1)
