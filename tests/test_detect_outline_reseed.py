"""A circle fit seeded on a ball's cast shadow is redone from the outline's best disc (detect._outline_reseed).

Closed-form images (tests/test_detect_streak_shade.swept_ball_with_shadow
with no sweep): a Lambertian ball (Lambert's cosine law) of the cloth's own
hue, its cast shadow a disc of the ball's radius offset ``off`` radii away
from the lamp (the shadow of a sphere on its plane lies R tan(zenith) past
the foot; geometry of a point lamp, common practice), the cloth keeping 35 %
of its light there (from memory); blurred, sRGB-encoded, 1 DN noise
(tests/lambert_ball.encode_frame). The true centre is the reference.

On Delta-E the shadow is as strong as the ball, so a seed from the
foreground blob can sit between ball and shadow (sweep MuJoCo clip mj9911's
blue ball on blue: seeds 7-8 px off at r = 8.1 px, fits 4-6 px off), where
the shadow also makes the edge map Delta-E. The outline's best disc on the
shade-free map (where the shadow is not ball) is near the ball; the fit
redone from there, on the edge map chosen there, covers the ball better
and is kept.
"""
from __future__ import annotations

import numpy as np
import pytest

from lambert_ball import encode_frame  # noqa: E402
from test_detect_blur import threshold  # noqa: E402
from test_detect_streak_shade import PAIRS, swept_ball_with_shadow  # noqa: E402
from tracking.detect import _outline_reseed, delta_e76, edge_map, refine_centre, shade_free_de, to_lab
from tracking.settings import DetectionSettings

S = DetectionSettings()
R = 9.0


@pytest.mark.parametrize("k", [0, 1], ids=["blue_on_blue", "red_on_red"])
@pytest.mark.parametrize("ang", [20.0, 150.0, 260.0])
def test_seed_on_the_shadow_is_redone_from_the_outline(k, ang):
    ball, cloth = PAIRS[k]
    c = np.array([74.3, 52.1])
    v = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])  # towards the shadow
    light = (-0.6 * v[0], -0.6 * v[1], 0.8)  # lamp ~37 deg off the vertical, on the other side
    img = swept_ball_with_shadow(c, v, 0.0, R, ball, cloth, light, 0.3, 1.0 * R * v)
    errs = []
    for seed in range(3):
        frame, bg = encode_frame(img, cloth, blur_px=0.8, noise_dn=1.0, seed=20 + seed)
        lab, bg_lab = to_lab(frame), to_lab(bg)
        d, de = delta_e76(lab, bg_lab), shade_free_de(lab, bg_lab, S.shade_min_light)
        thr = threshold(d)
        g = c + 0.85 * R * v  # the seed between ball and shadow
        em = edge_map(d, de, g[0], g[1], R, S)
        ref = refine_centre(em, g[0], g[1], R, S, frame, thr, None)
        out = _outline_reseed(ref, d, de, em, g[0], g[1], R, S, frame, thr, np.zeros((0, 2)))
        e_ref = np.inf if ref is None else float(np.hypot(ref["x"] - c[0], ref["y"] - c[1]))
        e_out = float(np.hypot(out["x"] - c[0], out["y"] - c[1]))
        errs.append((round(e_ref, 2), round(e_out, 2)))
    print(errs)
    assert max(e for _, e in errs) < 1.0, errs
    assert max(e for e, _ in errs) > 2.0, errs  # the diagnosis: the fit from the seed alone is off
