"""The inner-step check (calibrate.inner_step_ratio) near the picture's edge.

A table filmed with a cushion nose running off the frame's edge (sweep
render f09: 535-546 px on a 540 px frame) was refused as "clear edge on the cloth
inward of the fitted cushion line" although its fit was right: profiles
running off the picture sampled its replicated border, not the table. Only
profiles inside the picture may count. Reference: a ray-cast plain table
(tests/test_calibrate.render_table; rays from OpenCV's undistortPoints) seen
by a known camera, so the true nose lines are exact; a line put 50 mm out on
the cushion top (the nose visible inward of it) must still be flagged.
Scenario our own; seed chosen before running.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import table_preset
from test_calibrate import render_table
from tracking.calibrate import _side_ranges, inner_step_ratio, nose_height_mm
from tracking.camera import CameraModel
from tracking.settings import CalibrationSettings

POOL9 = table_preset("pool-9ft")


def _scene():
    L, W = POOL9.length_mm, POOL9.width_mm
    # offset so that the near long cushion's nose runs from 1 px inside the
    # frame's bottom edge to 7 px beyond it (f09: 535-546 px on a 540 px frame)
    cam = CameraModel.looking_down((L / 2, W / 2), 2500, 760, (960, 540), roll_deg=0.5, pitch_deg=0.0,
                                   yaw_deg=0.3, k1=-0.05, offset_mm=(0.0, 265.0))
    img = render_table(cam, POOL9, (60, 120, 40), face="vertical", seed=41, noise=3.0)
    return cam, img.mean(axis=2).astype(np.float32)


def _band_px(cam, side, z):
    """Width (px) of the vertical face band at the side's middle: its foot (z = 0) to its nose (z = h)."""
    L, W = POOL9.length_mm, POOL9.width_mm
    x, y = {"y0": (L / 2, 0.0), "xL": (L, W / 2), "yW": (L / 2, W), "x0": (0.0, W / 2)}[side]
    a, b = cam.project([[x, y, 0.0], [x, y, z]])
    return float(np.linalg.norm(b - a))


def test_nose_at_frame_edge_is_not_a_missed_nose():
    cam, gray = _scene()
    s = CalibrationSettings()
    L, W = POOL9.length_mm, POOL9.width_mm
    z = nose_height_mm(POOL9, POOL9.ball.diameter_mm)
    y_mid = cam.project([[L / 2, 0.0, z]])[0, 1]
    assert 540.0 < y_mid < 550.0, y_mid  # the scene is what it claims: the nose leaves the frame
    for side in ("y0", "xL", "yW", "x0"):
        r = inner_step_ratio(gray, cam, side, L, W, z, _side_ranges(POOL9, side, s), _band_px(cam, side, z), s)
        assert r < s.inner_step_max, (side, r)


def test_line_on_the_cushion_top_is_still_flagged():
    cam, gray = _scene()
    s = CalibrationSettings()
    L, W = POOL9.length_mm, POOL9.width_mm
    z = nose_height_mm(POOL9, POOL9.ball.diameter_mm)
    # yW (top of the frame, well inside it) taken 50 mm out, at the cushion top's outer edge
    r = inner_step_ratio(gray, cam, "yW", L, W + 50.0, z, _side_ranges(POOL9, "yW", s), _band_px(cam, "yW", z), s)
    assert r > s.inner_step_max, r
