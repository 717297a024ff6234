"""Linker track management: a tentative track (one stray fix) must not survive to take a ball's detection.

Motion is closed-form (balls at rest, then constant velocity); the truth is
which simulated ball made each detection.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.assign import Linker
from tracking.settings import TrackingSettings


def _dets(xy, rgb):
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": 0.6, "sy_mm": 0.6,
                         "r": [c[0] for c in rgb], "g": [c[1] for c in rgb], "b": [c[2] for c in rgb],
                         "white_frac": 0.0, "dark_frac": [0.6 if sum(c) < 150 else 0.0 for c in rgb]})


def test_stray_fix_does_not_take_a_ball_that_starts_moving():
    """30 fps. Frame 1: one stray dark blob (the end of another ball's streak) far from everything.
    A black ball rests until frame 16 and then leaves at 1.8 m/s, off its old (resting) gate.
    The stray fix's track never saw a velocity, so its gate has grown over the table by then
    (birth speed sigma 3 m/s x 0.5 s); it must be gone, and the black ball keeps one identity.
    Kept alive (confirm_hits=1), the stray track is stale by then (no re-start allowed), so its
    gated cost keeps the whole log-determinant of its grown covariance (tracking/assign.py) and
    the black ball's own re-start still wins: either guard alone keeps the identity (before the
    stale tracks kept that term, the kept-alive stray track took the moving ball)."""
    fps = 30.0
    black, dark = (25, 25, 28), (40, 45, 40)
    p0, v = np.array([1400.0, 300.0]), np.array([1300.0, -1250.0])  # |v| ~ 1.8 m/s
    for settings, expect_one in ((TrackingSettings(), True),
                                 (TrackingSettings(confirm_hits=1), True)):
        lk = Linker(28.575, settings)
        ids = set()
        row = 0
        for k in range(26):
            t = k / fps
            pts, cols, who = [], [], []
            pos = p0 if k < 17 else p0 + v * (t - 16 / fps)
            pts.append(pos), cols.append(black), who.append("black")
            if k == 1:
                pts.append(np.array([216.0, 670.0])), cols.append(dark), who.append("stray")
            out = lk.step(t, _dets(pts, cols), np.arange(row, row + len(pts)))
            row += len(pts)
            ids.add(int(out[who.index("black")]))
        assert (len(ids) == 1) == expect_one, (settings.confirm_hits, ids)
