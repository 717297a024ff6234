"""Identity measures of ball tracks against truth: CLEAR-MOT matching, ID switches, fragmentation, coverage.

Matching follows the CLEAR-MOT procedure (Bernardin & Stiefelhagen, "Evaluating Multiple Object
Tracking Performance: The CLEAR MOT Metrics", EURASIP J. Image and Video Processing, 2008, sec. 2.1):
per frame, a truth ball keeps the track it was last matched to when that track is present and still
within the gate; the balls and tracks left over are matched by the Hungarian method
(scipy.optimize.linear_sum_assignment) on centre distance, pairs beyond the gate discarded. A new
pair (ball, track) whose ball was last matched to a different track is one identity switch
("mismatch" in the paper; the last match is remembered across frames where the ball is unmatched,
as in the paper's definition).

Fragmentation: ``n_tracks`` = distinct tracks ever matched to a ball; ``frag`` = times a ball's
matched run is interrupted (matched -> unmatched -> matched again; Li, Huang & Nevatia, CVPR 2009).

Inputs are plain arrays so the module needs neither the tracker nor a clip: truth {ball: (N, 2) mm,
NaN where the ball is absent}, tracks {name: (N, 2) mm, NaN where the track has no point}, a view
mask {ball: (N,) bool} of ball-frames that count, and the gate (mm).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import linear_sum_assignment


@dataclass
class BallIdentity:
    """Per truth ball: ball-frames counted (in view), matched, identity switches, tracks used."""

    ball: str
    n_view: int = 0
    n_matched: int = 0
    switches: int = 0
    frag: int = 0
    tracks: dict[str, int] = field(default_factory=dict)  # track name -> matched frames
    missed_frames: list[int] = field(default_factory=list)
    switch_frames: list[int] = field(default_factory=list)

    @property
    def coverage(self) -> float:
        return self.n_matched / self.n_view if self.n_view else float("nan")

    @property
    def main_track(self) -> str | None:
        return max(self.tracks, key=self.tracks.get) if self.tracks else None


@dataclass
class IdentityReport:
    """Whole-clip figures: total switches, coverage, per-ball details and the frame-wise matches."""

    balls: dict[str, BallIdentity]
    match: dict[int, dict[str, str]]  # frame -> {ball: track}

    @property
    def switches(self) -> int:
        return sum(b.switches for b in self.balls.values())

    @property
    def frag(self) -> int:
        return sum(b.frag for b in self.balls.values())

    @property
    def coverage(self) -> float:
        nv = sum(b.n_view for b in self.balls.values())
        return sum(b.n_matched for b in self.balls.values()) / nv if nv else float("nan")

    @property
    def tracks_per_ball(self) -> float:
        used = [len(b.tracks) for b in self.balls.values() if b.tracks]
        return float(np.mean(used)) if used else float("nan")


def clear_mot_identity(truth: dict[str, np.ndarray], tracks: dict[str, np.ndarray], gate_mm: float,
                       view: dict[str, np.ndarray] | None = None) -> IdentityReport:
    """CLEAR-MOT matching frame by frame; see the module docstring. All arrays share the frame axis."""
    bids = sorted(truth)
    names = sorted(tracks)
    n = len(next(iter(truth.values()))) if truth else 0
    T = np.stack([truth[b] for b in bids]) if bids else np.zeros((0, n, 2))
    H = np.stack([tracks[h] for h in names]) if names else np.zeros((0, n, 2))
    V = np.stack([np.asarray(view[b], bool) if view is not None else np.isfinite(truth[b][:, 0]) for b in bids]) \
        if bids else np.zeros((0, n), bool)
    V &= np.isfinite(T[:, :, 0])
    out = {b: BallIdentity(b) for b in bids}
    last: dict[int, int] = {}  # ball index -> track index of its last match (kept across gaps)
    was_matched = np.zeros(len(bids), bool)
    ever = np.zeros(len(bids), bool)
    frame_match: dict[int, dict[str, str]] = {}
    for k in range(n):
        oi = np.nonzero(V[:, k])[0]
        hi = np.nonzero(np.isfinite(H[:, k, 0]))[0]
        pairs: dict[int, int] = {}
        if len(oi) and len(hi):
            D = np.linalg.norm(T[oi, k][:, None, :] - H[hi, k][None, :, :], axis=2)
            D[D > gate_mm] = np.inf
            used_o, used_h = set(), set()
            # 1. keep last correspondences still valid
            hpos = {h: j for j, h in enumerate(hi)}
            for i, o in enumerate(oi):
                h = last.get(o)
                if h is not None and h in hpos and np.isfinite(D[i, hpos[h]]) and h not in used_h:
                    pairs[o] = h
                    used_o.add(i)
                    used_h.add(h)
            # 2. Hungarian on the rest
            ri = [i for i in range(len(oi)) if i not in used_o]
            rj = [j for j, h in enumerate(hi) if h not in used_h]
            if ri and rj:
                sub = D[np.ix_(ri, rj)]
                big = 1e9
                r, c = linear_sum_assignment(np.where(np.isfinite(sub), sub, big))
                for a, b in zip(r, c):
                    if np.isfinite(sub[a, b]):
                        pairs[oi[ri[a]]] = hi[rj[b]]
        matched_now = np.zeros(len(bids), bool)
        for o, h in pairs.items():
            bi = out[bids[o]]
            if o in last and last[o] != h:
                bi.switches += 1
                bi.switch_frames.append(k)
            last[o] = h
            bi.n_matched += 1
            bi.tracks[names[h]] = bi.tracks.get(names[h], 0) + 1
            matched_now[o] = True
            if ever[o] and not was_matched[o]:
                bi.frag += 1
        for o in oi:
            out[bids[o]].n_view += 1
            if not matched_now[o]:
                out[bids[o]].missed_frames.append(k)
        # a ball out of view neither breaks nor continues its run
        was_matched[oi] = matched_now[oi]
        ever |= matched_now
        frame_match[k] = {bids[o]: names[h] for o, h in pairs.items()}
    return IdentityReport(out, frame_match)


def clusters_at(P0: dict[str, np.ndarray], link_mm: float) -> list[list[str]]:
    """Groups (>= 2 balls) whose centres chain together within ``link_mm`` (mm), from positions {ball: (2,)}."""
    ids = [b for b in sorted(P0) if np.all(np.isfinite(P0[b]))]
    parent = {b: b for b in ids}

    def root(b: str) -> str:
        while parent[b] != b:
            parent[b] = parent[parent[b]]
            b = parent[b]
        return b

    for i, a in enumerate(ids):
        for b in ids[i + 1:]:
            if np.hypot(*(P0[a] - P0[b])) < link_mm:
                parent[root(a)] = root(b)
    groups: dict[str, list[str]] = {}
    for b in ids:
        groups.setdefault(root(b), []).append(b)
    return [g for g in groups.values() if len(g) >= 2]


def cluster_own_tracks(rep: IdentityReport, cluster: list[str], frames: np.ndarray,
                       min_share: float = 0.9) -> dict[str, str | None]:
    """For each ball of a cluster: the track matched to it in >= ``min_share`` of ``frames`` and to no
    other ball of the clip in those frames (its own track), else None."""
    own: dict[str, str | None] = {}
    for b in cluster:
        cnt: dict[str, int] = {}
        for k in frames:
            h = rep.match.get(int(k), {}).get(b)
            if h is not None:
                cnt[h] = cnt.get(h, 0) + 1
        h = max(cnt, key=cnt.get) if cnt else None
        if h is None or cnt[h] < min_share * len(frames):
            own[b] = None
            continue
        shared = any(h == rep.match.get(int(k), {}).get(o) for k in frames for o in rep.match.get(int(k), {})
                     if o != b)
        own[b] = None if shared else h
    return own
