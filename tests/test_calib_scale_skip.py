"""After a refusal for an absurd camera height, presets of the same family that would be absurd too are skipped.

The rule (tracking/table_choice._scaled_height_absurd) rests on similar
figures: the same picture fitted with a table whose lengths are all scaled by s
puts the camera s times as high at the same focal. That is checked here
against OpenCV's own pose solver (cv2.solvePnP), independent of
our fit; then which presets calibrate_choosing_table tries.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

import tracking.table_choice as tc
from feltlab.errors import FeltlabError
from feltlab.standards import TABLES, table_preset
from tracking.camera import CameraModel
from tracking.settings import CalibrationSettings


@pytest.mark.parametrize("s", [0.78, 0.92, 1.41])
def test_scaled_table_scales_camera_height(s):
    """Same pixels, table lengths x s (nose height kept) -> camera height over the nose plane x s.

    OpenCV's iterative PnP pose from the same pixels, focal held; the camera height
    over the cloth then is s H to within (1 - s) x nose height (< 1 %).
    """
    L, W, z = 2540.0, 1270.0, 36.5
    cam = CameraModel.looking_down((L / 2, W / 2), 3000.0, 1100.0, (1280, 720), roll_deg=1.5, pitch_deg=4.0,
                                   yaw_deg=2.0)
    obj = np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z], [L / 2, 0, z], [L / 2, W, z]])
    px = cam.project(obj)
    scaled = np.column_stack([obj[:, :2] * s, obj[:, 2]])
    ok, rvec, tvec = cv2.solvePnP(scaled, px, cam.K, np.zeros(5), flags=cv2.SOLVEPNP_ITERATIVE)
    assert ok
    R, _ = cv2.Rodrigues(rvec)
    centre = -R.T @ tvec.ravel()
    H = cam.centre_mm[2]
    assert centre[2] - z == pytest.approx(s * (H - z), rel=1e-6)
    assert centre[2] == pytest.approx(s * H, rel=0.01)


def _err(height_mm):
    e = FeltlabError("refused (scale)")
    e.kind = "scale"
    e.height_mm = height_mm
    return e


@pytest.mark.parametrize("height_m,start,skipped", [
    (56.0, "pool-9ft", {"pool-8ft", "pool-7ft"}),   # sweep f04h32 (H.264 crf 32): 56 m as pool-9ft
    (10.5, "pool-9ft", set()),                      # 10.5 m x 0.78 = 8.2 m: pool-7ft may mend it
    (13.0, "pool-7ft", {"pool-9ft", "pool-8ft"}),   # larger tables only raise it
    (None, "pool-9ft", set()),                      # no height given: try all
])
def test_presets_tried_after_scale_refusal(monkeypatch, height_m, start, skipped):
    tried = []

    def refuse(frames, table, *a, **k):
        tried.append(table.name)
        raise _err(None if height_m is None else height_m * 1000.0)

    monkeypatch.setattr(tc, "calibrate_auto", refuse)
    with pytest.raises(FeltlabError, match=r"refused"):
        tc.calibrate_choosing_table([np.zeros((64, 64, 3), np.uint8)], table_preset(start))
    want = [start] + [n for n in TABLES if n != start and n not in skipped]
    assert tried == want
    # snooker and carom (other nose height, ball or pockets) are always tried
    assert "snooker" in tried and "carom" in tried


def test_limit_follows_settings():
    """The skip limit is max_camera_height_mm x scale_skip_factor (no other number)."""
    cs = CalibrationSettings()
    lim = cs.max_camera_height_mm * cs.scale_skip_factor
    nine, seven = table_preset("pool-9ft"), table_preset("pool-7ft")
    s = seven.length_mm / nine.length_mm
    assert tc._scaled_height_absurd(_err(lim / s * 1.01), nine, seven)
    assert not tc._scaled_height_absurd(_err(lim / s * 0.99), nine, seven)
    assert not tc._scaled_height_absurd(_err(lim * 10), nine, table_preset("snooker"))
