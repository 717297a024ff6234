"""The rim of a streak located on the shade-free map (DetectionSettings.streak_shade_free).

Closed-form images: a Lambertian ball (Lambert's cosine law, see
tests/lambert_ball.py) of the cloth's own hue, swept uniformly over L px
during the exposure (mid-exposure centre c), with its cast shadow on the
cloth: under a lamp off the vertical the shadow of a sphere on its plane is
offset from the foot by R tan(zenith) away from the lamp (geometry of a
point lamp; common practice), here a disc of the ball's radius offset
0.6 r across the motion (a lamp ~30 degrees off the vertical), swept with the
ball, the cloth keeping 35 % of its light there (umbra lit by ambient and
bounce light; from memory). Linear light, blurred and sRGB-encoded with
1 DN noise (tests/lambert_ball.encode_frame).

On Delta-E the shadow differs from the cloth as much as the ball's dim limb
does, so the streak's rim runs round ball and shadow and the centre moves
towards the shadow; on the shade-free difference (darkening along the
cloth's own colour does not count) it does not, and the streak fit shares
the circle fit's rim (and its dim-limb pull towards the lamp).
"""
from __future__ import annotations

import numpy as np
import pytest

from lambert_ball import encode_frame, lambert_ball  # noqa: E402
from test_detect_blur import SIZE, threshold  # noqa: E402
from tracking.detect import delta_e76, refine_centre, shade_free_de, to_lab
from tracking.settings import DetectionSettings
from tracking.streak import refine_streak, streak_axis

S = DetectionSettings()


def swept_ball_with_shadow(c, u, length, r, ball, cloth, light, ambient, shadow_off, keep=0.35, step=0.5):
    """Linear-light image of a Lambertian ball swept over ``length`` px along unit u (centre c), with its
    cast shadow (disc of radius r at ``shadow_off`` px from the ball's centre, the cloth keeping ``keep``
    of its light) swept with it."""
    n = max(1, int(np.ceil(length / step)))
    ts = ((np.arange(n) + 0.5) / n - 0.5) * length
    ys, xs = np.mgrid[0:SIZE[1], 0:SIZE[0]]
    img = np.zeros((SIZE[1], SIZE[0], 3))
    cl = np.asarray(cloth, float)
    for t in ts:
        p = c + t * u
        ball_only = lambert_ball(p[0], p[1], r, ball, (0, 0, 0), light, ambient, size=SIZE, ss=4)
        uncovered = lambert_ball(p[0], p[1], r, (0, 0, 0), (1, 1, 1), light, ambient, size=SIZE, ss=4)
        q = p + shadow_off
        shade = np.where((xs - q[0]) ** 2 + (ys - q[1]) ** 2 < r * r, keep, 1.0)
        img += ball_only + uncovered * cl[None, None, :] * shade[..., None]
    return img / n


# (ball, cloth) linear BGR: blue on blue, red on red (the cloth's own hue, the ball brighter)
PAIRS = [((0.55, 0.12, 0.04), (0.30, 0.10, 0.03)), ((0.03, 0.03, 0.45), (0.04, 0.03, 0.25))]


def _scene(k, ang, length, r=10.0):
    ball, cloth = PAIRS[k]
    c = np.array([74.3, 52.1])
    u = np.array([np.cos(np.radians(ang)), np.sin(np.radians(ang))])
    v = np.array([-u[1], u[0]])  # across the motion: the shadow's side
    light = (-0.45 * v[0], -0.45 * v[1], 0.9)  # lamp on the other side, ~27 deg off the vertical
    img = swept_ball_with_shadow(c, u, length, r, ball, cloth, light, 0.3, 0.6 * r * v)
    frame, bg = encode_frame(img, cloth, blur_px=0.8, noise_dn=1.0, seed=10 + k)
    lab, bg_lab = to_lab(frame), to_lab(bg)
    return c, v, frame, delta_e76(lab, bg_lab), shade_free_de(lab, bg_lab, S.shade_min_light)


@pytest.mark.parametrize("k,ang,length", [(0, 35.0, 20.0), (0, -60.0, 26.0), (1, 35.0, 20.0), (1, -60.0, 26.0),
                                          (1, 80.0, 32.0)])
def test_streak_and_circle_fits_see_the_same_rim(k, ang, length):
    """On the shade-free map the streak fit's centre lies across the motion where the circle fit's does
    (the circle fit locates on that map, detect.edge_map); on Delta-E it is pulled towards the shadow.

    A moving ball is located by one fit or the other from frame to frame, so
    their difference across the motion becomes a velocity error. Measured on
    these images: Delta-E streak vs shade-free circle fit 3.6-4.4 px apart,
    shade-free streak vs circle fit 0.05-1.4 px (both pulled 0.5-2 px towards
    the lamp: the dim limb of a ball of the cloth's hue reads as shadow; not
    corrected here). Checked: the Delta-E streak centre lies on the shadow's
    side, and the shade-free one at most half as far from the circle fit.
    """
    c, v, frame, d, de = _scene(k, ang, length)
    thr = threshold(d)
    ax = streak_axis(d, c[0], c[1], 10.0, thr, S)
    assert ax is not None and ax["ok"]
    circle = refine_centre(de, c[0], c[1], 10.0, S, frame, thr)
    on_d = refine_streak(d, ax, 10.0, S, thr)
    on_de = refine_streak(de, ax, 10.0, S, thr)
    assert circle is not None and on_d is not None and on_de is not None

    def across(o):
        return float(np.dot([o["x"] - c[0], o["y"] - c[1]], v))

    assert across(on_d) > 2.0  # towards the shadow
    gap_d = abs(across(on_d) - across(circle))
    gap_de = abs(across(on_de) - across(circle))
    assert gap_de < 0.5 * gap_d, (gap_de, gap_d)
