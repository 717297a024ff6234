"""Linker: a track unseen for long must not take a moving ball's detection after a bounce.

Closed-form motion: ball X rests, then is hidden (a hand over it); ball Y of
the same colour rolls at constant velocity into a cushion and comes back
(velocity reversed, scaled by the cushion's e; a jump the gate refuses).
Gaussian likelihood of a detection under a track: -2 ln N(v; 0, S) =
NIS + ln det S + const (Blackman & Popoli, Design and Analysis of Modern
Tracking Systems, Artech House 1999, ch. 6): X's predicted covariance after
0.4 s unseen (white acceleration 4 m/s^2: sigma ~ 0.6 m) makes any single
detection unlikely under X, even one inside its (huge) gate; Y, seen a frame
ago, re-starts from its own last fix.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.assign import Linker
from tracking.settings import TrackingSettings

R = 28.575


def _dets(xy):
    n = len(xy)
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": 0.6, "sy_mm": 0.6,
                         "r": [240.0] * n, "g": [238.0] * n, "b": [228.0] * n, "white_frac": 0.8, "dark_frac": 0.0})


def test_bounce_keeps_identity_against_a_stale_track():
    fps = 30.0
    x_rest = np.array([900.0, 330.0])
    y0, vy = np.array([700.0, 900.0]), np.array([0.0, -1500.0])   # Y rolls towards the y = 0 cushion
    nose = R                                                       # centre touches at y = R (closed form)
    t_hit = (y0[1] - nose) / -vy[1]
    e = 0.8
    lk = Linker(R, TrackingSettings())
    y_ids = []
    row = 0
    for k in range(30):
        t = k / fps
        ypos = y0 + vy * t if t < t_hit else np.array([y0[0], nose]) + np.array([0.0, -vy[1] * e]) * (t - t_hit)
        pts, who = [ypos], ["Y"]
        if k < 6:  # X visible at rest for 0.2 s, then hidden
            pts.append(x_rest), who.append("X")
        out = lk.step(t, _dets(pts), np.arange(row, row + len(pts)))
        row += len(pts)
        y_ids.append(int(out[0]))
    assert len(set(y_ids)) == 1, y_ids
