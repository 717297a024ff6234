"""A ball into a corner at 1000 fps: two cushions 32 ms apart, each found at its own time.

At 1000 fps the frames within the touching margin (3 mm + 4 sigma + one frame of travel) around a
cushion contact span ~15 ms at 700 mm/s, and the sampled gap's noise minima lie anywhere in that
run; a contact placed at one of them was up to 9 ms late here and its restitution 0.3-0.9 off
(physics.events before run_change_point). The change point of the whole run
(physics.events.run_change_point) fixes the time from all samples on both sides.

Closed forms (tests/test_events_corner.corner_shot, not the project's simulator): the ball rolls in
at deceleration mu_r g, each cushion reverses the normal velocity with restitution e and keeps the
tangential part, the spin passes unchanged so the slip changes by the velocity change, the ball
slides at mu_s g along -slip and then rolls (REFERENCES.md, "Closed forms usable as oracles").
Values inside the published ranges (Physics of Pool FAQ, Colorado State University): e 0.72,
mu_s 0.17, mu_r 0.009; approach 0.77 m/s ("slow" shot band 0.45-0.89 m/s, same source).

Time bound: a break located by two polynomial fits of degree p meeting at it has the error of
their end values over the velocity change; the variance of a least-squares polynomial of degree p
at the end of N equally spaced samples is ~(p + 1)^2 sigma^2 / N (sum of (2k+1) over the Legendre
terms k <= p, a standard regression result), so with quadratics either side
sigma_t ~ sigma sqrt(9 / N1 + 9 / N2) / dv_n. Each contact must be within 4 sigma_t of its
closed-form time (and the bound is never below one frame period).
"""
from __future__ import annotations

import numpy as np
import pytest

from physics.pipeline import analyze_tracks
from test_contacts import M, R, TABLE
from test_events_corner import corner_shot

FPS = 1000.0
E = 0.72
SIGMA = 0.4  # mm per coordinate, as a 1000 fps camera at ~1 mm/px with sub-pixel centroids
V_IN = (-290.0, -711.0)  # mm/s: meets y0 first at 711 mm/s, then x0
GAP_FRAMES = 32.0  # the second cushion 32 ms after the first


def _time_bound(dv_n: float, n1: int, n2: int) -> float:
    """4 sigma of a change point's time (s): see the module docstring."""
    sigma_t = SIGMA * np.sqrt(9.0 / n1 + 9.0 / n2) / dv_n
    return max(4.0 * sigma_t, 1.0 / FPS)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_corner_at_1000_fps_two_cushions_each_at_its_time(seed):
    tracks, det, (t1, t2), (va, v1, v2m, v2) = corner_shot(
        gap_frames=GAP_FRAMES, fps=FPS, e=E, v_in=V_IN, sigma=SIGMA, seed=seed, t_pre=0.4, t_post=0.3)
    c = analyze_tracks(tracks, det, TABLE, R, M, FPS).contacts
    assert c.kind.tolist() == ["ball-cushion", "ball-cushion"], c[["t_s", "kind", "cushion", "e", "e_sigma"]]
    cu = c.sort_values("t_s")
    assert cu.cushion.tolist() == ["y0", "x0"], cu[["t_s", "cushion"]]
    # samples each side of each change within the fit window (80 ms), the other contact ending it
    n_mid = int(GAP_FRAMES)
    n_win = int(0.08 * FPS)
    bounds = (
        _time_bound(abs(v1[1] - va[1]), n_win, n_mid),  # y0: in 711, out 0.72 x 711
        _time_bound(abs(v2[0] - v2m[0]), n_mid, n_win),  # x0: in ~290, out 0.72 x that
    )
    for (_, r), tt, bound in zip(cu.iterrows(), (t1, t2), bounds):
        assert abs(r.t_s - tt) <= bound, (r.cushion, r.t_s - tt, bound)
        assert np.isfinite(r.e) and abs(r.e - E) < 3 * r.e_sigma, (r.cushion, r.e, r.e_sigma)
