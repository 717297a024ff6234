"""Wrong table preset: the balls' image size gives it away (tracking/ball_size.py).

Closed form: scaling the whole scene (table, camera position) by s leaves the
image of the table unchanged (pinhole projection is homogeneous of degree 0
in the scene coordinates), so an 8-ft table calibrated as a 9-ft one fits
perfectly; but the ball is not scaled, so the expected image radius under
the wrong preset is smaller by 1/s and the fitted / expected ratio is s
(= 100/92 in for 9-ft vs 8-ft, WPA Tournament Table & Equipment
Specifications, 2001, secondary copy). Frames are ray-cast by the detection
tests' independent renderer (tests/test_detect.py).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from feltlab.standards import POOL_BALL, table_preset
from test_detect import CLOTH, render  # noqa: E402 (tests/ is on sys.path under pytest)
from tracking.ball_size import MIN_DETECTIONS, size_ratio, size_warning
from tracking.calibration import Calibration
from tracking.camera import CameraModel
from tracking.detect import build_background, detect_frame
from tracking.settings import DetectionSettings, TrackingSettings


def _cameras():
    true_t = table_preset("pool-8ft")
    cam = CameraModel.looking_down(table_centre_mm=(true_t.length_mm / 2, true_t.width_mm / 2), height_mm=2800.0,
                                   focal_px=1060.0, image_size=(960, 540), pitch_deg=1.0, k1=-0.02)
    right = Calibration(camera=cam, table=true_t, ball_diameter_mm=POOL_BALL.diameter_mm, method="truth")
    wrong_t = table_preset("pool-9ft")
    s = wrong_t.length_mm / true_t.length_mm
    cam_w = CameraModel(K=cam.K, dist=cam.dist, R=cam.R, t=cam.t * s, image_size=cam.image_size)
    wrong = Calibration(camera=cam_w, table=wrong_t, ball_diameter_mm=POOL_BALL.diameter_mm, method="truth")
    return right, wrong, s


def _ratio(frames, cal: Calibration, empty) -> float:
    ds = DetectionSettings()
    bg = build_background([empty], cal, ds)
    det = pd.concat([detect_frame(f, cal, ds, bg) for f in frames], ignore_index=True)
    det["smear_mm"] = 0.0
    return size_ratio(det)


def test_wrong_preset_is_flagged_and_right_one_is_not():
    right, wrong, s = _cameras()
    rng = np.random.default_rng(7)
    balls = [dict(x=600.0, y=400.0, bgr=(30, 200, 230)), dict(x=1200.0, y=700.0, bgr=(235, 235, 235)),
             dict(x=1800.0, y=300.0, bgr=(40, 40, 190))]
    empty = render(right, [], rng, noise_dn=1.5)
    frames = [render(right, balls, rng, noise_dn=1.5, light=(0.3, -0.2, 1.0)) for _ in range(12)]
    r_ok = _ratio(frames, right, empty)
    r_bad = _ratio(frames, wrong, empty)
    ts = TrackingSettings()
    band = (ts.ball_size_low, ts.ball_size_high)
    # Same pixels, so the two ratios differ by exactly the scene scale (closed form above).
    assert abs(r_bad / r_ok - s) < 0.01 * s
    assert size_warning(r_ok, "pool-8ft", POOL_BALL.diameter_mm, *band) is None
    msg = size_warning(r_bad, "pool-9ft", POOL_BALL.diameter_mm, *band)
    assert msg is not None and "larger" in msg and "--table" in msg


def test_pinned_and_moving_detections_are_left_out():
    n = MIN_DETECTIONS
    det = pd.DataFrame({"radius_px": [12.0] * n + [14.0] * n, "radius_expected_px": [12.0] * 2 * n,
                        "smear_mm": [0.0] * n + [20.0] * n})
    # Pinned radii (ratio exactly 1) carry no size; smeared ones are longer than the ball.
    assert np.isnan(size_ratio(det))
    det.loc[: n - 1, "radius_px"] = 12.6
    assert abs(size_ratio(det) - 1.05) < 1e-9
