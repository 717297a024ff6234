"""Second edge stage (tracking.detect._limb_points via refine_centre) on closed-form ball images.

The images are drawn analytically here, independently of the detector. A
sphere seen from straight above is a disc of radius r px; a point on it at
(dx, dy) from the centre has the unit normal n = (dx/r, dy/r, sqrt(1 -
(dx^2 + dy^2)/r^2)) and, for a distant lamp in direction l, the Lambertian
radiance albedo * (ambient + (1 - ambient) max(0, n . l)) (Lambert's cosine
law): the limb is dark, on the side away from the lamp darker than the
cloth. Pixels average 8x8 sub-samples (coverage exact to 1/64), the frame is
blurred by a Gaussian in linear light (a lens point-spread; the 50 % level
of a blurred straight edge stays on the edge for any symmetric kernel),
encoded with the sRGB curve of IEC 61966-2-1 and given Gaussian noise of
1 DN; fixed seeds, non-square crops. Truth: the drawn centre and radius.

The colour images keep full colour resolution (no 4:2:0 chroma subsampling),
and ball and cloth differ in hue (the stage splits colours; a ball of the
cloth's hue keeps the first-stage edge); see DetectionSettings.limb_linear
for why the stage is opt-in.
"""
from __future__ import annotations

import numpy as np
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from tracking.detect import delta_e76, refine_centre, to_lab
from tracking.settings import DetectionSettings

ON = DetectionSettings(limb_linear=True)
OFF = DetectionSettings(limb_linear=False)


def encode(img_lin: np.ndarray, cloth_bgr, blur_px: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Blur in linear light, sRGB-encode, add 1 DN noise -> (frame uint8, Delta-E map vs the empty cloth)."""
    frame, bg = encode_frame(img_lin, cloth_bgr, blur_px=blur_px, noise_dn=1.0, seed=seed)
    return frame, delta_e76(to_lab(frame), to_lab(bg))


CASES = [
    # (ball BGR linear, cloth BGR linear, lamp direction (x right, y down, z to camera), ambient)
    ((0.03, 0.30, 0.65), (0.07, 0.24, 0.09), (0.9, 0.4, 0.8), 0.12),    # orange ball, green cloth
    ((0.06, 0.06, 0.45), (0.10, 0.22, 0.06), (-0.6, 0.9, 0.7), 0.12),   # red ball, green cloth
    ((0.50, 0.15, 0.04), (0.09, 0.20, 0.05), (0.3, -1.0, 0.6), 0.10),   # blue ball, green cloth
    ((0.70, 0.70, 0.68), (0.04, 0.16, 0.05), (0.5, 0.3, 0.8), 0.20),    # white ball, green cloth
    ((0.03, 0.03, 0.03), (0.04, 0.16, 0.05), (-0.4, -0.3, 0.9), 0.30),  # black ball, green cloth
]


@pytest.mark.parametrize("k", range(len(CASES)))
@pytest.mark.parametrize("blur_px", [0.6, 1.0])
def test_limb_stage_finds_the_true_disc_under_limb_darkening(k, blur_px):
    """Centre within 0.1 px and radius within 0.15 px of the drawn disc.

    Closed form (module docstring). 0.1 px: 64 rays with ~0.2-0.4 px per-ray
    noise at 1 DN give a centre sigma of ~0.05 px; 8x8 coverage sampling adds
    < 0.02 px. The radius may sit up to ~0.1 px inside: the guard band keeps
    ~0.1-0.5 % of the blur's tail in the reference windows.
    """
    ball, cloth, light, amb = CASES[k]
    rng = np.random.default_rng(500 + 10 * k + int(10 * blur_px))
    r = 11.0 + rng.uniform(-1.5, 1.5)
    w, h = 61, 53  # non-square: catches x/y swaps
    cx, cy = w / 2 + rng.uniform(-0.5, 0.5), h / 2 + rng.uniform(-0.5, 0.5)
    frame, d = encode(lambert_ball(cx, cy, r, ball, cloth, light, amb, (w, h)), cloth, blur_px, seed=k)
    ref = refine_centre(d, w / 2, h / 2, r, ON, frame, 3.0)
    assert ref is not None
    assert np.hypot(ref["x"] - cx, ref["y"] - cy) < 0.1  # drawn centre (closed form, module docstring)
    assert abs(ref["radius"] - r) < 0.15  # drawn radius (closed form)


def test_dark_limb_pulls_the_first_stage_towards_the_lamp():
    """Without the second stage the same images are measurably biased (so the test above can fail).

    Mean over the cases at 1 px blur: the first-stage silhouette (steepest
    drop of the Delta-E image) lies > 0.15 px from the drawn centre, the
    second stage < 0.07 px (closed-form truth).
    """
    e_off, e_on = [], []
    for k, (ball, cloth, light, amb) in enumerate(CASES):
        cx, cy, r = 30.3, 26.6, 11.2
        frame, d = encode(lambert_ball(cx, cy, r, ball, cloth, light, amb, (61, 53)), cloth, 1.0, seed=40 + k)
        for ds, acc in ((OFF, e_off), (ON, e_on)):
            ref = refine_centre(d, 30.5, 26.5, r, ds, frame, 3.0)
            acc.append(np.hypot(ref["x"] - cx, ref["y"] - cy))
    assert np.mean(e_off) > 0.15  # closed-form truth: the bias the second stage removes
    assert np.mean(e_on) < 0.07


def test_limb_stage_keeps_a_moving_ball_at_mid_exposure():
    """A ball swept 4 px during the exposure: centre within 0.2 px of the mid-exposure position.

    Closed form: the time-averaged coverage of a disc moving at constant
    velocity is point-symmetric about the mid-exposure centre (the sensor
    integrates linear light; 13 sub-steps). Rays along the smear, wider than
    the reference windows, keep the first-stage point; the others see a
    sharp rim. 0.2 px, not 0.1: the lamp lights the leading side, so the
    shading within the smear is not symmetric (the first stage alone is off
    by ~0.3 px here).
    """
    r, cloth = 10.8, (0.07, 0.24, 0.09)
    w, h = 71, 55
    c0 = np.array([35.2, 27.4])
    v = np.array([6.0, 2.0]) / np.hypot(6.0, 2.0) * 4.0
    acc = np.zeros((h, w, 3))
    for t in np.linspace(-0.5, 0.5, 13):
        cx, cy = c0 + t * v
        acc += lambert_ball(cx, cy, r, (0.70, 0.70, 0.68), cloth, (0.5, 0.3, 0.8), 0.2, (w, h), ss=4)
    frame, d = encode(acc / 13, cloth, 0.8, seed=3)
    ref = refine_centre(d, 35.0, 27.0, r, ON, frame, 3.0)
    assert ref is not None
    assert np.hypot(ref["x"] - c0[0], ref["y"] - c0[1]) < 0.2  # point symmetry (closed form)
