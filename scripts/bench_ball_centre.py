#!/usr/bin/env python3
"""Per-frame centre error of one ball's detections against exact truth (prints figures, asserts nothing).

usage: bench_ball_centre.py CLIP.mp4 BALL [--step N] [--set NAME=VALUE ...] [--extras]

Runs only the detector (tracking.detect.detect_frame, truth camera, the
clip's temporal background from every third frame) on every Nth frame, takes
the detection nearest the ball's true table position and prints its error
(table mm), its free-radius fit against the expected image radius (px) and
its streak length; then the RMSE and the mean error over the frames. The mean
shows a constant offset (a bias of the edge model, e.g. a limb-darkened ball
near the cloth's colour), the RMSE the scatter. ``--set`` overrides
DetectionSettings fields (Python literals), to compare detection paths on the
same frames without the tracker in between. ``--extras`` also runs the
per-frame stages the pipeline runs after it (tracking.faint.add_faint: the
dark-ring re-centring, the stripe refit, the ring and faint searches; no
ring gate) and prints each detection's sigma. CLIP.truth.json beside the clip
must be in the MuJoCo renderer's format (frames.positions_mm, camera).
"""
from __future__ import annotations

import argparse
import ast
import dataclasses
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from tracking.detect import build_background, detect_frame  # noqa: E402
from tracking.faint import add_faint  # noqa: E402
from tracking.pipeline import calibration_from_truth  # noqa: E402
from tracking.settings import DetectionSettings  # noqa: E402
from tracking.video import open_video  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip", type=Path)
    ap.add_argument("ball", help="ball id as in the truth file")
    ap.add_argument("--step", type=int, default=4, help="every Nth frame (default 4)")
    ap.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                    help="override a DetectionSettings field")
    ap.add_argument("--extras", action="store_true", help="also run tracking.faint.add_faint as the pipeline does")
    a = ap.parse_args()
    truth = json.loads(a.clip.with_suffix(".truth.json").read_text())
    cal = calibration_from_truth(truth)
    over = {}
    for kv in a.set:
        k, v = kv.split("=", 1)
        over[k] = ast.literal_eval(v)
    ds = dataclasses.replace(DetectionSettings(), **over)
    imgs = [im for _, _, im in open_video(a.clip)]
    bg = build_background(imgs[::3], cal, ds)
    P = np.array(truth["frames"]["positions_mm"][a.ball], float)
    rows = []
    for f in range(0, len(imgs), a.step):
        if not np.all(np.isfinite(P[f])):
            continue
        det = detect_frame(imgs[f], cal, ds, bg)
        if a.extras:
            det = add_faint(det, imgs[f], cal, bg, ds)
        if not len(det):
            print(f"f{f:5d} no detections")
            continue
        e = np.hypot(det.x_mm.values - P[f][0], det.y_mm.values - P[f][1])
        k = int(np.argmin(e))
        r = det.iloc[k]
        rows.append((r.x_mm - P[f][0], r.y_mm - P[f][1]))
        print(f"f{f:5d} dx {rows[-1][0]:+6.2f} dy {rows[-1][1]:+6.2f} mm  radius {r.radius_px:5.2f} "
              f"of {r.radius_expected_px:5.2f} px  streak {r.streak_px:4.1f} px  sigma {r.sx_mm:5.2f} mm")
    if rows:
        E = np.array(rows)
        print(f"{a.clip.stem} ball {a.ball}: RMSE {np.sqrt(np.mean((E ** 2).sum(axis=1))):.2f} mm, mean "
              f"({E[:, 0].mean():+.2f}, {E[:, 1].mean():+.2f}) mm over {len(E)} frames (step {a.step})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
