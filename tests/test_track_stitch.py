"""Stitching after linking (tracking.assign.stitch_tracks) at a 30 fps contact frame.

Closed-form motion (rest, then constant velocity). A smear spreads a ball's
light over its swept area, so the ball's own pixels in a streak are mixed
with cloth: the white and dark pixel fractions fall to ~0 while the
chromaticity (r, g, b) / (r + g + b) of ball + cloth stays near the ball's
hue (additive mixing). Here: at the contact frame the struck ball's old track
keeps a piece at its resting place and a new track starts on its streak; the
two must be one ball, with that frame's two fixes dropped. A black ball and
the white cue ball have the same chromaticity and differ only in the white
and dark fractions, so a black ball's track must not be joined to the cue's.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.assign import stitch_tracks
from tracking.settings import TrackingSettings

FPS = 30.0
R = 28.575


def _rows(track, frames, xy, rgb, white, dark, streak):
    return [{"track": track, "frame": int(f), "t_s": f / FPS, "x_mm": p[0], "y_mm": p[1], "sx_mm": 1.0, "sy_mm": 1.0,
             "r": rgb[0], "g": rgb[1], "b": rgb[2], "white_frac": white, "dark_frac": dark, "streak_px": streak}
            for f, p in zip(frames, xy)]


def _yellow_rest_then_struck():
    x0, v = np.array([1200.0, 220.0]), np.array([3500.0, -2600.0])
    tc = 3 / FPS - 0.01
    pos = lambda f: x0 + v * max(f / FPS - tc, 0.0)  # noqa: E731
    yellow, cloth = np.array([220.0, 170.0, 30.0]), np.array([32.0, 112.0, 62.0])
    smeared = tuple(0.8 * yellow + 0.2 * cloth)             # the streak's core: 20 % cloth mixed in
    rows = _rows(0, range(0, 4), [pos(f) if f < 3 else x0 for f in range(0, 4)], yellow, 0.0, 0.0, 0.0)
    rows += _rows(5, range(3, 12), [pos(f) + (40.0 if f == 3 else 0.0) for f in range(3, 12)], smeared, 0.0, 0.0, 30.0)
    return rows


def test_struck_ball_one_track_and_contact_frame_dropped():
    out = stitch_tracks(pd.DataFrame(_yellow_rest_then_struck()), TrackingSettings(), R)
    assert out.track.nunique() == 1
    assert 3 not in set(out.frame)                        # both fixes of the shared frame dropped
    assert len(out) == 4 + 9 - 2


def test_black_is_not_joined_to_the_cue():
    """Cue rests then leaves; a black ball starts moving nearby in the same frame: two balls."""
    cue = _rows(1, range(0, 6), [np.array([600.0, 500.0])] * 6, (240, 238, 228), 0.9, 0.0, 0.0)
    black = _rows(2, range(5, 15), [np.array([600.0 + 60 + 40 * k, 500.0]) for k in range(10)], (24, 23, 21),
                  0.0, 0.7, 0.0)
    out = stitch_tracks(pd.DataFrame(cue + black), TrackingSettings(), R)
    assert out.track.nunique() == 2
