"""Side-pocket centres: the mirror centre of the cushion strip along a long side, and its use in the camera fit.

Checks against closed forms and an independent projection:

* a 1-D strip with a hole of erf edges (a Gaussian-blurred box, closed form via
  scipy.special.erf) at a known sub-sample centre, with and without a smooth
  multiplicative shading -> mirror_centre finds the centre;
* a hard shadow on one side of the hole (a lamp off to one side) moves the
  centre, and the returned sigma bounds that move;
* an image of a table plane drawn by OpenCV (projectPoints + a homography,
  warpPerspective; not our camera code) with the hole at a known x ->
  side_pocket_centre returns that x;
* a camera fit whose two short-side lines are both off the same way along x
  (as under lamps) is placed along x by the pocket points, and is not without them.

Pool table: 2540 x 1270 mm playing surface, nose height 1 7/16 in (WPA, from
memory); the side pocket centred on the long side (common practice).
"""
import cv2
import numpy as np
import pytest
from scipy.special import erf

from feltlab.standards import table_preset
from tracking._camera_fit import SIDE_ORDER, fit_edges
from tracking.camera import CameraModel
from tracking.pockets import mirror_centre, side_pocket_centre, side_pocket_points
from tracking.settings import CalibrationSettings

TABLE = table_preset("pool-9ft")
L, W, H_NOSE = TABLE.length_mm, TABLE.width_mm, 36.5125
SIZE = (1280, 720)


def _hole_profile(s, centre, half, blur, floor=0.05):
    """Brightness of a strip with a dark hole [centre - half, centre + half], Gaussian blur sigma ``blur``."""
    k = blur * np.sqrt(2.0)
    inside = 0.5 * (erf((s - (centre - half)) / k) - erf((s - (centre + half)) / k))
    return floor + (1.0 - floor) * (1.0 - inside)


@pytest.mark.parametrize("centre_off", [0.0, 0.37, -1.13])
@pytest.mark.parametrize("shaded", [False, True])
def test_mirror_centre_of_a_blurred_hole(centre_off, shaded):
    step = 0.25  # samples per unit: 4 (the unit is one image px here)
    s = np.arange(0, 481) * step
    mid = s[-1] / 2
    p = 120.0 * _hole_profile(s, mid + centre_off, 24.0, 1.2)
    if shaded:
        # a lamp's smooth fall-off multiplies the brightness: exp of a quadratic
        p = p * np.exp(0.006 * (s - 20.0) - 4e-5 * (s - 20.0) ** 2)
    c, sig, sig_sys, asym = mirror_centre(p, step, 4.0, 50.0, corr=2.0)
    assert c == pytest.approx(centre_off, abs=0.01)
    assert asym < 1e-3 and sig < 0.01 and sig_sys < 0.05


def test_mirror_centre_with_noise_within_its_sigma():
    rng = np.random.default_rng(7)
    step = 0.25
    s = np.arange(0, 481) * step
    mid = s[-1] / 2
    errs, sigs = [], []
    for _ in range(40):
        p = 120.0 * _hole_profile(s, mid + 0.4, 24.0, 1.2) + rng.normal(0, 1.5, len(s))
        c, sig, _, _ = mirror_centre(np.maximum(p, 1.0), step, 4.0, 50.0, corr=step)
        errs.append(c - 0.4)
        sigs.append(sig)
    # independent samples (corr = step): the least-squares sigma matches the scatter (within sampling error)
    assert np.std(errs) == pytest.approx(np.mean(sigs), rel=0.4)
    assert abs(np.mean(errs)) < 3 * np.mean(sigs) / np.sqrt(len(errs)) + 0.01


def test_a_hard_shadow_on_one_side_is_bounded_by_sigma():
    """A lamp to one side throws a sharp shadow across the strip beside the hole: the mirror breaks."""
    step = 0.25
    s = np.arange(0, 481) * step
    mid = s[-1] / 2
    p = 120.0 * _hole_profile(s, mid, 24.0, 1.2)
    shadow = 1.0 - 0.3 * 0.5 * (1 + erf((s - (mid + 28.0)) / 1.5)) * (s < mid + 36.0)
    c, sig, sig_sys, asym = mirror_centre(p * shadow, step, 4.0, 50.0, corr=2.0)
    assert abs(c) > 0.02  # the shadow does move the centre
    assert abs(c) < np.hypot(sig, sig_sys)  # and the sigma covers it
    assert asym > 1e-3


def _camera(dx_mm=40.0):
    R_down = np.array([[1.0, 0, 0], [0, -1.0, 0], [0, 0, -1.0]])
    a = np.radians(1.5)
    Rx = np.array([[1, 0, 0], [0, np.cos(a), -np.sin(a)], [0, np.sin(a), np.cos(a)]])
    R = Rx @ R_down
    C = np.array([L / 2 + dx_mm, W / 2 - 100.0, 2900.0])
    t = -R @ C
    f = 1000.0
    K = np.array([[f, 0, (SIZE[0] - 1) / 2], [0, f, (SIZE[1] - 1) / 2], [0, 0, 1]])
    rvec, _ = cv2.Rodrigues(R)
    return CameraModel(K=K, dist=[0, 0, 0, 0, 0], R=R, t=t, image_size=SIZE), rvec, t


def _table_image(rvec, t, K, hole_x_mm, z_mm):
    """The plane z = z_mm drawn by OpenCV: cloth, cushion strip, rail and two round holes at hole_x_mm."""
    # the plane in a 0.5 mm texture covering x in [0, L], y in [-150, W + 150]
    res = 0.5
    x0, y0 = -20.0, -150.0
    nx, ny = int((L + 40) / res), int((W + 300) / res)
    xs = x0 + np.arange(nx) * res  # texel i at OpenCV coordinate i (its centre)
    ys = y0 + np.arange(ny) * res
    X, Y = np.meshgrid(xs, ys)
    tex = np.full(X.shape, 90.0, np.float32)  # cloth
    strip = (Y < 0) | (Y > W)
    tex[strip] = 140.0  # cushion top
    tex[(Y < -50) | (Y > W + 50)] = 70.0  # rail
    for yc in (-45.0, W + 45.0):
        tex[(X - hole_x_mm) ** 2 + (Y - yc) ** 2 < 62.0 ** 2] = 6.0
    src = np.array([[x0, y0], [x0 + nx * res, y0], [x0 + nx * res, y0 + ny * res], [x0, y0 + ny * res]])
    dst, _ = cv2.projectPoints(np.column_stack([src, np.full(4, z_mm)]), rvec, t, K, np.zeros(5))
    src_px = (src - [x0, y0]) / res
    Hm = cv2.getPerspectiveTransform(src_px.astype(np.float32), dst.reshape(4, 2).astype(np.float32))
    # anti-alias before the ~6x reduction (a lens's blur of ~0.8 px, in texture px), then resample
    tex = cv2.GaussianBlur(tex, (0, 0), 0.8 * 2.9 / res)
    return cv2.warpPerspective(tex, Hm, SIZE, flags=cv2.INTER_LINEAR)


@pytest.mark.parametrize("hole_dx_mm", [0.0, 0.9, -1.7])
def test_side_pocket_centre_in_an_opencv_drawn_image(hole_dx_mm):
    cam, rvec, t = _camera()
    img = _table_image(rvec, t, cam.K, L / 2 + hole_dx_mm, H_NOSE)
    mm_px = cam.mm_per_px([L / 2, 0.0, H_NOSE])
    for side in (0, 1):
        r = side_pocket_centre(img, cam, TABLE, H_NOSE, side)
        assert r is not None
        # within 0.05 px (texture 0.5 mm ~ 0.17 px, blurred before the reduction)
        assert r["x_mm"] - L / 2 == pytest.approx(hole_dx_mm, abs=0.05 * mm_px)
        assert r["sigma_px"] < 0.2
        # the returned point is on the side's nose line at that x
        xyz = cam.backproject(r["px"].reshape(1, 2), H_NOSE)[0]
        assert xyz[0] == pytest.approx(r["x_mm"], abs=0.01)


def test_no_points_on_a_carom_table_or_out_of_view():
    cam, rvec, t = _camera()
    img = _table_image(rvec, t, cam.K, L / 2, H_NOSE)
    pts, _ = side_pocket_points(np.dstack([img] * 3), cam, table_preset("carom"), H_NOSE)
    assert pts == []
    # a camera looking past the table's middle: the mid strip is off the picture
    far, _, _ = _camera(dx_mm=2400.0)
    assert side_pocket_centre(img, far, TABLE, H_NOSE, 0) is None
    # the same image with pockets: two points
    pts, info = side_pocket_points(np.dstack([img] * 3), cam, TABLE, H_NOSE)
    assert len(pts) == 2, info


def _groups(cam, rvec, t, shift_px):
    """Nose points projected by OpenCV; both short sides moved shift_px along +u (same direction)."""
    s = np.linspace(0.08, 0.92, 80)
    ends = {"y0": ((0, 0), (L, 0)), "xL": ((L, 0), (L, W)), "yW": ((L, W), (0, W)), "x0": ((0, W), (0, 0))}
    out = []
    for side in SIDE_ORDER:
        a, b = (np.array(e, float) for e in ends[side])
        xyz = np.column_stack([a + s[:, None] * (b - a), np.full(len(s), H_NOSE)])
        px, _ = cv2.projectPoints(xyz, rvec, t, cam.K, np.zeros(5))
        px = px.reshape(-1, 2)
        if side in ("x0", "xL"):
            px = px + [shift_px, 0.0]
        out.append((side, H_NOSE, px))
    return out


def test_pocket_points_place_the_table_along_its_length():
    st = CalibrationSettings()
    prior = (st.hfov_prior_deg, st.hfov_prior_sigma_deg)
    cam, rvec, t = _camera()
    groups = _groups(cam, rvec, t, 0.6)
    mids = np.array([[L / 2, 0.0, H_NOSE], [L / 2, W, H_NOSE]])
    truth = cam.project(mids)
    plain = fit_edges(cam, groups, L, W, st.fit_k2, st.loss_scale_px, prior)
    err_plain = np.abs(plain.camera.project(mids)[:, 0] - truth[:, 0]).max()
    assert err_plain > 0.4  # the short lines alone carry their shift to the middle
    # exact pocket centres (rim at the nose height), sigma 0.3 px
    pts = [(truth[i], H_NOSE, 0.5, 0.3) for i in range(2)]
    fit = fit_edges(cam, groups, L, W, st.fit_k2, st.loss_scale_px, prior, points=pts)
    err = np.abs(fit.camera.project(mids)[:, 0] - truth[:, 0]).max()
    assert err < 0.15
    # the pocket points are not in the returned residuals (they are the nose points')
    assert len(fit.resid_px) == sum(len(g[2]) for g in groups)
