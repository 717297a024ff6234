"""A moving ball's track sigma keeps the error its detections share from frame to frame.

Monte Carlo against the generating distribution: each simulated clip draws
one along-motion bias (the streak's end asymmetry: the same shading and
shadow every frame) with sigma s_sys and independent per-frame noise with
sigma s_rand. The RTS smoother averages the noise down (~ s_rand / sqrt(n))
but not the bias, so the track's own sx_mm must hold s_sys: the mean squared
normalised error of the track at mid-clip is then ~1 (its expectation for an
honest sigma is exactly 1, chi-square with one degree of freedom per axis).
"""
from __future__ import annotations

import numpy as np

from tracking.pipeline import smooth_ball
from tracking.settings import TrackingSettings


def _z2(with_sys: bool, seed: int = 4) -> float:
    rng = np.random.default_rng(seed)
    fps, n, v = 60.0, 20, 3000.0  # 3 m/s along x
    s_sys, s_rand = 2.0, 0.8      # mm
    frames = np.arange(n)
    t = frames / fps
    z2 = []
    for _ in range(300):
        truth = np.column_stack([200.0 + v * t, 400.0 + 0 * t])
        bias = rng.normal(0, s_sys)
        z = truth + np.column_stack([bias + rng.normal(0, s_rand, n), rng.normal(0, s_rand, n)])
        sig = np.column_stack([np.full(n, np.hypot(s_sys, s_rand)), np.full(n, s_rand)])
        sys_var = np.column_stack([np.full(n, s_sys ** 2), np.zeros(n)]) if with_sys else None
        rows, _, _ = smooth_ball(frames, t, z, sig, t, set(), TrackingSettings(), sys_var=sys_var)
        k = n // 2
        z2.append(((rows["x_mm"][k] - truth[k, 0]) / rows["sx_mm"][k]) ** 2)
    return float(np.mean(z2))


def test_shared_bias_stays_in_the_track_sigma():
    # 300 clips: the mean of chi-square(1) has sigma sqrt(2/300) = 0.08; 0.3 leaves room for the
    # smoother's own approximations
    assert abs(_z2(True) - 1.0) < 0.3
    # averaging the bias down as if it were noise makes the track overconfident
    assert _z2(False) > 2.0
