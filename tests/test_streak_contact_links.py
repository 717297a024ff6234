"""Linking through a contact at 30 fps: rigid balls cannot pass through each other.

Closed form: a head-on contact of equal masses with restitution e leaves the
cue ball at (1 - e)/2 and the object ball at (1 + e)/2 of the incoming speed
(momentum conservation and Newton's restitution law, any mechanics handbook).
The truth is which ball made each detection.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tracking.assign import Linker
from tracking.settings import TrackingSettings

R = 28.575  # mm, pool ball radius (57.15 mm diameter, WPA equipment specifications)


def _dets(xy, sig):
    """Detections of same-coloured balls (the colour term cannot tell them apart)."""
    return pd.DataFrame({"x_mm": [p[0] for p in xy], "y_mm": [p[1] for p in xy], "sx_mm": sig, "sy_mm": sig,
                         "r": 200.0, "g": 200.0, "b": 190.0, "white_frac": 0.5, "dark_frac": 0.0,
                         "streak_px": 0.0})


@pytest.mark.parametrize("e,angle", [(0.95, 0.0), (0.9, 30.0)])
def test_full_hit_keeps_identities(e, angle):
    """Cue ball at 4 m/s hits a resting object ball head-on just before frame 4 (t_c = 0.13 s).

    Its prediction for frame 4 runs on to where the object ball went (a few
    mm past its resting place), well inside its gate, while the cue ball
    itself has almost stopped 2 R short of it. Without the rigid-ball rule
    the cue ball's track takes the object ball's detection (identity switch).
    """
    fps, v0, tc = 30.0, 4000.0, 0.13
    u = np.array([np.cos(np.radians(angle)), np.sin(np.radians(angle))])
    a0 = np.array([300.0, 400.0])
    b0 = a0 + (v0 * tc + 2 * R) * u
    va, vb = v0 * (1 - e) / 2, v0 * (1 + e) / 2
    for tol, expect_ok in ((TrackingSettings().pass_through_tol, True), (None, False)):
        lk = Linker(R, TrackingSettings(pass_through_tol=tol))
        ids = {"a": [], "b": []}
        row = 0
        for k in range(12):
            t = k / fps
            if t < tc:
                pa, pb = a0 + v0 * t * u, b0
            else:
                pa, pb = a0 + (v0 * tc + va * (t - tc)) * u, b0 + vb * (t - tc) * u
            # a moving ball's centre is less sure (smear): 8 mm; a resting one 0.5 mm
            sa = 8.0 if (t < tc or va > 0) else 0.5
            out = lk.step(t, _dets([pa, pb], [sa, 8.0 if t >= tc else 0.5]), np.arange(row, row + 2))
            row += 2
            ids["a"].append(int(out[0]))
            ids["b"].append(int(out[1]))
        ok = len(set(ids["a"])) == 1 and len(set(ids["b"])) == 1 and ids["a"][0] != ids["b"][0]
        assert ok == expect_ok, (tol, ids)
