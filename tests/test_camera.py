"""Camera model: projection/back-projection properties and agreement with OpenCV."""
import cv2
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

from tracking.camera import CameraModel

R_BALL = 57.15 / 2  # WPA pool ball radius, mm


def _cam(roll=0.0, pitch=0.0, yaw=0.0, k1=0.0, k2=0.0, size=(1280, 720)):
    return CameraModel.looking_down((1270, 635), 3000, 1150, size, roll, pitch, yaw, k1, k2)


angles = st.floats(-4, 4)


@settings(max_examples=60, deadline=None)
@given(roll=angles, pitch=angles, yaw=angles, k1=st.floats(-0.08, 0.05),
       x=st.floats(0, 2540), y=st.floats(0, 1270), z=st.floats(0, 40))
def test_backproject_inverts_project(roll, pitch, yaw, k1, x, y, z):
    cam = _cam(roll, pitch, yaw, k1)
    px = cam.project([[x, y, z]])
    back = cam.backproject(px, z)[0]
    assert np.allclose(back[:2], [x, y], atol=1e-3)  # mm


@settings(max_examples=40, deadline=None)
@given(roll=angles, pitch=angles, yaw=angles, k1=st.floats(-0.08, 0.05), k2=st.floats(-0.02, 0.02))
def test_projection_matches_opencv(roll, pitch, yaw, k1, k2):
    # Independent reference: OpenCV's cv2.projectPoints with the same K, dist, R, t.
    cam = _cam(roll, pitch, yaw, k1, k2)
    rng = np.random.default_rng(0)
    pts = np.column_stack([rng.uniform(0, 2540, 50), rng.uniform(0, 1270, 50), rng.uniform(0, 40, 50)])
    # Rotation vector by scipy, robust near 180 degrees (a downward camera is a half turn about x,
    # where cv2.Rodrigues' matrix -> vector direction loses ~1e-6 and moved points by 0.005 px).
    rvec = Rotation.from_matrix(cam.R).as_rotvec()
    ref, _ = cv2.projectPoints(pts.reshape(-1, 1, 3), rvec, cam.t, cam.K, cam.dist)
    assert np.allclose(cam.project(pts), ref.reshape(-1, 2), atol=1e-6)


def test_untilted_camera_keeps_table_origin_bottom_left():
    # DEVELOPERS.md convention: origin at the image's bottom-left, x right, y up in the image.
    cam = _cam()
    o, xdir, ydir = cam.project([[0, 0, 0], [100, 0, 0], [0, 100, 0]])
    assert o[0] < 640 and o[1] > 360
    assert xdir[0] > o[0] and abs(xdir[1] - o[1]) < 1e-9
    assert ydir[1] < o[1] and abs(ydir[0] - o[0]) < 1e-9


def test_ball_centre_plane_differs_from_cloth_plane_when_tilted():
    # Pinhole geometry: a point at height R seen from a camera at height H maps, through the cloth
    # plane, to a point displaced away from the camera foot by R * d / (H - R), d = horizontal distance.
    cam = _cam(pitch=3.0)
    p = np.array([[2400.0, 1200.0, R_BALL]])
    px = cam.project(p)
    on_cloth = cam.backproject(px, 0.0)[0]
    c = cam.centre_mm
    d = np.hypot(*(p[0, :2] - c[:2]))
    expected = R_BALL * d / (c[2] - R_BALL)
    assert np.hypot(*(on_cloth[:2] - p[0, :2])) == pytest.approx(expected, rel=1e-6)
    assert expected > 10  # several mm at the far end: it matters


def test_homography_matches_projection_without_distortion():
    cam = _cam(1.0, 2.0, -1.0)
    H = cam.plane_homography(R_BALL)
    pts = np.array([[100.0, 200.0], [2000.0, 1000.0]])
    hp = (H @ np.column_stack([pts, np.ones(2)]).T).T
    hp = hp[:, :2] / hp[:, 2:]
    assert np.allclose(hp, cam.project(np.column_stack([pts, [R_BALL, R_BALL]])), atol=1e-9)


def test_dict_round_trip():
    cam = _cam(1, 2, 3, -0.03)
    again = CameraModel.from_dict(cam.to_dict())
    assert np.allclose(again.project([[5, 6, 7]]), cam.project([[5, 6, 7]]))
