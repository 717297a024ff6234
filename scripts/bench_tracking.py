#!/usr/bin/env python3
"""Tracking accuracy and speed on clips with exact truth (prints figures, asserts nothing).

usage: bench_tracking.py [CLIP.mp4 ...] [--auto] [--frames N]

Without clips: the outside footage in ../shared/footage (D1, D2) when present,
and the bundled demo clips in clips/. Each clip needs CLIP.truth.json beside
it, in either the outside-footage format (frames.positions_mm) or our
renderer's (tracks.<ball>.x_mm/y_mm). ``--auto`` calibrates from the clip
instead of using the truth camera.

Figures per clip: balls (true / tracked), coverage (share of true ball-frames
with a track point within 5 mm), RMSE of moving and of resting ball-frames,
jitter of resting balls (SD of the track while the truth rests), identity
switches (frames where a track is nearest to another true ball), the
detections' RMSE and their mean squared normalised error (1 = honest
sigmas), segment boundaries vs true contact times, time per frame (wall
and CPU).
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import linear_sum_assignment

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tracking.calibration import Calibration  # noqa: E402
from tracking.camera import CameraModel  # noqa: E402
from tracking.pipeline import calibration_from_truth, track_clip  # noqa: E402
from feltlab.standards import table_preset  # noqa: E402


def load_truth(path: Path) -> dict:
    """Normalise both truth formats to: fps, n, cal, pos {id: (N,2)}, contacts [(t, kind, a, b)]."""
    d = json.loads(path.read_text())
    if "frames" in d and "positions_mm" in d["frames"]:
        pos = {k: np.array(v, float) for k, v in d["frames"]["positions_mm"].items()}
        cal = calibration_from_truth(d)
    else:
        pos = {k: np.column_stack([v["x_mm"], v["y_mm"]]).astype(float) for k, v in d["tracks"].items()}
        for k, v in d["tracks"].items():
            if "on_table" in v:
                pos[k][~np.asarray(v["on_table"], bool)] = np.nan
        cm = d["camera"]
        cam = CameraModel(K=cm["K"], dist=cm["dist"], R=cm["R"], t=cm["t_mm"], image_size=cm["image_size"])
        tb = d.get("table", "pool-9ft")
        tname = (tb.get("name") or tb.get("preset") or "pool-9ft") if isinstance(tb, dict) else tb
        cal = Calibration(camera=cam, table=table_preset(tname), ball_diameter_mm=float(d["ball"]["diameter_mm"]),
                          method="truth")
    contacts = [(c.get("t_s"), c.get("kind"), c.get("ball_a"), c.get("ball_b") or "") for c in d.get("contacts", [])
                if c.get("required", True) and c.get("t_s") is not None]
    return {"fps": float(d["fps"]), "n": int(d["n_frames"]), "cal": cal, "pos": pos, "contacts": contacts}


def bench(clip: Path, auto: bool) -> dict:
    truth = load_truth(clip.parent / (clip.stem + ".truth.json"))
    t0, c0 = time.perf_counter(), time.process_time()
    res = track_clip(clip, table=truth["cal"].table, calibration=None if auto else truth["cal"])
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    tr = res.tracks
    names = sorted(tr.ball.unique())
    ids = sorted(truth["pos"])
    n = truth["n"]
    # per (track, truth) mean distance over the track's frames
    cost = np.full((len(names), len(ids)), 1e6)
    for i, nm in enumerate(names):
        g = tr[tr.ball == nm]
        fr = g.frame.to_numpy(int)
        fr_ok = fr < n
        for j, bid in enumerate(ids):
            P = truth["pos"][bid][fr[fr_ok]]
            e = np.hypot(g.x_mm.to_numpy()[fr_ok] - P[:, 0], g.y_mm.to_numpy()[fr_ok] - P[:, 1])
            cost[i, j] = np.nanmean(np.where(np.isfinite(e), e, 100.0)) if len(e) else 1e6
    ri, ci = linear_sum_assignment(cost)
    match = {names[i]: ids[j] for i, j in zip(ri, ci) if cost[i, j] < 50}
    mv_err, rest_err, jit, cov_hits, cov_total, switches = [], [], [], 0, 0, 0
    det_err, det_z2 = [], []
    for nm, bid in match.items():
        P = truth["pos"][bid]
        g = tr[tr.ball == nm].set_index("frame")
        spd = np.r_[0, np.hypot(*np.diff(P, axis=0).T)] * truth["fps"]
        moving = spd > 5.0
        for k in range(n):
            if not np.isfinite(P[k, 0]):
                continue
            cov_total += 1
            if k in g.index:
                e = np.hypot(g.at[k, "x_mm"] - P[k, 0], g.at[k, "y_mm"] - P[k, 1])
                cov_hits += e <= 5.0
                (mv_err if moving[k] else rest_err).append(e)
                # identity: is another true ball nearer?
                others = [np.hypot(g.at[k, "x_mm"] - truth["pos"][o][k, 0], g.at[k, "y_mm"] - truth["pos"][o][k, 1])
                          for o in ids if o != bid and np.isfinite(truth["pos"][o][k, 0])]
                switches += bool(others) and min(others) < e
        rest_k = [k for k in range(1, n) if np.isfinite(P[k, 0]) and not moving[k] and k in g.index]
        if len(rest_k) > 5:
            jit.append(float(np.hypot(g.loc[rest_k, "x_mm"].std(), g.loc[rest_k, "y_mm"].std())))
        dd = res.detections[(res.detections.ball == nm) & res.detections.used]
        fr = dd.frame.to_numpy(int)
        ok = fr < n
        ex = dd.x_mm.to_numpy()[ok] - P[fr[ok], 0]
        ey = dd.y_mm.to_numpy()[ok] - P[fr[ok], 1]
        fin = np.isfinite(ex)
        det_err += list(np.hypot(ex[fin], ey[fin]))
        det_z2 += list(((ex / dd.sx_mm.to_numpy()[ok]) ** 2 + (ey / dd.sy_mm.to_numpy()[ok]) ** 2)[fin] / 2)
    # contacts vs segment starts
    inv = {v: k for k, v in match.items()}
    seg_hits, seg_total = 0, 0
    for t_c, kind, a, b in truth["contacts"]:
        for bid in (a, b):
            if not bid or bid not in inv:
                continue
            seg_total += 1
            starts = [s[0] for s in res.segments_hint.get(inv[bid], [])[1:]]
            seg_hits += any(abs(s - t_c) <= 2.0 / truth["fps"] for s in starts)
    rms = lambda v: float(np.sqrt(np.mean(np.square(v)))) if len(v) else float("nan")  # noqa: E731
    return {
        "clip": clip.stem, "fps": truth["fps"], "balls": f"{len(ids)}/{len(names)}",
        "cov5": cov_hits / max(cov_total, 1), "rmse_move": rms(mv_err), "rmse_rest": rms(rest_err),
        "jitter_rest": float(np.max(jit)) if jit else float("nan"), "switch_frames": int(switches),
        "det_rmse": rms(det_err), "det_z2": float(np.mean(det_z2)) if det_z2 else float("nan"),
        "contact_splits": f"{seg_hits}/{seg_total}", "ms_frame_wall": 1000 * wall / max(res.n_frames, 1),
        "ms_frame_cpu": 1000 * cpu / max(res.n_frames, 1),
        "labels": ",".join(f"{k}={v}" for k, v in sorted(match.items(), key=lambda kv: kv[1])),
        "unmatched": ",".join(sorted(set(names) - set(match))),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clips", nargs="*", type=Path)
    ap.add_argument("--auto", action="store_true", help="calibrate from the clip instead of the truth camera")
    a = ap.parse_args()
    clips = a.clips
    if not clips:
        foot = ROOT.parent / "shared" / "footage"
        clips = sorted(foot.glob("*.mp4")) if foot.is_dir() else []
        clips += sorted((ROOT / "clips").glob("*.mp4"))
    cols = ["clip", "fps", "balls", "cov5", "rmse_move", "rmse_rest", "jitter_rest", "switch_frames", "det_rmse",
            "det_z2", "contact_splits", "ms_frame_wall", "ms_frame_cpu"]
    print(" ".join(f"{c:>14s}" for c in cols))
    for clip in clips:
        r = bench(clip, a.auto)
        print(" ".join(f"{r[c]:>14.3f}" if isinstance(r[c], float) else f"{str(r[c]):>14s}" for c in cols))
        print(f"{'':>14s} labels: {r['labels']}" + (f"  unmatched tracks: {r['unmatched']}" if r["unmatched"] else ""))
        sys.stdout.flush()


if __name__ == "__main__":
    main()
