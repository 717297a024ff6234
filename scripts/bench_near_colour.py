#!/usr/bin/env python3
"""Silhouette centre bias of a ball close to the cloth's colour, on closed-form images (prints, asserts nothing).

usage: bench_near_colour.py [--seeds N] [--tilt LO HI] [--ambient A]

Images from tests/lambert_ball.py: a Lambertian sphere (Lambert's cosine
law, ambient term) seen straight down on uniform cloth, its cast shadow a
blurred disc shifted away from the lamp (tests/lambert_ball.soft_shadow),
blurred in linear light, sRGB-encoded (IEC 61966-2-1), 1 DN noise. Truth:
the drawn centre. For each ball/cloth pair (near colours: white on grey, red
on red, and a far pair for reference) it prints the mean centre error of
tracking.detect.refine_centre on the Delta-E map (the first stage) and with
DetectionSettings.limb_linear (the colour-split second stage), split into
the component toward the lamp (positive = toward the lamp) and across it,
the fitted radius minus the drawn one, and where the edges sit (edge radius
minus drawn, from the drawn centre) on the lamp side and on the far side
(first-stage rays within 45 degrees of the lamp's azimuth or its opposite).
A known-radius or strong-arc fit can only remove the pull if the lamp-side
edges sit on the outline; --tilt (lamp angle from the vertical, degrees,
drawn uniformly in LO-HI; default 20-40) near 0 with a low --ambient shades
the ball toward its limb all round (lamps overhead), as in the MuJoCo clips
(scripts/bench_rim_rays.py).
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
from lambert_ball import encode_frame, lambert_ball, soft_shadow  # noqa: E402
from tracking.detect import _edge_points, delta_e76, edge_patch, refine_centre, to_lab  # noqa: E402
from tracking.settings import DetectionSettings  # noqa: E402

PAIRS = {  # ball BGR, cloth BGR (linear light 0-1)
    "white on grey": ((0.70, 0.70, 0.68), (0.16, 0.16, 0.15)),
    "red on red": ((0.04, 0.04, 0.55), (0.03, 0.03, 0.16)),
    "white on green": ((0.70, 0.70, 0.68), (0.04, 0.16, 0.05)),
}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=8)
    ap.add_argument("--tilt", type=float, nargs=2, default=(20.0, 40.0), metavar=("LO", "HI"),
                    help="lamp angle from the vertical, degrees (drawn uniformly)")
    ap.add_argument("--ambient", type=float, default=0.15, help="ambient share of the ball's shading")
    a = ap.parse_args()
    w, h = 71, 63
    for name, (ball, cloth) in PAIRS.items():
        for shadow in (0.0, 0.6):
            for label, ds in (("first stage", DetectionSettings(limb_linear=False)),
                              ("limb_linear", DetectionSettings(limb_linear=True))):
                along, across, drad, lamp_side, far_side = [], [], [], [], []
                for s in range(a.seeds):
                    rng = np.random.default_rng(9000 + s)
                    r = 11.0 + rng.uniform(-1.0, 1.0)
                    cx, cy = w / 2 + rng.uniform(-0.5, 0.5), h / 2 + rng.uniform(-0.5, 0.5)
                    phi = rng.uniform(0, 2 * np.pi)
                    tilt = np.radians(rng.uniform(*a.tilt))
                    light = (np.sin(tilt) * np.cos(phi), np.sin(tilt) * np.sin(phi), np.cos(tilt))
                    img = lambert_ball(cx, cy, r, ball, cloth, light, a.ambient, (w, h))
                    if shadow:
                        off = -0.5 * r * np.array([np.cos(phi), np.sin(phi)])
                        img = soft_shadow(img, cx, cy, r, cloth, off, shadow, 2.0)
                    frame, bg = encode_frame(img, cloth, blur_px=1.0, noise_dn=1.0, seed=s)
                    d = delta_e76(to_lab(frame), to_lab(bg))
                    ref = refine_centre(d, w / 2, h / 2, r, ds, frame, 3.0)
                    if ref is None:
                        continue
                    dsm, xa, ya = edge_patch(d, cx, cy, int(np.ceil(ds.ray_max * r + 3 * ds.edge_smooth_px + 3)),
                                             ds.edge_smooth_px)
                    c0 = np.array([cx - xa, cy - ya])
                    pts, _, ok, _ = _edge_points(dsm, c0, r, ds, edge_floor=3.0)
                    pull = np.linalg.norm(pts - c0, axis=1) - r
                    cosang = np.cos(np.linspace(0, 2 * np.pi, ds.n_rays, endpoint=False) - phi)
                    lamp_side.append(float(np.mean(pull[ok & (cosang > np.cos(np.pi / 4))])))
                    far_side.append(float(np.mean(pull[ok & (cosang < -np.cos(np.pi / 4))])))
                    drad.append(ref["radius"] - r)
                    e = np.array([ref["x"] - cx, ref["y"] - cy])
                    u = np.array([np.cos(phi), np.sin(phi)])
                    along.append(float(e @ u))
                    across.append(float(e[0] * -u[1] + e[1] * u[0]))
                n = len(along)
                print(f"{name:15s} shadow {shadow:.1f} {label:12s} fits {n}/{a.seeds}  toward lamp "
                      f"{np.mean(along) if n else np.nan:+.2f} px  across {np.mean(across) if n else np.nan:+.2f} px  "
                      f"rms {np.sqrt(np.mean(np.square(along) + np.square(across))) if n else np.nan:.2f} px  "
                      f"radius {np.mean(drad) if n else np.nan:+.2f} px  edges lamp side "
                      f"{np.mean(lamp_side) if n else np.nan:+.2f} far side {np.mean(far_side) if n else np.nan:+.2f} px")
    return 0


if __name__ == "__main__":
    sys.exit(main())
