#!/usr/bin/env python3
"""Tracking accuracy and speed on clips with exact truth (prints figures, asserts nothing).

usage: bench_tracking.py [CLIP.mp4 ...] [--auto] [--both] [--breakdown]

Without clips: the outside footage in ../shared/footage (D1, D2) when present,
and the bundled demo clips in clips/. Each clip needs CLIP.truth.json beside
it, in either the outside-footage format (frames.positions_mm) or our
renderer's (tracks.<ball>.x_mm/y_mm). ``--auto`` calibrates from the clip
instead of using the truth camera; ``--both`` runs each clip both ways.

Figures per clip (one row per clip and calibration):

* ``balls``: true balls / tracks. ``cov_view``: share of true ball-frames
  whose centre is inside the image that have a track point within 5 mm
  (``n_view`` of them; ball-frames out of view are not counted).
* ``rmse_move`` / ``rmse_rest``: RMS track error (mm) of moving / resting
  ball-frames (truth speed > / <= 5 mm/s).
* static jitter, 1 sigma (mm per axis, sqrt of the mean of the x and y
  variances about the mean of each still stretch, pooled over a ball's still
  stretches, worst resting ball): ``jit_det`` of the
  raw per-frame detections, ``jit_trk`` of the track output (which averages
  rest runs, so it is much smaller and says little about a single frame).
* ``id_sw``: identity switches, CLEAR-MOT (scripts/id_metrics.py: a ball keeps
  its last track while it stays within one ball radius; a new match to a
  different track is one switch), summed over balls; ``frag``: times a
  ball's matched run breaks and resumes; ``trk_ball``: mean distinct tracks
  per ball (1 = no fragmentation); ``cov_mot``: share of in-view ball-frames
  matched to some track within one radius (target >= 0.99); ``wrong_fr``:
  frames where a ball's globally matched track lies nearer another true ball.
* ``own``: balls touching at frame 0 (centres within D + 5 mm, chained) that
  got a track of their own over the frames before the first of them moves
  (>= 90 % of those frames, shared with no other ball), e.g. ``12/12``.
  The per-ball lines below each row list switches, tracks and missed frames.
* ``corner_px``: worst of the four playing-surface corners (cushion-nose
  plane and cloth plane) of the camera used vs the truth camera (0 for truth).
* ``diam_mm``: ball diameter recovered from the free-radius silhouette fits of
  resting detections (median), to compare with the published diameter
  ``diam_pub`` (feltlab/standards.py).
* ``det_rmse`` / ``det_z2``: detections' RMSE (mm) and their mean squared
  normalised error (1 = honest sigmas; ``det_z2m`` over moving ball-frames
  only); ``trk_z2`` / ``trk_z2m``: the same for the track output against its
  own sx_mm, sy_mm (all / moving covered ball-frames; 1 = honest); ``splits``: true contacts followed
  by a motion-segment start within 2 frames; ``ms_fr``: wall time per frame.
* ``--breakdown``: the moving ball-frames' error by travel per frame (px) and fix
  kind, along / across the true motion, by distance from a contact and by ball
  (:func:`moving_breakdown`), to tell a streak centre, a time stamp, the
  smoother and contact frames apart.
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

from feltlab.errors import FeltlabError  # noqa: E402
from feltlab.standards import table_preset  # noqa: E402
from tracking.calibrate import nose_height_mm  # noqa: E402
from tracking.calibration import Calibration  # noqa: E402
from tracking.camera import CameraModel  # noqa: E402
from tracking.pipeline import calibration_from_truth, track_clip  # noqa: E402

sys.path.insert(0, str(ROOT / "scripts"))
from id_metrics import clear_mot_identity, cluster_own_tracks, clusters_at  # noqa: E402

MOVING_MM_S = 5.0  # truth speed above which a ball-frame counts as moving
COVER_MM = 5.0     # a track point within this of the truth covers the ball-frame
BREAKDOWN = False  # --breakdown: print moving_breakdown per clip


def truth_path(clip: Path) -> Path:
    return clip.parent / (clip.stem + ".truth.json")


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


def in_view(cal: Calibration, P: np.ndarray) -> np.ndarray:
    """(N,) bool: ball centre (table mm, z = R) projects inside the image."""
    ok = np.isfinite(P[:, 0])
    out = np.zeros(len(P), bool)
    if ok.any():
        uv = cal.table_to_px(P[ok])
        w, h = cal.camera.image_size
        out[np.nonzero(ok)[0]] = (uv[:, 0] >= -0.5) & (uv[:, 0] <= w - 0.5) & (uv[:, 1] >= -0.5) & (uv[:, 1] <= h - 0.5)
    return out


def corner_error_px(cal: Calibration, truth_cal: Calibration) -> float:
    """Worst corner (nose and cloth planes) of ``cal``'s camera vs the truth camera (px)."""
    L, W = truth_cal.table.length_mm, truth_cal.table.width_mm
    err = 0.0
    for z in (0.0, nose_height_mm(truth_cal.table, truth_cal.ball_diameter_mm)):
        P = np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]], float)
        err = max(err, float(np.max(np.linalg.norm(cal.camera.project(P) - truth_cal.camera.project(P), axis=1))))
    return err


def _rms(v) -> float:
    return float(np.sqrt(np.mean(np.square(v)))) if len(v) else float("nan")


def _sd1(xy: np.ndarray) -> float:
    """1-sigma scatter per axis (mm): sqrt of the mean of the x and y variances."""
    return float(np.sqrt((np.var(xy[:, 0], ddof=1) + np.var(xy[:, 1], ddof=1)) / 2)) if len(xy) > 2 else float("nan")


def _sd1_runs(xy: np.ndarray, run_id: np.ndarray) -> float:
    """Like :func:`_sd1`, about each run's own mean (a ball still at two places is not jitter);
    pooled over runs with >= 3 points."""
    ss, dof = 0.0, 0
    for r in np.unique(run_id):
        p = xy[run_id == r]
        if len(p) >= 3:
            ss += float(np.sum((p - p.mean(axis=0)) ** 2)) / 2
            dof += len(p) - 1
    return float(np.sqrt(ss / dof)) if dof > 1 else float("nan")


def _runs(frames: list[int]) -> str:
    """'3-7,12' from sorted frame numbers."""
    out, i = [], 0
    while i < len(frames):
        j = i
        while j + 1 < len(frames) and frames[j + 1] == frames[j] + 1:
            j += 1
        out.append(f"{frames[i]}-{frames[j]}" if j > i else f"{frames[i]}")
        i = j + 1
    return ",".join(out)


def identity_figures(truth: dict, tcal: Calibration, by_name: dict, n: int, R: float) -> dict:
    """CLEAR-MOT identity figures (scripts/id_metrics.py), cluster ownership and per-ball detail lines."""
    ids = sorted(truth["pos"])
    pos = {b: truth["pos"][b][:n] for b in ids}
    view = {b: in_view(tcal, pos[b]) for b in ids}
    trk = {}
    for nm, g in by_name.items():
        a = np.full((n, 2), np.nan)
        fr = g.index.to_numpy(int)
        ok = fr < n
        a[fr[ok]] = g[["x_mm", "y_mm"]].to_numpy(float)[ok]
        trk[nm] = a
    rep = clear_mot_identity(pos, trk, gate_mm=R, view=view)
    spd = {b: np.r_[0, np.hypot(*np.diff(pos[b], axis=0).T)] * truth["fps"] for b in ids}
    first = {b: int(np.argmax(np.isfinite(pos[b][:, 0]))) for b in ids}
    P0 = {b: pos[b][first[b]] for b in ids if first[b] == 0}
    own_txt, lines = "-", []
    for cl in clusters_at(P0, link_mm=2 * R + 5.0):
        mv = np.zeros(n, bool)
        for b in cl:
            mv |= spd[b] > MOVING_MM_S
        k_end = int(np.argmax(mv[1:])) + 1 if mv[1:].any() else n
        frames = np.arange(0, k_end)
        own = cluster_own_tracks(rep, cl, frames)
        got = sum(v is not None for v in own.values())
        own_txt = f"{got}/{len(cl)}" if own_txt == "-" else own_txt + f"+{got}/{len(cl)}"
        lines.append(f"cluster of {len(cl)} (frames 0-{k_end - 1} at rest): own tracks {got}/{len(cl)}"
                     + (f"; shared or none: {','.join(b for b, v in own.items() if v is None)}" if got < len(cl) else ""))
    for b in ids:
        bi = rep.balls[b]
        if bi.switches or bi.missed_frames or len(bi.tracks) > 1:
            miss = bi.missed_frames
            mov = sum(spd[b][k] > MOVING_MM_S for k in miss)
            # nearest other true ball at the missed frames (mm between centres)
            near = [min((np.hypot(*(pos[b][k] - pos[o][k])) for o in ids if o != b and np.isfinite(pos[o][k, 0])),
                        default=np.inf) for k in miss]
            close = sum(d < 2 * R + 5.0 for d in near)
            lines.append(f"{b}: cov {bi.coverage:.3f} sw {bi.switches}" + (f" at {bi.switch_frames}" if bi.switches else "")
                         + f" tracks {dict(sorted(bi.tracks.items(), key=lambda kv: -kv[1]))}"
                         + (f" missed {len(miss)} [{_runs(miss)}] moving {mov} touching {close}" if miss else ""))
    return {"rep": rep, "own": own_txt, "lines": lines}


def moving_breakdown(truth: dict, tcal: Calibration, tracks, dets, inv: dict) -> list[str]:
    """Moving ball-frames' error broken down (lines of a markdown table): by travel in px per frame and
    the fix's kind (circle fit, streak fit, none = predicted), along / across the true motion (detection
    and track RMSE, track mean along = a time-stamp or lag bias), their share of the track's squared
    error; then by distance from the ball's nearest contact and by ball."""
    fps, n = truth["fps"], truth["n"]
    ctimes: dict[str, list[float]] = {}
    for t_c, _, a, b in truth["contacts"]:
        for x in (a, b):
            if x:
                ctimes.setdefault(x, []).append(t_c)
    rows = []
    for bid, nm in inv.items():
        P = truth["pos"][bid]
        g = tracks[tracks.ball == nm].set_index("frame")
        dd = dets[dets.ball == nm].drop_duplicates("frame").set_index("frame")
        V = np.full_like(P, np.nan)
        V[1:-1] = (P[2:] - P[:-2]) * fps / 2
        view = in_view(tcal, P)
        for k in range(1, n - 1):
            sp = float(np.hypot(*V[k]))
            if not view[k] or not np.isfinite(sp) or sp <= MOVING_MM_S or k not in g.index:
                continue
            u = V[k] / sp
            w = np.array([-u[1], u[0]])
            uv = tcal.table_to_px(np.array([P[k], P[k] + u]))
            et = g.loc[k, ["x_mm", "y_mm"]].to_numpy(float) - P[k]
            r = {"ball": bid, "px": sp / fps * float(np.hypot(*(uv[1] - uv[0]))), "t_al": et @ u, "t_ac": et @ w,
                 "kind": "none", "d_al": np.nan, "d_ac": np.nan,
                 "dc": min((abs(k / fps - t) * fps for t in ctimes.get(bid, [])), default=np.inf)}
            if k in dd.index:
                ed = dd.loc[k, ["x_mm", "y_mm"]].to_numpy(float) - P[k]
                r.update(kind="streak" if float(dd.at[k, "streak_px"] if "streak_px" in dd else 0) > 0 else "circle",
                         d_al=ed @ u, d_ac=ed @ w)
            rows.append(r)
    if not rows:
        return []
    import pandas as pd
    df = pd.DataFrame(rows)
    df["e2"] = df.t_al ** 2 + df.t_ac ** 2
    tot = max(float(df.e2.sum()), 1e-12)
    out = ["| travel px/frame | fix | n | det RMSE along / across mm | track RMSE along / across mm | track mean along mm | share of track SSE |",
           "|---|---|---|---|---|---|---|"]
    df["bin"] = pd.cut(df.px, [0, 1, 3, 6, 12, 25, 50, 1e9])
    for (bn, kd), s in df.groupby(["bin", "kind"], observed=True):
        out.append(f"| {bn} | {kd} | {len(s)} | {_rms(s.d_al.dropna()):.2f} / {_rms(s.d_ac.dropna()):.2f} | "
                   f"{_rms(s.t_al):.2f} / {_rms(s.t_ac):.2f} | {s.t_al.mean():+.2f} | {s.e2.sum() / tot:.2f} |")
    for lab, s in (("<= 1 frame from a contact", df[df.dc <= 1]), ("1-2 frames", df[(df.dc > 1) & (df.dc <= 2)]),
                   ("farther", df[df.dc > 2])):
        out.append(f"{lab}: n {len(s)}, track RMSE {np.sqrt(s.e2.mean()) if len(s) else np.nan:.2f} mm, "
                   f"share {s.e2.sum() / tot:.2f}")
    for bid, s in df.groupby("ball"):
        out.append(f"ball {bid}: n {len(s)}, track RMSE {np.sqrt(s.e2.mean()):.2f} mm, share {s.e2.sum() / tot:.2f}")
    return out


def bench(clip: Path, auto: bool) -> dict:
    truth = load_truth(truth_path(clip))
    tcal = truth["cal"]
    t0, c0 = time.perf_counter(), time.process_time()
    try:
        res = track_clip(clip, table=tcal.table, calibration=None if auto else tcal,
                         fps=truth["fps"] if clip.is_dir() else None)  # a frame folder has no rate
    except FeltlabError as exc:
        return {"clip": clip.stem, "cal": "auto" if auto else "truth", "error": str(exc)}
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    tr, dets = res.tracks, res.detections
    names = sorted(tr.ball.unique())
    ids = sorted(truth["pos"])
    n = truth["n"]
    R = tcal.ball_radius_mm
    by_name = {nm: tr[tr.ball == nm].set_index("frame") for nm in names}
    # global track <-> ball match by mean distance over the track's frames
    cost = np.full((len(names), len(ids)), 1e6)
    for i, nm in enumerate(names):
        g = by_name[nm]
        fr = g.index.to_numpy(int)
        fr = fr[fr < n]
        for j, bid in enumerate(ids):
            P = truth["pos"][bid][fr]
            e = np.hypot(g.loc[fr, "x_mm"].to_numpy() - P[:, 0], g.loc[fr, "y_mm"].to_numpy() - P[:, 1])
            cost[i, j] = np.nanmean(np.where(np.isfinite(e), e, 100.0)) if len(e) else 1e6
    ri, ci = linear_sum_assignment(cost)
    match = {names[i]: ids[j] for i, j in zip(ri, ci) if cost[i, j] < 50}
    inv = {v: k for k, v in match.items()}
    mv_err, rest_err, jit_det, jit_trk, diam = [], [], [], [], []
    cov_hits = cov_total = wrong = 0
    det_err, det_z2, det_z2m, trk_z2, trk_z2m = [], [], [], [], []
    for bid in ids:
        P = truth["pos"][bid]
        view = in_view(tcal, P)
        spd = np.r_[0, np.hypot(*np.diff(P, axis=0).T)] * truth["fps"]
        moving = ~(spd <= MOVING_MM_S)
        nm = inv.get(bid)
        g = by_name.get(nm)
        for k in range(n):
            if not view[k]:
                continue
            cov_total += 1
            if g is None or k not in g.index:
                continue
            e = np.hypot(g.at[k, "x_mm"] - P[k, 0], g.at[k, "y_mm"] - P[k, 1])
            cov_hits += e <= COVER_MM
            zt = ((g.at[k, "x_mm"] - P[k, 0]) / g.at[k, "sx_mm"]) ** 2 + ((g.at[k, "y_mm"] - P[k, 1]) / g.at[k, "sy_mm"]) ** 2
            if np.isfinite(zt):
                trk_z2.append(zt / 2)
                if moving[k]:
                    trk_z2m.append(zt / 2)
            (mv_err if moving[k] else rest_err).append(e)
            others = [np.hypot(g.at[k, "x_mm"] - truth["pos"][o][k, 0], g.at[k, "y_mm"] - truth["pos"][o][k, 1])
                      for o in ids if o != bid and np.isfinite(truth["pos"][o][k, 0])]
            wrong += bool(others) and min(others) < e
        if nm is None:
            continue
        dd = dets[dets.ball == nm]
        fr = dd.frame.to_numpy(int)
        ok = fr < n
        dd, fr = dd[ok], fr[ok]
        # resting stretch of this ball (truth), in view
        rest = np.zeros(n, bool)
        rest[1:] = ~moving[1:] & view[1:]
        rk = rest[fr]
        run_id = np.cumsum(np.r_[rest[0], rest[1:] & ~rest[:-1]])  # still-stretch number per frame
        if rk.sum() > 5:
            jit_det.append(_sd1_runs(dd[rk][["x_mm", "y_mm"]].to_numpy(float), run_id[fr[rk]]))
            rfr = np.nonzero(rest)[0]
            rfr = rfr[np.isin(rfr, g.index)]
            if len(rfr) > 5:
                jit_trk.append(_sd1_runs(g.loc[rfr, ["x_mm", "y_mm"]].to_numpy(float), run_id[rfr]))
            if "radius_expected_px" in dd:
                ratio = dd[rk].radius_px.to_numpy(float) / dd[rk].radius_expected_px.to_numpy(float)
                diam += list(ratio[np.isfinite(ratio)] * 2 * R)
        du = dd[dd.used]
        fu = du.frame.to_numpy(int)
        ex = du.x_mm.to_numpy() - P[fu, 0]
        ey = du.y_mm.to_numpy() - P[fu, 1]
        fin = np.isfinite(ex)
        det_err += list(np.hypot(ex[fin], ey[fin]))
        z2 = ((ex / du.sx_mm.to_numpy()) ** 2 + (ey / du.sy_mm.to_numpy()) ** 2) / 2
        det_z2 += list(z2[fin])
        det_z2m += list(z2[fin & moving[fu]])
    ident = identity_figures(truth, tcal, by_name, n, R)
    seg_hits = seg_total = 0
    for t_c, kind, a, b in truth["contacts"]:
        for bid in (a, b):
            if not bid or bid not in inv:
                continue
            seg_total += 1
            starts = [s[0] for s in res.segments_hint.get(inv[bid], [])[1:]]
            seg_hits += any(abs(s - t_c) <= 2.0 / truth["fps"] for s in starts)
    return {
        "clip": clip.stem, "cal": "auto" if auto else "truth", "fps": truth["fps"],
        "size": "x".join(str(v) for v in tcal.camera.image_size), "balls": f"{len(ids)}/{len(names)}",
        "cov_view": cov_hits / max(cov_total, 1), "n_view": cov_total, "rmse_move": _rms(mv_err),
        "rmse_rest": _rms(rest_err), "jit_det": float(np.max(jit_det)) if jit_det else float("nan"),
        "jit_trk": float(np.max(jit_trk)) if jit_trk else float("nan"), "id_sw": ident["rep"].switches,
        "frag": ident["rep"].frag, "trk_ball": ident["rep"].tracks_per_ball, "cov_mot": ident["rep"].coverage,
        "own": ident["own"], "ident_lines": ident["lines"],
        "wrong_fr": int(wrong), "corner_px": corner_error_px(res.calibration, tcal),
        "diam_mm": float(np.median(diam)) if diam else float("nan"), "diam_pub": float(tcal.table.ball.diameter_mm),
        "det_rmse": _rms(det_err), "det_z2": float(np.mean(det_z2)) if det_z2 else float("nan"),
        "det_z2m": float(np.mean(det_z2m)) if det_z2m else float("nan"),
        "trk_z2": float(np.mean(trk_z2)) if trk_z2 else float("nan"),
        "trk_z2m": float(np.mean(trk_z2m)) if trk_z2m else float("nan"),
        "splits": f"{seg_hits}/{seg_total}", "ms_fr": 1000 * wall / max(res.n_frames, 1),
        "cpu_ms_fr": 1000 * cpu / max(res.n_frames, 1),
        "labels": ",".join(f"{k}={v}" for k, v in sorted(match.items(), key=lambda kv: kv[1])),
        "unmatched": ",".join(sorted(set(names) - set(match))),
        "height_from": str((res.calibration.camera.meta or {}).get("height_from", ""))[:24],
        "breakdown": moving_breakdown(truth, tcal, tr, dets, inv) if BREAKDOWN else [],
    }


COLS = ["clip", "cal", "fps", "size", "balls", "cov_view", "n_view", "rmse_move", "rmse_rest", "jit_det", "jit_trk",
        "id_sw", "frag", "trk_ball", "cov_mot", "own", "wrong_fr", "corner_px", "diam_mm", "diam_pub", "det_rmse", "det_z2", "det_z2m", "trk_z2", "trk_z2m", "splits", "ms_fr"]


def fmt_row(r: dict) -> str:
    if "error" in r:
        return f"{r['clip']:>10s} {r['cal']:>5s}  refused: {r['error']}"
    return " ".join(f"{r[c]:>9.3f}" if isinstance(r[c], float) else f"{str(r[c]):>9s}" for c in COLS)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clips", nargs="*", type=Path)
    ap.add_argument("--auto", action="store_true", help="calibrate from the clip instead of the truth camera")
    ap.add_argument("--both", action="store_true", help="run each clip with the truth camera and with auto calibration")
    ap.add_argument("--breakdown", action="store_true",
                    help="also print the moving ball-frames' error by travel per frame, fix kind, contact distance and ball")
    a = ap.parse_args()
    global BREAKDOWN
    BREAKDOWN = a.breakdown
    clips = a.clips
    if not clips:
        foot = ROOT.parent / "shared" / "footage"
        clips = sorted(foot.glob("*.mp4")) if foot.is_dir() else []
        clips += sorted((ROOT / "clips").glob("*.mp4"))
    modes = [False, True] if a.both else [a.auto]
    print(" ".join(f"{c:>9s}" for c in COLS))
    for clip in clips:
        for auto in modes:
            r = bench(clip, auto)
            print(fmt_row(r))
            if "error" not in r:
                print(f"{'':>9s} labels: {r['labels']}" + (f"  unmatched tracks: {r['unmatched']}" if r["unmatched"] else "")
                      + (f"  height from: {r['height_from']}" if auto else ""))
                for line in r["ident_lines"]:
                    print(f"{'':>9s} {line}")
                for line in r["breakdown"]:
                    print(f"{'':>9s} {line}")
            sys.stdout.flush()


if __name__ == "__main__":
    main()
