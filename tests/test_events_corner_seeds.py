"""Two cushions a few frames apart (a ball into a corner), over many noise draws: no e is reported
confidently wrong.

Closed form (tests/test_events_corner.py: corner_shot, written there, not produced by the
project's simulator): the ball rolls in a straight line, each cushion reverses its normal velocity
with restitution e = 0.72 and keeps the tangential part (apparent cushion restitution 0.6-0.9,
Physics of Pool FAQ, Colorado State University), between the two it slides then rolls.

At 240 fps with the cushions 2.6 frame periods apart the guards around both breaks can leave no
sample between them. The chain fit then fitted its samples along a whole family of middle
segments, and the pseudo-inverse of its singular J^T J gave that family zero variance: draw 3
reported e 0.408 +- 0.006 and 1.187 +- 0.064 (50 and 7 sigma off) with its second break a frame
late. Now the family is bounded by the fit's ranges (physics.segments.bounded_cov) and each
cushion break's centre is no farther from the nose line than at first touch
(physics.segments.touch_residuals).

Checks: each contact within half a frame period of its closed-form time, and every reported e
within 3.5 of its reported sigmas of 0.72 (with Gaussian errors 0.05 % of draws fall beyond 3.5
sigma: standard normal table).
"""
from __future__ import annotations

import numpy as np
import pytest

from physics.pipeline import analyze_tracks
from test_events_corner import M, R, TABLE, corner_shot

E_TRUE = 0.72  # corner_shot's closed-form restitution at both cushions
Z_MAX = 3.5


def _check(seed: int, gap_frames: float = 2.6, fps: float = 240.0, t_max_frames: float = 0.5):
    """Asserts both cushions found, in order, within ``t_max_frames`` frame periods of their
    closed-form times, every reported e within Z_MAX sigmas of 0.72; returns (|e - 0.72| / sigma
    (NaN where e was left empty), |time error| in frame periods) per contact."""
    tracks, det, (t1, t2), _ = corner_shot(gap_frames=gap_frames, fps=fps, seed=seed)
    c = analyze_tracks(tracks, det, TABLE, R, M, fps).contacts
    cu = c[c.kind == "ball-cushion"].sort_values("t_s")
    assert cu.cushion.tolist() == ["y0", "x0"], (seed, c[["t_s", "kind", "cushion", "e", "e_sigma"]])
    z, dt = [], []
    for (_, r), tt in zip(cu.iterrows(), (t1, t2)):
        dt.append(abs(r.t_s - tt) * fps)
        assert dt[-1] < t_max_frames, (seed, r.cushion, (r.t_s - tt) * fps)
        if np.isfinite(r.e):
            assert r.e_sigma <= 0.5
            z.append(abs(r.e - E_TRUE) / r.e_sigma)
            assert z[-1] < Z_MAX, (seed, r.cushion, r.e, r.e_sigma)
        else:
            assert "e not measured" in str(r.note), (seed, r.cushion, r.note)
            z.append(float("nan"))
    return z, dt


def test_corner_no_sample_between_cushions_e_not_confidently_wrong():
    """Draw 3 at 240 fps, 2.6 frames apart: no sample is left between the cushions (the draw
    that reported e 0.41 +- 0.006 and 1.19 +- 0.064)."""
    _check(3)


@pytest.mark.slow
def test_corner_41_draws_times_and_e_within_sigmas():
    """Draws 0-40 at 240 fps, cushions 2.6 frames apart (about 10 s per draw). Every reported e
    within Z_MAX sigmas; contact times within a frame period, and at least 90 % of them within
    half of one (draws 13, 31, 32, 34: one contact each 0.6-0.8 frame off). Before: draw 3 as
    above, the other draws left both e empty (sigmas 10-2500)."""
    res = [_check(seed, t_max_frames=1.0) for seed in range(41)]
    z = np.array([r[0] for r in res])
    dt = np.array([r[1] for r in res])
    assert np.isfinite(z).mean() > 0.5  # the e check is not vacuous: most e are reported
    assert np.mean(dt < 0.5) >= 0.9, np.round(dt, 2)


@pytest.mark.slow
@pytest.mark.parametrize("gap_frames,fps", [(5.0, 240.0), (2.6, 120.0), (2.6, 500.0)])
def test_corner_other_gaps_and_rates(gap_frames, fps):
    """Draws 0-5 with the cushions 5 frame periods apart, and at 120 and 500 fps. Not claimed
    here (known shortfalls): 1.5 frames apart at 240 fps (draw 1 also reports the second cushion
    at the first break, e -0.85 +- 0.43), 3.5 frames (draw 0's second touch 0.53 frame late, as
    before)."""
    for seed in range(6):
        _check(seed, gap_frames, fps)
