"""Brightness matching (tracking/exposure.py) against the closed-form sRGB curve.

A brightness change is a gain G(x, y) in linear light; frames here are made by
encoding linear images with the sRGB curve of IEC 61966-2-1 (closed form in
tests/lambert_ball.py), so the ideal correction is known exactly: decode,
divide by G, encode.
"""
from __future__ import annotations

import numpy as np

from lambert_ball import srgb_encode
from tracking.exposure import ExposureMatcher
from tracking.settings import ExposureSettings

H, W = 180, 320


def _scene(rng):
    ys, xs = np.mgrid[0:H, 0:W]
    r2 = ((xs - W / 2) / (W / 2)) ** 2 + ((ys - H / 2) / (H / 2)) ** 2
    cloth = np.array([0.02, 0.18, 0.05]) * 2.0  # BGR linear, a green cloth
    lin = cloth[None, None, :] * (1.0 - 0.35 * r2)[..., None]  # vignetting
    balls = lin.copy()
    for cx, cy, col in ((80, 60, (0.8, 0.8, 0.8)), (200, 120, (0.05, 0.4, 0.8)), (250, 40, (0.02, 0.02, 0.02))):
        m = (xs - cx) ** 2 + (ys - cy) ** 2 < 14 ** 2
        balls[m] = col
    return xs, ys, lin, balls


def _encode(lin, rng, noise=0.8):
    return np.clip(np.rint(srgb_encode(lin) + rng.normal(0, noise, lin.shape)), 0, 255).astype(np.uint8)


def test_flicker_gain_field_is_removed():
    rng = np.random.default_rng(3)
    xs, ys, cloth, scene = _scene(rng)
    bg = srgb_encode(cloth).astype(np.float32)
    mask = np.ones((H, W), np.uint8)
    m = ExposureMatcher(bg, mask)
    # a lamp 9 % brighter on one side of the table, 4 % on the other, in linear light
    G = (1.065 + 0.025 * (xs - W / 2) / (W / 2))[..., None]
    frame = _encode(scene * G, rng)
    steady = srgb_encode(scene)
    out = m.correct(frame).astype(float)
    cloth_px = np.all(np.abs(scene - cloth) < 1e-12, axis=2) & (srgb_encode(cloth).min(axis=2) > 20)
    err_before = np.abs(frame.astype(float) - steady)[cloth_px].mean()
    err_after = np.abs(out - steady)[cloth_px].mean()
    # closed form: the corrected cloth equals the steady one up to the added noise (mean |N(0, 0.8)| = 0.64 DN)
    assert err_before > 2.0
    assert err_after < 0.9, (err_before, err_after)


def test_steady_frame_is_left_untouched_and_balls_do_not_bias():
    rng = np.random.default_rng(4)
    xs, ys, cloth, scene = _scene(rng)
    bg = srgb_encode(cloth).astype(np.float32)
    m = ExposureMatcher(bg, np.ones((H, W), np.uint8))
    frame = _encode(scene, rng)
    assert m.correct(frame) is frame  # below min_change: bit for bit
    # balls (a white, a blue and a black one) are outliers of the fit: a pure
    # 20 % gain must come out as q = 1.2^(1/2.4) on every channel
    frame2 = _encode(scene * 1.2, rng)
    coef = m.fit(frame2)
    q = m.A @ coef  # the fitted field over the sampled cloth
    err = np.abs(q - 1.2 ** (1 / 2.4))
    # a plain least-squares fit would be pulled ~0.05 by the white ball alone
    assert err.mean() < 0.0015 and err.max() < 0.006, (err.mean(), err.max())


def test_a_cut_is_not_corrected():
    rng = np.random.default_rng(5)
    _, _, cloth, scene = _scene(rng)
    bg = srgb_encode(cloth).astype(np.float32)
    m = ExposureMatcher(bg, np.ones((H, W), np.uint8), ExposureSettings())
    frame = _encode(scene * 4.0, rng)  # far beyond any flicker: another scene or a flash
    assert m.correct(frame) is frame
