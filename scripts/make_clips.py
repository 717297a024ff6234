"""Regenerate the bundled demo clips: every clips/bench_*.toml and clips/drill_*.toml
-> clips/NAME.mp4 + clips/NAME.truth.json (fixed seeds, so reruns match closely).

Usage: python scripts/make_clips.py [NAME ...]   (default: all; `make clips` runs this)
Replaces the existing bundled clips of the scenarios it renders.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from feltlab.render import load_scenario, render_scenario  # noqa: E402

SUFFIX = {"mp4v": ".mp4", "ffv1": ".avi", "png": ""}


def main(names: list[str]) -> int:
    clips = ROOT / "clips"
    files = [p for p in sorted(clips.glob("bench_*.toml")) + sorted(clips.glob("drill_*.toml"))
             if not p.name.endswith(".calibration.toml")]  # CLIP.calibration.toml: manual calibration
    if names:
        files = [f for f in files if f.stem in names]
    total = 0
    for f in files:
        sc = load_scenario(f)
        out = clips / f"{f.stem}{SUFFIX[sc.codec]}"
        t = time.perf_counter()
        info = render_scenario(sc, out, overwrite=True)
        size = out.stat().st_size
        total += size + Path(info["truth"]).stat().st_size
        print(f"{out.name}: {info['frames']} frames {sc.resolution[0]}x{sc.resolution[1]} @ {sc.fps:g} fps, "
              f"{size / 1e6:.2f} MB, background {info['background_s']:.1f} s, "
              f"{info['fps_rendered']:.1f} frames/s, total {time.perf_counter() - t:.1f} s")
    print(f"clips total {total / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
