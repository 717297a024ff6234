"""Two touching balls seen as one blob must not become one confident streak fix.

Closed-form images (tests/lambert_ball.py: Lambertian spheres, Lambert's
cosine law, supersampled): two discs of the known radius r whose centres are
2r (touching) or 2r + 1 px apart, so no sub-sample is covered by both and the
two-ball image is ball A + ball B - cloth exactly. Optionally a faint cast
shadow (cloth darkened by 25 %, an ellipse along both balls) fills the
thresholded gap between them, as on MuJoCo render mj9104 at its ball-ball
contact (frames 18-19: one blob, fitted as a 48-58 px "streak" between the
balls with a 1.2-1.5 px sigma). Blur: Gaussian 0.8 px (optics) or 2.5 px.

Reference: the drawn centres (analytic geometry), and OpenCV's own
minimum enclosing circle (cv2.minEnclosingCircle) of each ball's
half-coverage contour on the noiseless image, which must agree with them.
The blob must come out either as two centres within 0.5 px of the drawn ones
or as no fix: never as one streak-fit centre between them.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from tracking.detect import delta_e76, refine_centre, to_lab
from tracking.settings import DetectionSettings
from tracking.streak import refine_streak, streak_axis

S = DetectionSettings()
SIZE = (150, 110)  # w, h


def threshold(d: np.ndarray) -> float:
    """Foreground threshold as the detector sets it (fg_sigma x the noise sigma of Delta-E, >= fg_min_de)."""
    return max(S.fg_sigma * float(np.median(d)) / 1.538, S.fg_min_de)


def two_balls(ca, cb, r, ball_a, ball_b, cloth, light, amb, shadow: float):
    """Linear-light image of two balls (centres ca, cb px) on cloth; ``shadow`` > 0: on a faint shadow that long (x r)."""
    cl = np.asarray(cloth, float)
    img = (lambert_ball(*ca, r, ball_a, cloth, light, amb, size=SIZE, ss=6)
           + lambert_ball(*cb, r, ball_b, cloth, light, amb, size=SIZE, ss=6) - cl)
    if shadow:
        m = np.zeros(SIZE[::-1], np.float32)
        mid = (np.asarray(ca) + np.asarray(cb)) / 2
        ang = float(np.degrees(np.arctan2(cb[1] - ca[1], cb[0] - ca[0])))
        cv2.ellipse(m, (int(round(mid[0])), int(round(mid[1]))), (int(round(shadow * r)), int(round(0.9 * r))), ang,
                    0, 360, 1.0, -1)
        m = cv2.GaussianBlur(m, (0, 0), 1.5)
        is_cloth = np.all(np.abs(img - cl) < 1e-9, axis=2)
        img = np.where(is_cloth[..., None], img * (1.0 - 0.25 * m[..., None]), img)
    return img


CASES = [
    # (radius px, separation - 2r px, direction deg, blur px, shadow length x r (0: none), seed)
    (15.0, 0.0, 0.0, 0.8, 0.0, 1),
    (15.0, 0.0, 31.0, 2.5, 0.0, 2),
    (12.0, 1.0, 75.0, 0.8, 2.2, 3),
    (15.0, 3.0, -40.0, 1.2, 2.8, 3),   # one streak fix 0.1 px from the midpoint, sigma 1.2 px, before
    (15.85, 3.2, -26.0, 1.2, 2.7, 5),  # mj9104's radius and gap: the same before
    (15.0, 5.0, 148.0, 1.2, 2.6, 6),
]


@pytest.mark.parametrize("r,gap,ang,blur,shadow,seed", CASES)
def test_touching_balls_are_not_one_streak(r, gap, ang, blur, shadow, seed):
    """No streak fix from any seed on the blob; circle fits on each ball within 0.5 px of it or none.

    The circle-fit bound is checked at optical blur (<= 1.2 px) and where
    the shadow does not reach past the balls only: at 2.5 px blur the circle
    fit on this lit ball is 0.35 px off even alone (measured; the shading's
    limb bias grows with blur) and 0.53 px beside its neighbour; a shadow
    2.8 r long pulls the yellow ball's fit 0.55 px (sigma 0.26 px). Both are
    circle-fit limits, not merges, and are left open here.
    """
    rng = np.random.default_rng(seed)
    u = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])
    mid = np.array([SIZE[0] / 2, SIZE[1] / 2]) + rng.uniform(-2, 2, 2)
    ca, cb = mid - (r + gap / 2) * u, mid + (r + gap / 2) * u
    cloth = (0.05, 0.25, 0.04)
    ball_a, ball_b = (0.80, 0.82, 0.85), (0.05, 0.65, 0.80)  # white and yellow (BGR, linear)
    light, amb = (0.3, -0.2, 1.0), 0.35
    lin = two_balls(ca, cb, r, ball_a, ball_b, cloth, light, amb, shadow)
    frame, bg = encode_frame(lin, cloth, blur_px=blur, noise_dn=1.0, seed=seed)
    d = delta_e76(to_lab(frame), to_lab(bg))
    thr = threshold(d)

    # outside reference: OpenCV's enclosing circle of each ball's half-coverage contour agrees with the drawing
    for c in (ca, cb):
        one = lambert_ball(*c, r, (1.0, 1.0, 1.0), (0.0, 0.0, 0.0), (0, 0, 1), 1.0, size=SIZE, ss=6)[..., 0]
        cnts, _ = cv2.findContours((one >= 0.5).astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
        (ex, ey), er = cv2.minEnclosingCircle(max(cnts, key=cv2.contourArea))
        assert np.hypot(ex - c[0], ey - c[1]) < 0.6 and abs(er - r) < 1.0

    # the blob is one component above threshold (else the case tests nothing)
    n_cc, lab = cv2.connectedComponents((d > thr).astype(np.uint8), connectivity=8)
    ia, ib = (lab[int(round(c[1])), int(round(c[0]))] for c in (ca, cb))
    assert ia == ib != 0

    # no streak fix from a seed at either ball or between them
    for seed_px in (ca, cb, mid, ca + 0.3 * r * u, cb - 0.3 * r * u):
        ax = streak_axis(d, seed_px[0], seed_px[1], r, thr, S)
        if ax is None or not ax["ok"] or ax["length"] < S.streak_min_len * r:
            continue
        ref = refine_streak(d, ax, r, S, thr)
        assert ref is None, (ax, ref)

    # the circle fits from seeds on each ball: that ball's centre within 0.5 px, or no fix
    for c, other in ((ca, cb), (cb, ca)) if blur <= 1.2 and shadow <= 2.2 else ():
        seed_px = c + 0.25 * r * (other - c) / np.linalg.norm(other - c)
        got = refine_centre(d, seed_px[0], seed_px[1], r, S, frame, thr)
        if got is not None:
            assert np.hypot(got["x"] - c[0], got["y"] - c[1]) < 0.5, (got, c)
