#!/usr/bin/env python3
"""Render fresh varied clips with truth for the accuracy benchmarks (prints the paths).

usage: make_fresh_clips.py OUT_DIR --seeds 5101 5102 [--kind varied|rack] [--size 1280x720] [--fps 60]
                           [--balls 12] [--duration 1.2] [--table T] [--ball-set pool|snooker|carom]
                           [--cloth green|blue|red|grey] [--lamps N] [--light F] [--uneven]
                           [--whole] [--k1 K] [--tilt DEG] [--noise F] [--name-suffix S]
                           [--footage-dir DIR]

``varied``: :func:`feltlab.render.variety.varied_scenario` (a cut shot with
bystanders); ``rack``: :func:`feltlab.render.variety.rack_scenario` (a tight
triangle of touching balls broken by the cue ball), both with a camera,
lamps, cloth and sensor drawn from the seed. The sweep options then override
one condition each, after the draw (so a seed keeps the rest of its scene):
table preset, ball colours (pool solids/stripes, snooker reds and colours, a
three-ball carom set), cloth colour, number and brightness of lamps (``--light``
scales lamps and ambient; ``--uneven`` puts one bright lamp near one end),
lens k1, camera pitch (tilt) and sensor noise. Then e.g.
``scripts/bench_tracking.py OUT_DIR/*.mp4``. ``--footage-dir DIR`` also puts a copy of
each clip in DIR with its truth in the outside footage layout
(:func:`feltlab.render.truth.footage_truth`), for ``../shared/score_footage.py --clips DIR``.
Existing clips are kept (not re-rendered), so a run can be resumed.
"""
from __future__ import annotations

import argparse
import json
import shutil
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from feltlab.render import render_scenario  # noqa: E402
from feltlab.render.truth import footage_truth, read_truth, truth_path_for  # noqa: E402
from feltlab.render.variety import apply_overrides, rack_scenario, varied_scenario  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--seeds", type=int, nargs="+", required=True)
    ap.add_argument("--kind", choices=("varied", "rack"), default="varied")
    ap.add_argument("--size", default="1280x720")
    ap.add_argument("--fps", type=float, default=60.0)
    ap.add_argument("--balls", type=int, default=12, help="object balls in a rack")
    ap.add_argument("--duration", type=float, default=1.2)
    ap.add_argument("--table", default=None, help="table preset (varied only), e.g. snooker, carom, pool-8ft")
    ap.add_argument("--ball-set", choices=("pool", "snooker", "carom"), default=None,
                    help="recolour the balls as this set (carom keeps three balls: white cue, white, red)")
    ap.add_argument("--cloth", default=None, help="cloth colour: green, blue, red, grey or R,G,B")
    ap.add_argument("--lamps", type=int, default=None, help="number of lamps (spread along the table)")
    ap.add_argument("--light", type=float, default=None, help="scale lamp intensity and ambient (e.g. 0.4 = dim)")
    ap.add_argument("--uneven", action="store_true", help="one bright low lamp near one end, dim ambient")
    ap.add_argument("--whole", action="store_true", help="always the whole table in view (no crop)")
    ap.add_argument("--k1", type=float, default=None, help="lens radial distortion k1 (k2 set to 0)")
    ap.add_argument("--tilt", type=float, default=None, help="camera pitch (deg)")
    ap.add_argument("--noise", type=float, default=None, help="scale read and shot noise")
    ap.add_argument("--footage-dir", type=Path, default=None,
                    help="also copy each clip here with a truth file the outside scorer reads")
    ap.add_argument("--name-suffix", default="", help="appended to the clip name (keeps variants apart)")
    a = ap.parse_args()
    w, h = (int(v) for v in a.size.lower().split("x"))
    a.out.mkdir(parents=True, exist_ok=True)
    for s in a.seeds:
        path = a.out / f"{a.kind}{s}_{w}x{h}_{a.fps:g}fps{a.name_suffix}.mp4"
        if not path.exists():
            if a.kind == "rack":
                sc = rack_scenario(s, resolution=(w, h), fps=a.fps, n_balls=a.balls, duration_s=a.duration,
                                   whole=True if a.whole else None)
            else:
                tables = (a.table,) if a.table else ("pool-9ft", "pool-8ft", "pool-7ft", "carom")
                n = {"carom": 3, "snooker": 6}.get(a.ball_set or "")
                sc = varied_scenario(s, resolution=(w, h), fps=a.fps, duration_s=a.duration, tables=tables, n_balls=n,
                                     whole=True if a.whole else None)
            apply_overrides(sc, ball_set=a.ball_set, cloth=a.cloth, lamps=a.lamps, light=a.light, uneven=a.uneven,
                            k1=a.k1, tilt_deg=a.tilt, noise=a.noise)
            render_scenario(sc, path)
            _warn_if_table_cut(path, (w, h))
        if a.footage_dir is not None:
            _to_footage(path, a.footage_dir)
        print(path)


def _to_footage(path: Path, folder: Path) -> None:
    """Copy a clip into ``folder`` with its truth in the outside footage layout (kept if present)."""
    folder.mkdir(parents=True, exist_ok=True)
    name = path.stem
    dst, tdst = folder / path.name, folder / f"{name}.truth.json"
    if dst.exists() and tdst.exists():
        return
    shutil.copyfile(path, folder / f".{path.name}.partial")
    (folder / f".{path.name}.partial").replace(dst)
    tmp = folder / f".{name}.truth.partial"
    tmp.write_text(json.dumps(footage_truth(read_truth(truth_path_for(path)), name)))
    tmp.replace(tdst)


def _warn_if_table_cut(path: Path, size: tuple[int, int]) -> None:
    """Say so when a cloth corner lies outside the picture (automatic calibration needs all four)."""
    truth = read_truth(truth_path_for(path))
    out = [c for c in truth["corners_px"]["cloth"] if not (0 <= c[0] <= size[0] - 1 and 0 <= c[1] <= size[1] - 1)]
    if out:
        print(f"make_fresh_clips: note: {path.name}: {len(out)} table corner(s) outside the picture "
              "(a crop: only a calibration file can measure it)", file=sys.stderr)


if __name__ == "__main__":
    main()
