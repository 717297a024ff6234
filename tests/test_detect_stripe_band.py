"""A stripe ball whose band is the cloth's colour (tracking/stripe_outline.py), on closed-form images.

Outside truth, all closed forms drawn here (not by our renderer):
- the ball: exact sphere-ray intersection through the calibrated pinhole
  camera with lens distortion of tests/test_detect.py (sphere_normals),
  shade = ambient + (1 - ambient) max(0, n.l) (Lambert's cosine law), 4x4
  supersampling, Gaussian noise;
- the stripe: white caps where |n.a| > 0.55 for the stripe axis a (a band
  of height 1.1 R round the ball's middle; common practice look, the
  figure from memory), the band the cloth's own green (colours common
  practice, from memory);
- the cast shadow: the ball's disc moved away from the lamp by R tan(zenith)
  (the sphere centre's shadow on the cloth plane, plain geometry), the
  cloth under it darkened by half with a 2 px linear edge.
The ball's true centre is the reference. With the stripe axis tilted 55 deg
from the vertical the white cap fills one side of the rim and the band the
other; the colour fit traces the cap and the shadow (3-6 px off with a
sigma of 0.2-0.4 px without the refit, checked below); the refit puts it
within 0.6 px. Not yet: with the axis tilted 40 deg several cases stay
3-6 px off (the refit does not pass its checks and the colour fit's radius
looks like a ball's, so its sigma is not widened either).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from test_detect import CLOTH, R_MM, empty_background, make_calibration, nearest, sphere_normals, truth_px
from tracking.detect import detect_frame
from tracking.faint import add_faint
from tracking.settings import DetectionSettings

S = DetectionSettings()
OFF = dataclasses.replace(S, stripe_refit=False)
WHITE = (235, 240, 242)
LIGHTS = {"x30": (0.5, 0.0, 0.866), "xy30": (-0.3, 0.4, 0.866)}
TOL_PX = 0.6  # stated bound on the refitted centre's error (px; the ball is ~11 px in radius here)


def render_stripe(cal, x: float, y: float, axis, band_bgr, light, ambient: float, rng: np.random.Generator,
                  noise_dn: float, shadow: float = 0.5, cap_z: float = 0.55, ss: int = 4) -> np.ndarray:
    """BGR uint8 frame of one stripe ball at (x, y) table mm on the cloth, with its cast shadow."""
    w, h = cal.camera.image_size
    img = np.empty((h, w, 3), float)
    img[:] = CLOTH
    L = np.asarray(light, float) / np.linalg.norm(light)
    a = np.asarray(axis, float) / np.linalg.norm(axis)
    C = np.array([x, y, R_MM])
    c_px = cal.camera.project(C[None])[0]
    r_px = R_MM / cal.camera.mm_per_px(C)
    half = int(np.ceil(r_px * 1.6 + 2 + r_px * np.hypot(L[0], L[1]) / L[2]))
    cx, cy = int(round(c_px[0])), int(round(c_px[1]))
    x0, y0, x1, y1 = cx - half, cy - half, cx + half + 1, cy + half + 1
    n, hit = sphere_normals(cal, C, x0, y0, x1, y1, ss)
    shade = ambient + (1 - ambient) * np.clip(n @ L, 0, 1)
    base = np.tile(np.asarray(band_bgr, float), (len(n), 1))
    base[np.abs(n @ a) > cap_z] = WHITE
    col = base * shade[:, None]
    shape = (y1 - y0, x1 - x0, ss * ss)
    cov = hit.reshape(shape).mean(axis=2)
    colsum = (col * hit[:, None]).reshape(shape + (3,)).sum(axis=2) / (ss * ss)
    patch = img[y0:y1, x0:x1]
    if shadow:
        sx, sy = c_px[0] - r_px * L[0] / L[2], c_px[1] - r_px * L[1] / L[2]
        yy, xx = np.mgrid[y0:y1, x0:x1]
        inside = np.clip(0.5 - (np.hypot(xx - sx, yy - sy) - r_px) / 2.0, 0, 1)
        patch = patch * (1 - shadow * inside)[..., None]
    img[y0:y1, x0:x1] = patch * (1 - cov[..., None]) + colsum
    img = img + rng.normal(0, noise_dn, img.shape)
    return np.clip(np.round(img), 0, 255).astype(np.uint8)


def _axis(tilt_deg: float, azimuth_deg: float) -> tuple[float, float, float]:
    t, p = np.radians(tilt_deg), np.radians(azimuth_deg)
    return np.sin(t) * np.cos(p), np.sin(t) * np.sin(p), np.cos(t)


@pytest.fixture(scope="module")
def setup():
    cal = make_calibration()
    return cal, empty_background(cal)


@pytest.mark.parametrize("light", LIGHTS)
@pytest.mark.parametrize("azimuth", [90.0, 200.0])
def test_stripe_with_a_band_of_the_cloths_colour_is_centred_on_its_outline(setup, light, azimuth):
    cal, bg = setup
    x, y = 1210.0, 590.0
    tp = truth_px(cal, x, y)
    for seed in range(2):
        img = render_stripe(cal, x, y, _axis(55.0, azimuth), CLOTH, LIGHTS[light], 0.3,
                            np.random.default_rng(seed), 1.5)
        before, d0 = nearest(add_faint(detect_frame(img, cal, OFF, bg), img, cal, bg, OFF), tp)
        # the failure this is for: the colour fit traces the cap and the shadow, confidently
        assert d0 > 2.0 and d0 > 3.0 * before.sigma_px, (light, azimuth, seed, d0, before.sigma_px)
        row, d1 = nearest(add_faint(detect_frame(img, cal, S, bg), img, cal, bg, S), tp)
        assert d1 < TOL_PX, (light, azimuth, seed, d1)


def test_clear_solid_ball_with_a_shadow_is_left_alone(setup):
    """A white ball (its colour fit already on the outline) keeps its colour-fit centre and sigma."""
    cal, bg = setup
    x, y = 1210.0, 590.0
    tp = truth_px(cal, x, y)
    img = render_stripe(cal, x, y, (0.0, 0.0, 1.0), WHITE, LIGHTS["x30"], 0.3, np.random.default_rng(3), 1.5)
    a, _ = nearest(add_faint(detect_frame(img, cal, OFF, bg), img, cal, bg, OFF), tp)
    b, _ = nearest(add_faint(detect_frame(img, cal, S, bg), img, cal, bg, S), tp)
    assert (a.x_px, a.y_px, a.sigma_px) == (b.x_px, b.y_px, b.sigma_px)
