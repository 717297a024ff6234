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
import pytest

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


def test_suggested_preset_follows_the_measured_size():
    """The presets' predicted size factors are closed forms of their published dimensions, and a
    measured ratio inside a candidate's band picks it (pool sizes: WPA; snooker: WPBSA)."""
    from tracking.ball_size import predicted_size_factor, suggest_preset

    p9, p8, p7, sn = (table_preset(n) for n in ("pool-9ft", "pool-8ft", "pool-7ft", "snooker"))
    assert abs(predicted_size_factor(p9, p8) - 100 / 92) < 1e-9
    assert abs(predicted_size_factor(p9, p7) - 100 / 78) < 1e-9
    assert abs(predicted_size_factor(p9, sn) - (52.5 / 57.15) * (2540.0 / 3569.0)) < 1e-3
    ts = TrackingSettings()
    band = (ts.ball_size_low, ts.ball_size_high)
    for bias in (0.95, 0.97, 0.99):  # the detector's measured range with the right preset
        assert suggest_preset(bias, p9, *band) is None
        for true in (p8, p7, sn):
            got = suggest_preset(bias * predicted_size_factor(p9, true), p9, *band)
            assert got is not None and got.name == true.name
            assert suggest_preset(bias, true, *band) is None
    # a ratio the assumed preset explains (any bias inside its own band) never switches it, even where
    # another preset's band overlaps (9 ft vs 8 ft: 100/92 apart, WPA, against a band wider than that)
    for r in np.linspace(band[0], band[1], 25):
        assert suggest_preset(r, p9, *band) is None
    assert suggest_preset(band[1] * 1.01, p9, *band).name == "pool-8ft"
    # far outside every band: keep the assumed preset (and its warning)
    assert suggest_preset(2.0, p9, *band) is None
    assert suggest_preset(float("nan"), p9, *band) is None


@pytest.mark.parametrize("preset, size", [("pool-8ft", "960x540"), ("pool-7ft", "960x540"), ("pool-7ft", "1280x720")])
def test_smaller_table_is_recognised_without_a_preset(tmp_path, preset, size):
    """End to end: a clip of an 8-ft or 7-ft table (rendered by feltlab's renderer), tracked with no
    preset named. The cushion fit alone cannot tell them from 9 ft (closed form in the module
    docstring); the balls' size must, and the positions must then come out in the right table's
    millimetres. On a 7-ft table the balls show 28 % larger than the 9-ft preset predicts (100/78,
    WPA sizes). At 540p the blurred limb reads small enough to stay inside the detector's 20 % radius
    tolerance; at 720p from 1.8 m most radius fits are pinned, the size is unknown as 9-ft, and it is
    read on a trial with the 7-ft preset (tracking/ball_size.py, misfit_candidates)."""
    from feltlab.render import render_scenario, scenario_from_dict
    from tracking.pipeline import track_clip

    w, h = (int(v) for v in size.split("x"))
    camera = ({"height_mm": 2500, "fov_deg": 60, "pitch_deg": 1.0, "k1": -0.02} if w < 1000 else
              {"height_mm": 1800, "fov_deg": 70, "pitch_deg": 1.0, "k1": -0.02})
    pos = {"cue": [500.0, 400.0], "red": [1200.0, 800.0], "yellow": [1800.0, 350.0]}
    sc = scenario_from_dict({
        "clip": {"table": preset, "fps": 30, "duration_s": 0.5 if w < 1000 else 1.0, "resolution": [w, h],
                 "seed": 5},
        "camera": camera,
        "ball": [{"label": k, "position_mm": v} for k, v in pos.items()],
    })
    clip = tmp_path / f"{preset}_{size}.mp4"
    render_scenario(sc, clip)
    res = track_clip(clip, table=None, auto_table=True)
    assert res.calibration.table.name == preset
    assert any(preset in w and "--table" in w for w in res.warnings)
    got = res.tracks.groupby("ball")[["x_mm", "y_mm"]].median().to_numpy()
    truth = np.array(list(pos.values()))
    # every true ball within 3 mm of a track (with the 9-ft preset they would be 60-500 mm off)
    d = np.hypot(got[:, None, 0] - truth[None, :, 0], got[:, None, 1] - truth[None, :, 1])
    assert d.shape[0] == 3 and np.all(d.min(axis=0) < 3.0)
