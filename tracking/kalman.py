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

Measurement noise: each measurement carries a sigma pair (N,2) mm (an
axis-aligned covariance) or a full covariance (N,2,2) mm^2. A ball moving
during the exposure smears over L = speed x exposure mm; :func:`smear_cov`
gives the extra covariance along the motion (a uniform smear of length L has
variance L^2/12, the variance of the uniform distribution on an interval of
length L), which the pipeline and the linker add to the detector's sigma.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from filterpy.kalman import KalmanFilter

H = np.array([[1.0, 0, 0, 0], [0, 1.0, 0, 0]])
#: chi-square(2) 99% point (standard table value): a measurement this close to
#: the old motion's prediction counts as agreeing with it.
CONSISTENT_NIS = 9.21


def as_cov(sig: np.ndarray) -> np.ndarray:
    """Measurement covariances (N,2,2) mm^2 from sigmas (N,2) mm or covariances (N,2,2) (returned as is).

    >>> as_cov(np.array([[1.0, 2.0]]))[0].tolist()
    [[1.0, 0.0], [0.0, 4.0]]
    """
    sig = np.asarray(sig, float)
    if sig.ndim == 3:
        return sig
    C = np.zeros((len(sig), 2, 2))
    C[:, 0, 0] = sig[:, 0] ** 2
    C[:, 1, 1] = sig[:, 1] ** 2
    return C


def smear_cov(v_mm_s: np.ndarray, exposure_s: float, var_per_len2: float = 1.0 / 12.0) -> np.ndarray:
    """Extra centre covariance (N,2,2) mm^2 of balls moving at v (N,2) mm/s during an exposure (s).

    The ball's image is swept over L = |v| exposure mm; a centre found
    anywhere along the sweep with equal chance has variance L^2/12 along the
    motion (uniform distribution on an interval of length L) and none across.

    >>> round(float(smear_cov(np.array([[300.0, 0.0]]), 0.1)[0, 0, 0]), 6)  # L = 30 mm: 30^2 / 12
    75.0
    """
    v = np.nan_to_num(np.asarray(v_mm_s, float).reshape(-1, 2))
    return var_per_len2 * exposure_s ** 2 * v[:, :, None] * v[:, None, :]


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
    C = as_cov(sig)
    x0 = np.zeros(4)
    x0[:2] = z[0]
    P0 = np.diag([1.0, 1.0, speed_sigma ** 2, speed_sigma ** 2])
    P0[:2, :2] = C[0]
    if n >= 2 and t[n - 1] > t[0]:
        A = np.column_stack([np.ones(n), t[:n] - t[0]])
        coef, *_ = np.linalg.lstsq(A, z[:n], rcond=None)
        x0[:2] = coef[0]
        x0[2:] = coef[1]
        # velocity from n points: sigma sqrt(12 / (n (n^2-1))) / dt (regression result)
        dt = (t[n - 1] - t[0]) / (n - 1)
        sv = np.sqrt(np.max(C[:n, [0, 1], [0, 1]])) * np.sqrt(12.0 / (n * (n * n - 1))) / dt
        P0[2, 2] = P0[3, 3] = (3 * sv) ** 2 + (0.1 * speed_sigma) ** 2
    return x0, P0


def forward_filter(t_grid: np.ndarray, meas_idx: np.ndarray, z: np.ndarray, sig: np.ndarray,
                   accel_sigma: float, speed_sigma: float):
    """Kalman filter on a frame grid; ``meas_idx[i]`` is the grid index of measurement i.

    Returns (xs, Ps, Fs, Qs, nis_grid) for filterpy's rts_smoother.
    """
    n = len(t_grid)
    Rs = as_cov(sig)
    kf = KalmanFilter(dim_x=4, dim_z=2)
    kf.H = H.copy()
    x0, P0 = _initial_state(t_grid[meas_idx], z, Rs, speed_sigma)
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
            Rm = Rs[i]
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
    Rs = as_cov(sig)
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
            x0, P0 = _initial_state(t[i:i + 1], z[i:i + 1], Rs[i:i + 1], speed_sigma)
            kf.x, kf.P = x0, P0
            t_last = t[i]
            i += 1
            continue
        x_prev, P_prev = kf.x.copy(), kf.P.copy()
        F, Q = cv_transition(t[i] - t_last, accel_sigma)
        kf.F, kf.Q = F, Q
        kf.predict()
        Rm = Rs[i]
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
                jump = nis(z[i + 1], x2, P2, Rs[i + 1]) > CONSISTENT_NIS
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
    segs = _refine_boundaries(t, z, sig, segs, out)
    _reclaim_outliers(t, z, Rs, segs, out, accel_sigma)
    return segs, out


def _reclaim_outliers(t, z, Rs, segs, out, accel_sigma: float) -> None:
    """An 'outlier' just before a cut that the next piece's motion explains is that piece's first point.

    The outlier test compares the point after a spike with the old motion
    predicted two frames ahead, whose process noise has grown (white
    acceleration: position variance ~ dt^3); right after a contact that can
    pass while the spike itself was already the new motion. Explains: the
    straight line through the next piece's first two points, extrapolated
    back (2 z1 - z2 at equal steps: variance 4 R1 + R2), is closer than the
    line through the previous piece's last two points and within the
    chi-square(2) 99% point with that variance, the point's own R and one
    step of process noise. Only two points each side: the next piece may end
    at another contact a few frames on. Edits segs/out in place.
    """
    for k in range(1, len(segs)):
        b, b1 = segs[k]
        j = b - 1
        if j < segs[k - 1][0] or not out[j] or b1 - b < 2:
            continue
        ib = [i for i in range(b, b1) if not out[i]][:2]
        ia = [i for i in range(segs[k - 1][0], j) if not out[i]][-2:]
        if len(ib) < 2 or len(ia) < 2:
            continue
        v = z[j] - _line_predict(t[ib], z[ib], t[j])
        va = z[j] - _line_predict(t[ia], z[ia], t[j])
        r = (t[ib[0]] - t[j]) / max(t[ib[1]] - t[ib[0]], 1e-9)
        _, Q = cv_transition(t[ib[0]] - t[j], accel_sigma)
        S = Rs[j] + (1 + r) ** 2 * Rs[ib[0]] + r ** 2 * Rs[ib[1]] + Q[:2, :2]
        if np.linalg.norm(v) < np.linalg.norm(va) and float(v @ np.linalg.solve(S, v)) <= CONSISTENT_NIS:
            out[j] = False
            segs[k - 1] = (segs[k - 1][0], j)
            segs[k] = (j, b1)
    segs[:] = [s for s in segs if s[1] > s[0]]


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


def smear_scale(pieces: list[tuple], c_max_s2: float,
                outlier_chi2: float = 10.83, max_drop: float = 0.1) -> float:
    """Clip-wide smear scale c (s^2): along-motion centre variance c |v|^2 beyond the detector's sigma.

    pieces: per ball (t (N,) s, z (N,2) mm, R (N,2,2) mm^2 detector
    covariances[, f (N,) 0/1: whether the smear term applies to that
    detection; default all 1]), time-sorted. A streak-fitted centre
    (tracking/streak.py) is the mid-exposure centre itself, its smear error
    already in its own sigma: f = 0 there. For three detections a frame apart at nearly
    constant velocity the second difference d = z[i+1] - 2 z[i] + z[i-1] has
    covariance R[i-1] + 4 R[i] + R[i+1] (independent errors); its part along
    the motion u then has variance u'(R[i-1] + 4 R[i] + R[i+1])u
    + c |v|^2 (f[i-1] + 4 f[i] + f[i+1]).
    c is the moment estimate sum(d_u^2 - base) / sum(6 |v|^2) over all
    triples (covariance matching: Mehra, IEEE Trans. Autom. Control 17:693,
    1972), clipped to [0, c_max_s2]. A triple whose d_u^2 exceeds
    ``outlier_chi2`` (chi-square 1 dof, p = 0.999) times its largest possible
    variance (c = c_max_s2) cannot be blur - a contact or a wrong detection -
    and is left out. The friction deceleration (<~2 m/s^2) adds (a dt^2)^2,
    negligible against the smear at the speeds that matter.

    >>> rng = np.random.default_rng(0)
    >>> t = np.arange(400) / 30.0
    >>> z = np.column_stack([2000.0 * t, 0 * t]) + rng.normal(0, 1, (400, 2)) * [[np.sqrt(1 + 2e-5 * 2000.0 ** 2), 1]]
    >>> R = np.tile(np.eye(2), (400, 1, 1))
    >>> round(smear_scale([(t, z, R)], 1e-3) / 2e-5, 1)  # true c = 2e-5 s^2
    1.0
    """
    rows = []
    for piece in pieces:
        t, z, R = piece[:3]
        n = len(t)
        f = np.ones(n) if len(piece) < 4 or piece[3] is None else np.asarray(piece[3], float)
        if n < 3:
            continue
        dt1, dt2 = t[1:-1] - t[:-2], t[2:] - t[1:-1]
        even = (dt1 > 0) & (np.abs(dt2 - dt1) <= 0.05 * dt1)
        v = (z[2:] - z[:-2]) / np.where(even, dt1 + dt2, 1.0)[:, None]
        sp = np.hypot(v[:, 0], v[:, 1])
        ok = even & (sp > 0)
        if not ok.any():
            continue
        u = v[ok] / sp[ok, None]
        d = (z[2:] - 2 * z[1:-1] + z[:-2])[ok]
        B = (R[:-2] + 4 * R[1:-1] + R[2:])[ok]
        rows.append(np.column_stack([np.einsum("ni,ni->n", d, u) ** 2, np.einsum("ni,nij,nj->n", u, B, u),
                                     (f[:-2] + 4 * f[1:-1] + f[2:])[ok] * sp[ok] ** 2]))
    if not rows:
        return 0.0
    du2, base, w = np.vstack(rows).T
    if w.sum() <= 0:
        return 0.0
    # at most max_drop of the triples (those least like blur at the bound)
    # may be left out: contacts are a few per ball, and trimming a
    # heavy-tailed blur error by its own shrinking estimate would run to 0
    r = du2 / (base + c_max_s2 * w)
    always = r <= np.quantile(r, 1.0 - max_drop)
    c = c_max_s2
    for _ in range(20):
        keep = always | (du2 <= outlier_chi2 * (base + c * w))
        if not keep.any() or w[keep].sum() <= 0:
            return 0.0
        c_new = float(np.clip(np.sum(du2[keep] - base[keep]) / np.sum(w[keep]), 0.0, c_max_s2))
        if abs(c_new - c) <= 1e-3 * c_max_s2:
            return c_new
        c = c_new
    return c


def bridge_gap(xa: np.ndarray, va: np.ndarray, ta: float, xb: np.ndarray, vb: np.ndarray, tb: float,
               t: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Positions (N,2) mm and velocities (N,2) mm/s at times t (s) in a gap between two motion pieces.

    Piece A ends at time ta at xa moving at va; piece B starts at tb at xb
    moving at vb (a contact in between changed the velocity, and its frames
    gave no usable fix). Each piece is a straight line in time; the contact
    is where the two lines come closest, at
    tc = argmin |xa + va (tc - ta) - xb - vb (tc - tb)| (least squares in
    one variable, closed form), clipped to [ta, tb]. Before tc the ball
    follows A's line, after it B's. Also returns the lines' miss distance at
    tc (mm): 0 for a clean contact, more when the pieces' ends are off.

    >>> p, v, miss = bridge_gap(np.zeros(2), np.zeros(2), 0.0, np.array([30.0, 0]), np.array([1000.0, 0]), 0.05,
    ...                         np.array([0.02, 0.04]))
    >>> p[:, 0].round(3).tolist(), miss  # at rest until tc = 0.02 s, then 1 m/s
    ([0.0, 20.0], 0.0)
    """
    xa, va, xb, vb = (np.asarray(a, float) for a in (xa, va, xb, vb))
    c0 = xa - va * ta - xb + vb * tb      # A(tc) - B(tc) = c0 + (va - vb) tc
    dv = va - vb
    den = float(dv @ dv)
    tc = float(np.clip(-(c0 @ dv) / den, ta, tb)) if den > 1e-12 else 0.5 * (ta + tb)
    miss = float(np.linalg.norm(c0 + dv * tc))
    t = np.asarray(t, float)
    before = (t <= tc)[:, None]
    pos = np.where(before, xa + va * (t - ta)[:, None], xb + vb * (t - tb)[:, None])
    vel = np.where(before, va, vb)
    return pos, np.broadcast_to(vel, pos.shape).copy(), miss


def scatter_scale(frames: np.ndarray, z: np.ndarray, C: np.ndarray, stretches: list[tuple[int, int]],
                  min_quads: int = 5) -> float:
    """Factor k^2 >= 1 by which one ball's moving detections scatter more than their covariances say.

    frames: (N,) frame numbers; z: (N,2) mm; C: (N,2,2) mm^2; stretches:
    detection index ranges [a, b) where the ball moves. Over four fixes in
    consecutive frames the third difference d = z3 - 3 z2 + 3 z1 - z0 is
    blind to any motion of constant acceleration (a sliding ball's friction
    mu_s g along a fixed slip direction, a rolling ball's mu_r g: a parabola
    in time), so with independent errors it has covariance
    B = C0 + 9 C1 + 9 C2 + C3 and d' B^-1 d ~ chi-square(2), median 2 ln 2.
    k^2 is the median of d' B^-1 d over all such quadruples / (2 ln 2)
    (a median: a contact or the slide-to-roll change inside a quadruple is
    a rare outlier), at least 1, and 1 with fewer than ``min_quads`` quadruples.
    A ball whose fits wander with its turning markings or its shadow (a dark
    or cloth-coloured ball) shows k^2 of 2-7 where the detector claims its
    usual sigma.

    >>> rng = np.random.default_rng(1)
    >>> f = np.arange(400); z = np.column_stack([3.0 * f, 0.01 * f ** 2]) + rng.normal(0, 2.0, (400, 2))
    >>> round(scatter_scale(f, z, np.tile(np.eye(2), (400, 1, 1)), [(0, 400)]), 1)  # true 2^2 = 4
    4.0
    """
    f = np.asarray(frames, int)
    q = []
    for a, b in stretches:
        for i in range(a, b - 3):
            if f[i + 3] - f[i] != 3:
                continue
            d3 = z[i + 3] - 3 * z[i + 2] + 3 * z[i + 1] - z[i]
            B3 = C[i] + 9 * C[i + 1] + 9 * C[i + 2] + C[i + 3]
            q.append(float(d3 @ np.linalg.solve(B3, d3)))
    if len(q) < min_quads:
        return 1.0
    return max(1.0, float(np.median(q) / (2.0 * np.log(2.0))))
