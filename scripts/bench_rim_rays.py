#!/usr/bin/env python3
"""Where a ball's rim edges sit around its true outline, ray by ray (prints figures, asserts nothing).

usage: bench_rim_rays.py CLIP.mp4 BALL [--frames F ...] [--sectors N]

From the ball's TRUE silhouette centre (truth camera, the clip's temporal
background from every third frame, as scripts/bench_ball_centre.py), casts
the detector's rays (tracking.detect._edge_points on the edge map
detect_frame would pick, tracking.detect.edge_map) and prints per angular
sector: the edge radius minus the expected image radius (px; negative =
inside the outline), the edge slope (map units per px) and the map's mean
1.5-3 px inside the expected outline (the ball's contrast next to its limb).
Then per frame: the mean pull (all rays), and its first harmonic - the centre
offset an equally weighted circle fit takes from these edges (px, direction in
degrees, image axes) - which is the part of the pull that moves a centre.

Why: a known-radius or strong-arc circle fit removes a one-sided pull only if
the strongest edges sit ON the outline. Where every edge sits inside it (a
ball shaded down toward its limb all round, lamps overhead), such a fit
trades the one-sided bias for one the other way; this shows which case a
clip is. CLIP.truth.json beside the clip must be in the MuJoCo renderer's
format (frames.positions_mm, camera).
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from tracking.detect import (_edge_points, build_background, delta_e76, edge_map, edge_patch,  # noqa: E402
                             lightness_difference, shade_free_de, to_lab)
from tracking.pipeline import calibration_from_truth  # noqa: E402
from tracking.settings import DetectionSettings  # noqa: E402
from tracking.video import open_video  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip", type=Path)
    ap.add_argument("ball", help="ball id as in the truth file")
    ap.add_argument("--frames", type=int, nargs="+", default=[0])
    ap.add_argument("--sectors", type=int, default=16, help="angular sectors printed (divides the ray count)")
    a = ap.parse_args()
    truth = json.loads(a.clip.with_suffix(".truth.json").read_text())
    cal = calibration_from_truth(truth)
    ds = DetectionSettings()
    imgs = [im for _, _, im in open_video(a.clip)]
    if not imgs:
        print(f"{a.clip}: no frames read")
        return 1
    bg = build_background(imgs[::3], cal, ds)
    bg_lab = bg.lab_image()
    P = np.array(truth["frames"]["positions_mm"][a.ball], float)
    n = ds.n_rays
    per = max(n // a.sectors, 1)
    th = np.linspace(0, 2 * np.pi, n, endpoint=False)
    for f in a.frames:
        if not (0 <= f < len(imgs)) or not np.all(np.isfinite(P[f])):
            print(f"f{f}: no truth or frame")
            continue
        pc = cal.table_to_px(P[f][None, :2])[0]
        r, ox, oy = bg.lookup(*pc)
        c0 = pc + [ox, oy]  # silhouette centre in the image
        lab = to_lab(imgs[f])
        d = delta_e76(lab, bg_lab)
        de = shade_free_de(lab, bg_lab, ds.shade_min_light)
        dl = lightness_difference(lab, bg_lab) if ds.dark_rim_luminance else None
        em = edge_map(d, de, c0[0], c0[1], r, ds, dl)
        name = "shade-free" if em is de else ("lightness" if em is dl else "Delta-E")
        half = int(np.ceil(ds.ray_max * r + 3 * ds.edge_smooth_px + 3))
        got = edge_patch(em, c0[0], c0[1], half, ds.edge_smooth_px)
        if got is None:
            print(f"f{f}: too near the image border")
            continue
        dsm, xa, ya = got
        c = c0 - [xa, ya]
        pts, slope, valid, _ = _edge_points(dsm, c, r, ds, edge_floor=bg.threshold_dn)
        pull = np.linalg.norm(pts - c, axis=1) - r
        s = np.arange(r - 3.0, r - 1.5 + 1e-6, 0.5)
        mx = (c[0] + np.cos(th)[:, None] * s[None, :]).astype(np.float32)
        my = (c[1] + np.sin(th)[:, None] * s[None, :]).astype(np.float32)
        inner = cv2.remap(dsm, mx, my, cv2.INTER_LINEAR).mean(axis=1)
        print(f"{a.clip.stem} ball {a.ball} frame {f}: expected radius {r:.2f} px, {name} map, "
              f"{int(valid.sum())}/{n} rays with an edge")
        print("   angle  edge-R px  slope  inner contrast")
        for k in range(0, n, per):
            sl = slice(k, k + per)
            v = valid[sl]
            if not v.any():
                print(f"  {np.degrees(th[k]):6.1f}      -")
                continue
            print(f"  {np.degrees(th[k]):6.1f}  {np.mean(pull[sl][v]):+8.2f}  {np.mean(slope[sl][v]):6.2f}  "
                  f"{np.mean(inner[sl][v]):8.1f}")
        u = np.column_stack([np.cos(th), np.sin(th)])[valid]
        p = pull[valid]
        # first harmonic of the pull = the centre offset of an equal-weight circle fit (full coverage)
        h1 = 2.0 * (u * p[:, None]).mean(axis=0)
        print(f"  mean pull {p.mean():+.2f} px; first harmonic {np.hypot(*h1):.2f} px toward "
              f"{np.degrees(np.arctan2(h1[1], h1[0])) % 360:.0f} deg (an equal-weight fit's centre offset)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
