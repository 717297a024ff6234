"""Ball names in a clip from a grey-level camera (tracking/appearance.is_monochrome, tracking/labels.py).

Scenes are the closed-form Lambertian scenes of tests/test_labels_light.py (one point lamp, sRGB
encoding, IEC 61966-2-1), turned grey by OpenCV's cv2.cvtColor(BGR2GRAY) (ITU-R BT.601 luma
weights 0.299 R + 0.587 G + 0.114 B, an outside library's conversion) and back to three equal
channels, as a grey video decodes. Ball-set facts (common practice): the cue ball is white and is
the ball struck first; a white ball reflects most light in every channel.
"""
from __future__ import annotations

import cv2
import numpy as np
import pandas as pd

from test_labels_light import PURPLE, R_PX, WHITE, YELLOW, scene
from tracking.appearance import add_appearance, is_monochrome, light_field
from tracking.labels import label_tracks

GREEN = np.array([0.10, 0.35, 0.05])  # BGR linear: a green solid, about the cloth's grey level


def _grey(img: np.ndarray) -> np.ndarray:
    return cv2.cvtColor(cv2.cvtColor(img, cv2.COLOR_BGR2GRAY), cv2.COLOR_GRAY2BGR)


def _tracks(balls, grey: bool, n_frames: int = 6):
    rows = []
    light = None
    for s in range(n_frames):
        frame, bg, det = scene(balls, exposure=0.9, seed=s)
        if grey:
            frame = _grey(frame)
            bg.image[:] = _grey(np.clip(bg.image, 0, 255).astype(np.uint8)).astype(np.float32)
        if light is None:
            light = light_field(bg, [(frame, det)])
        out = add_appearance(det, frame, bg, light)
        rows.append(out.assign(track=list(range(len(balls))), streak_px=0.0, radius_expected_px=R_PX,
                               frame=s, t_s=s / 60.0, x_mm=[b[0] for b in balls], y_mm=[b[1] for b in balls]))
    return frame, pd.concat(rows, ignore_index=True)


def test_grey_frames_are_monochrome_and_colour_frames_are_not():
    balls = [(200.0, 60.0, WHITE, None, 0.0), (250.0, 60.0, YELLOW, None, 0.0)]
    frame, _, _ = scene(balls, exposure=0.9)
    assert not is_monochrome([frame])
    assert is_monochrome([_grey(frame)])
    # a grey cloth under neutral light with one coloured ball is still a colour clip
    grey_cloth = np.full((120, 200, 3), 96, np.uint8)
    assert is_monochrome([grey_cloth])
    cv2.circle(grey_cloth, (100, 60), 12, (40, 40, 200), -1)   # a red ball (BGR)
    assert not is_monochrome([grey_cloth])
    assert not is_monochrome([])


def test_grey_clip_names_balls_by_lightness_not_by_a_hue_it_does_not_have():
    balls = [(200.0, 60.0, WHITE, None, 0.0), (250.0, 60.0, PURPLE, None, 0.0),
             (150.0, 60.0, YELLOW, None, 0.0), (300.0, 60.0, GREEN, None, 0.0)]
    frame, det = _tracks(balls, grey=True)
    assert is_monochrome([frame])
    names, table = label_tracks(det, table="pool-9ft", monochrome=True)
    # BT.601 luma of the linear albedos above (lit alike): white > yellow > green > purple
    assert names == {0: "cue", 2: "shade-1", 3: "shade-2", 1: "shade-3"}, names
    assert set(table.ball) == {"cue", "shade-1", "shade-2", "shade-3"}
    # (without the flag the same grey pixels were named cue, maroon, white, red: hue from codec-level tints)


def test_grey_clip_cue_is_the_struck_ball_among_the_brightest():
    # a yellow ball can read nearly as light as the white one in grey; the ball struck (first to move) is the cue
    balls = [(200.0, 60.0, WHITE, None, 0.0), (150.0, 60.0, YELLOW * 1.6, None, 0.0)]
    _, det = _tracks(balls, grey=True)
    lvl = det.groupby("track")[["r_n", "g_n", "b_n"]].median().mean(axis=1)
    assert lvl[1] >= 0.85 * lvl[0]           # the two are within the cue band
    moved = det.copy()
    moved.loc[moved.track == 1, "x_mm"] += 20.0 * moved.loc[moved.track == 1, "frame"]  # ball 1 moves from frame 1
    names, _ = label_tracks(moved, table="pool-9ft", monochrome=True)
    assert names == {1: "cue", 0: "shade-1"}, names
    names, _ = label_tracks(det, table="pool-9ft", monochrome=True)   # nothing moves: the brightest
    assert names[int(lvl.idxmax())] == "cue"
