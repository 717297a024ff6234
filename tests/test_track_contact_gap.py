"""Linker at 30 fps: a struck ball whose contact frame gave no fix keeps its track.

Closed form: ball B rests until the contact, then leaves at 3 m/s (straight
line). At 30 fps the two touching balls' blobs merge in the contact frame,
so B has no fix there: two frame intervals (0.067 s) pass between its last
resting fix and its first moving one. One whole missed frame must still
allow the track to re-start its motion (TrackingSettings.jump_max_gap_s:
"one at 30 fps is always allowed"), or a new track starts on the moving ball.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.assign import Linker
from tracking.settings import TrackingSettings

R = 28.575


def _dets(xy):
    n = len(xy)
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": 0.7, "sy_mm": 0.7,
                         "r": [200.0] * n, "g": [40.0] * n, "b": [40.0] * n, "white_frac": 0.0, "dark_frac": 0.0})


def test_struck_ball_keeps_its_track_across_a_missed_contact_frame():
    fps = 30.0
    p0, v = np.array([1500.0, 600.0]), np.array([2400.0, 1800.0])   # 3 m/s after the hit
    k_hit = 8
    tc = (k_hit - 0.4) / fps
    lk = Linker(R, TrackingSettings())
    ids = []
    row = 0
    for k in range(16):
        t = k / fps
        if k == k_hit:                       # merged blob: no fix for B
            out = lk.step(t, _dets([]), np.arange(row, row))
            continue
        pos = p0 + v * max(t - tc, 0.0)
        out = lk.step(t, _dets([pos]), np.arange(row, row + 1))
        row += 1
        ids.append(int(out[0]))
    assert len(set(ids)) == 1, ids
