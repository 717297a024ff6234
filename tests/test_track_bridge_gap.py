"""A frame without a fix between two motion pieces (a contact at a low frame rate) is bridged on the pieces' lines.

Closed forms: a ball at rest until tc, then rolling at constant velocity v:
x(t) = x0 + v max(t - tc, 0); a cushion bounce reflects the normal velocity
component with restitution e at the contact point (constant velocity
before and after; spin and cloth friction left out: only the shape of the
path matters here). Between the two
pieces the ball is on the first line up to tc and on the second after.
"""
from __future__ import annotations

import numpy as np

from tracking.kalman import bridge_gap
from tracking.pipeline import smooth_ball
from tracking.settings import TrackingSettings


def test_rest_then_roll_is_exact():
    x0, v, tc = np.array([500.0, 300.0]), np.array([2600.0, -1500.0]), 0.2123
    fps = 30.0
    ta, tb = 6 / fps, 8 / fps                                      # last rest frame, first moving frame
    xb = x0 + v * (tb - tc)
    t = np.array([7 / fps])
    p, vel, miss = bridge_gap(x0, np.zeros(2), ta, xb, v, tb, t)
    np.testing.assert_allclose(p[0], x0 + v * max(t[0] - tc, 0.0), atol=1e-9)
    np.testing.assert_allclose(vel[0], v)
    assert miss < 1e-9


def test_cushion_bounce_is_exact_either_side_of_contact():
    fps, e = 30.0, 0.8
    x0, v1 = np.array([900.0, 200.0]), np.array([1200.0, -3000.0])
    tc = (x0[1] - 28.0) / 3000.0                                   # centre reaches y = 28 mm
    xc = x0 + v1 * tc
    v2 = np.array([v1[0], -e * v1[1]])
    for gap_frame in (int(np.floor(tc * fps)), int(np.ceil(tc * fps))):   # contact before / after the frame
        ta, tb = (gap_frame - 1) / fps, (gap_frame + 1) / fps
        xa, xb = x0 + v1 * ta, xc + v2 * (tb - tc)
        t = np.array([gap_frame / fps])
        p, _, miss = bridge_gap(xa, v1, ta, xb, v2, tb, t)
        truth = x0 + v1 * t[0] if t[0] <= tc else xc + v2 * (t[0] - tc)
        np.testing.assert_allclose(p[0], truth, atol=1e-6)
        assert miss < 1e-6


def test_smooth_ball_bridges_the_contact_frame():
    """Exact detections: rest at x0 (frames 0-6), none at frame 7 (merged blob), rolling from frame 8.

    The old fill (extrapolate the nearer piece) put frame 7 at the rest point: |v| (t7 - tc) = 48 mm off.
    """
    fps = 30.0
    x0, v, tc = np.array([500.0, 300.0]), np.array([2600.0, -1500.0]), 7 / fps - 0.016
    frames = np.r_[np.arange(0, 7), np.arange(8, 20)]
    t = frames / fps
    z = x0 + v * np.maximum(t - tc, 0.0)[:, None]
    sig = np.full((len(t), 2), 0.3)
    frame_t = np.arange(20) / fps
    rows, _, _ = smooth_ball(frames, t, z, sig, frame_t, set(), TrackingSettings())
    k = list(rows["frame"]).index(7)
    truth = x0 + v * (7 / fps - tc)
    err = np.hypot(rows["x_mm"][k] - truth[0], rows["y_mm"][k] - truth[1])
    assert err < 2.0, err
