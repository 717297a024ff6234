"""Corner-error warnings: the gain from one nose line's error to the cloth corners, and line offsets.

The truth is a camera we construct (pinhole looking down, tilted a little,
OpenCV's projectPoints for the edge points: an independent projection); a
known bias is put on one side's points, the tool's own fit is made, and the
cloth-corner error against the constructed camera must be what the gain
predicted (first order: small biases act linearly on a least-squares fit).
"""
import cv2
import numpy as np
import pytest

from tracking._camera_fit import SIDE_ORDER, fit_edges
from tracking.calibrate import _curve, corner_gain, corner_gains, line_offsets_px
from tracking.camera import CameraModel
from tracking.settings import CalibrationSettings

L, W, H_NOSE = 2540.0, 1270.0, 36.51  # pool-9ft playing surface and nose height (WPA)
SIZE = (1280, 720)
CORNERS = np.array([[0, 0, 0], [L, 0, 0], [L, W, 0], [0, W, 0]], float)


def _camera(f_px: float, height_mm: float, tilt_deg: float = 2.0) -> tuple[CameraModel, np.ndarray, np.ndarray]:
    """A camera over the table's middle looking down, tilted about the table's x axis; (model, rvec, tvec)."""
    R_down = np.array([[1.0, 0, 0], [0, -1.0, 0], [0, 0, -1.0]])
    a = np.radians(tilt_deg)
    Rx = np.array([[1, 0, 0], [0, np.cos(a), -np.sin(a)], [0, np.sin(a), np.cos(a)]])
    R = Rx @ R_down
    C = np.array([L / 2 + 60.0, W / 2 - 150.0, height_mm])
    t = -R @ C
    K = np.array([[f_px, 0, (SIZE[0] - 1) / 2], [0, f_px, (SIZE[1] - 1) / 2], [0, 0, 1]])
    rvec, _ = cv2.Rodrigues(R)
    return CameraModel(K=K, dist=[0, 0, 0, 0, 0], R=R, t=t, image_size=SIZE), rvec, t


def _edge_groups(f_px, height_mm):
    cam, rvec, t = _camera(f_px, height_mm)
    K = cam.K
    s = np.linspace(0.08, 0.92, 80)
    ends = {"y0": ((0, 0), (L, 0)), "xL": ((L, 0), (L, W)), "yW": ((L, W), (0, W)), "x0": ((0, W), (0, 0))}
    groups = []
    for side in SIDE_ORDER:
        a, b = (np.array(e, float) for e in ends[side])
        xyz = np.column_stack([a + s[:, None] * (b - a), np.full(len(s), H_NOSE)])
        px, _ = cv2.projectPoints(xyz, rvec, t, K, np.zeros(5))
        groups.append((side, H_NOSE, px.reshape(-1, 2)))
    return cam, groups


@pytest.mark.parametrize("f_px,height_mm", [(1000.0, 2700.0), (1600.0, 4200.0)])
def test_gain_predicts_the_corner_error_of_a_biased_line(f_px, height_mm):
    st = CalibrationSettings()
    prior = (st.hfov_prior_deg, st.hfov_prior_sigma_deg)
    cam_true, groups = _edge_groups(f_px, height_mm)
    fit = fit_edges(cam_true, groups, L, W, st.fit_k2, st.loss_scale_px, prior)
    gains = corner_gains(fit.camera, groups, L, W, st, prior)
    uv_true = cam_true.project(CORNERS)
    uv_fit = fit.camera.project(CORNERS)
    bias = 0.3  # px outward on one line
    for k, side in enumerate(SIDE_ORDER):
        p, n = _curve(cam_true, side, L, W, H_NOSE)(np.linspace(0, 1, 64))
        px = groups[k][2]
        near = np.argmin(((px[:, None, :] - p[None]) ** 2).sum(axis=2), axis=1)
        moved = list(groups)
        moved[k] = (side, H_NOSE, px + bias * n[near])
        biased = fit_edges(fit.camera, moved, L, W, st.fit_k2, st.loss_scale_px, prior)
        # the corner error it causes, beyond the unbiased fit's own (the prior pulls that a little)
        err = np.linalg.norm(biased.camera.project(CORNERS) - uv_fit, axis=1).max()
        assert err == pytest.approx(gains[side] * bias, rel=0.25, abs=0.02)
    # the points are exact: without the focal prior the fit lands on the constructed camera's corners
    exact = fit_edges(cam_true, groups, L, W, st.fit_k2, st.loss_scale_px, None)
    assert np.linalg.norm(exact.camera.project(CORNERS) - uv_true, axis=1).max() < 0.05
    assert np.all((uv_true > 0) & (uv_true < np.array(SIZE)))  # the table is in the picture
    assert corner_gain(fit.camera, groups, L, W, st, prior) == pytest.approx(
        float(np.sqrt(sum(g * g for g in gains.values()))))


def test_line_offsets_show_a_foot_line_the_camera_cannot_meet():
    st = CalibrationSettings()
    cam_true, groups = _edge_groups(1100.0, 2900.0)
    rvec, _ = cv2.Rodrigues(cam_true.R)
    s = np.linspace(0.08, 0.92, 80)
    feet = []
    for side, (a, b) in zip(SIDE_ORDER, [((0, 0), (L, 0)), ((L, 0), (L, W)), ((L, W), (0, W)), ((0, W), (0, 0))]):
        a, b = np.array(a, float), np.array(b, float)
        xyz = np.column_stack([a + s[:, None] * (b - a), np.zeros(len(s))])
        px, _ = cv2.projectPoints(xyz, rvec, cam_true.t, cam_true.K, np.zeros(5))
        feet.append((side, 0.0, px.reshape(-1, 2)))
    # a foot line taken 1.5 px inward on xL (its edge found off the foot)
    p, n = _curve(cam_true, "xL", L, W, 0.0)(np.linspace(0, 1, 64))
    near = np.argmin(((feet[1][2][:, None, :] - p[None]) ** 2).sum(axis=2), axis=1)
    feet[1] = ("xL", 0.0, feet[1][2] - 1.5 * n[near])
    all_groups = groups + feet
    fit = fit_edges(cam_true, all_groups, L, W, st.fit_k2, st.loss_scale_px, None)
    off = line_offsets_px(fit.resid_px, all_groups)
    assert set(off) == {"y0", "xL", "yW", "x0", "y0@0", "xL@0", "yW@0", "x0@0"}
    worst = max(off, key=lambda k: abs(off[k]))
    assert abs(off[worst]) > st.line_offset_note_px
    # exact lines: every offset is ~0
    clean = groups + [(sd, 0.0, px) for sd, _, px in feet[:1]] + [("xL", 0.0, feet[1][2] + 1.5 * n[near])] + feet[2:]
    fit0 = fit_edges(cam_true, clean, L, W, st.fit_k2, st.loss_scale_px, None)
    assert max(abs(v) for v in line_offsets_px(fit0.resid_px, clean).values()) < 0.05
