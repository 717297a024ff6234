"""Frame-to-frame linking of detections into ball tracks (table frame, mm, s).

Each live track carries a constant-velocity Kalman state (tracking/kalman.py)
and a running colour signature. Every frame, the cost of giving detection j
to track i is

* ``NIS_ij + ln(det S_ij / det R_j) + colour_weight * |colour_i - colour_j|``
  when the normalised innovation squared passes the chi-square gate (a smooth
  continuation). NIS plus the log-determinant is twice the negative log
  Gaussian likelihood (up to a constant per detection), so a track that has
  gone unseen for a while - whose predicted covariance S has grown - does not
  win a detection that a freshly seen track explains (Blackman & Popoli,
  *Design and Analysis of Modern Tracking Systems*, Artech House 1999, ch. 6);
* ``gate + 10 + colour_weight * |...| + distance / radius`` (for a track that may
  re-start, the log-determinant term above is capped at 10, so its gated
  continuation always costs less; a track unseen for longer than a re-start gap
  keeps the whole term) when it fails the
  gate but lies within the travel at the largest credible speed since the
  track's last fix, and that fix is at most ``jump_max_gap_s`` old (a contact
  changed the velocity: the track is re-started from there and the jump is
  recorded). A track lost for longer (a ball that left the view or was
  covered) may only continue through the gate: its old fix says nothing about
  where a re-started ball went, and allowing it would let a stale track take
  another ball's detection anywhere on the table;
* forbidden otherwise,

and the global nearest-neighbour assignment is solved with
``scipy.optimize.linear_sum_assignment`` (Hungarian method, Kuhn 1955 /
Munkres 1957). The colour term keeps identities apart when a contact sends
one ball to where the other was predicted to be. Unmatched detections start
tracks, except on the exposure sweep of a confirmed track fixed in the same
frame (a piece of an unfitted streak: :meth:`Linker._on_sweep`); tracks
unseen for longer than ``max_missed_s`` end (pocketed, left the view, covered
by a hand).

Each detection's noise is its sigma plus the smear of the track's
predicted motion during the exposure (tracking/kalman.py :func:`smear_cov`;
exposure ``TrackingSettings.exposure_frac`` x the frame interval, the whole
interval when unknown), so a fast, blurred ball is not gated out along its
direction of travel; a streak-fitted detection (``streak_px`` > 0,
tracking/streak.py) is the mid-exposure centre and its sigma already holds
its smear error, so it gets no smear term.

Colour signature: chromaticity (r, g, b) / (r + g + b) (unchanged by the
overall brightness, so vignetting and lighting gradients do not change it),
scaled x3, plus the white and dark pixel fractions.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from tracking.kalman import H, cv_transition, smear_cov
from tracking.settings import TrackingSettings

FORBIDDEN = 1e9
#: Extra cost of re-starting a track's motion over any gated continuation
#: (chi-square units; our choice: e^10 ~ 2e4, far beyond any likelihood
#: ratio the gate lets through). The log-determinant term is capped at it.
JUMP_PENALTY = 10.0


def colour_signature(df: pd.DataFrame) -> np.ndarray:
    """(N,5) colour features of detections: 3 x chromaticity (r,g,b), white_frac, dark_frac."""
    rgb = df[["r", "g", "b"]].to_numpy(float)
    s = rgb.sum(axis=1, keepdims=True)
    chrom = np.where(s > 1e-6, rgb / np.maximum(s, 1e-6), 1.0 / 3.0)
    wf = df["white_frac"].to_numpy(float)[:, None]
    dk = df["dark_frac"].to_numpy(float)[:, None]
    return np.nan_to_num(np.hstack([3.0 * chrom, wf, dk]), nan=0.0)


@dataclass
class LiveTrack:
    """A track being followed: state x (4,), covariance P (4,4), last update time (s)."""

    id: int
    x: np.ndarray
    P: np.ndarray
    t: float
    colour: np.ndarray
    hits: int = 1
    last_seen_t: float = 0.0
    jumps: list[int] = field(default_factory=list)  # detection row ids that re-started the motion


def view_test(table_to_px: Callable[[np.ndarray], np.ndarray], image_size: tuple[int, int],
              margin_px: float, px_to_table: Callable[[np.ndarray], np.ndarray] | None = None
              ) -> Callable[[np.ndarray], np.ndarray]:
    """In-view test for :class:`Linker`: centre (mm) -> px inside the image grown by ``margin_px``.

    With ``px_to_table`` the pixel must also map back to the same point (within
    1 mm): far outside the picture a radial lens polynomial folds back and
    would put a distant point inside the image.

    >>> f = view_test(lambda xy: np.asarray(xy, float), (100, 50), 5.0)
    >>> f(np.array([[50.0, 25.0], [103.0, 25.0], [120.0, 25.0]])).tolist()
    [True, True, False]
    """
    w, h = image_size

    def f(xy: np.ndarray) -> np.ndarray:
        xy = np.asarray(xy, float).reshape(-1, 2)
        uv = np.asarray(table_to_px(xy), float).reshape(-1, 2)
        m = margin_px
        ok = ((uv[:, 0] >= -0.5 - m) & (uv[:, 0] <= w - 0.5 + m) & (uv[:, 1] >= -0.5 - m)
              & (uv[:, 1] <= h - 0.5 + m))
        if px_to_table is not None and ok.any():
            back = np.asarray(px_to_table(uv[ok]), float).reshape(-1, 2)
            ok[np.nonzero(ok)[0]] = np.linalg.norm(back - xy[ok], axis=1) < 1.0
        return ok

    return f


class Linker:
    """Online global-nearest-neighbour linker; feed frames in time order with :meth:`step`."""

    def __init__(self, ball_radius_mm: float, settings: TrackingSettings = TrackingSettings(),
                 in_view: Callable[[np.ndarray], np.ndarray] | None = None):
        """in_view: optional map of table points (N,2) mm -> (N,) bool, True where a ball
        centred there would still show in the image (see :func:`view_test`)."""
        self.s = settings
        self.R = ball_radius_mm
        self.in_view = in_view
        self.live: list[LiveTrack] = []
        self.ended: list[LiveTrack] = []
        self.next_id = 0
        self._t_prev: float | None = None

    def _birth(self, row_id: int, z: np.ndarray, sig: np.ndarray, col: np.ndarray, t: float) -> LiveTrack:
        x = np.array([z[0], z[1], 0.0, 0.0])
        v2 = self.s.birth_speed_sigma_mm_s ** 2
        P = np.diag([sig[0] ** 2, sig[1] ** 2, v2, v2])
        tr = LiveTrack(id=self.next_id, x=x, P=P, t=t, colour=col.copy(), last_seen_t=t)
        self.next_id += 1
        self.live.append(tr)
        return tr

    def step(self, t: float, det: pd.DataFrame, row_ids: np.ndarray) -> np.ndarray:
        """Assign this frame's detections (row ids given) -> track id per detection (-1 never)."""
        s = self.s
        n_det = len(det)
        out = np.full(n_det, -1, int)
        z = det[["x_mm", "y_mm"]].to_numpy(float) if n_det else np.zeros((0, 2))
        sig = det[["sx_mm", "sy_mm"]].to_numpy(float) if n_det else np.zeros((0, 2))
        sig = np.maximum(np.nan_to_num(sig, nan=1.0), 0.05)
        col = colour_signature(det) if n_det else np.zeros((0, 5))
        # a streak-fitted centre is the mid-exposure centre: no smear term
        smeared = (np.where(det["streak_px"].to_numpy(float) > 0, 0.0, 1.0) if n_det and "streak_px" in det
                   else np.ones(n_det))
        dt_frame = (t - self._t_prev) if self._t_prev is not None else 0.0
        self._t_prev = t
        exp_s = dt_frame * (1.0 if s.exposure_frac is None else float(s.exposure_frac))
        # Predict all live tracks to t.
        preds = []
        for tr in self.live:
            F, Q = cv_transition(t - tr.t, s.accel_sigma_mm_s2)
            preds.append((F @ tr.x, F @ tr.P @ F.T + Q))
        nt = len(self.live)
        cost = np.full((nt, n_det), FORBIDDEN)
        jump = np.zeros((nt, n_det), bool)
        # A track predicted out of view (it rolled out of the picture) takes no
        # detection: whatever shows in view is another ball, or this one back
        # after an unseen bounce, which starts a new track (stitched later).
        # A track seen in the previous frame inside the view stays a candidate
        # (a ball at the very edge may be predicted just outside).
        visible = np.ones(nt, bool)
        if self.in_view is not None and nt:
            visible = np.asarray(self.in_view(np.array([xp[:2] for xp, _ in preds])), bool)
            fresh = np.array([t - tr.t <= 1.5 * dt_frame for tr in self.live])
            if (fresh & ~visible).any():
                last_in = np.asarray(self.in_view(np.array([tr.x[:2] for tr in self.live])), bool)
                visible |= fresh & last_in
        for i, (tr, (xp, Pp)) in enumerate(zip(self.live, preds)):
            if not visible[i] and t > tr.t:
                continue
            S_base = H @ Pp @ H.T
            R_smear = smear_cov(xp[2:], exp_s, s.smear_var_per_len2)[0]
            last_pos = tr.x[:2]
            reach = s.max_speed_mm_s * max(t - tr.t, dt_frame, 1e-6) + 2 * self.R
            # one whole missed frame (a contact's merged blob) at any frame rate
            can_jump = (t - tr.t) <= max(s.jump_max_gap_s, 2.5 * dt_frame)
            for j in range(n_det):
                v = z[j] - xp[:2]
                Rm = np.diag(sig[j] ** 2) + smeared[j] * R_smear
                S = S_base + Rm
                d2 = float(v @ np.linalg.solve(S, v))
                cd = float(np.linalg.norm(col[j] - tr.colour))
                if d2 <= s.gate_chi2:
                    # capped below the jump penalty, so a gated continuation
                    # always costs less than a re-start of the same track; a
                    # track that may no longer re-start (unseen too long) has no
                    # re-start to undercut and keeps the whole term, so its
                    # grown covariance does not win a detection that a freshly
                    # seen track's re-start explains (the likelihood ratio)
                    logdet = float(np.log(np.linalg.det(S) / np.linalg.det(Rm)))
                    if can_jump:
                        logdet = min(logdet, JUMP_PENALTY)
                    cost[i, j] = d2 + logdet + s.colour_weight * cd
                elif can_jump:
                    dist = float(np.linalg.norm(z[j] - last_pos))
                    if dist <= reach:
                        cost[i, j] = s.gate_chi2 + JUMP_PENALTY + s.colour_weight * cd + dist / self.R
                        jump[i, j] = True
        if nt and n_det and s.pass_through_tol is not None:
            self._forbid_pass_through(cost, z, t, dt_frame)
        matched_det = set()
        if nt and n_det:
            ri, ci = linear_sum_assignment(cost)
            for i, j in zip(ri, ci):
                if cost[i, j] >= FORBIDDEN:
                    continue
                tr = self.live[i]
                xp, Pp = preds[i]
                Rm = np.diag(sig[j] ** 2) + smeared[j] * smear_cov(xp[2:], exp_s, s.smear_var_per_len2)[0]
                if jump[i, j]:
                    # Velocity re-started from the displacement since the last fix.
                    dtt = max(t - tr.t, 1e-6)
                    vel = (z[j] - tr.x[:2]) / dtt
                    tr.x = np.array([z[j][0], z[j][1], vel[0], vel[1]])
                    v2 = (0.5 * self.s.birth_speed_sigma_mm_s) ** 2
                    tr.P = np.diag([sig[j][0] ** 2, sig[j][1] ** 2, v2, v2])
                    tr.jumps.append(int(row_ids[j]))
                else:
                    S = H @ Pp @ H.T + Rm
                    K = Pp @ H.T @ np.linalg.inv(S)
                    tr.x = xp + K @ (z[j] - H @ xp)
                    tr.P = (np.eye(4) - K @ H) @ Pp
                tr.t = t
                tr.last_seen_t = t
                tr.hits += 1
                tr.colour = 0.8 * tr.colour + 0.2 * col[j]
                out[j] = tr.id
                matched_det.add(j)
        near_xy = [tr.x[:2] if tr.t == t else preds[i][0][:2] for i, tr in enumerate(self.live) if visible[i]]
        # End tracks unseen for too long.
        keep = []
        for tr in self.live:
            # a tentative track (fewer than confirm_hits fixes: a streak end, a
            # flash) is dropped as soon as it misses more than a re-start gap;
            # kept alive, its unknown velocity lets its gate grow over the whole
            # table and it would take the next ball that starts to move
            # (M-of-N track confirmation, Blackman & Popoli 1999, ch. 9)
            limit = s.max_missed_s if tr.hits >= s.confirm_hits else max(s.jump_max_gap_s, 1.5 * dt_frame)
            if t - tr.last_seen_t > limit:
                self.ended.append(tr)
            else:
                keep.append(tr)
        self.live = keep
        # Births: unmatched detections not sitting on a live track.
        for j in range(n_det):
            if j in matched_det:
                continue
            # (a second detection on a ball already followed: compare with the
            # predictions of tracks in view, not with stale last fixes)
            near = any(np.linalg.norm(z[j] - p_xy) < 1.2 * self.R for p_xy in near_xy)
            if near or self._on_sweep(z[j], t, exp_s):
                continue
            tr = self._birth(int(row_ids[j]), z[j], sig[j], col[j], t)
            out[j] = tr.id
        return out

    def _on_sweep(self, p: np.ndarray, t: float, exp_s: float) -> bool:
        """True if table point p (mm) lies on the exposure sweep of a confirmed track fixed at t.

        A ball moving at v during an exposure e covers the segment of length
        |v| e about its mid-exposure centre, widened by its radius (swept
        disc, tracking/streak.py); a streak that was not fitted as one comes
        out as circle fits along it. A detection within one radius of that
        segment is a piece of the moving ball, not a ball of its own: a
        real ball there would overlap it. Pure geometry (segment-point
        distance, clamped projection).
        """
        if exp_s <= 0:
            return False
        for tr in self.live:
            if tr.t != t or tr.hits < self.s.confirm_hits:
                continue
            half = 0.5 * float(np.hypot(tr.x[2], tr.x[3])) * exp_s
            if half < 0.5 * self.R:
                continue
            u = tr.x[2:] / max(float(np.hypot(tr.x[2], tr.x[3])), 1e-9)
            v = np.asarray(p, float) - tr.x[:2]
            a = float(np.clip(v @ u, -half, half))
            if float(np.linalg.norm(v - a * u)) < self.R:
                return True
        return False

    def _forbid_pass_through(self, cost: np.ndarray, z: np.ndarray, t: float, dt_frame: float) -> None:
        """Forbid (in ``cost``) track -> detection links whose path crosses a resting ball.

        For a track i fixed in the previous frame, the straight path from its
        last fix to detection j may not pass within (2 - pass_through_tol)
        radii of the last fix of another confirmed track k fixed in the previous
        frame and resting (moving less than half a radius a frame): rigid
        balls' centres stay two radii apart. Segment-point distance: closest point
        of the segment, clamped projection (elementary geometry).
        """
        if dt_frame <= 0:
            return
        R = self.R
        lim = (2.0 - self.s.pass_through_tol) * R
        fresh = [tr.t < t and t - tr.t <= 1.5 * dt_frame for tr in self.live]
        # confirmed tracks only: a tentative one may be a streak's end, no ball
        rest = [k for k, tr in enumerate(self.live) if fresh[k] and tr.hits >= self.s.confirm_hits
                and np.hypot(tr.x[2], tr.x[3]) * dt_frame < 0.5 * R]
        if not rest:
            return
        for i, tr in enumerate(self.live):
            if not fresh[i]:
                continue
            a = tr.x[:2]
            for k in rest:
                if k == i:
                    continue
                b = self.live[k].x[:2]
                d = z - a                                   # (n_det, 2)
                L2 = np.maximum(np.einsum("ni,ni->n", d, d), 1e-12)
                u = np.clip(((b - a) @ d.T) / L2, 0.0, 1.0)  # (n_det,)
                near = np.hypot(*(a[None, :] + u[:, None] * d - b[None, :]).T) < lim
                # a ball already touching (or overlapping, by detection error)
                # that stays put is not crossing it
                near &= np.linalg.norm(a - b) >= lim
                cost[i, near] = FORBIDDEN

    def jumps(self) -> dict[int, list[int]]:
        """Track id -> detection row ids where the linker re-started the motion."""
        return {tr.id: list(tr.jumps) for tr in self.live + self.ended}


# --------------------------------------------------------------------------- stitching after linking
def _slow_rows(g: pd.DataFrame, radius_mm: float, dt: float) -> np.ndarray:
    """(N,) bool: detections of one track (time-sorted) that moved less than one radius a frame and
    were not streak-fitted, so their colour is not diluted by a smear over the cloth."""
    z = g[["x_mm", "y_mm"]].to_numpy(float)
    step = np.zeros(len(g))
    if len(g) > 1:
        d = np.hypot(*np.diff(z, axis=0).T) / np.maximum(np.diff(g["t_s"].to_numpy(float)) / dt, 1.0)
        step = np.maximum(np.r_[d, d[-1]], np.r_[d[0], d])
    st = g["streak_px"].to_numpy(float) > 0 if "streak_px" in g else np.zeros(len(g), bool)
    return (step < radius_mm) & ~st


def _stitch_colour_distance(all_a: np.ndarray, slow_a: np.ndarray | None, peak_a: np.ndarray,
                            all_b: np.ndarray, slow_b: np.ndarray | None, peak_b: np.ndarray) -> float:
    """Colour signature distance of two tracks, allowing for a smear's dilution.

    all_*: mean signatures; slow_*: mean over unsmeared detections (None if
    none); peak_*: the largest white and dark fractions seen. Both tracks with
    unsmeared detections: those signatures. Otherwise the chromaticity only
    (a smear mixes in cloth: the white and dark fractions fall to ~0, the hue
    stays), except that a track that ever showed white pixels and one that
    ever showed dark pixels are never the same ball (a smear only lowers
    both fractions, so each track's least smeared frame shows its kind):
    infinite distance (``peak_frac`` 0.3 for either).
    """
    if slow_a is not None and slow_b is not None:
        return float(np.linalg.norm(slow_a - slow_b))
    if (peak_a[0] > 0.3 and peak_b[1] > 0.3) or (peak_a[1] > 0.3 and peak_b[0] > 0.3):
        return float("inf")
    return float(np.linalg.norm(all_a[:3] - all_b[:3]))


def stitch_tracks(det: pd.DataFrame, s: TrackingSettings, radius_mm: float) -> pd.DataFrame:
    """Join a track that ends to one that starts nearby later (or in its last frame) with the same colour.

    det: linked detections (columns track, t_s, x_mm, y_mm and the colour
    summary). A pair (a, b) is joined when b starts after a's last fix, or
    in that same frame (a contact frame at a low frame rate: the blobs of the two touching balls break up, the
    struck ball's old track keeps a piece at its resting place and a new
    track starts on its streak), b's start lies within half the largest
    credible travel since (``max_speed_mm_s``) plus a diameter, and the
    colours agree (signature distance < 0.35). A smear dilutes a ball's
    colour with the cloth's (white and dark pixel fractions fall to ~0, the
    chromaticity keeps its hue), so unless both tracks have unsmeared
    detections (moving under one radius a frame, no streak fit) the
    chromaticity is compared, and white against dark pixels
    (:func:`_stitch_colour_distance`).
    Where the two overlap by a frame, both fixes of that frame
    are dropped: at least one is a piece of a broken-up blob, and the
    smoother bridges one missing frame better than a confidently wrong fix.
    Among candidates the shortest gap wins, then the closer colour. Pure.
    """
    if det.empty:
        return det
    det = det.copy()
    ts = np.sort(det["t_s"].unique())
    dt = float(np.median(np.diff(ts))) if len(ts) > 1 else 1.0
    changed = True
    while changed:
        changed = False
        info = det.groupby("track").agg(t0=("t_s", "min"), t1=("t_s", "max"))
        sig_all, sig_slow, peak = {}, {}, {}
        for tid, g in det.groupby("track"):
            g = g.sort_values("t_s")
            cs = colour_signature(g)
            sig_all[tid] = cs.mean(axis=0)
            slow = _slow_rows(g, radius_mm, dt)
            sig_slow[tid] = cs[slow].mean(axis=0) if slow.any() else None
            peak[tid] = cs[:, 3:].max(axis=0)
        best = None
        for a in info.index:
            ga = det[det.track == a]
            end = ga[ga.t_s == info.at[a, "t1"]].iloc[0]
            for b in info.index:
                if b == a or info.at[b, "t0"] <= info.at[a, "t0"]:
                    continue
                gap = info.at[b, "t0"] - info.at[a, "t1"]
                if gap < -0.5 * dt:
                    continue
                start = det[(det.track == b) & (det.t_s == info.at[b, "t0"])].iloc[0]
                dist = np.hypot(start.x_mm - end.x_mm, start.y_mm - end.y_mm)
                if dist > s.max_speed_mm_s * max(gap, dt) * 0.5 + 2 * radius_mm:
                    continue
                cd = _stitch_colour_distance(sig_all[a], sig_slow[a], peak[a], sig_all[b], sig_slow[b], peak[b])
                if cd >= 0.35:
                    continue
                key = (round(gap / dt), cd)
                if best is None or key < best[0]:
                    best = (key, a, b)
        if best is not None:
            _, a, b = best
            t_over = info.at[b, "t0"]
            if info.at[a, "t1"] >= t_over - 0.5 * dt:  # one shared frame: drop both fixes
                det = det[~(det.track.isin([a, b]) & (np.abs(det.t_s - t_over) < 0.5 * dt))]
            det.loc[det.track == b, "track"] = a
            changed = True
    return det
