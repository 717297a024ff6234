#!/usr/bin/env python3
"""Automatic calibration vs the truth camera, per clip (prints figures, asserts nothing).

usage: bench_calibration.py CLIP.mp4 [...] [--save DIR]

Each clip needs CLIP.truth.json beside it (either truth format read by
scripts/bench_tracking.py). The calibration frames are chosen as
``tracking.pipeline.track_clip`` chooses them (``background_samples`` spread
over the clip, every k-th of those up to ``calibration_frames``), then
``calibrate_auto`` runs on them.

Figures per clip:

* ``corner_worst`` / ``corner_mean``: the playing-surface corners (cloth plane
  z = 0 and cushion-nose plane z = h, 8 points) of the fitted camera vs the
  truth camera's, px.
* per cushion (y0, xL, yW, x0): the nose points the final fit used, measured
  against the truth camera's nose line (signed, + = inward onto the cloth):
  mean, RMS and count; ``foot`` lines likewise at z = 0 where the fit used
  cushion-face feet.
* the fitted vs true horizontal field of view.
* on frames above 1920x1080: the factor the search ran reduced by
  (tracking.calibrate_scale), how far the full-size refit moved the corners
  and whether it was kept; the calibration's time and the peak memory.

``--save DIR``: also write DIR/CLIP.calib.npz (the edge points per group and the
median image) for a closer look.
"""
from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

import tracking.calibrate as calmod  # noqa: E402
from bench_tracking import load_truth, truth_path  # noqa: E402
from tracking.calibrate import calibrate_auto, hfov_deg_of, nose_height_mm  # noqa: E402
from tracking.settings import DetectionSettings, TrackClipSettings  # noqa: E402
from tracking.video import open_video  # noqa: E402

INWARD = {"y0": 1.0, "x0": 1.0, "xL": -1.0, "yW": -1.0}  # sign that makes a residual point onto the cloth


def calib_frames(clip: Path) -> list[np.ndarray]:
    """The frames track_clip calibrates from."""
    src = open_video(clip)
    imgs = [im for _, _, im in src.sample(DetectionSettings().background_samples)]
    n = TrackClipSettings().calibration_frames
    step = max(1, len(imgs) // n)
    return imgs[::step][:n]


def line_resid_px(cam, side: str, px: np.ndarray, L: float, W: float, z: float) -> np.ndarray:
    """Signed distance (px, + inward) of image points from the camera's cushion line at height z."""
    return INWARD[side] * calmod._point_resid_px(cam, side, px, L, W, z)


def bench(clip: Path, save: Path | None) -> None:
    truth = load_truth(truth_path(clip))
    tcal = truth["cal"]
    tab = tcal.table
    L, W = tab.length_mm, tab.width_mm
    zn = nose_height_mm(tab, tcal.ball_diameter_mm)
    frames = calib_frames(clip)
    captured: list = []
    orig = calmod._fit_robust

    def spy(cam, groups, L_, W_, settings, prior):
        fit, kept = orig(cam, groups, L_, W_, settings, prior)
        captured.append(kept)
        return fit, kept

    calmod._fit_robust = spy
    t0 = time.perf_counter()
    try:
        cal = calibrate_auto(frames, tab, tcal.ball_diameter_mm)
    except Exception as exc:  # noqa: BLE001 - a bench reports and goes on
        print(f"{clip.stem}: calibration failed: {exc}")
        return
    finally:
        calmod._fit_robust = orig
    dt = time.perf_counter() - t0
    errs = []
    for z in (0.0, zn):
        P = np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]], float)
        errs.append(np.linalg.norm(cal.camera.project(P) - tcal.camera.project(P), axis=1))
    errs = np.concatenate(errs)
    # the groups of the fit that made the final camera: the last capture whose
    # size matches the calibration's own count of nose points
    n_nose = int(cal.camera.meta.get("n_edge_points", 0))
    final = captured[-1]
    for g in reversed(captured):
        if sum(len(p) for s, z, p in g if z > 0) == n_nose:
            final = g
            break
    m = cal.camera.meta
    scale = (f"  (reduced {int(m['reduced_by'])}x, full-size refit moved {m['full_refine_shift_px']:.2f} px, "
             f"{'kept' if m.get('work_factor', 1) == 1 else 'not kept'})" if "reduced_by" in m else "")
    print(f"{clip.stem}: corner worst {errs.max():.2f} px  mean {errs.mean():.2f} px  (cloth "
          f"{errs[:4].max():.2f}, nose {errs[4:].max():.2f})  hfov fit {hfov_deg_of(cal.camera):.1f} true "
          f"{hfov_deg_of(tcal.camera):.1f} ({cal.camera.meta.get('hfov_source')})  res {cal.residual_px:.2f} px  "
          f"{dt:.1f} s{scale}")
    # the fit kept ran on frames reduced k-fold (tracking.calibrate_scale): its points to full-frame px
    k = int(cal.camera.meta.get("work_factor", 1))
    final = [(side, z, k * np.asarray(p, float) + (k - 1) / 2.0) for side, z, p in final]
    row = []
    for side, z, p in final:
        if not len(p):
            continue
        r = line_resid_px(tcal.camera, side, p, L, W, z)
        kind = "nose" if z > 0 else "foot"
        row.append(f"{side}/{kind} {np.mean(r):+.2f}/{np.sqrt(np.mean(r * r)):.2f} n{len(r)}")
    print("   vs truth line (mean/rms px, + inward): " + "  ".join(row))
    # peak resident memory of this process so far (Linux: kB), frames included
    print(f"   peak memory so far {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    if save is not None:
        save.mkdir(parents=True, exist_ok=True)
        out = {f"{side}_{'nose' if z > 0 else 'foot'}": p for side, z, p in final}
        out["median"] = calmod.median_image(frames, calmod.CalibrationSettings().max_frames).astype(np.float32)
        tmp = save / f"{clip.stem}.calib.tmp.npz"
        np.savez_compressed(tmp, **out)
        tmp.replace(save / f"{clip.stem}.calib.npz")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("clips", nargs="+", type=Path)
    ap.add_argument("--save", type=Path, default=None, help="write CLIP.calib.npz (points, median image) here")
    a = ap.parse_args()
    for clip in a.clips:
        bench(clip, a.save)


if __name__ == "__main__":
    main()
