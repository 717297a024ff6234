"""Automatic calibration where the cushion top is nearly the cloth's shade (a faint nose step).

Reference: synthetic tables ray-cast in tests/test_calibrate.py through
OpenCV's own ``undistortPoints`` (OpenCV calib3d documentation: pinhole +
Brown-Conrady distortion) with a camera we choose, on the WPA 9-ft playing
surface (2540 x 1270 mm between cushion noses, via feltlab.standards). The
known geometry - the rendering camera's projection of the playing-surface
corners - is the outside reference; no figure comes from our calibration.

The cushion top is the cloth's colour at 0.90-0.93 of its brightness: a
grey step of 4-8 DN at the nose, beside a much stronger cushion/rail edge
~20 px further out, with 1.5-2 DN sensor noise. Before the nose step was
detected on the cloth-colour projection, this step stayed under the
first-edge threshold on grey and the rail line was taken (corners tens of
px off, or a refusal).
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.errors import FeltlabError
from feltlab.standards import table_preset
from tests.test_calibrate import _corners, render_table
from tracking.calibrate import calibrate_auto, nose_height_mm
from tracking.camera import CameraModel

POOL9 = table_preset("pool-9ft")

#: name: (cloth BGR, cushion shade, noise DN, roll, pitch, yaw deg, k1)
FAINT = {
    "green-6dn": ((50, 120, 30), 0.91, 2.0, 0.5, 3.0, 1.0, -0.04),
    "blue-5dn": ((150, 80, 25), 0.94, 1.5, -1.0, -2.0, -0.5, -0.08),
    "grey-8dn": ((110, 110, 115), 0.93, 2.0, 0.0, 4.0, 1.5, 0.02),
}


def _grey_step(cloth, shade) -> float:
    return float(np.mean(cloth) * (1 - shade))


@pytest.mark.parametrize("name", list(FAINT))
def test_faint_nose_step_gives_corners_within_1px(name):
    cloth, shade, noise, roll, pitch, yaw, k1 = FAINT[name]
    assert 4.0 <= _grey_step(cloth, shade) <= 8.0  # the case this test is about
    cam = CameraModel.looking_down((POOL9.length_mm / 2, POOL9.width_mm / 2), 3000, 900, (1200, 700),
                                   roll_deg=roll, pitch_deg=pitch, yaw_deg=yaw, k1=k1)
    img = render_table(cam, POOL9, cloth, face="none", noise=noise, seed=7, cushion_shade=shade)
    try:
        cal = calibrate_auto([img], POOL9)
    except FeltlabError as exc:  # a refusal would be honest, but this view is plain: it must fit
        pytest.fail(f"refused: {exc}")
    zn = nose_height_mm(POOL9, POOL9.ball.diameter_mm)
    for z in (zn, POOL9.ball.radius_mm):
        err = np.linalg.norm(cal.camera.project(_corners(POOL9, z)) - cam.project(_corners(POOL9, z)), axis=1)
        assert err.max() < 1.0, f"z = {z:.1f} mm corners off by {err.round(2)} px"
    # Without a visible cushion face the focal length comes from a weak prior,
    # and k1 scales with it: the lens moves a point by k1 r^3 / f^2 px (r px
    # from the centre; OpenCV's radial model), which is what the picture fixes.
    f_fit, f_true = cal.camera.K[0, 0], cam.K[0, 0]
    assert abs(cal.camera.dist[0] * (f_true / f_fit) ** 2 - k1) < 0.01


def test_cushion_colour_check_sees_a_line_on_the_rail():
    """The colour outside the nose lines is the cushion top's on all four sides (render_table paints them
    alike); with the x = L line moved 100 mm outward - beyond the 50 mm cushion, onto the rail - that side
    shows the rail's colour. Reference: the rendering camera and the painted geometry."""
    from dataclasses import replace

    from tracking.calibrate import cushion_colour_spread
    from tracking.settings import CalibrationSettings

    s = CalibrationSettings()
    cam = CameraModel.looking_down((POOL9.length_mm / 2, POOL9.width_mm / 2), 3000, 900, (1200, 700),
                                   pitch_deg=2.0, k1=-0.03)
    img = render_table(cam, POOL9, (50, 120, 30), face="none", seed=3)
    zn = nose_height_mm(POOL9, POOL9.ball.diameter_mm)
    assert cushion_colour_spread(img, cam, POOL9, zn, s) < s.cushion_chroma_max / 2
    longer = replace(POOL9, length_mm=POOL9.length_mm + 100.0)
    assert cushion_colour_spread(img, cam, longer, zn, s) > 2 * s.cushion_chroma_max


@pytest.mark.parametrize("shade", [1.0, 0.97])
def test_invisible_nose_refuses_or_fits(shade):
    """Cushion tops of the cloth's own shade (no nose step, or 1-2 DN): a one-line refusal, or corners
    within 1 px - never a fit silently off. Reference: the rendering camera."""
    cam = CameraModel.looking_down((POOL9.length_mm / 2, POOL9.width_mm / 2), 3000, 900, (1200, 700),
                                   roll_deg=0.5, pitch_deg=3.0, yaw_deg=1.0, k1=-0.04)
    img = render_table(cam, POOL9, (50, 120, 30), face="none", noise=2.0, seed=5, cushion_shade=shade)
    try:
        cal = calibrate_auto([img], POOL9)
    except FeltlabError as exc:
        assert "\n" not in str(exc) and "calibrate from a file" in str(exc)
        return
    zn = nose_height_mm(POOL9, POOL9.ball.diameter_mm)
    err = np.linalg.norm(cal.camera.project(_corners(POOL9, zn)) - cam.project(_corners(POOL9, zn)), axis=1)
    assert err.max() < 1.0, f"corners off by {err.round(2)} px"


def test_main_line_takes_the_innermost_supported_line():
    """Points on two parallel parabolas 20 px apart (nose inward, rail outward) plus scattered ones:
    the innermost line is kept when it holds at least ``min_share`` of the best line's points.
    Reference: the parabolas the points were drawn from."""
    from tracking.calibrate import main_line

    rng = np.random.default_rng(4)
    p0, p1, nrm = np.array([100.0, 500.0]), np.array([1100.0, 520.0]), np.array([0.02, 1.0])
    t = (p1 - p0) / np.linalg.norm(p1 - p0)
    n = nrm / np.linalg.norm(nrm)

    def line(k, off):
        u = rng.uniform(0, 1, k)
        d = off + 3.0 * (u - 0.5) ** 2 + rng.normal(0, 0.25, k)  # a lens bends the line by ~1 px
        return p0 + np.outer(u * np.linalg.norm(p1 - p0), t) + np.outer(d, n)

    nose, rail = line(60, 0.0), line(180, 20.0)
    stray = p0 + np.outer(rng.uniform(0, 1000, 15), t) + np.outer(rng.uniform(-40, 40, 15), n)
    px = np.vstack([nose, rail, stray])
    is_nose = np.r_[np.ones(60, bool), np.zeros(195, bool)]
    is_rail = np.r_[np.zeros(60, bool), np.ones(180, bool), np.zeros(15, bool)]
    keep = main_line(px, p0, p1, nrm, 1.5, min_share=0.5)  # nose has 1/3 of the rail's support
    assert keep[is_rail].mean() > 0.95 and not keep[is_nose].any()
    keep = main_line(px, p0, p1, nrm, 1.5, min_share=0.15)
    assert keep[is_nose].mean() > 0.95 and not keep[is_rail].any()
