#!/usr/bin/env python3
"""Silhouette centre bias of a ball close to the cloth's colour, on closed-form images (prints, asserts nothing).

usage: bench_near_colour.py [--seeds N]

Images from tests/lambert_ball.py: a Lambertian sphere (Lambert's cosine
law, ambient term) seen straight down on uniform cloth, its cast shadow a
blurred disc shifted away from the lamp (tests/lambert_ball.soft_shadow),
blurred in linear light, sRGB-encoded (IEC 61966-2-1), 1 DN noise. Truth:
the drawn centre. For each ball/cloth pair (near colours: white on grey, red
on red, and a far pair for reference) it prints the mean centre error of
tracking.detect.refine_centre on the Delta-E map (the first stage) and with
DetectionSettings.limb_linear (the colour-split second stage), split into
the component toward the lamp (positive = toward the lamp) and across it.
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
from tracking.detect import delta_e76, refine_centre, to_lab  # noqa: E402
from tracking.settings import DetectionSettings  # noqa: E402

PAIRS = {  # ball BGR, cloth BGR (linear light 0-1)
    "white on grey": ((0.70, 0.70, 0.68), (0.16, 0.16, 0.15)),
    "red on red": ((0.04, 0.04, 0.55), (0.03, 0.03, 0.16)),
    "white on green": ((0.70, 0.70, 0.68), (0.04, 0.16, 0.05)),
}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=8)
    a = ap.parse_args()
    w, h = 71, 63
    for name, (ball, cloth) in PAIRS.items():
        for shadow in (0.0, 0.6):
            for label, ds in (("first stage", DetectionSettings(limb_linear=False)),
                              ("limb_linear", DetectionSettings(limb_linear=True))):
                along, across = [], []
                for s in range(a.seeds):
                    rng = np.random.default_rng(9000 + s)
                    r = 11.0 + rng.uniform(-1.0, 1.0)
                    cx, cy = w / 2 + rng.uniform(-0.5, 0.5), h / 2 + rng.uniform(-0.5, 0.5)
                    phi = rng.uniform(0, 2 * np.pi)
                    tilt = np.radians(rng.uniform(20, 40))
                    light = (np.sin(tilt) * np.cos(phi), np.sin(tilt) * np.sin(phi), np.cos(tilt))
                    img = lambert_ball(cx, cy, r, ball, cloth, light, 0.15, (w, h))
                    if shadow:
                        off = -0.5 * r * np.array([np.cos(phi), np.sin(phi)])
                        img = soft_shadow(img, cx, cy, r, cloth, off, shadow, 2.0)
                    frame, bg = encode_frame(img, cloth, blur_px=1.0, noise_dn=1.0, seed=s)
                    d = delta_e76(to_lab(frame), to_lab(bg))
                    ref = refine_centre(d, w / 2, h / 2, r, ds, frame, 3.0)
                    if ref is None:
                        continue
                    e = np.array([ref["x"] - cx, ref["y"] - cy])
                    u = np.array([np.cos(phi), np.sin(phi)])
                    along.append(float(e @ u))
                    across.append(float(e[0] * -u[1] + e[1] * u[0]))
                n = len(along)
                print(f"{name:15s} shadow {shadow:.1f} {label:12s} fits {n}/{a.seeds}  toward lamp "
                      f"{np.mean(along) if n else np.nan:+.2f} px  across {np.mean(across) if n else np.nan:+.2f} px  "
                      f"rms {np.sqrt(np.mean(np.square(along) + np.square(across))) if n else np.nan:.2f} px")
    return 0


if __name__ == "__main__":
    sys.exit(main())
