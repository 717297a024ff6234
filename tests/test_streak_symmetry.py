"""Streak checks against closed forms: point symmetry of a swept disc, and the smear scale with streak fits.

A disc of radius r swept uniformly over L px has a coverage image symmetric
under a half turn about its mid-exposure centre (reverse time: the sweep maps
onto itself), and its coverage integrates to the disc's area pi r^2 (each
instant of the exposure contributes one disc). A resting disc of the same
radius next to one end, disjoint from the sweep, therefore makes the point
asymmetry A_D / (pi r^2 + A_D) = 1/2 exactly (tracking.streak.point_asymmetry).
"""
from __future__ import annotations

import numpy as np
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from test_detect_blur import SIZE, swept_ball, swept_coverage, threshold  # noqa: E402
from tracking.detect import delta_e76, to_lab
from tracking.kalman import smear_scale
from tracking.settings import DetectionSettings
from tracking.streak import point_asymmetry, refine_streak, streak_axis

S = DetectionSettings()


def _with_resting_ball(img, p, r, colour, cloth, light, seed):
    """Delta-E map and threshold of ``img`` with a resting Lambertian ball of ``colour`` at p (px) on top."""
    rest = lambert_ball(p[0], p[1], r, colour, cloth, light, 0.35, size=SIZE, ss=4)
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    in_rest = (xs - p[0]) ** 2 + (ys - p[1]) ** 2 < r * r
    frame, bg = encode_frame(np.where(in_rest[..., None], rest, img), cloth, blur_px=0.8, noise_dn=1.0, seed=seed)
    d = delta_e76(to_lab(frame), to_lab(bg))
    return d, threshold(d)


@pytest.mark.parametrize("length,ang", [(10.0, 15.0), (24.0, -40.0), (40.0, 95.0)])
def test_swept_disc_is_point_symmetric(length, ang):
    """Closed-form swept coverage: asymmetry ~0 about the true centre, clearly not about a shifted one."""
    c = np.array([74.3, 51.6])
    u = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])
    cov = swept_coverage(c, u, length, 10.0).astype(np.float32)
    # half-turn symmetry is exact; pixel sampling of the rotated image (bilinear) leaves < 2 %
    assert point_asymmetry(cov, c, 0.01) < 0.02
    assert point_asymmetry(cov, c + 0.25 * length * u, 0.01) > 0.1


def test_streak_with_resting_disc_has_asymmetry_one_half():
    """Swept disc + a disjoint resting disc of the same radius: A_D / (pi r^2 + A_D) = 0.5 (closed form above)."""
    r, L = 9.0, 30.0
    c = np.array([60.2, 50.7])
    u = np.array([1.0, 0.0])
    cov = swept_coverage(c, u, L, r)
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    rest = c + (L / 2 + 2 * r + 3.0) * u  # clear of the sweep's end by 3 px
    disc = swept_coverage(rest, u, 1e-6, r)  # a resting disc (sweep of ~0 length)
    a = point_asymmetry((cov + disc).astype(np.float32), c, 0.01)
    assert abs(a - 0.5) < 0.03, a  # closed form 0.5; 0.03 for the bilinear resampling at the rims


def test_rendered_streak_passes_and_streak_into_resting_ball_falls_back():
    """A rendered Lambertian swept ball is accepted as a streak; the same streak run into a resting ball is not."""
    r, L = 11.0, 30.0
    cloth = (0.05, 0.25, 0.04)
    light = (0.3, -0.2, 1.0)
    c = np.array([55.4, 52.3])
    u = np.array([1.0, 0.0])
    img = swept_ball(c, u, L, r, (0.8, 0.82, 0.85), cloth, light, 0.35)
    frame, bg = encode_frame(img, cloth, blur_px=0.8, noise_dn=1.0, seed=3)
    d = delta_e76(to_lab(frame), to_lab(bg))
    thr = threshold(d)
    ax = streak_axis(d, c[0], c[1], r, thr, S)
    assert ax is not None and ax["ok"]
    st = refine_streak(d, ax, r, S, thr)
    assert st is not None and st["asym"] < S.streak_max_asym
    assert np.hypot(st["x"] - c[0], st["y"] - c[1]) < 0.1 * L  # streak_sigma_frac scale, module docstring
    # the moving ball touches a resting one at its leading end (a contact frame)
    p = c + (L / 2 + 2 * r) * u
    d, thr = _with_resting_ball(img, p, r, (0.1, 0.1, 0.6), cloth, light, seed=4)
    ax = streak_axis(d, c[0], c[1], r, thr, S)
    st = refine_streak(d, ax, r, S, thr) if ax is not None and ax["ok"] else None
    assert st is None, st


def test_smear_scale_leaves_streak_fits_out():
    """Covariance matching (Mehra 1972) with the smear term on the circle fits only recovers the true c.

    Every third detection is a streak fit (f = 0: no smear error beyond its
    sigma); the others carry along-motion noise of variance c |v|^2.
    Reference: the c the data were drawn with.
    """
    rng = np.random.default_rng(11)
    n, c_true = 600, 2e-5
    t = np.arange(n) / 30.0
    v = 2500.0
    f = (np.arange(n) % 3 != 0).astype(float)
    z = np.column_stack([v * t, 0 * t])
    z[:, 0] += rng.normal(0, 1, n) * np.sqrt(1.0 + f * c_true * v * v)
    z[:, 1] += rng.normal(0, 1, n)
    R = np.tile(np.eye(2), (n, 1, 1))
    c = smear_scale([(t, z, R, f)], 1e-3)
    assert abs(c / c_true - 1) < 0.2, c / c_true  # ~600 triples: relative sigma ~ sqrt(2/600) x (1 + base/smear)
    # ignoring the mask (every detection smeared) underestimates c by ~ (2/3 of 6) / 6 weights
    c_all = smear_scale([(t, z, R)], 1e-3)
    assert c_all < 0.85 * c_true


def test_ball_beside_a_streak_does_not_count():
    """A resting ball beside a streak (outside its stadium, not touching) leaves it a streak.

    The asymmetry is taken only within the blob's stadium; over the whole
    patch the neighbour's disc would have no mirror image and read as the
    one-sided excess of a contact (closed form above: up to 1/2).
    """
    r, L = 11.0, 36.0
    cloth = (0.05, 0.25, 0.04)
    light = (0.3, -0.2, 1.0)
    c = np.array([62.4, 40.3])
    u = np.array([1.0, 0.0])
    img = swept_ball(c, u, L, r, (0.8, 0.82, 0.85), cloth, light, 0.35)
    p = c + np.array([-8.0, 2.9 * r])  # beside the streak, 0.9 r clear of its side
    d, thr = _with_resting_ball(img, p, r, (0.75, 0.7, 0.2), cloth, light, seed=6)
    ax = streak_axis(d, c[0], c[1], r, thr, S)
    assert ax is not None and ax["ok"]
    st = refine_streak(d, ax, r, S, thr)
    assert st is not None and st["asym"] < S.streak_max_asym, st
    assert np.hypot(st["x"] - c[0], st["y"] - c[1]) < 0.1 * L
