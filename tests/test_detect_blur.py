"""Motion streaks (tracking/streak.py) on closed-form images of a ball swept during the exposure.

A ball moving at constant velocity during the exposure images as the time
average of its still images: a disc of radius r swept uniformly over a
length L. Its coverage at a point at distance s along the motion and n
across it from the mid-exposure centre is |[s - h, s + h] ∩ [-L/2, L/2]| / L
with h = sqrt(r^2 - n^2) (the share of the exposure the disc covers the
point), so the mid-exposure centre is the image's centre of symmetry under a
half turn. The frames here average Lambertian still images
(tests/lambert_ball.py: Lambert's cosine law, 4x4 sub-samples per pixel) at
0.25 px steps of the sweep, then blur, sRGB-encode and add noise (fixed
seeds, non-square crops). Truth: the drawn mid-exposure centre.

Outside reference: OpenCV's own ellipse fit (cv2.fitEllipse, Fitzgibbon's
direct least squares) and minimum-area rectangle on the half-coverage mask of
the noiseless coverage image; both are independent of our code and, the
shape being point-symmetric, return its centre.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from tracking.detect import delta_e76, refine_centre, to_lab
from tracking.settings import DetectionSettings
from tracking.streak import refine_streak, stadium_moments, streak_axis

S = DetectionSettings()
SIZE = (150, 104)  # w, h: non-square


def threshold(d: np.ndarray) -> float:
    """Foreground threshold as the detector sets it: fg_sigma x the per-axis noise sigma of Delta-E
    (median Delta-E / 1.538 for 3-axis Gaussian noise; the ball covers a small part of the crop),
    at least fg_min_de."""
    return max(S.fg_sigma * float(np.median(d)) / 1.538, S.fg_min_de)


def swept_ball(c, u, length, r, ball, cloth, light, ambient, step=0.25):
    """Linear-light image of a Lambertian ball swept over ``length`` px along unit u, centred at c."""
    n = max(1, int(np.ceil(length / step)))
    ts = ((np.arange(n) + 0.5) / n - 0.5) * length
    img = np.zeros((SIZE[1], SIZE[0], 3))
    for t in ts:
        img += lambert_ball(c[0] + t * u[0], c[1] + t * u[1], r, ball, cloth, light, ambient, size=SIZE, ss=4)
    return img / n


def swept_coverage(c, u, length, r, ss=8):
    """Closed-form coverage of a disc swept over ``length`` px (pixel-averaged over ss x ss sub-samples)."""
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    px = xs[..., None, None] + sub[None, None, None, :] - c[0]
    py = ys[..., None, None] + sub[None, None, :, None] - c[1]
    s = px * u[0] + py * u[1]
    nn = -px * u[1] + py * u[0]
    h = np.sqrt(np.clip(r * r - nn * nn, 0.0, None))
    lo, hi = np.maximum(s - h, -length / 2), np.minimum(s + h, length / 2)
    cov = np.where(np.abs(nn) < r, np.clip(hi - lo, 0.0, None) / length, 0.0)
    return cov.mean(axis=(2, 3))


CASES = [
    # (smear / radius, direction deg, radius px, ball BGR, cloth BGR (linear), lamp direction, ambient, seed)
    (1.3, 20.0, 12.0, (0.80, 0.82, 0.85), (0.05, 0.25, 0.04), (0.3, -0.2, 1.0), 0.35, 1),
    (2.0, -35.0, 12.5, (0.05, 0.08, 0.70), (0.20, 0.10, 0.03), (-0.4, 0.3, 1.0), 0.30, 2),
    (2.5, 100.0, 14.0, (0.75, 0.75, 0.72), (0.10, 0.12, 0.12), (0.0, 0.5, 1.0), 0.40, 3),
    (3.0, 165.0, 11.0, (0.10, 0.55, 0.75), (0.04, 0.18, 0.03), (0.5, 0.0, 1.0), 0.25, 4),
]


@pytest.mark.parametrize("ratio,ang,r,ball,cloth,light,amb,seed", CASES)
def test_streak_centre_is_mid_exposure(ratio, ang, r, ball, cloth, light, amb, seed):
    """From a seed near one end, the streak fit returns the mid-exposure centre; a circle fit does not.

    Across the motion within 0.35 px: the silhouette fit's own limb-darkening
    bias on still Lambertian balls is ~0.2-0.3 px (DetectionSettings.
    model_sigma_px). Along it within 0.12 L: a known bias of the edge rule
    (steepest drop of the colour difference), whose place on each end's
    coverage ramp depends on that end's limb colour, and the lamp shades the
    leading and trailing limbs differently; measured 0.02-0.09 L on these
    four images. (Extrapolating the linear-light difference to zero coverage
    removed it here, < 0.03 L, but was worse on compressed renders with
    4:2:0 chroma and cast shadows, so it was not adopted.) The circle fit
    from the same seed settles near the end: > 0.2 L off for smears >= 2.5
    radii (measured 0.26-0.32 L; at 2 radii it came out 0.10 L, as bad as the
    streak fit's along-motion bias on that image).
    """
    rng = np.random.default_rng(seed)
    c = np.array([SIZE[0] / 2 + rng.uniform(-3, 3), SIZE[1] / 2 + rng.uniform(-3, 3)])
    u = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])
    nrm = np.array([-u[1], u[0]])
    L = ratio * r
    frame, bg = encode_frame(swept_ball(c, u, L, r, ball, cloth, light, amb), cloth, blur_px=0.8,
                             noise_dn=1.0, seed=seed)
    d = delta_e76(to_lab(frame), to_lab(bg))
    THR = threshold(d)

    # outside reference: OpenCV's ellipse fit and min-area rectangle on the
    # half-coverage contour of the noiseless closed-form coverage
    cov = swept_coverage(c, u, L, r)
    cnts, _ = cv2.findContours((cov >= 0.5).astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    cnt = max(cnts, key=cv2.contourArea)
    ell = np.array(cv2.fitEllipse(cnt)[0])
    box = np.array(cv2.minAreaRect(cnt)[0])
    # the references find the drawn centre to the pixel grid's quantisation
    # (contours run through pixel centres): the image and its truth agree
    assert np.linalg.norm(ell - c) < 0.3 and np.linalg.norm(box - c) < 0.6, (ell, box, c)

    seed_px = c + 0.4 * L * u  # a disc-score peak near the leading end
    ax = streak_axis(d, seed_px[0], seed_px[1], r, THR, S)
    assert ax is not None and ax["ok"] and ax["length"] >= S.streak_min_len * r, ax
    # smear direction within 10 degrees (a line: either way round)
    assert abs(np.sin(ax["angle"] - np.radians(ang))) < np.sin(np.radians(10.0)), ax
    ref = refine_streak(d, ax, r, S, THR)
    assert ref is not None
    got = np.array([ref["x"], ref["y"]])
    assert abs((got - c) @ nrm) < 0.35, (got, c)
    assert abs((got - c) @ u) < 0.12 * L, (got, c, L)
    # the same against OpenCV's ellipse-fit centre of the true half-coverage shape
    assert abs((got - ell) @ nrm) < 0.5 and abs((got - ell) @ u) < 0.12 * L + 0.3
    if ratio >= 2.5:
        circ = refine_centre(d, seed_px[0], seed_px[1], r, S, frame, THR)
        assert circ is None or np.hypot(circ["x"] - c[0], circ["y"] - c[1]) > 0.2 * L, circ


def test_streak_sigma_grows_with_length():
    """The reported centre sigma grows with the smear (DetectionSettings.streak_sigma_frac)."""
    sig = []
    for ratio in (1.3, 3.0):
        c = np.array([74.3, 51.6])
        u = np.array([1.0, 0.0])
        L = ratio * 12.0
        cloth = (0.05, 0.25, 0.04)
        frame, bg = encode_frame(swept_ball(c, u, L, 12.0, (0.8, 0.8, 0.8), cloth, (0.2, 0.2, 1.0), 0.35), cloth,
                                 blur_px=0.8, noise_dn=1.0, seed=7)
        d = delta_e76(to_lab(frame), to_lab(bg))
        THR = threshold(d)
        ax = streak_axis(d, c[0], c[1], 12.0, THR, S)
        sig.append(refine_streak(d, ax, 12.0, S, THR)["sigma_px"])
    # the added term alone: streak_sigma_frac x the length difference (1.7 r)
    assert sig[1] - sig[0] > 0.5 * S.streak_sigma_frac * 1.7 * 12.0, sig


def test_resting_ball_with_shadow_is_not_a_streak():
    """A still ball whose blob is stretched by its cast shadow keeps the circle fit.

    The shadow: the cloth dimmed to 45 % over a disc of the ball's radius
    offset 0.9 radii (a lamp ~40 degrees off the vertical; geometric shadow
    of a sphere on its plane, R tan(zenith) ~ 0.85 R; common practice).
    Its edges stay sharp, so the end-ramp test refuses the streak model.
    """
    r, c = 12.0, np.array([70.4, 50.7])
    cloth = np.array((0.05, 0.25, 0.04))
    img = lambert_ball(c[0], c[1], r, (0.8, 0.8, 0.8), cloth, (-0.6, 0.0, 1.0), 0.35, size=SIZE, ss=4)
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    shadow = ((xs - c[0] - 0.9 * r) ** 2 + (ys - c[1]) ** 2 < r * r) & ((xs - c[0]) ** 2 + (ys - c[1]) ** 2 >= r * r)
    img[shadow] *= 0.45
    frame, bg = encode_frame(img, cloth, blur_px=0.8, noise_dn=1.0, seed=11)
    d = delta_e76(to_lab(frame), to_lab(bg))
    THR = threshold(d)
    ax = streak_axis(d, c[0], c[1], r, THR, S)
    assert ax is not None and ax["length"] > 0.5 * r  # the shadow does stretch the blob
    st = refine_streak(d, ax, r, S, THR) if ax["length"] >= S.streak_min_len * r else None
    assert st is None, st


def test_stadium_moments_match_opencv():
    """Closed-form stadium moments vs OpenCV's image moments of a finely drawn stadium (cv2.moments)."""
    for a, r in [(0.0, 10.0), (7.5, 10.0), (20.0, 8.0)]:
        k = 16  # draw 16x larger: pixel quantisation well below 1 %
        img = np.zeros((int(2 * (a + r) * k) + 40, int(2 * r * k) + 40), np.uint8)
        cx, cy = img.shape[1] // 2, img.shape[0] // 2
        cv2.rectangle(img, (int(cx - r * k), int(cy - a * k)), (int(cx + r * k), int(cy + a * k)), 1, -1)
        for sgn in (-1, 1):
            cv2.circle(img, (cx, int(cy + sgn * a * k)), int(r * k), 1, -1)
        m = cv2.moments(img, binaryImage=True)
        area, var_along, var_across = stadium_moments(a, r)
        assert m["m00"] / k ** 2 == pytest.approx(area, rel=0.01)
        assert m["mu02"] / m["m00"] / k ** 2 == pytest.approx(var_along, rel=0.01)
        assert m["mu20"] / m["m00"] / k ** 2 == pytest.approx(var_across, rel=0.01)


def test_two_touching_balls_are_not_a_streak():
    """Two touching still balls make a stadium-like blob (length ~2 r) but no streak.

    Their outline pinches to the edge blur between them, where the support
    of a swept disc is 2 r wide all along its middle (closed form above),
    and their ends are sharp; the blob's centre must not be reported as a ball.
    """
    r = 12.0
    cloth = (0.05, 0.25, 0.04)
    c1, c2 = np.array([62.3, 50.6]), np.array([62.3 + 2 * r * 0.96, 50.6 + 2 * r * 0.28])
    a = lambert_ball(c1[0], c1[1], r, (0.8, 0.8, 0.8), cloth, (0.2, 0.2, 1.0), 0.35, size=SIZE, ss=4)
    b = lambert_ball(c2[0], c2[1], r, (0.1, 0.1, 0.6), cloth, (0.2, 0.2, 1.0), 0.35, size=SIZE, ss=4)
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    in_b = (xs - c2[0]) ** 2 + (ys - c2[1]) ** 2 < r * r
    img = np.where(in_b[..., None], b, a)
    frame, bg = encode_frame(img, cloth, blur_px=0.8, noise_dn=1.0, seed=5)
    d = delta_e76(to_lab(frame), to_lab(bg))
    THR = threshold(d)
    for seed_px in (c1, c2, (c1 + c2) / 2):
        ax = streak_axis(d, seed_px[0], seed_px[1], r, THR, S)
        st = refine_streak(d, ax, r, S, THR) if ax is not None and ax["ok"] \
            and ax["length"] >= S.streak_min_len * r else None
        assert st is None, (seed_px, ax, st)
