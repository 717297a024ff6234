"""Linker: pieces of an unfitted motion streak start no tracks; a real ball beside the path does.

Closed form: a disc of radius R moving at v during an exposure e covers the
segment of length |v| e about its mid-exposure centre, widened by R (swept
disc). A streak the detector did not fit as one comes out as circle fits
along that segment (the ends and the middle). Balls are rigid: another ball's
centre is never within R of the moving ball's swept segment while that ball
is not touching it.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.assign import Linker
from tracking.settings import TrackingSettings

R = 28.575


def _dets(xy):
    n = len(xy)
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": 1.0, "sy_mm": 1.0,
                         "r": [240.0] * n, "g": [238.0] * n, "b": [228.0] * n, "white_frac": 0.8, "dark_frac": 0.0})


def test_streak_pieces_start_no_tracks():
    fps, e = 30.0, 0.9
    p0, v = np.array([300.0, 400.0]), np.array([4800.0, 1400.0])   # 5 m/s: sweep 150 mm = 5.2 R
    u = v / np.linalg.norm(v)
    half = 0.5 * np.linalg.norm(v) * e / fps
    beside = np.array([1200.0, 400.0])                              # a resting ball 2.3 R off the path
    n_off = ((beside - p0) - ((beside - p0) @ u) * u)
    assert np.linalg.norm(n_off) > 2.1 * R
    lk = Linker(R, TrackingSettings(exposure_frac=e))
    ball_ids, piece_ids, beside_ids = set(), set(), set()
    row = 0
    for k in range(12):
        t = k / fps
        c = p0 + v * t if k > 0 else p0
        pts, who = [c], ["ball"]
        if k >= 3:  # a streak split into circle fits at both ends, 2R from the centre
            pts += [c + (half - 0.3 * R) * u, c - (half - 0.3 * R) * u]
            who += ["piece", "piece"]
        if k >= 5:
            pts.append(beside), who.append("beside")
        out = lk.step(t, _dets(pts), np.arange(row, row + len(pts)))
        row += len(pts)
        for w, o in zip(who, out):
            {"ball": ball_ids, "piece": piece_ids, "beside": beside_ids}[w].add(int(o))
    assert len(ball_ids) == 1, ball_ids
    assert piece_ids <= {-1} | ball_ids, piece_ids     # no track started from a piece
    assert len(beside_ids) == 1 and not (beside_ids & ({-1} | ball_ids)), beside_ids
