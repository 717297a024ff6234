"""Faint-ball search (tracking/faint.py) on closed-form images of a low-contrast disc on noisy cloth.

Outside truth: the matched-filter statistic of a disc of known contrast in
independent Gaussian noise is non-central chi-square with 3 degrees of
freedom (one per CIELAB axis) and non-centrality lambda = |c|^2 / var(v),
var(v) = sigma^2 (sum kd^2 + sum kr^2) for the disc and ring kernels kd, kr
(a weighted mean of independent pixels); detection and false-alarm
probabilities come from scipy.stats (ncx2, chi2). The images are drawn
here from those parameters, not by our renderer.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tracking.faint import (centre_surround, detection_level, disc_kernel, faint_search, robust_cov,
                            tail_level)
from tracking.settings import DetectionSettings

S = DetectionSettings()
H, W = 150, 230  # non-square: catches x/y swaps
R = 5.0          # disc radius px (a ball at half resolution of a 720p table view)
SIGMA = 1.0      # per-pixel, per-axis noise (Delta-E units)
CLOTH = np.array([45.0, -30.0, 15.0], np.float32)  # a green cloth in CIELAB


def _disc_image(cx: float, cy: float, contrast: np.ndarray, seed: int) -> np.ndarray:
    """Cloth plus a flat disc (radius R, 4x4-supersampled coverage) plus Gaussian noise, CIELAB (H,W,3)."""
    rng = np.random.default_rng(seed)
    img = np.broadcast_to(CLOTH, (H, W, 3)).astype(np.float32).copy()
    k = disc_kernel(R)
    cov = k / k.max()  # coverage 0..1 of each pixel
    n = k.shape[0] // 2
    xi, yi = int(cx), int(cy)
    img[yi - n:yi + n + 1, xi - n:xi + n + 1] += cov[..., None] * contrast.astype(np.float32)
    return img + rng.normal(0.0, SIGMA, img.shape).astype(np.float32)


def _var_v() -> float:
    kd = disc_kernel(R)
    kr = disc_kernel(S.faint_ring_out * R, S.faint_ring_in * R)
    return SIGMA ** 2 * float((kd ** 2).sum() + (kr ** 2).sum())


def _contrast_for(lam: float) -> np.ndarray:
    """Contrast vector (mostly L*, a little a*) whose non-centrality is lam."""
    d = np.array([1.0, 0.4, -0.2])
    return d / np.linalg.norm(d) * np.sqrt(lam * _var_v())


def _search(img: np.ndarray):
    ref = np.broadcast_to(CLOTH, img.shape).astype(np.float32)
    return faint_search(img, ref, np.ones((H, W), bool), R, np.zeros((0, 2)), S)


def test_per_pixel_contrast_is_below_the_foreground_threshold():
    # The case the module exists for: each pixel differs from the cloth by
    # less than the detector's 6-sigma threshold (fg_sigma), yet the disc is
    # found. lambda = 400 -> |c| = 20 sqrt(var_v) ~ 3.4 sigma per pixel here.
    c = _contrast_for(400.0)
    assert np.linalg.norm(c) < 0.7 * S.fg_sigma * SIGMA


def test_faint_disc_found_at_its_centre_with_predicted_probability():
    # lambda 400: detection probability ncx2.sf(level, 3, 400) is ~1 at the
    # chi-square level (scipy.stats); every trial must find the disc within
    # 1 px of its known centre (the peak of a matched filter lies at the
    # disc centre; seeds are on the pixel grid).
    lam = 400.0
    level0 = detection_level(H * W / (np.pi * R * R), S.faint_false_alarm)
    assert stats.ncx2.sf(level0, 3, lam) > 0.999
    hits = 0
    for seed in range(12):
        cx, cy = 60.0 + 7 * seed, 40.0 + 5 * seed
        seeds, info = _search(_disc_image(cx, cy, _contrast_for(lam), seed))
        near = [s for s in seeds if np.hypot(s["x"] - cx, s["y"] - cy) <= 1.0]
        hits += bool(near)
        # nothing else in the picture is a ball
        assert len(seeds) == len(near), seeds
    assert hits == 12


def test_statistic_follows_noncentral_chi_square():
    # E[q] at the true centre = 3 + lambda (mean of ncx2(3, lambda)), when the
    # frame's own robust covariance estimate is right; 30 trials, tolerance
    # 4 standard errors of the mean (sd of ncx2 = sqrt(2 (3 + 2 lambda))).
    lam = 60.0
    qs = []
    for seed in range(30):
        cx, cy = 115.0, 75.0
        img = _disc_image(cx, cy, _contrast_for(lam), 100 + seed)
        ref = np.broadcast_to(CLOTH, img.shape).astype(np.float32)
        v, _, _ = centre_surround(img - ref, np.ones((H, W), np.float32), R, S)
        mu, cov = robust_cov(v[::2, ::2].reshape(-1, 3))
        d = v[int(cy), int(cx)] - mu
        qs.append(float(d @ np.linalg.solve(cov, d)))
    se = np.sqrt(2 * (3 + 2 * lam) / len(qs))
    # scipy.stats.ncx2 mean; robust_cov of a small frame adds a few % of scale error
    assert abs(np.mean(qs) - stats.ncx2.mean(3, lam)) < 4 * se + 0.05 * lam


def test_too_faint_a_disc_is_not_claimed():
    # lambda 4: detection probability at the level is < 1e-3 (scipy.stats.ncx2),
    # so in 10 trials the disc is found at most once.
    lam = 4.0
    level0 = detection_level(H * W / (np.pi * R * R), S.faint_false_alarm)
    assert stats.ncx2.sf(level0, 3, lam) < 1e-3
    found = sum(bool(_search(_disc_image(115.0, 75.0, _contrast_for(lam), 200 + s))[0]) for s in range(10))
    assert found <= 1


def test_empty_noisy_cloth_gives_no_detection():
    # No ball: the false-alarm probability per frame is faint_false_alarm
    # (1e-4, Bonferroni over the frame's disc positions, chi-square level from
    # scipy.stats), so 20 frames of pure noise give no seed (P(any) ~ 2e-3).
    for seed in range(20):
        rng = np.random.default_rng(300 + seed)
        img = (np.broadcast_to(CLOTH, (H, W, 3)) + rng.normal(0, SIGMA, (H, W, 3))).astype(np.float32)
        seeds, _ = _search(img)
        assert seeds == []


def test_smooth_lighting_gradient_and_a_line_are_not_balls():
    # A lamp's fall-off (quadratic in L*, 6 units across the frame) and a
    # straight dark line 2 px wide (a cushion shadow or a wrinkle) are not
    # ball-shaped: the ring removes the gradient; the line is open at both
    # ends in the shape test.
    rng = np.random.default_rng(7)
    yy, xx = np.mgrid[0:H, 0:W]
    img = (np.broadcast_to(CLOTH, (H, W, 3)) + rng.normal(0, SIGMA, (H, W, 3))).astype(np.float32)
    img[..., 0] += (6.0 * ((xx - W / 2) ** 2 + (yy - H / 2) ** 2) / (W / 2) ** 2).astype(np.float32)
    img[:, 120:122, 0] -= 8.0
    seeds, _ = _search(img)
    assert seeds == []


def test_small_bright_mark_is_not_a_ball():
    # A table spot or chalk mark: a disc of 1/5 the ball's radius (1/25 of
    # its area; spots are ~1/20 of a ball's area, common practice) so bright
    # that the mean over a ball-sized disc is as large as a clear faint
    # ball's (lambda ~ 900). A matched filter alone would claim it; a ball
    # changes most of its disc, the mark only the mean.
    rng = np.random.default_rng(5)
    img = (np.broadcast_to(CLOTH, (H, W, 3)) + rng.normal(0, SIGMA, (H, W, 3))).astype(np.float32)
    k = disc_kernel(0.2 * R)
    cov = k / k.max()
    n = k.shape[0] // 2
    step = 25.0 * _contrast_for(900.0)  # x25: the mark's mean over the ball disc matches lambda 900
    img[75 - n:75 + n + 1, 115 - n:115 + n + 1] += cov[..., None] * step.astype(np.float32)
    seeds, info = _search(img)
    assert seeds == []
    # ... while the same mean spread over a whole ball-sized disc is found
    seeds, _ = _search(_disc_image(115.0, 75.0, _contrast_for(900.0), 5))
    assert len(seeds) == 1


def test_tail_level_matches_chi_square_for_gaussian_noise():
    # Peaks over threshold (exponential tail) on chi-square(3) samples must
    # give about the chi-square level itself (scipy.stats.chi2.isf).
    rng = np.random.default_rng(11)
    q = rng.chisquare(3, 400000)
    for n_pos, fa in ((2000, 1e-4), (500, 1e-3)):
        exact = float(stats.chi2.isf(fa / n_pos, 3))
        assert tail_level(q, n_pos, fa) == pytest.approx(exact, rel=0.12)


def test_robust_covariance_ignores_a_bright_ball():
    # 2% of samples far out (balls) must not inflate the covariance: within
    # 5% of the true sigma per axis (the reweighting consistency factor,
    # Croux & Haesbroeck 1999, makes the core unbiased).
    rng = np.random.default_rng(3)
    x = rng.normal(0, [1.0, 2.0, 0.5], (30000, 3))
    x[:600] += [30.0, -20.0, 10.0]
    _, cov = robust_cov(x)
    assert np.sqrt(np.diag(cov)) == pytest.approx([1.0, 2.0, 0.5], rel=0.05)


# --------------------------------------------------------------------------- whole frames
# Closed-form frames as in tests/test_detect_low_contrast.py: each pixel's
# ball coverage from 4x4 sub-pixel rays through the calibrated camera hitting
# the ball sphere; flat colours; Gaussian sensor noise. The true centre is
# the projection of the sphere centre.
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_detect_low_contrast import CLOTH_LAB, R_MM, calibration, delta_e_1976, draw, lab_to_srgb_cie  # noqa: E402

from tracking.detect import build_background, detect_frame  # noqa: E402
from tracking.faint import faint_background, find_faint  # noqa: E402

NOISE_DN = 2.0
POS = [(700.0, 500.0), (1900.0, 800.0)]


def _frames(ball_rgb, n: int, seed: int):
    cal = calibration()
    cloth = lab_to_srgb_cie(CLOTH_LAB)
    rng = np.random.default_rng(seed)
    return cal, cloth, [draw(cal, cloth, [(x, y, ball_rgb) for x, y in POS], NOISE_DN, rng) for _ in range(n)]


def _below_threshold_ball(cal, cloth):
    rng = np.random.default_rng(0)
    bg = build_background([draw(cal, cloth, [], NOISE_DN, rng) for _ in range(7)], cal)
    # 0.5 of the detector's own threshold (CIE 1976 Delta-E, mostly L*)
    ball = lab_to_srgb_cie(CLOTH_LAB + np.array([-0.45, 0.2, 0.0]) / np.hypot(0.45, 0.2) * 0.5 * bg.threshold_dn)
    assert delta_e_1976(np.round(ball), np.round(cloth)) < 0.7 * bg.threshold_dn
    return bg, ball


def test_ball_below_the_per_pixel_threshold_is_found_in_a_frame():
    """Two flat balls at 0.5 threshold: detect_frame misses them, find_faint finds both within 0.5 px.

    Flat (unshaded) balls: the silhouette and the disc template are both
    unbiased, so the centre error is noise only; 0.5 px covers the sub-pixel
    fit of a rim at ~1.5 noise sigma per pixel (Cramer-Rao, template_sigma_px).
    """
    cal = calibration()
    cloth = lab_to_srgb_cie(CLOTH_LAB)
    bg, ball = _below_threshold_ball(cal, cloth)
    img = draw(cal, cloth, [(x, y, ball) for x, y in POS], NOISE_DN, np.random.default_rng(9))
    det = detect_frame(img, cal, DetectionSettings(), bg)
    assert det.empty  # below the per-pixel threshold
    ff = find_faint(img, cal, bg, np.zeros((0, 2)))
    assert len(ff) == len(POS), ff[["x_px", "y_px", "faint_q"]]
    for x, y in POS:
        t = cal.camera.project(np.array([[x, y, R_MM]]))[0]
        e = np.hypot(ff.x_px - t[0], ff.y_px - t[1])
        assert e.min() < 0.5, (x, y, e.min())
        i = int(np.argmin(e))
        # the table position agrees with the sphere centre (mm; 0.5 px at ~2.9 mm/px)
        assert np.hypot(ff.x_mm.iloc[i] - x, ff.y_mm.iloc[i] - y) < 2.0
        assert 0 < ff.confidence.iloc[i] <= 0.5
        assert ff.sx_mm.iloc[i] > 0


def test_resting_faint_ball_is_painted_out_of_the_background():
    """A faint ball that never moves is in the temporal median; faint_background removes it.

    After it, the frame differs from the background at the ball (found by
    find_faint), where the plain background shows nothing there.
    """
    cal = calibration()
    cloth = lab_to_srgb_cie(CLOTH_LAB)
    bg0, ball = _below_threshold_ball(cal, cloth)
    rng = np.random.default_rng(21)
    frames = [draw(cal, cloth, [(x, y, ball) for x, y in POS], NOISE_DN, rng) for _ in range(9)]
    bg = build_background(frames, cal)
    assert len(bg.static_px) == 0  # too faint for the provisional detector
    assert find_faint(frames[0], cal, bg, np.zeros((0, 2))).empty  # the ball is part of the background
    nb = faint_background(bg, cal)
    assert len(nb.static_px) == len(POS)
    ff = find_faint(frames[0], cal, nb, np.zeros((0, 2)))
    assert len(ff) == len(POS)
    for x, y in POS:
        assert np.hypot(ff.x_mm - x, ff.y_mm - y).min() < 3.0  # ~1 px at ~2.9 mm/px


def test_empty_frame_gives_no_faint_ball():
    """No ball on the cloth: nothing is found in 5 noisy frames (false-alarm probability 1e-4 per frame)."""
    cal = calibration()
    cloth = lab_to_srgb_cie(CLOTH_LAB)
    rng = np.random.default_rng(0)
    bg = build_background([draw(cal, cloth, [], NOISE_DN, rng) for _ in range(7)], cal)
    assert faint_background(bg, cal) is bg
    for k in range(5):
        img = draw(cal, cloth, [], NOISE_DN, np.random.default_rng(40 + k))
        assert find_faint(img, cal, bg, np.zeros((0, 2))).empty


def test_faint_disc_in_a_corner_pocket_mouth_is_not_a_ball():
    """A faint resting disc whose own disc reaches past a corner pocket's mouth line is left alone.

    Geometry (tracking/pockets.py): the mouth is the chord mouth/sqrt(2) from the
    corner along each nose line; with no clear silhouette a faint find there is the
    pocket's shaded rim (seen on snooker renders), so its disc must clear the
    mouth line (u + v >= (mouth + 2R)/sqrt(2)). Checked both ways: with the
    mouth set to 0 the same disc is painted out like the two in the open.
    """
    from dataclasses import replace as _replace

    cal = calibration()
    cloth = lab_to_srgb_cie(CLOTH_LAB)
    _, ball = _below_threshold_ball(cal, cloth)
    rng = np.random.default_rng(33)
    corner = (45.0, 45.0)  # u + v = 90 mm < (86 + 57.15) / sqrt(2) = 101 mm
    frames = [draw(cal, cloth, [(x, y, ball) for x, y in POS + [corner]], NOISE_DN, rng) for _ in range(9)]
    bg = build_background(frames, cal)
    off = faint_background(bg, cal, _replace(DetectionSettings(), corner_mouth_min_mm=0.0))
    assert len(off.static_px) == len(POS) + 1  # the rule is what keeps it out
    on = faint_background(bg, cal)
    assert len(on.static_px) == len(POS)
