"""Clip -> calibration -> detections -> linked, smoothed, named ball tracks.

:func:`track_clip` streams the clip twice: once to sample frames for the
background (and calibration, when none is given), once to detect and link.
Memory grows with balls x frames (detection rows), never with whole frames.

Per ball (:func:`smooth_ball`): rest runs (all detections within a few sigma
of their mean for >= ``rest_min_s``, with no significant drift along a line,
:func:`drifts`) are averaged; the moving stretches are
cut at contacts (NIS spikes, tracking/kalman.py) and each piece is
RTS-smoothed on its own. Units: mm, s, mm/s; table frame (DEVELOPERS.md).

Measurement noise (:func:`measurement_cov`): the detector's sigma plus
c |v|^2 along the motion of a ball moving at v during the exposure (its
image smears over L = |v| x exposure). The speed comes from the ball's own
detections (central differences). c is measured from the clip
(tracking/kalman.py :func:`smear_scale`, second differences of the
detections), never above the bound of a centre found anywhere along a
uniform smear, L^2/12 (:func:`smear_cov`), with the exposure
``TrackingSettings.exposure_frac`` x the frame interval, or the whole frame
interval when unknown (the longest a shutter can stay open).
The detections table's ``sx_mm``, ``sy_mm`` carry this total (``sxy_mm2``
its x-y covariance, ``smear_mm`` the bound's smear length |v| x exposure).

A resting ball's track sigma keeps the part of the detector's sigma that
its own scatter does not show (shading and shadow errors of a still ball do
not average out over frames).
"""
from __future__ import annotations

import logging
import os
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import f as f_dist

from feltlab.errors import FeltlabError
from feltlab.standards import DEFAULT_TABLE, TablePreset, table_preset
from tracking.assign import Linker, stitch_tracks, view_test
from tracking.ball_size import (MIN_DETECTIONS, PINNED_SHARE_MISFIT, misfit_candidates, pinned_share, size_ratio,
                                 size_warning, suggest_preset)
from tracking.calibration import Calibration
from tracking.detect import build_background, detect_frame
from tracking.exposure import ExposureMatcher
from tracking.dark_ring import RingGate
from tracking.faint import add_faint, faint_background
from tracking.kalman import (as_cov, bridge_gap, scatter_scale, smear_cov, smear_scale, smooth_segment,
                             split_segments)
from tracking.appearance import add_appearance, is_monochrome, light_field
from tracking.labels import label_tracks
from tracking.overlap import separate_overlaps
from tracking.chroma import block_chroma, rebuild_chroma
from tracking.phantoms import StillCloth, off_surface_tracks, clean_median, codec_tracks, ring_shading
from tracking.settings import PhantomSettings, TrackClipSettings, TrackingSettings
from tracking.table_choice import calibrate_choosing_table

log = logging.getLogger("feltlab.tracking")

TRACK_COLUMNS = ["frame", "t_s", "ball", "x_mm", "y_mm", "vx_mm_s", "vy_mm_s", "sx_mm", "sy_mm", "visible"]
DETECTION_OUT_COLUMNS = ["frame", "t_s", "ball", "x_mm", "y_mm", "sx_mm", "sy_mm", "x_px", "y_px", "confidence",
                         "radius_px", "support", "used"]


@dataclass
class TrackResult:
    """Output of :func:`track_clip`.

    tracks: one row per ball per frame between its first and last detection
    (:data:`TRACK_COLUMNS`; smoothed, ``visible`` 0 where predicted).
    detections: the measurements assigned to each ball (``used`` False for a
    rejected outlier). balls: ball, r, g, b, pattern (+ hue_deg, white_frac,
    n_detections). segments_hint: ball -> [(t_start_s, t_end_s, kind)] with
    kind 'rest' or 'move'; a new 'move' piece starts at each velocity jump
    (contact) the filter saw. fps_source: 'override' or 'container'.
    """

    tracks: pd.DataFrame
    detections: pd.DataFrame
    calibration: Calibration
    fps: float
    fps_source: str
    n_frames: int
    balls: pd.DataFrame
    segments_hint: dict[str, list[tuple[float, float, str]]] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    stats: dict = field(default_factory=dict)


# --------------------------------------------------------------------------- per ball
def exposure_s(frame_t: np.ndarray, s: TrackingSettings) -> float:
    """Assumed exposure (s): ``exposure_frac`` (None: 1, a full-frame shutter) x the median frame interval."""
    dt = np.diff(frame_t[np.isfinite(frame_t)])
    dt = dt[dt > 0]
    if not len(dt):
        return 0.0
    return float(np.median(dt)) * (1.0 if s.exposure_frac is None else float(s.exposure_frac))


def detection_velocity(t: np.ndarray, z: np.ndarray) -> np.ndarray:
    """(N,2) mm/s velocity at each time-sorted detection: central differences (one-sided at the ends).

    >>> detection_velocity(np.array([0.0, 0.1, 0.2]), np.array([[0.0, 0], [10, 0], [20, 0]]))[:, 0].tolist()
    [100.0, 100.0, 100.0]
    """
    n = len(t)
    v = np.zeros((n, 2))
    if n < 2:
        return v
    ia = np.r_[0, np.arange(n - 2), n - 2]
    ib = np.r_[1, np.arange(2, n), n - 1]
    dt = t[ib] - t[ia]
    ok = dt > 0
    v[ok] = (z[ib[ok]] - z[ia[ok]]) / dt[ok, None]
    return v


def measurement_cov(t: np.ndarray, z: np.ndarray, sig: np.ndarray, c_s2: float,
                    smeared: np.ndarray | None = None) -> np.ndarray:
    """(N,2,2) mm^2: detector sigmas (N,2) plus c_s2 |v|^2 along the motion (module docstring).

    smeared: (N,) 0/1, where the smear term applies (0 for streak-fitted
    centres, whose own sigma carries their smear error); default all.
    """
    S = smear_cov(detection_velocity(t, z), np.sqrt(max(c_s2, 0.0)), 1.0)
    if smeared is not None:
        S = S * np.asarray(smeared, float)[:, None, None]
    return as_cov(sig) + S


def smear_applies(g: pd.DataFrame) -> np.ndarray:
    """(N,) 1.0 where a detection's centre may lie anywhere along its smear, 0.0 for a streak fit."""
    if "streak_px" not in g:
        return np.ones(len(g))
    return np.where(g["streak_px"].to_numpy(float) > 0, 0.0, 1.0)


@lru_cache(maxsize=256)
def _drift_t(p: float, dof: int) -> float:
    """|v| / se(v) threshold of the two-slope F-test at false-alarm probability p (scipy.stats.f)."""
    return float(np.sqrt(2.0 * f_dist.isf(p, 2, dof)))


def drifts(t: np.ndarray, z: np.ndarray, s: TrackingSettings) -> bool:
    """True when the points z (m,2 mm) at t (m, s) move along a line: the fitted displacement over the
    run exceeds ``rest_drift_mm`` and the slope is significant at ``rest_drift_p`` (|v| / se(v) with
    se from the scatter about the line, pooled over x and y: |v|^2 / se^2 / 2 ~ F(2, 2(m-2)))."""
    m = len(t)
    if m < 4 or s.rest_drift_p is None:
        return False
    tc = t - t.mean()
    stt = float(np.sum(tc ** 2))
    if stt <= 0:
        return False
    zc = z - z.mean(axis=0)
    v = tc @ zc / stt                                   # mm/s per axis
    res = zc - np.outer(tc, v)
    s2 = max(float(np.sum(res ** 2)) / (2 * (m - 2)), 1e-4)  # mm^2 per axis; floor 0.01 mm
    speed = float(np.hypot(*v))
    return speed * (t[-1] - t[0]) > s.rest_drift_mm and speed / np.sqrt(s2 / stt) > _drift_t(s.rest_drift_p, 2 * (m - 2))


def rest_runs(t: np.ndarray, z: np.ndarray, sig: np.ndarray, s: TrackingSettings) -> list[tuple[int, int]]:
    """Index ranges [i0, i1) where the ball sits still (see module docstring)."""
    n = len(t)
    runs = []
    i = 0
    tol = s.rest_sigma * np.hypot(sig[:, 0], sig[:, 1]) / np.sqrt(2) + s.rest_tol_mm
    while i < n:
        j = i + 1
        while j < n:
            m = z[i:j + 1].mean(axis=0)
            if np.any(np.linalg.norm(z[i:j + 1] - m, axis=1) > tol[i:j + 1]) or drifts(t[i:j + 1], z[i:j + 1], s):
                break
            j += 1
        if t[j - 1] - t[i] >= s.rest_min_s:
            runs.append((i, j))
            i = j
        else:
            i += 1
    return runs


def spikes(frames: np.ndarray, z: np.ndarray, sig: np.ndarray, k_sigma: float) -> np.ndarray:
    """(N,) bool: detections a ball cannot have made - farther from both neighbours (the frames just
    before and after) than the ball travels in one frame on either side, by more than ``k_sigma`` x
    the two detections' sigmas (mm). A ball reaches a point between two frames only by moving there:
    a cushion bounce or a struck ball stays within its incoming or outgoing step, and a fix on the
    straight path between its two neighbours (a ball struck from rest that reaches a cushion within
    the next frame) is passed through; an out-and-back jump with still neighbours is a wrong
    detection (a merged blob, a neighbour's disc).
    Judged only with two consecutive neighbours on each side."""
    n = len(frames)
    out = np.zeros(n, bool)
    if n < 5:
        return out
    s = np.hypot(sig[:, 0], sig[:, 1])
    f = np.asarray(frames, int)
    for k in range(2, n - 2):
        if not (f[k] - f[k - 2] == 2 and f[k + 2] - f[k] == 2):
            continue
        step = max(np.linalg.norm(z[k - 1] - z[k - 2]), np.linalg.norm(z[k + 2] - z[k + 1]))
        dp, dn = np.linalg.norm(z[k] - z[k - 1]), np.linalg.norm(z[k] - z[k + 1])
        tol = k_sigma * (s[k] + max(s[k - 1], s[k + 1]))
        # a fix on the straight path between its neighbours is passed through, not a spike: a ball
        # struck from rest whose next step ends at a cushion (its outgoing step then folds back)
        detour = dp + dn - np.linalg.norm(z[k + 1] - z[k - 1])
        out[k] = min(dp, dn) > step + tol and detour > tol
    return out


def smooth_ball(frames: np.ndarray, t: np.ndarray, z: np.ndarray, sig: np.ndarray, frame_t: np.ndarray,
                jumps: set[int], s: TrackingSettings, cov: np.ndarray | None = None,
                sys_var: np.ndarray | None = None):
    """Smoothed per-frame states of one ball from its time-sorted detections.

    frames: (N,) frame index of each detection; t: (N,) s; z: (N,2) mm;
    sig: (N,2) mm; frame_t: time (s) of every frame index of the clip;
    jumps: detection indices where the linker saw a velocity jump.
    cov: (N,2,2) mm^2 measurement covariances for the moving pieces
    (default: from ``sig`` alone). sys_var: (N,2) mm^2, the part of each
    moving detection's variance that is the same from frame to frame (the
    smear of a circle fit, a streak's end asymmetry: the same shading and
    shadow a frame later); it does not average down, so a moving piece's
    track variance keeps it (from the nearest detection).
    Returns (rows: dict of arrays over frames first..last, segments
    [(t0, t1, kind)], used: (N,) bool).
    """
    n = len(t)
    C = as_cov(sig) if cov is None else np.asarray(cov, float)
    if s.spike_sigma is not None:
        bad = spikes(frames, z, sig, s.spike_sigma)
        if bad.any():
            # spikes are interior (two neighbours each side), so the kept fixes span the same frames;
            # the left-out frame is bridged like a missed one (visible 0)
            keep = ~bad
            remap = np.cumsum(keep) - 1
            rows, segments, used_k = smooth_ball(frames[keep], t[keep], z[keep], sig[keep], frame_t,
                                                 {int(remap[j]) for j in jumps if 0 <= j < n and keep[j]},
                                                 replace(s, spike_sigma=None), C[keep],
                                                 None if sys_var is None else sys_var[keep])
            used = np.zeros(n, bool)
            used[keep] = used_k
            return rows, segments, used
    used = np.ones(n, bool)
    f0, f1 = int(frames[0]), int(frames[-1])
    grid_f = np.arange(f0, f1 + 1)
    nf = len(grid_f)
    X = np.full((nf, 4), np.nan)
    SX = np.full((nf, 2), np.nan)
    vis = np.zeros(nf, int)
    vis[frames - f0] = 1
    pieces: list[tuple[int, int, str]] = []  # detection index ranges
    runs = rest_runs(t, z, sig, s)
    moving = [(a, b) for a, b in zip([0] + [r[1] for r in runs], [r[0] for r in runs] + [n]) if b > a]
    # The smoother weighs the moving fixes by how much they really scatter
    # (tracking/kalman.py scatter_scale); the contact and outlier tests keep
    # the detector's covariances, so a wandering ball's gross fixes stay out.
    Cs = C
    if s.scatter_scale:
        k2 = scatter_scale(frames, z, C, moving, s.scatter_min_quads)
        if k2 > 1.0:
            Cs = C.copy()
            for a, b in moving:
                Cs[a:b] *= k2
    cursor = 0
    for a, b in runs + [(n, n)]:
        if a > cursor:
            # The linker's jumps are hints only: it re-starts a track on any
            # gate failure; the NIS test below decides where motion pieces end.
            segs, out = split_segments(t[cursor:a], z[cursor:a], C[cursor:a], s.accel_sigma_mm_s2,
                                       s.birth_speed_sigma_mm_s, s.split_nis)
            used[cursor:a] &= ~out
            pieces += [(cursor + i0, cursor + i1, "move") for i0, i1 in segs]
        if b > a:
            pieces.append((a, b, "rest"))
        cursor = b
    segments = []
    for i0, i1, kind in pieces:
        idx = np.arange(i0, i1)[used[i0:i1]]
        if len(idx) == 0:
            continue
        g0, g1 = int(frames[idx[0]]) - f0, int(frames[idx[-1]]) - f0
        if kind == "rest" or len(idx) == 1:
            sg = sig[idx] if kind == "rest" else np.sqrt(Cs[idx][:, [0, 1], [0, 1]])
            w = 1.0 / np.maximum(sg ** 2, 1e-6)
            m = np.sum(w * z[idx], axis=0) / np.sum(w, axis=0)
            var_det = np.median(sg ** 2, axis=0)
            scatter2 = np.var(z[idx], axis=0, ddof=1) if len(idx) > 2 else var_det
            # random part averages down; what the detector's sigma claims
            # beyond the observed scatter (its model error) does not
            se = np.sqrt(np.maximum(scatter2, var_det) / len(idx) + np.maximum(var_det - scatter2, 0.0))
            X[g0:g1 + 1] = [m[0], m[1], 0.0, 0.0]
            SX[g0:g1 + 1] = se if len(idx) > 1 else sg[0]
            if len(idx) == 1 and kind == "move":
                X[g0, 2:] = np.nan
        else:
            tg = frame_t[grid_f[g0:g1 + 1]]
            fit = smooth_segment(tg, frames[idx] - f0 - g0, z[idx], Cs[idx], s.accel_sigma_mm_s2,
                                 s.birth_speed_sigma_mm_s)
            X[g0:g1 + 1] = fit.x
            var = np.stack([fit.P[:, 0, 0], fit.P[:, 1, 1]], axis=1)
            if sys_var is not None:
                gf = np.arange(g0, g1 + 1)
                near = np.abs(gf[:, None] - (frames[idx] - f0)[None, :]).argmin(axis=1)
                var = var + sys_var[idx][near]
            SX[g0:g1 + 1] = np.sqrt(var)
        segments.append((float(frame_t[f0 + g0]), float(frame_t[f0 + g1]), kind))
    # Frames between pieces (missed detections at a contact): each piece's
    # line up to where the two come closest (tracking/kalman.py bridge_gap);
    # from the nearer piece with its end velocity where only one side exists.
    have = np.isfinite(X[:, 0])
    if not have.all():
        idx_have = np.nonzero(have)[0]
        for g in np.nonzero(~have)[0]:
            k = idx_have[np.argmin(np.abs(idx_have - g))]
            dt = frame_t[f0 + g] - frame_t[f0 + k]
            v = np.nan_to_num(X[k, 2:])
            X[g] = [X[k, 0] + v[0] * dt, X[k, 1] + v[1] * dt, v[0], v[1]]
            SX[g] = SX[k] + np.abs(dt) * 50.0  # a growing, honest-looking guess: 50 mm/s per s
            kp, kn = idx_have[idx_have < g], idx_have[idx_have > g]
            if len(kp) and len(kn):
                a, b = kp[-1], kn[0]
                p, vv, miss = bridge_gap(X[a, :2], np.nan_to_num(X[a, 2:]), frame_t[f0 + a], X[b, :2],
                                         np.nan_to_num(X[b, 2:]), frame_t[f0 + b], np.array([frame_t[f0 + g]]))
                X[g] = [p[0, 0], p[0, 1], vv[0, 0], vv[0, 1]]
                SX[g] = np.hypot(SX[g], miss / 2.0)
    rows = {"frame": grid_f, "t_s": frame_t[grid_f], "x_mm": X[:, 0], "y_mm": X[:, 1],
            "vx_mm_s": X[:, 2], "vy_mm_s": X[:, 3], "sx_mm": SX[:, 0], "sy_mm": SX[:, 1], "visible": vis}
    return rows, segments, used


# --------------------------------------------------------------------------- one ball, one detection
def merge_overlapping(det: pd.DataFrame, radius_mm: float, frac: float) -> pd.DataFrame:
    """Merge detections of one frame whose centres are closer than ``frac`` x one ball diameter.

    Balls cannot overlap: two real ball centres are at least 2R apart (2R when
    touching). A long motion streak (a fast ball over a long exposure) can come
    out of the detector as two blobs at its ends; they lie symmetrically about
    the mid-exposure centre, so the pair is replaced by its inverse-variance
    mean, with the half-separation added in quadrature to the sigmas (we do
    not know which end is closer). Colour and other columns come from the
    more confident detection. Pure: returns a new frame.

    >>> d = pd.DataFrame({"x_mm": [100.0, 140.0, 400.0], "y_mm": [50.0, 50.0, 50.0], "sx_mm": 1.0,
    ...                   "sy_mm": 1.0, "confidence": [0.9, 0.8, 0.9]})
    >>> merge_overlapping(d, 28.575, 0.8)[["x_mm", "y_mm"]].to_numpy().tolist()
    [[120.0, 50.0], [400.0, 50.0]]
    """
    n = len(det)
    if n < 2:
        return det
    z = det[["x_mm", "y_mm"]].to_numpy(float)
    d = np.linalg.norm(z[:, None, :] - z[None, :, :], axis=2)
    np.fill_diagonal(d, np.inf)
    lim = frac * 2.0 * radius_mm
    if not (d < lim).any():
        return det
    conf = det["confidence"].to_numpy(float) if "confidence" in det else np.ones(n)
    order = np.argsort(-conf, kind="stable")
    taken = np.zeros(n, bool)
    rows = []
    for i in order:
        if taken[i]:
            continue
        grp = [i] + [j for j in np.nonzero((d[i] < lim) & ~taken)[0] if j != i]
        taken[grp] = True
        row = det.iloc[i].copy()
        if len(grp) > 1:
            sig = np.maximum(det.iloc[grp][["sx_mm", "sy_mm"]].to_numpy(float), 1e-3)
            w = 1.0 / sig ** 2
            m = (w * z[grp]).sum(axis=0) / w.sum(axis=0)
            half = 0.5 * float(np.max(d[np.ix_(grp, grp)][np.isfinite(d[np.ix_(grp, grp)])]))
            row["x_mm"], row["y_mm"] = m
            se = 1.0 / np.sqrt(w.sum(axis=0))
            row["sx_mm"], row["sy_mm"] = np.hypot(se, half / np.sqrt(2.0))
            for c in ("x_px", "y_px"):
                if c in det:
                    row[c] = float(det.iloc[grp][c].mean())
        rows.append(row)
    return pd.DataFrame(rows).reset_index(drop=True)


def separate_detections(det: pd.DataFrame, radius_mm: float) -> pd.DataFrame:
    """Detections of one frame moved apart where two are closer than one diameter (table mm).

    See :func:`tracking.overlap.separate_overlaps`; each detection's
    covariance is its sx_mm, sy_mm. Pure: returns a new frame.
    """
    if len(det) < 2:
        return det
    xy = det[["x_mm", "y_mm"]].to_numpy(float)
    s = np.maximum(det[["sx_mm", "sy_mm"]].to_numpy(float), 1e-3)
    cov = np.zeros((len(det), 2, 2))
    cov[:, 0, 0], cov[:, 1, 1] = s[:, 0] ** 2, s[:, 1] ** 2
    p = separate_overlaps(xy, cov, radius_mm)
    if np.allclose(p, xy):
        return det
    out = det.copy()
    out["x_mm"], out["y_mm"] = p[:, 0], p[:, 1]
    return out


# --------------------------------------------------------------------------- clip
def _resolve_table(table) -> TablePreset:
    if isinstance(table, TablePreset):
        return table
    try:
        return table_preset(str(table))
    except ValueError as exc:
        raise FeltlabError(str(exc)) from None


def track_clip(path: str | os.PathLike, table: str | TablePreset | None = DEFAULT_TABLE,
               calibration: Calibration | str | os.PathLike | None = None, fps: float | None = None,
               frame_range: tuple[int, int | None] | None = None,
               settings: TrackClipSettings = TrackClipSettings(),
               progress: Callable[[int, int], None] | None = None, auto_table: bool = False,
               phantoms: PhantomSettings = PhantomSettings(), hfov_deg: float | None = None) -> TrackResult:
    """Track every ball in a clip; see :class:`TrackResult` for the output.

    table: preset name (or TablePreset; None: the calibration file's, else
    the default preset). calibration: a Calibration, a
    calibration file (TOML), or None for automatic calibration from the
    cushion lines. fps: capture rate override (high-speed clips).
    frame_range: (start, stop) frame indices. progress(done, total) is called
    after every frame (total 0 when the container does not say).
    auto_table: with automatic calibration, choose the preset from the
    picture: a table without side pockets is carom (tracking/pockets.py);
    among the pocketed presets, which differ only in size, the balls' image
    size chooses (tracking/ball_size.py,
    :func:`~tracking.ball_size.suggest_preset`) and the clip is tracked again
    with the preset it points to. A warning says what was chosen. For
    callers whose user named no preset. phantoms: the compressed-footage
    background update and the off-surface test (tracking/phantoms.py).
    hfov_deg: the lens's horizontal field of view (deg) for automatic
    calibration (:func:`tracking.calibrate.calibrate_auto`) or a calibration
    file's manual corners (:func:`tracking.calibrate.calibration_from_file`).
    """
    from tracking.video import open_video

    tp = _resolve_table(table) if table is not None else None
    src = open_video(path, fps_override=fps, frame_range=frame_range)
    warnings = list(src.warnings)
    ds, ts = settings.detection, settings.tracking
    sample = src.sample(ds.background_samples)
    imgs = [im for _, _, im in sample]
    if calibration is None:
        from tracking.calibrate import calibrate_auto

        step = max(1, len(imgs) // settings.calibration_frames)
        calib_imgs = imgs[::step][: settings.calibration_frames]
        if auto_table:
            # a carom table is 2:1 like pool: only the missing side pockets tell
            cal, notes = calibrate_choosing_table(calib_imgs, tp or table_preset(DEFAULT_TABLE), hfov_deg=hfov_deg)
            warnings.extend(notes)
        else:
            cal = calibrate_auto(calib_imgs, tp or table_preset(DEFAULT_TABLE), hfov_deg=hfov_deg)
    elif isinstance(calibration, Calibration):
        cal = calibration
    else:
        from tracking.calibrate import calibration_from_file

        cal = calibration_from_file(calibration, table=tp, hfov_deg=hfov_deg)
    warnings.extend(f"calibration: {n}" for n in cal.notes)
    w, h = cal.camera.image_size
    if (imgs[0].shape[1], imgs[0].shape[0]) != (w, h):
        raise FeltlabError(f"the calibration is for {w}x{h} images but the clip is "
                           f"{imgs[0].shape[1]}x{imgs[0].shape[0]}; calibrate this clip")
    mono = is_monochrome(imgs)
    if mono:
        warnings.append("the clip has no colour (grey-level camera): balls are named by lightness - cue, black, "
                        "shade-1 (lightest) ... - not by colour")
    # colour copied over 2 x 2 blocks by the decoder: interpolated between block centres (tracking/chroma.py)
    rebuild = settings.chroma_rebuild and not mono and block_chroma(imgs[:5])
    if rebuild:
        imgs = [rebuild_chroma(im) for im in imgs]
    bg = build_background(imgs, cal, ds)
    bg = faint_background(bg, cal, ds)  # faint resting balls out of the background too
    # where a ball stood for part of the clip: the median of the frames that show the cloth there
    bg, n_cleaned = clean_median(bg, imgs, phantoms)
    # the scene's light (lamp fall-off, exposure), taken out of the colours balls are named by
    light = light_field(bg, [(im, detect_frame(im, cal, ds, bg)) for im in imgs[:2]])
    del imgs, sample
    exposure = ExposureMatcher(bg.image, bg.mask, settings.exposure)

    # A ball whose centre is up to one radius outside the picture still shows
    # a part of itself; beyond that it has left the view.
    linker = Linker(cal.ball_radius_mm, ts, in_view=view_test(cal.table_to_px, (w, h), bg.radius_px,
                                                                        cal.px_to_table))
    # compressed footage: the background follows the codec's still cloth
    still = StillCloth(bg, cal, phantoms, ts.confirm_hits)
    ring_gate = RingGate(ds)  # where the dark-ring search runs, frame by frame (tracking/dark_ring.py)
    chunks = []
    frame_times: dict[int, float] = {}
    row0 = 0
    total = src.n_frames
    done = 0
    for idx, t, img in src:
        if rebuild:
            img = rebuild_chroma(img)
        raw = img
        img = exposure.correct(img)  # lamp flicker / auto exposure out
        bg = still.update(raw, img, t)
        det = merge_overlapping(add_faint(detect_frame(img, cal, ds, bg), img, cal, bg, ds, ring_gate), cal.ball_radius_mm,
                                ts.merge_below_frac)
        if ts.separate_overlaps:
            det = separate_detections(det, cal.ball_radius_mm)
        det = add_appearance(det, img, bg, light, ds)
        if len(det):
            # a ball's shading on the frame itself (tracking/phantoms.py, 4)
            det = det.assign(shade_l=ring_shading(img, det[["x_px", "y_px"]].to_numpy(float),
                                                  det["radius_expected_px"].to_numpy(float), ds))
        frame_times[idx] = t
        ids = np.arange(row0, row0 + len(det))
        tid = linker.step(t, det, ids)
        still.note_tracks(linker.live, det, tid)
        if len(det):
            det = det.assign(frame=idx, t_s=t, track=tid, row=ids)
            chunks.append(det)
        row0 += len(det)
        done += 1
        if progress is not None:
            progress(done, total)
    n_frames = done
    if not frame_times:
        raise FeltlabError(f"{Path(path).name}: no frames were read")
    fmax = max(frame_times)
    frame_t = np.full(fmax + 1, np.nan)
    for k, v in frame_times.items():
        frame_t[k] = v
    # Frames outside the range (before start) never appear in grids.
    det_all = pd.concat(chunks, ignore_index=True) if chunks else pd.DataFrame(
        columns=list(chunks[0].columns) if chunks else ["frame", "t_s", "track", "row", "x_mm", "y_mm"])
    jumps = linker.jumps()
    result = _finish(det_all, jumps, frame_t, cal, ts, warnings, ds.streak_sigma_frac, phantoms, mono)
    if auto_table and calibration is None and not cal.table.pockets and not _carom_set(result[2]):
        # No side pockets, but not a carom ball set either (more than four
        # balls, or stripes): a pool table drawn without pockets. Pool it is.
        log.info("no side pockets but %d balls / stripes: tracking again as %s", len(result[2]), DEFAULT_TABLE)
        again = track_clip(path, table=DEFAULT_TABLE, calibration=None, fps=fps, frame_range=frame_range,
                           settings=settings, progress=progress, auto_table=False, phantoms=phantoms)
        again.warnings.insert(0, f"no side pockets seen, but the balls are not a carom set: table taken as "
                                 f"{again.calibration.table.name}; pass --table to set it")
        return again
    if auto_table and calibration is None:
        ratio = float(result[1].attrs.get("ball_size_ratio", float("nan")))
        alt = suggest_preset(ratio, cal.table, ts.ball_size_low, ts.ball_size_high)
        if alt is not None:
            log.info("ball size %.3f x the %s prediction: tracking again as %s", ratio, cal.table.name, alt.name)
            again = track_clip(path, table=alt, calibration=None, fps=fps, frame_range=frame_range,
                               settings=settings, progress=progress, auto_table=False, phantoms=phantoms)
            note = (f"table taken as {alt.name} from the balls' image size ({ratio:.3f} x what "
                    f"{cal.table.name} predicts); pass --table to set it")
            again.warnings.insert(0, note)
            return again
        share, n_slow = result[1].attrs.get("ball_size_pinned", (float("nan"), 0))
        if not np.isfinite(ratio) and n_slow >= MIN_DETECTIONS and share >= PINNED_SHARE_MISFIT:
            # Every radius fit failed its tolerance: the balls are far larger or smaller than this
            # preset predicts (a 7-ft table fitted as 9-ft). Try the sizes that would explain it and
            # keep the first whose balls then measure in band (tracking/ball_size.py).
            for alt in misfit_candidates(cal.table, ds.radius_tol):
                log.info("ball radii pinned to the %s prediction in %.0f%% of %d slow detections: trying %s", cal.table.name,
                         100 * share, n_slow, alt.name)
                try:
                    again = track_clip(path, table=alt, calibration=None, fps=fps, frame_range=frame_range,
                                       settings=settings, progress=progress, auto_table=False, phantoms=phantoms)
                except FeltlabError:
                    continue
                r2 = float(again.stats.get("ball_size_ratio", float("nan")))
                if np.isfinite(r2) and ts.ball_size_low <= r2 <= ts.ball_size_high:
                    again.warnings.insert(0, f"table taken as {alt.name} from the balls' image size (no ball "
                                             f"fitted the size {cal.table.name} predicts); pass --table to set it")
                    return again
            warnings.append(f"no ball's image size fitted the {cal.table.name} preset's {cal.ball_diameter_mm:.2f} mm "
                            f"ball, nor any other preset's: distances may be scaled; pass the right --table")
    return TrackResult(tracks=result[0], detections=result[1], calibration=cal, fps=src.fps,
                       fps_source=src.fps_source, n_frames=n_frames, balls=result[2], segments_hint=result[3],
                       warnings=list(dict.fromkeys(list(src.warnings) + warnings)),
                       stats={"background_noise_dn": bg.noise_dn, "threshold_dn": bg.threshold_dn,
                              "radius_px": bg.radius_px, "static_balls_painted": int(len(bg.static_px)),
                              "background_px_cleaned": n_cleaned,
                              "time_source": src.time_source,
                              "still_cloth_px": still.pixels_updated, "still_cloth_frames": still.frames_updated,
                              "smear_scale_s2": float(result[1].attrs.get("smear_scale_s2", float("nan"))),
                              "ball_size_ratio": float(result[1].attrs.get("ball_size_ratio", float("nan")))})


def _finish(det_all: pd.DataFrame, jumps: dict[int, list[int]], frame_t: np.ndarray, cal: Calibration,
            ts: TrackingSettings, warnings: list[str], streak_sigma_frac: float = 0.0,
            phantoms: PhantomSettings = PhantomSettings(), monochrome: bool = False):
    """Detections with track ids -> (tracks, detections, balls, segments_hint); monochrome: name balls
    by lightness (tracking/labels.py)."""
    empty_tracks = pd.DataFrame(columns=TRACK_COLUMNS)
    if det_all.empty or "track" not in det_all:
        warnings.append("no balls were found; check the calibration and that the balls are in view")
        return empty_tracks, pd.DataFrame(columns=DETECTION_OUT_COLUMNS), pd.DataFrame(
            columns=["ball", "r", "g", "b", "pattern"]), {}
    det_all = det_all[det_all.track >= 0].copy()
    det_all = stitch_tracks(det_all, ts, cal.ball_radius_mm)
    # No ball centre lies beyond the cushion nose (pockets aside): such a
    # "track" is compression blocks along a rail (tracking/phantoms.py).
    off = off_surface_tracks(det_all, cal.table, cal.ball_radius_mm, phantoms)
    if off:
        warnings.append(f"{len(off)} track(s) off the playing surface (centre beyond the cushion nose) "
                        f"dropped as image artefacts")
        det_all = det_all[~det_all.track.isin(off)].copy()
    # Too few fixes with a ball's shading or colour (and mostly predicted, or
    # beyond the nose, or none at all): codec blocks the linker strung
    # together, not balls (tracking/phantoms.py, 4).
    codec = codec_tracks(det_all, frame_t, cal.table, cal.ball_radius_mm, phantoms)
    if codec:
        warnings.append(f"{len(codec)} track(s) that never showed a ball's shading or colour dropped as "
                        f"compression artefacts")
        det_all = det_all[~det_all.track.isin(codec)].copy()
    # Drop short clutter tracks that never rest, and tracks that never had
    # the linker's confirmation (confirm_hits fixes, none further apart than a
    # tentative track may go unseen): single fixes linked or stitched over
    # gaps (compression blocks at keyframes).
    dt_frame = np.nanmedian(np.diff(frame_t)) if np.isfinite(frame_t).sum() > 1 else 0.0
    gap_s = max(ts.jump_max_gap_s, 1.5 * float(dt_frame))
    keep_ids = []
    dropped = 0
    for tid, g in det_all.groupby("track"):
        dur = g.t_s.max() - g.t_s.min()
        if dur >= ts.min_track_s and longest_run(g.t_s.to_numpy(float), gap_s) >= ts.confirm_hits:
            keep_ids.append(tid)
        else:
            dropped += 1
    if dropped:
        warnings.append(f"{dropped} short track(s) (< {ts.min_track_s} s) dropped as clutter")
    det_all = det_all[det_all.track.isin(keep_ids)].copy()
    names, balls = label_tracks(det_all, table=cal.table.name, monochrome=monochrome)
    det_all["ball"] = det_all.track.map(names)
    track_rows = []
    segs: dict[str, list] = {}
    used_all = pd.Series(True, index=det_all.index)
    exp_s = exposure_s(frame_t, ts)
    for c in ("sxy_mm2", "smear_mm"):
        det_all[c] = 0.0
    per_track = {}
    for tid, g in det_all.groupby("track"):
        g = g.sort_values("frame")
        g = g[~g.frame.duplicated(keep="first")]
        sig = np.maximum(g[["sx_mm", "sy_mm"]].to_numpy(float), 0.02)
        per_track[tid] = (g.t_s.to_numpy(float), g[["x_mm", "y_mm"]].to_numpy(float), sig, smear_applies(g))
    c_max = ts.smear_var_per_len2 * exp_s ** 2
    c_s2 = smear_scale([(t_, z_, as_cov(s_), f_) for t_, z_, s_, f_ in per_track.values()], c_max) \
        if ts.smear_from_clip else c_max
    for tid, g in det_all.groupby("track"):
        g = g.sort_values("frame")
        g = g[~g.frame.duplicated(keep="first")]
        fr = g.frame.to_numpy(int)
        rowpos = {int(r): k for k, r in enumerate(g["row"].to_numpy())}
        jset = {rowpos[r] for r in jumps.get(int(tid), []) if r in rowpos}
        z = g[["x_mm", "y_mm"]].to_numpy(float)
        sig = np.maximum(g[["sx_mm", "sy_mm"]].to_numpy(float), 0.02)
        tt = g.t_s.to_numpy(float)
        C = measurement_cov(tt, z, sig, c_s2, smear_applies(g))
        # per-axis variance shared by neighbouring frames (mm^2): a streak's
        # length share of its sigma (tracking/streak.py: the two ends shade and
        # shadow alike from frame to frame). The smear term is not: smear_scale
        # measures it from second differences, which a shared bias cancels out of.
        sys_var = np.zeros_like(sig)
        if "streak_px" in g and "radius_expected_px" in g:
            mmpp = cal.ball_radius_mm / np.maximum(g["radius_expected_px"].to_numpy(float), 1e-6)
            sl = np.nan_to_num(streak_sigma_frac * g["streak_px"].to_numpy(float) * mmpp)
            sys_var = sys_var + (sl ** 2)[:, None]
        rows, segments, used = smooth_ball(fr, tt, z, sig, frame_t, jset, ts, cov=C,
                                           sys_var=np.maximum(sys_var, 0.0))
        used_all.loc[g.index] = used
        det_all.loc[g.index, "sx_mm"] = np.sqrt(C[:, 0, 0])
        det_all.loc[g.index, "sy_mm"] = np.sqrt(C[:, 1, 1])
        det_all.loc[g.index, "sxy_mm2"] = C[:, 0, 1]
        det_all.loc[g.index, "smear_mm"] = np.hypot(*detection_velocity(tt, z).T) * exp_s
        df = pd.DataFrame(rows)
        df["ball"] = names[int(tid)]
        track_rows.append(df)
        segs[names[int(tid)]] = segments
    tracks = pd.concat(track_rows, ignore_index=True)[TRACK_COLUMNS] if track_rows else empty_tracks
    tracks = tracks.sort_values(["frame", "ball"]).reset_index(drop=True)
    det_all["used"] = used_all.reindex(det_all.index).fillna(False).astype(bool)
    extra = [c for c in det_all.columns if c not in DETECTION_OUT_COLUMNS and c not in ("track", "row")]
    dets = det_all[DETECTION_OUT_COLUMNS + extra].sort_values(["frame", "ball"]).reset_index(drop=True)
    dets.attrs["smear_scale_s2"] = c_s2
    # A wrong --table preset fits the cushions just as well (all pool tables
    # are 2:1); only the balls' image size can tell (tracking/ball_size.py).
    ratio = size_ratio(det_all[det_all.used])
    dets.attrs["ball_size_ratio"] = ratio
    dets.attrs["ball_size_pinned"] = pinned_share(det_all[det_all.used])
    msg = size_warning(ratio, cal.table.name, cal.ball_diameter_mm, ts.ball_size_low,
                       ts.ball_size_high)
    if msg:
        warnings.append(msg)
    return tracks, dets, balls, segs


def longest_run(t_s: np.ndarray, max_gap_s: float) -> int:
    """Most fixes in a row with no gap longer than ``max_gap_s`` between neighbours (times in s, any order).

    >>> longest_run(np.array([0, 1, 2, 7, 9, 10]) / 60.0, 0.025)
    3
    >>> longest_run(np.array([0, 2, 4, 6, 20]) / 60.0, 0.05)
    4
    """
    t = np.unique(np.asarray(t_s, float))
    if len(t) == 0:
        return 0
    breaks = np.nonzero(np.diff(t) > max_gap_s + 1e-9)[0]
    edges = np.r_[-1, breaks, len(t) - 1]
    return int(np.max(np.diff(edges)))


def _carom_set(balls: pd.DataFrame) -> bool:
    """Could these tracked balls be a carom set? At most four balls (three in carom games, four in
    four-ball; common practice) and no stripe balls."""
    if balls is None or len(balls) == 0:
        return True
    stripes = "pattern" in balls and bool((balls["pattern"] == "stripe").any())
    return len(balls) <= 4 and not stripes


def calibration_from_truth(truth: dict, table: str = "pool-9ft") -> Calibration:
    """Calibration (method 'truth') from a render's truth JSON (camera t in metres)."""
    from tracking.camera import CameraModel

    cm = truth["camera"]
    cam = CameraModel(K=cm["K"], dist=cm.get("dist_coeffs", cm.get("dist", [0, 0, 0, 0, 0])),
                      R=cm.get("R_world_to_cam_opencv", cm.get("R")),
                      t=np.asarray(cm.get("t_world_to_cam_m"), float) * 1000.0
                      if "t_world_to_cam_m" in cm else cm.get("t_mm"),
                      image_size=truth["resolution"])
    d = float(truth.get("ball", {}).get("diameter_mm", table_preset(table).ball.diameter_mm))
    return Calibration(camera=cam, table=table_preset(truth.get("table", {}).get("name", table)),
                       ball_diameter_mm=d, method="truth")
