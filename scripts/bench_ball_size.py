#!/usr/bin/env python3
"""Recovered ball diameter on clips with exact truth (prints figures, asserts nothing).

usage: bench_ball_size.py CLIP.mp4 [...] [--max-n N]

Each clip is tracked with its truth camera (so the image radius the
calibration expects is exact) and the diameter is read two ways from the
detections of slow balls (smear <= 1 mm), as median ratio x the truth
diameter:

* ``diam_sil``: the silhouette radius of the detector (``radius_px``; the
  figure bench_tracking prints as diam_mm, there over truth-resting frames);
* ``diam_model``: the free-radius photometric model fit
  (:func:`tracking.ball_size.model_radius_ratio`: blurred-disc coverage,
  limb-darkened shading, contact shadow).

``n_sil`` / ``n_model``: detections each figure rests on. Compare with the
published diameter ``diam_pub`` (pool 57.15 +- 0.127 mm, WPA; snooker 52.5,
carom 61.5 mm; feltlab/standards.py and ../shared/REFERENCES.md).
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

from bench_tracking import load_truth, truth_path  # noqa: E402
from tracking.ball_size import model_radius_ratio  # noqa: E402
from tracking.detect import build_background  # noqa: E402
from tracking.faint import faint_background  # noqa: E402
from tracking.pipeline import track_clip  # noqa: E402
from tracking.settings import DetectionSettings  # noqa: E402
from tracking.video import open_video  # noqa: E402


def read_frames(clip: Path) -> list[np.ndarray]:
    return [im for _, _, im in open_video(clip)]


def bench(clip: Path, max_n: int) -> dict:
    truth = load_truth(truth_path(clip))
    cal = truth["cal"]
    res = track_clip(clip, table=cal.table, calibration=cal)
    det = res.detections
    D = cal.ball_diameter_mm
    slow = det[det.smear_mm.to_numpy(float) <= 1.0] if "smear_mm" in det else det
    rs = slow.radius_px.to_numpy(float) / slow.radius_expected_px.to_numpy(float)
    rs = rs[np.isfinite(rs) & (rs != 1.0)]
    imgs = read_frames(clip)
    ds = DetectionSettings()
    bg = faint_background(build_background(imgs, cal, ds), cal, ds)
    frames = dict(enumerate(imgs))
    ratio, n_model = model_radius_ratio(frames, det, bg.image.astype(np.float32), ds, max_n=max_n)
    return {"clip": clip.stem, "diam_pub": D, "diam_sil": float(np.median(rs)) * D if len(rs) else float("nan"),
            "n_sil": len(rs), "diam_model": ratio * D, "n_model": n_model}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clips", nargs="+", type=Path)
    ap.add_argument("--max-n", type=int, default=60, help="most detections fitted by the model per clip")
    a = ap.parse_args()
    print(f"{'clip':<34} {'diam_pub':>8} {'diam_sil':>8} {'n_sil':>6} {'diam_model':>10} {'n_model':>7}")
    for c in a.clips:
        r = bench(c, a.max_n)
        print(f"{r['clip']:<34} {r['diam_pub']:8.2f} {r['diam_sil']:8.2f} {r['n_sil']:6d} {r['diam_model']:10.2f} "
              f"{r['n_model']:7d}", flush=True)


if __name__ == "__main__":
    main()
