"""Constant-velocity Kalman filter and RTS smoother for one ball (table frame, mm, s).

State ``[x, y, vx, vy]`` (mm, mm/s) in the table frame; measurements are
centres ``[x, y]`` (mm) with per-detection sigmas from the detector. The
deceleration by cloth friction (mu g ~ 2 m/s^2 while sliding, ~0.1 m/s^2
rolling) enters as white-noise acceleration (the "discrete white noise
acceleration" model, Bar-Shalom, Li & Kirubarajan, *Estimation with
Applications to Tracking and Navigation*, Wiley 2001, section 6.3.2).

A contact changes the velocity within ~1 ms (far less than a frame), which
this model cannot follow: it shows as a spike of the normalised innovation
squared (NIS). :func:`split_segments` cuts a ball's measurements there, and
:func:`smooth_segment` runs the Rauch-Tung-Striebel smoother (Rauch, Tung &
Striebel, AIAA J. 3(8):1445, 1965; filterpy's ``rts_smoother``) on each
segment separately, so smoothing never mixes the motion before and after a
contact.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from filterpy.kalman import KalmanFilter

H = np.array([[1.0, 0, 0, 0], [0, 1.0, 0, 0]])
#: chi-square(2) 99% point (standard table value): a measurement this close to
#: the old motion's prediction counts as agreeing with it.
CONSISTENT_NIS = 9.21


def cv_transition(dt: float, accel_sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """(F, Q) of the constant-velocity model over ``dt`` s with acceleration noise sigma (mm/s^2).

    >>> F, Q = cv_transition(0.5, 2.0)
    >>> float(F[0, 2]), float(Q[0, 0])  # dt, (dt^2/2)^2 sigma^2
    (0.5, 0.0625)
    """
    F = np.eye(4)
    F[0, 2] = F[1, 3] = dt
    g = np.array([0.5 * dt * dt, dt])
    q1 = np.outer(g, g) * accel_sigma ** 2
    Q = np.zeros((4, 4))
    Q[np.ix_([0, 2], [0, 2])] = q1
    Q[np.ix_([1, 3], [1, 3])] = q1
    return F, Q


def nis(z: np.ndarray, x: np.ndarray, P: np.ndarray, Rm: np.ndarray) -> float:
    """Normalised innovation squared of measurement z (2,) against predicted state x, P."""
    v = z - H @ x
    S = H @ P @ H.T + Rm
    return float(v @ np.linalg.solve(S, v))


@dataclass
class SegmentFit:
    """Smoothed states of one motion segment on its frame grid.

    t: times (s, one per frame from first to last measurement); x: (N,4)
    states; P: (N,4,4) covariances; measured: bool (N,) frames with a
    measurement; nis: (N,) forward-filter NIS (nan where no measurement).
    """

    t: np.ndarray
    x: np.ndarray
    P: np.ndarray
    measured: np.ndarray
    nis: np.ndarray


def _initial_state(t: np.ndarray, z: np.ndarray, sig: np.ndarray, speed_sigma: float):
    """Position from the first measurement, velocity from a line through the first <= 4."""
    n = min(len(t), 4)
    x0 = np.zeros(4)
    x0[:2] = z[0]
    P0 = np.diag([sig[0, 0] ** 2, sig[0, 1] ** 2, speed_sigma ** 2, speed_sigma ** 2])
    if n >= 2 and t[n - 1] > t[0]:
        A = np.column_stack([np.ones(n), t[:n] - t[0]])
        coef, *_ = np.linalg.lstsq(A, z[:n], rcond=None)
        x0[:2] = coef[0]
        x0[2:] = coef[1]
        # velocity from n points: sigma sqrt(12 / (n (n^2-1))) / dt (regression result)
        dt = (t[n - 1] - t[0]) / (n - 1)
        sv = np.max(sig[:n]) * np.sqrt(12.0 / (n * (n * n - 1))) / dt
        P0[2, 2] = P0[3, 3] = (3 * sv) ** 2 + (0.1 * speed_sigma) ** 2
    return x0, P0


def forward_filter(t_grid: np.ndarray, meas_idx: np.ndarray, z: np.ndarray, sig: np.ndarray,
                   accel_sigma: float, speed_sigma: float):
    """Kalman filter on a frame grid; ``meas_idx[i]`` is the grid index of measurement i.

    Returns (xs, Ps, Fs, Qs, nis_grid) for filterpy's rts_smoother.
    """
    n = len(t_grid)
    kf = KalmanFilter(dim_x=4, dim_z=2)
    kf.H = H.copy()
    x0, P0 = _initial_state(t_grid[meas_idx], z, sig, speed_sigma)
    kf.x = x0.copy()
    kf.P = P0.copy()
    xs = np.zeros((n, 4))
    Ps = np.zeros((n, 4, 4))
    Fs = np.zeros((n, 4, 4))
    Qs = np.zeros((n, 4, 4))
    nis_g = np.full(n, np.nan)
    at = {int(g): i for i, g in enumerate(meas_idx)}
    for k in range(n):
        if k > 0:
            F, Q = cv_transition(t_grid[k] - t_grid[k - 1], accel_sigma)
            kf.F, kf.Q = F, Q
            kf.predict()
            Fs[k], Qs[k] = F, Q
        else:
            Fs[k], Qs[k] = np.eye(4), np.zeros((4, 4))
        i = at.get(k)
        if i is not None:
            Rm = np.diag(sig[i] ** 2)
            if k > 0:
                nis_g[k] = nis(z[i], kf.x, kf.P, Rm)
            kf.update(z[i], R=Rm)
        xs[k] = kf.x
        Ps[k] = kf.P
    return xs, Ps, Fs, Qs, nis_g


def smooth_segment(t_grid: np.ndarray, meas_idx: np.ndarray, z: np.ndarray, sig: np.ndarray,
                   accel_sigma: float, speed_sigma: float) -> SegmentFit:
    """Forward filter then RTS smoother over one motion segment (no contact inside)."""
    kf = KalmanFilter(dim_x=4, dim_z=2)
    xs, Ps, Fs, Qs, nis_g = forward_filter(t_grid, meas_idx, z, sig, accel_sigma, speed_sigma)
    if len(t_grid) >= 2:
        # filterpy's rts_smoother uses Fs[k+1], Qs[k+1] to map step k -> k+1,
        # which is how forward_filter stores them (Fs[k]: k-1 -> k).
        xs, Ps, _, _ = kf.rts_smoother(xs, Ps, Fs, Qs)
    measured = np.zeros(len(t_grid), bool)
    measured[meas_idx] = True
    return SegmentFit(t=t_grid, x=xs, P=Ps, measured=measured, nis=nis_g)


def split_segments(t: np.ndarray, z: np.ndarray, sig: np.ndarray, accel_sigma: float, speed_sigma: float,
                   split_nis: float, forced: set[int] | None = None) -> tuple[list[tuple[int, int]], np.ndarray]:
    """Cut measurements (time-sorted) into contact-free segments at NIS spikes.

    A measurement whose NIS exceeds ``split_nis`` starts a new segment when the
    next measurement also disagrees with the old motion (a velocity jump);
    if the next one agrees, the spike is a single bad detection and is
    flagged as an outlier instead. ``forced``: indices that must start a
    segment (jumps seen by the linker). Returns ([(i0, i1_exclusive), ...],
    outlier mask).
    """
    n = len(t)
    out = np.zeros(n, bool)
    forced = forced or set()
    segs: list[tuple[int, int]] = []
    start = 0
    kf = None
    i = 0
    while i < n:
        if i == start or kf is None:
            kf = KalmanFilter(dim_x=4, dim_z=2)
            kf.H = H.copy()
            x0, P0 = _initial_state(t[i:i + 1], z[i:i + 1], sig[i:i + 1], speed_sigma)
            kf.x, kf.P = x0, P0
            t_last = t[i]
            i += 1
            continue
        x_prev, P_prev = kf.x.copy(), kf.P.copy()
        F, Q = cv_transition(t[i] - t_last, accel_sigma)
        kf.F, kf.Q = F, Q
        kf.predict()
        Rm = np.diag(sig[i] ** 2)
        v = nis(z[i], kf.x, kf.P, Rm)
        # Only judge once the segment has >= 3 points (velocity known).
        spike = (i - start) >= 2 and v > split_nis
        if i in forced or spike:
            if i in forced or i + 1 >= n:
                jump = True
            else:
                F2, Q2 = cv_transition(t[i + 1] - t_last, accel_sigma)
                x2 = F2 @ x_prev
                P2 = F2 @ P_prev @ F2.T + Q2
                # an outlier only if the next point clearly agrees with the old
                # motion (NIS below the chi-square(2) 99% point, 9.21)
                jump = nis(z[i + 1], x2, P2, np.diag(sig[i + 1] ** 2)) > CONSISTENT_NIS
            if jump:
                segs.append((start, i))
                start = i
                kf = None
                continue
            out[i] = True  # single outlier: skip it, keep the motion
            kf.x, kf.P = x_prev, P_prev
            i += 1
            continue
        kf.update(z[i], R=Rm)
        t_last = t[i]
        i += 1
    segs.append((start, n))
    segs = [s for s in segs if s[1] > s[0]]
    return _refine_boundaries(t, z, sig, segs, out), out


def _line_predict(t: np.ndarray, z: np.ndarray, t_at: float) -> np.ndarray:
    """Straight-line (constant velocity) least-squares prediction of z at t_at."""
    if len(t) == 1:
        return z[0]
    A = np.column_stack([np.ones(len(t)), t - t_at])
    coef, *_ = np.linalg.lstsq(A, z, rcond=None)
    return coef[0]


def _refine_boundaries(t, z, sig, segs, out, m: int = 5, max_moves: int = 2):
    """Move each cut earlier while the last point of the earlier piece fits the later one better.

    The NIS only rises once the new motion has carried the ball measurably
    off the old line, which can be a frame or two after the contact; a point
    that a straight line through the next piece predicts better than a line
    through the previous piece belongs to the next piece.
    """
    segs = [list(s) for s in segs]
    for k in range(1, len(segs)):
        for _ in range(max_moves):
            a0, b = segs[k - 1][0], segs[k][0]
            b1 = segs[k][1]
            if b - a0 < 4 or b1 - b < 2:
                break
            j = b - 1
            ia = [i for i in range(max(a0, j - m), j) if not out[i]]
            ib = [i for i in range(b, min(b1, b + m)) if not out[i]]
            if len(ia) < 2 or len(ib) < 2:
                break
            ea = np.linalg.norm(z[j] - _line_predict(t[ia], z[ia], t[j]))
            eb = np.linalg.norm(z[j] - _line_predict(t[ib], z[ib], t[j]))
            if eb < ea:
                segs[k - 1][1] = j
                segs[k][0] = j
            else:
                break
    return [tuple(s) for s in segs if s[1] > s[0]]
