"""A fast cushion bounce at a low frame rate is a contact candidate (physics.events.find_contacts).

Closed forms (written here, not produced by the project's simulator): the ball rolls in a straight
line at deceleration mu_r g (rolling resistance 0.01, inside the published 0.005-0.015, Physics of
Pool FAQ, Colorado State University, REFERENCES.md); the cushion reverses the normal velocity with
restitution e (cushion e = -v'.n / v.n, apparent cushion restitution 0.6-0.9 in the same source)
and keeps the tangential part; the ball's spin is unchanged through the contact, so it leaves
sliding with slip u' = v' - v (rolling in, u = 0), decelerates at mu_s g along -u' and rolls from
2 |u'| / (7 mu_s g) on at (5 v' + 2 R omega x z) / 7 (REFERENCES.md, "Closed forms usable as
oracles"; tests/test_contacts.py: _motion).

Where the ball touches: the cushion nose sits above the ball's centre, so the centre is
D = sqrt(R^2 - (h - R)^2) from the nose line at first touch (h the nose height; 63.5 % of the
ball's diameter, WPA range 62.5-64.5 %, from memory; physics/cushion_geometry.py), not R.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import G_MM_S2
from physics.events import gap_step
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.cushion_geometry import contact_distance_mm
from test_contacts import M, R, TABLE, _motion

D = contact_distance_mm(R, TABLE.cushion_nose_height_mm)  # centre to nose line at touch, mm


def cushion_bounce(v_in=(100.0, -1800.0), e=0.8, fps=60.0, phase=0.5, sigma=0.25, seed=0,
                   mu_s=0.2, mu_r=0.01, t_pre=0.4, t_post=0.6):
    """A ball rolling into the y = 0 cushion nose, touching it at t_c; samples at ``phase`` of a
    frame period after the touch (0.5: the nearest samples are half a frame of travel away)."""
    rng = np.random.default_rng(seed)
    g = G_MM_S2
    dt = 1 / fps
    tc = t_pre + phase * dt
    t = np.arange(0.0, tc + t_post, dt)
    va = np.array(v_in, float)
    sp = float(np.hypot(*va))
    d = va / sp
    pc = np.array([1200.0, D])  # centre at the touch: D from the nose line y = 0
    pre = t < tc
    tau = tc - t[pre]
    p = np.zeros((len(t), 2))
    # rolling in: speed at tau before the touch is sp + mu_r g tau
    p[pre] = pc - d * (sp * tau + 0.5 * mu_r * g * tau**2)[:, None]
    v1 = np.array([va[0], -e * va[1]])
    p[~pre] = _motion(pc, v1, v1 - va, mu_s, mu_r, t[~pre] - tc)
    tracks, det = tables_from_positions(t, {"cue": p}, sigma, rng, fps)
    return tracks, det, tc


def test_gap_step_is_the_larger_neighbouring_change():
    """Hand-worked sequence: steps 28, 24, then a missing sample."""
    assert gap_step(np.array([30.0, 2.0, 26.0, np.nan])).tolist() == [28.0, 28.0, 24.0, 0.0]


@pytest.mark.parametrize("phase,seed", [(0.5, 0), (0.4, 1), (0.6, 2)])
def test_fast_bounce_at_60fps_is_found_with_its_restitution(phase, seed):
    """1.8 m/s into the cushion at 60 fps: the samples either side of the touch lie ~15 mm from
    the nose line, while a centred speed fit across the reversal sees only ~100 mm/s. The touch
    must be found (one ball-cushion contact on y0, within a quarter frame) with e within 3 of its
    sigmas and 0.03 of the closed-form 0.8."""
    tracks, det, tc = cushion_bounce(phase=phase, seed=seed)
    c = analyze_tracks(tracks, det, TABLE, R, M, 60.0).contacts
    cu = c[c.kind == "ball-cushion"]
    assert len(cu) == 1, c[["t_s", "kind", "ball_a", "cushion", "e"]]
    r = cu.iloc[0]
    assert r.cushion == "y0"
    assert abs(r.t_s - tc) * 60.0 < 0.25, (r.t_s, tc)
    assert abs(r.e - 0.8) < min(3 * r.e_sigma, 0.03), (r.e, r.e_sigma)
