#!/usr/bin/env python3
"""Where a resting ball's position error comes from (prints figures, asserts nothing).

usage: bench_rest.py CLIP.mp4 [--auto] [--chroma-rebuild]
       bench_rest.py --codec SEED [SEED ...] [--size WxH]

Clip mode: tracks the clip (truth camera unless ``--auto``) and prints one
line per ball that is still (truth speed <= 5 mm/s) for at least 5 frames:
the mean offset of its raw detections and of its track from the truth (table
mm and image px), their 1-sigma scatter per axis, the detections' free radius
over the expected one, the detections' own sigma, and the offset's component
towards the lamp (truth ``render.lamps``, when the renderer wrote them) and
towards the camera's foot. The detections' mean equal to the track's says
the tracker adds nothing (a bias of the detector); a mean offset much larger
than the scatter is a fixed bias, not noise.

Codec mode: ray-cast frames (closed-form ray-sphere intersection,
tests/test_detect.render) of six still balls at random positions, detected
raw, after a round trip through OpenCV's mp4v and MJPG writers, after 4:2:0
chroma subsampling alone (OpenCV area resize of Cr/Cb to half size and back,
nearest and linear), after JPEG with full-resolution chroma (DCT alone), and
the copied-block variants again after tracking.chroma.rebuild_chroma.
Printed per variant: the RMS and the largest per-ball mean offset (px). A
still ball sits at one phase of the codec's 2-px chroma grid and 8-px
transform blocks in every frame, so that part of its error repeats frame
after frame and no averaging removes it; a moving ball meets every phase.
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "scripts"))

MIN_FRAMES = 5


def clip_mode(clip: Path, auto: bool, chroma_rebuild: bool = False) -> None:
    from bench_tracking import MOVING_MM_S, in_view, load_truth, truth_path
    from tracking.pipeline import track_clip
    from tracking.settings import TrackClipSettings

    truth = load_truth(truth_path(clip))
    tcal = truth["cal"]
    raw = json.loads(truth_path(clip).read_text())
    lamps = [np.asarray(lp["pos_mm"][:2], float) for lp in (raw.get("render") or {}).get("lamps", [])]
    res = track_clip(clip, table=tcal.table, calibration=None if auto else tcal,
                     settings=TrackClipSettings(chroma_rebuild=chroma_rebuild))
    cal = res.calibration
    foot = np.asarray(cal.camera.centre_mm[:2], float)
    tr, det = res.tracks, res.detections
    print(f"{clip.name} ({'auto' if auto else 'truth'} camera): lamps {[p.round(0).tolist() for p in lamps]}, "
          f"camera foot {foot.round(0).tolist()}, chroma rebuild {'on' if chroma_rebuild else 'off'}")
    print("| ball | track | frames | det mean mm (x, y) | det mean px | track mean mm | det 1-sigma mm | track 1-sigma mm "
          "| r / r_exp | det sigma mm | towards lamp / foot mm |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for bid, P in sorted(truth["pos"].items()):
        spd = np.r_[np.inf, np.hypot(*np.diff(P, axis=0).T)] * truth["fps"]
        rest = (spd <= MOVING_MM_S) & in_view(tcal, P)
        if rest.sum() < MIN_FRAMES:
            continue
        fr_rest = np.nonzero(rest)[0]
        best = None
        for nm, g in tr.groupby("ball"):
            g = g.set_index("frame")
            fr = fr_rest[np.isin(fr_rest, g.index)]
            if len(fr) < MIN_FRAMES:
                continue
            e = g.loc[fr, ["x_mm", "y_mm"]].to_numpy(float) - P[fr]
            m = float(np.nanmean(np.hypot(*e.T)))
            if best is None or m < best[0]:
                best = (m, nm, fr, e)
        if best is None:
            print(f"| {bid} | none | {len(fr_rest)} | | | | | | | | |")
            continue
        _, nm, fr, et = best
        dd = det[det.ball == nm].drop_duplicates("frame").set_index("frame")
        fd = fr[np.isin(fr, dd.index)]
        ed = dd.loc[fd, ["x_mm", "y_mm"]].to_numpy(float) - P[fd]
        ep = dd.loc[fd, ["x_px", "y_px"]].to_numpy(float) - cal.table_to_px(P[fd])
        md, mt = np.nanmean(ed, axis=0), np.nanmean(et, axis=0)
        pm = P[fr].mean(axis=0)
        towards = []
        for src in lamps[:1] + [foot]:
            u = src - pm
            towards.append(f"{md @ u / max(np.linalg.norm(u), 1e-9):+.2f}")
        ratio = np.nanmedian(dd.loc[fd, "radius_px"].to_numpy(float) / dd.loc[fd, "radius_expected_px"].to_numpy(float))
        print(f"| {bid} | {nm} | {len(fr)} | {md[0]:+.2f}, {md[1]:+.2f} | {np.nanmean(ep[:, 0]):+.3f}, "
              f"{np.nanmean(ep[:, 1]):+.3f} | {mt[0]:+.2f}, {mt[1]:+.2f} | {np.nanstd(ed[:, 0]):.2f}, {np.nanstd(ed[:, 1]):.2f} "
              f"| {np.nanstd(et[:, 0]):.2f}, {np.nanstd(et[:, 1]):.2f} | {ratio:.3f} | "
              f"{np.nanmedian(dd.loc[fd, 'sx_mm'].to_numpy(float)):.2f} | {' / '.join(towards)} |")


def codec_mode(seeds: list[int], size: tuple[int, int]) -> None:
    import cv2

    sys.path.insert(0, str(ROOT / "tests"))
    from test_detect import make_calibration, nearest, render, truth_px

    from tracking.chroma import rebuild_chroma
    from tracking.detect import build_background, detect_frame
    from tracking.video import open_video

    cal = make_calibration(size=size)

    def round_trip(frames: list[np.ndarray], fourcc: str) -> list[np.ndarray]:
        with tempfile.TemporaryDirectory() as tmp:
            p = str(Path(tmp) / ("c.avi" if fourcc == "MJPG" else "c.mp4"))
            wr = cv2.VideoWriter(p, cv2.VideoWriter_fourcc(*fourcc), 60, cal.camera.image_size)
            for f in frames:
                wr.write(f)
            wr.release()
            out = [f for _, _, f in open_video(p)]
        return out

    def chroma_420(f: np.ndarray, interp: int) -> np.ndarray:
        y = cv2.cvtColor(f, cv2.COLOR_BGR2YCrCb)
        h, w = y.shape[:2]
        c = cv2.resize(y[..., 1:], (w // 2, h // 2), interpolation=cv2.INTER_AREA)
        y[..., 1:] = cv2.resize(c, (w, h), interpolation=interp)
        return cv2.cvtColor(y, cv2.COLOR_YCrCb2BGR)

    def jpeg_444(f: np.ndarray) -> np.ndarray:
        _, b = cv2.imencode(".jpg", f, [cv2.IMWRITE_JPEG_QUALITY, 75, cv2.IMWRITE_JPEG_SAMPLING_FACTOR,
                                        cv2.IMWRITE_JPEG_SAMPLING_FACTOR_444])
        return cv2.imdecode(b, cv2.IMREAD_COLOR)

    variants = {
        "raw": lambda fr: fr,
        "mp4v (OpenCV writer)": lambda fr: round_trip(fr, "mp4v"),
        "MJPG (OpenCV writer)": lambda fr: round_trip(fr, "MJPG"),
        "4:2:0 chroma alone, nearest up": lambda fr: [chroma_420(f, cv2.INTER_NEAREST) for f in fr],
        "4:2:0 chroma alone, linear up": lambda fr: [chroma_420(f, cv2.INTER_LINEAR) for f in fr],
        "JPEG q75 4:4:4 (DCT alone)": lambda fr: [jpeg_444(f) for f in fr],
        "4:2:0 nearest up, then tracking.chroma.rebuild_chroma": lambda fr: [
            rebuild_chroma(chroma_420(f, cv2.INTER_NEAREST)) for f in fr],
        "mp4v, then tracking.chroma.rebuild_chroma": lambda fr: [rebuild_chroma(f) for f in round_trip(fr, "mp4v")],
        "MJPG, then tracking.chroma.rebuild_chroma": lambda fr: [rebuild_chroma(f) for f in round_trip(fr, "MJPG")],
    }
    colours = [(30, 40, 200), (235, 240, 242), (20, 190, 240), (120, 30, 90)]
    found: dict[str, list[np.ndarray]] = {k: [] for k in variants}
    for seed in seeds:
        rng = np.random.default_rng(seed)
        L, W = cal.table.length_mm, cal.table.width_mm
        balls = []
        while len(balls) < 6:  # apart by two diameters: no neighbour in a ball's rim rays
            x, y = float(rng.uniform(200, L - 200)), float(rng.uniform(150, W - 150))
            if all(np.hypot(x - b["x"], y - b["y"]) > 4 * cal.ball_radius_mm for b in balls):
                balls.append({"x": x, "y": y, "bgr": colours[int(rng.integers(len(colours)))]})
        frames = [render(cal, balls, rng, noise_dn=1.5, ss=3) for _ in range(5)]
        empty = render(cal, [], rng, noise_dn=1.5, ss=3)
        for name, fn in variants.items():
            out = fn(frames + [empty])
            bg = build_background([out[-1]], cal)
            per = []
            for im in out[:-1]:
                d = detect_frame(im, cal, background=bg)
                row = []
                for b in balls:
                    tp = truth_px(cal, b["x"], b["y"])
                    r, dist = nearest(d, tp) if len(d) else (None, np.inf)
                    row.append((r.x_px - tp[0], r.y_px - tp[1]) if dist < 3 else (np.nan, np.nan))
                per.append(row)
            found[name].append(np.nanmean(np.array(per, float), axis=0))  # each ball's fixed offset
    print(f"ray-cast still balls, {size[0]}x{size[1]}, seeds {seeds}: per-ball mean offset over 5 frames (px)")
    print("| frames | balls | offset RMS px (per axis) | largest px |")
    print("|---|---|---|---|")
    for name, lst in found.items():
        m = np.concatenate(lst)
        ok = np.isfinite(m[:, 0])
        print(f"| {name} | {ok.sum()} | {np.sqrt(np.mean(m[ok] ** 2)):.3f} | {np.max(np.hypot(*m[ok].T)):.3f} |")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip", nargs="?", type=Path)
    ap.add_argument("--auto", action="store_true", help="calibrate from the clip instead of the truth camera")
    ap.add_argument("--chroma-rebuild", action="store_true",
                    help="track with tracking.chroma (TrackClipSettings.chroma_rebuild=True)")
    ap.add_argument("--codec", nargs="+", type=int, metavar="SEED", help="the ray-cast codec experiment")
    ap.add_argument("--size", default="1280x720", help="frame size of the codec experiment")
    a = ap.parse_args()
    if a.codec:
        w, h = (int(v) for v in a.size.lower().split("x"))
        codec_mode(a.codec, (w, h))
    elif a.clip:
        clip_mode(a.clip, a.auto, a.chroma_rebuild)
    else:
        ap.error("give a clip or --codec SEED ...")


if __name__ == "__main__":
    main()
