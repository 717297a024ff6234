"""A still ball's centre on 4:2:0 video whose colour was copied over 2 x 2 blocks (tracking/chroma.py).

Truth: ray-cast frames of balls on cloth (closed-form ray-sphere intersection,
tests/test_detect.render), exact to the sub-sample grid. The 4:2:0 step is
OpenCV's (an independent library): Cr/Cb area-resized to half size, then
copied back over each 2 x 2 block (INTER_NEAREST), which is what the FFmpeg
decoder behind cv2.VideoCapture delivered on every clip we measured (colour
constant inside aligned blocks to ~0.001 DN); the video round trip itself is
OpenCV's MJPG writer and reader.
"""
from __future__ import annotations

import cv2
import numpy as np
import pytest

from test_detect import make_calibration, nearest, render, truth_px
from tracking.chroma import block_chroma, rebuild_chroma
from tracking.detect import build_background, detect_frame

COLOURS = [(30, 40, 200), (235, 240, 242), (20, 190, 240), (120, 30, 90)]  # BGR: red, white, yellow, purple


def _balls(cal, rng, n=6):
    L, W = cal.table.length_mm, cal.table.width_mm
    out = []
    while len(out) < n:
        x, y = float(rng.uniform(200, L - 200)), float(rng.uniform(150, W - 150))
        if all(np.hypot(x - b["x"], y - b["y"]) > 4 * cal.ball_radius_mm for b in out):
            out.append({"x": x, "y": y, "bgr": COLOURS[int(rng.integers(len(COLOURS)))]})
    return out


def _copied_420(img):
    """4:2:0 colour with each sample copied over its 2 x 2 block (OpenCV resize both ways)."""
    y = cv2.cvtColor(img, cv2.COLOR_BGR2YCrCb)
    h, w = y.shape[:2]
    c = cv2.resize(y[..., 1:], (w // 2, h // 2), interpolation=cv2.INTER_AREA)
    y[..., 1:] = cv2.resize(c, (w, h), interpolation=cv2.INTER_NEAREST)
    return cv2.cvtColor(y, cv2.COLOR_YCrCb2BGR)


def test_copied_blocks_are_seen_in_opencv_decoded_video_and_not_in_raw_frames(tmp_path):
    cal = make_calibration(size=(960, 540))
    rng = np.random.default_rng(3)
    frames = [render(cal, _balls(cal, rng, 3), rng, noise_dn=1.5, ss=2) for _ in range(3)]
    assert not block_chroma(frames)  # full-resolution colour: left alone
    p = str(tmp_path / "c.avi")
    wr = cv2.VideoWriter(p, cv2.VideoWriter_fourcc(*"MJPG"), 30, cal.camera.image_size)
    for f in frames:
        wr.write(f)
    wr.release()
    cap = cv2.VideoCapture(p)
    dec = []
    while True:
        ok, f = cap.read()
        if not ok:
            break
        dec.append(f)
    assert len(dec) == 3
    assert block_chroma(dec)
    assert not block_chroma([rebuild_chroma(f) for f in dec])  # interpolated: no longer copied blocks
    grey = [cv2.cvtColor(cv2.cvtColor(f, cv2.COLOR_BGR2GRAY), cv2.COLOR_GRAY2BGR) for f in frames]
    assert not block_chroma(grey)  # no colour at all: nothing to rebuild


@pytest.mark.slow
def test_rebuilt_colour_brings_still_ball_centres_back():
    """Each still ball's mean offset over frames (the error a still ball keeps) against the ray-cast truth.

    Measured (scripts/bench_rest.py --codec, 24 balls each): per axis RMS raw / copied blocks /
    rebuilt 0.035 / 0.086 / 0.059 px (seeds 21-24, 1280x720), 0.038 / 0.110 / 0.077 px (seeds 31-34,
    1920x1080). Here seeds 41-42 (12 balls): rebuilt must beat copied by at least a fifth, and stay
    under 0.09 px.
    """
    cal = make_calibration(size=(1280, 720))
    off = {"raw": [], "copied": [], "rebuilt": []}
    for seed in (41, 42):
        rng = np.random.default_rng(seed)
        balls = _balls(cal, rng)
        frames = [render(cal, balls, rng, noise_dn=1.5, ss=3) for _ in range(3)]
        empty = render(cal, [], rng, noise_dn=1.5, ss=3)
        for name, fn in (("raw", lambda f: f), ("copied", _copied_420),
                         ("rebuilt", lambda f: rebuild_chroma(_copied_420(f)))):
            bg = build_background([fn(empty)], cal)
            per = []
            for f in frames:
                d = detect_frame(fn(f), cal, background=bg)
                row = []
                for b in balls:
                    tp = truth_px(cal, b["x"], b["y"])
                    r, dist = nearest(d, tp)
                    assert dist < 1.0, (name, b, dist)
                    row.append((r.x_px - tp[0], r.y_px - tp[1]))
                per.append(row)
            off[name].append(np.mean(np.array(per), axis=0))
    rms = {k: float(np.sqrt(np.mean(np.concatenate(v) ** 2))) for k, v in off.items()}
    assert rms["rebuilt"] <= 0.8 * rms["copied"], rms
    assert rms["rebuilt"] <= 0.09, rms
