#!/usr/bin/env python3
"""Render fresh varied clips with truth for the accuracy benchmarks (prints the paths).

usage: make_fresh_clips.py OUT_DIR --seeds 5101 5102 [--kind varied|rack] [--size 1280x720] [--fps 60]
                           [--balls 12] [--duration 1.2]

``varied``: :func:`feltlab.render.variety.varied_scenario` (a cut shot with
bystanders); ``rack``: :func:`feltlab.render.variety.rack_scenario` (a tight
triangle of touching balls broken by the cue ball), both with a camera,
lamps, cloth and sensor drawn from the seed. Then e.g.
``scripts/bench_tracking.py OUT_DIR/*.mp4``. Existing clips are kept (not
re-rendered), so a run can be resumed.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from feltlab.render import render_scenario  # noqa: E402
from feltlab.render.variety import rack_scenario, varied_scenario  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--seeds", type=int, nargs="+", required=True)
    ap.add_argument("--kind", choices=("varied", "rack"), default="varied")
    ap.add_argument("--size", default="1280x720")
    ap.add_argument("--fps", type=float, default=60.0)
    ap.add_argument("--balls", type=int, default=12, help="object balls in a rack")
    ap.add_argument("--duration", type=float, default=1.2)
    a = ap.parse_args()
    w, h = (int(v) for v in a.size.lower().split("x"))
    a.out.mkdir(parents=True, exist_ok=True)
    for s in a.seeds:
        path = a.out / f"{a.kind}{s}_{w}x{h}_{a.fps:g}fps.mp4"
        if not path.exists():
            if a.kind == "rack":
                sc = rack_scenario(s, resolution=(w, h), fps=a.fps, n_balls=a.balls, duration_s=a.duration)
            else:
                sc = varied_scenario(s, resolution=(w, h), fps=a.fps, duration_s=a.duration)
            render_scenario(sc, path)
        print(path)


if __name__ == "__main__":
    main()
