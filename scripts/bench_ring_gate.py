#!/usr/bin/env python3
"""Dark-ring search cost and finds per frame: every frame on the whole surface vs the RingGate (prints figures).

usage: bench_ring_gate.py CLIP.mp4 [CLIP.mp4 ...]

Each clip needs CLIP.truth.json beside it (truth camera: the figures are
about the search, not the calibration). Per frame the colour detector runs
once; then tracking.dark_ring.find_dark_ring runs (a) on the whole surface
and (b) through a RingGate carried over the clip. Printed: ms per frame of
each (median and mean, wall clock), whole-surface searches made by the gate,
ring finds of each, and finds of (a) that (b) missed or (b) made alone
(matched within 0.5 px).
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.append(str(ROOT))
sys.path.append(str(ROOT / "scripts"))

from tracking.dark_ring import find_dark_ring  # noqa: E402

try:
    from tracking.dark_ring import RingGate  # noqa: E402
except ImportError:  # an older tree (PYTHONPATH): the every-frame figures only
    RingGate = None
from tracking.detect import build_background, detect_frame  # noqa: E402
from tracking.exposure import ExposureMatcher  # noqa: E402
from tracking.faint import _known, faint_background  # noqa: E402
from tracking.settings import TrackClipSettings  # noqa: E402
from tracking.video import open_video  # noqa: E402

from bench_tracking import load_truth, truth_path  # noqa: E402  (after tracking: it puts this tree first on sys.path)


def bench(clip: Path) -> None:
    cal = load_truth(truth_path(clip))["cal"]
    s = TrackClipSettings()
    ds = s.detection
    src = open_video(clip)
    imgs = [im for _, _, im in src.sample(ds.background_samples)]
    bg = faint_background(build_background(imgs, cal, ds), cal, ds)
    ex = ExposureMatcher(bg.image, bg.mask, s.exposure)
    gate = RingGate(ds) if RingGate is not None else None
    ta, tb, na, nb, miss, extra = [], [], 0, 0, 0, 0
    for _, _, img in src:
        img = ex.correct(img)
        known = _known(detect_frame(img, cal, ds, bg))
        t0 = time.perf_counter()
        a = find_dark_ring(img, cal, bg, known, ds)
        t1 = time.perf_counter()
        b = find_dark_ring(img, cal, bg, known, ds, gate) if gate is not None else a
        t2 = time.perf_counter()
        ta.append(t1 - t0)
        tb.append(t2 - t1)
        pa, pb = a[["x_px", "y_px"]].to_numpy(float), b[["x_px", "y_px"]].to_numpy(float)
        na, nb = na + len(pa), nb + len(pb)
        miss += sum(not len(pb) or np.min(np.hypot(*(pb - p).T)) > 0.5 for p in pa)
        extra += sum(not len(pa) or np.min(np.hypot(*(pa - p).T)) > 0.5 for p in pb)
    ta, tb = 1000 * np.array(ta), 1000 * np.array(tb)
    print(f"{clip.stem:28s} frames {len(ta):4d}  every frame: {np.median(ta):6.1f} / {ta.mean():6.1f} ms  "
          f"gated: {np.median(tb):6.1f} / {tb.mean():6.1f} ms ({gate.n_full if gate else '-'} whole-surface)  "
          f"finds {na} vs {nb}: missed {miss}, extra {extra}")


if __name__ == "__main__":
    if len(sys.argv) < 2:
        sys.exit("usage: bench_ring_gate.py CLIP.mp4 [...] (each with CLIP.truth.json beside it)")
    print("clip                         frames  ring search ms/frame median / mean (wall)")
    for c in sys.argv[1:]:
        bench(Path(c))
