"""Events from raw ball samples: strikes, ball-ball and ball-cushion contacts, rest, leaving.

Table frame, mm, s. A contact is accepted only with both kinds of evidence:

* geometric: the sampled gap (centre distance - 2R, or distance to a cushion-nose line - R)
  has a local minimum below a margin that allows for noise and for one frame of travel, or (two
  balls) a run of frames below that margin begins with an arrival;
  a cushion candidate is then moved to the change point of its touching run
  (:func:`run_change_point`: where the velocity along the normal changes, from all samples either
  side), since at high frame rates the run spans many frames and the gap's noise minima lie
  anywhere in it;
* kinematic: a change-point fit around the candidate (position continuous at a break time
  scanned across the candidate frame, separate velocity and acceleration on each side,
  weighted linear least squares) shows a velocity jump along the contact normal that is larger
  than ``dv_min_mm_s`` and ``dv_z`` standard errors, with the sign a contact requires (pushes
  the balls apart; reverses the approach to a cushion). For two balls the changes must also
  come from one impulse: alike on both balls (``pair_impulse_ratio_min``) and with no rise of
  their kinetic energy (``ke_gain_tol``). A change-point window ends at contacts already
  accepted and at the ball's own larger change elsewhere (:func:`kink_fit_own`): one velocity
  jump is evidence for one contact only.

Nose lines: ``x0`` is x = 0, ``xL`` is x = L, ``y0`` is y = 0, ``yW`` is y = W (table frame);
the in-plane cushion normal points into the table.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from feltlab.errors import FeltlabError
from feltlab.standards import MU_BALL_BALL_RANGE
from physics.settings import PhysicsSettings

CUSHION_NORMALS = {
    "x0": np.array([1.0, 0.0]),
    "xL": np.array([-1.0, 0.0]),
    "y0": np.array([0.0, 1.0]),
    "yW": np.array([0.0, -1.0]),
}


def cushion_distance(xy: np.ndarray, cushion: str, length_mm: float, width_mm: float) -> np.ndarray:
    """Distance (mm) of points (T,2) from a cushion-nose line, positive on the table side."""
    if cushion == "x0":
        return xy[:, 0]
    if cushion == "xL":
        return length_mm - xy[:, 0]
    if cushion == "y0":
        return xy[:, 1]
    return width_mm - xy[:, 1]


@dataclass
class BallSamples:
    """One ball's raw samples: times (T,) s, centres (T,2) mm, sigmas (T,2) mm, sorted by time."""

    ball: str
    t: np.ndarray
    xy: np.ndarray
    sig: np.ndarray


def ball_samples(
    tracks: pd.DataFrame, detections: pd.DataFrame | None, s: PhysicsSettings
) -> dict[str, BallSamples]:
    """Per-ball samples: raw detections where a ball has them, else its visible track rows."""
    need = {"t_s", "ball", "x_mm", "y_mm"}
    if tracks is None or not need <= set(tracks.columns):
        raise FeltlabError(
            f"tracks table needs columns {sorted(need)}; pass the tracks from the tracking stage"
        )
    out: dict[str, BallSamples] = {}
    for ball, tr in tracks.groupby("ball", sort=True):
        src = None
        if detections is not None and len(detections) and need <= set(detections.columns):
            d = detections[detections["ball"] == ball]
            if len(d) >= 3:
                src = d
        if src is None:
            src = tr
            if "visible" in src.columns and (src["visible"] > 0).sum() >= 3:
                src = src[src["visible"] > 0]
        src = src.dropna(subset=["t_s", "x_mm", "y_mm"]).sort_values("t_s")
        src = src.drop_duplicates(subset=["t_s"])
        if len(src) < 3:
            continue
        sig = np.full((len(src), 2), s.default_sigma_mm)
        for i, c in enumerate(("sx_mm", "sy_mm")):
            if c in src.columns:
                v = src[c].to_numpy(float)
                sig[:, i] = np.where(np.isfinite(v) & (v > 0), v, s.default_sigma_mm)
        sig = np.maximum(sig, s.min_sigma_mm)
        out[str(ball)] = BallSamples(
            str(ball), src["t_s"].to_numpy(float), src[["x_mm", "y_mm"]].to_numpy(float), sig
        )
    return out


def local_speed(b: BallSamples, dt: float, s: PhysicsSettings) -> tuple[np.ndarray, np.ndarray]:
    """Speed (T,) mm/s from a centred moving linear fit and its standard error (T,) mm/s."""
    n = len(b.t)
    w = max(2, int(round(s.speed_window_s / dt / 2)))
    sp = np.zeros(n)
    se = np.zeros(n)
    for i in range(n):
        lo, hi = max(0, i - w), min(n, i + w + 1)
        tt = b.t[lo:hi] - b.t[i]
        if hi - lo < 3:
            sp[i], se[i] = 0.0, np.inf
            continue
        tm = tt.mean()
        sxx = np.sum((tt - tm) ** 2)
        v = (tt - tm) @ (b.xy[lo:hi] - b.xy[lo:hi].mean(axis=0)) / sxx
        sp[i] = float(np.hypot(*v))
        se[i] = float(np.mean(b.sig[lo:hi]) / np.sqrt(sxx))
    return sp, se


@dataclass
class Onset:
    """Motion at the start of the samples: ``rest_first`` and the estimated onset time (s)."""

    rest_first: bool
    t_onset: float | None
    rest_xy: np.ndarray | None = None


def motion_onset(b: BallSamples, dt: float, s: PhysicsSettings) -> Onset:
    """Is the ball at rest at its first samples, and when does it start moving (s)."""
    sp, se = local_speed(b, dt, s)
    moving = sp > np.maximum(s.rest_speed_mm_s, s.rest_speed_z * se)
    k = max(3, int(round(s.speed_window_s / dt)))
    if not moving[: max(3, int(0.5 * s.speed_window_s / dt) + 1)].any():
        sig_med = float(np.median(b.sig))
        idx = None
        for i in range(len(moving) - k + 1):
            if moving[i : i + k].all():
                # sustained motion: the ball ends the run well away from where it started
                if np.hypot(*(b.xy[i + k - 1] - b.xy[max(i - k, 0)])) > s.onset_sigmas * sig_med:
                    idx = i
                    break
        rest_xy = np.median(b.xy[: max(3, (idx or len(b.t)) // 2 + 1)], axis=0)
        if idx is None:
            return Onset(True, None, rest_xy)
        # onset: where a line through the first moving samples leaves the rest position
        dist = np.hypot(*(b.xy - rest_xy).T)
        thr = 4.0 * sig_med
        j0 = max(idx - k, 0)
        # the first sample from which the ball stays away from its rest position through the
        # moving run: a lone noisy sample beyond the threshold earlier is not the start (a
        # Rayleigh 4-sigma excursion has probability exp(-8) per sample, and detectors whose
        # scatter exceeds their stated sigma a little make it far likelier over ~100 rest samples)
        end = min(len(b.t), idx + k)
        near = np.flatnonzero(dist[j0:end] <= thr)
        first = j0 + (int(near[-1]) + 1 if len(near) else 0)
        if first >= end:
            first = idx
        j = slice(first, min(len(b.t), first + 6))
        if j.stop - j.start >= 2:
            tt = b.t[j]
            p = np.polyfit(tt, dist[j], 1)
            t_on = -p[1] / p[0] if p[0] > 1e-9 else b.t[first]
            t_on = float(np.clip(t_on, b.t[max(first - 2, 0)], b.t[first]))
        else:
            t_on = float(b.t[first])
        return Onset(True, t_on, rest_xy)
    return Onset(False, None, None)


@dataclass
class KinkFit:
    """Change-point fit of one ball around a candidate: break time (s), velocities before and
    after (2,) mm/s at the break, covariance of the jump (2,2), reduced chi^2."""

    t_b: float
    v_pre: np.ndarray
    v_post: np.ndarray
    dv_cov: np.ndarray
    chi2_red: float
    ok: bool = True
    #: fitted position (2,) mm at the break (both sides meet there)
    p_b: np.ndarray | None = None
    #: weighted sum of squared residuals, and the window (s) the fit used
    chi2: float = float("nan")
    lo: float = float("nan")
    hi: float = float("nan")


def kink_fit(
    b: BallSamples, t_c: float, lo: float, hi: float, guard: float, dt: float, s: PhysicsSettings,
    scan: np.ndarray | None = None,
) -> KinkFit | None:
    """Fit position-continuous two-sided quadratics to samples in (lo, hi), break scanned over
    [t_c - dt, t_c + dt] (or the times ``scan``); samples within ``guard`` of ``t_c`` are left out."""
    m = (b.t > lo) & (b.t < hi) & (np.abs(b.t - t_c) > guard)
    t, xy, sig = b.t[m], b.xy[m], b.sig[m]
    best = None
    span = max(dt, s.contact_time_floor_s)
    for tb in np.linspace(t_c - span, t_c + span, 2 * int(np.ceil(8 * span / dt)) + 1) if scan is None else scan:
        pre = t < tb
        npre, npost = int(pre.sum()), int((~pre).sum())
        if npre < 2 or npost < 2:
            continue
        tau = t - tb
        cols = [np.ones_like(tau), np.where(pre, tau, 0.0), np.where(pre, 0.0, tau)]
        if npre >= s.min_side_points + 1:
            cols.append(np.where(pre, 0.5 * tau**2, 0.0))
        if npost >= s.min_side_points + 1:
            cols.append(np.where(pre, 0.0, 0.5 * tau**2))
        A = np.column_stack(cols)
        if len(t) <= A.shape[1]:
            continue
        chi2 = 0.0
        vpre = np.zeros(2)
        vpost = np.zeros(2)
        pb = np.zeros(2)
        cov = np.zeros((2, 2))
        for i in range(2):
            w = 1.0 / sig[:, i]
            Aw = A * w[:, None]
            yw = xy[:, i] * w
            coef, *_ = np.linalg.lstsq(Aw, yw, rcond=None)
            r = yw - Aw @ coef
            chi2 += float(r @ r)
            C = np.linalg.pinv(Aw.T @ Aw)
            vpre[i], vpost[i], pb[i] = coef[1], coef[2], coef[0]
            cov[i, i] = C[1, 1] + C[2, 2] - 2 * C[1, 2]
        dof = max(2 * len(t) - 2 * A.shape[1], 1)
        if best is None or chi2 < best[0]:
            best = (chi2, tb, vpre, vpost, cov, dof, pb)
    if best is None:
        return None
    chi2, tb, vpre, vpost, cov, dof, pb = best
    red = max(chi2 / dof, 1.0)
    return KinkFit(float(tb), vpre, vpost, cov * red, red, p_b=pb, chi2=chi2, lo=lo, hi=hi)


def kink_fit_double(
    b: BallSamples, t1c: float, t2c: float, lo: float, hi: float, guard: float, dt: float,
    s: PhysicsSettings,
) -> tuple[KinkFit, KinkFit] | None:
    """Two changes a few frames apart (a ball meeting both cushions at a corner): one
    position-continuous model with a quadratic before ``t1``, a straight line between ``t1`` and
    ``t2`` and a quadratic after ``t2``, fitted to samples in (lo, hi) by weighted linear least
    squares; ``t1``, ``t2`` scanned over one frame period around ``t1c`` < ``t2c``; samples
    within ``guard`` of either candidate left out. Between the changes the velocity is constant
    (over ~10 ms cloth friction changes it by ~ mu_s g x 10 ms ~ 20 mm/s and the path by ~0.1 mm,
    below the noise). Even with no sample between them the middle velocity is fixed by position
    continuity at both changes. Returns the two changes as (KinkFit at t1: before -> middle,
    KinkFit at t2: middle -> after), or None when the samples do not support the model."""
    m = (b.t > lo) & (b.t < hi) & (np.abs(b.t - t1c) > guard) & (np.abs(b.t - t2c) > guard)
    t, xy, sig = b.t[m], b.xy[m], b.sig[m]
    best = None
    grid1 = np.linspace(t1c - dt, t1c + dt, 9)
    grid2 = np.linspace(t2c - dt, t2c + dt, 9)
    for t1 in grid1:
        for t2 in grid2:
            if t2 <= t1 + 0.25 * dt:
                continue
            pre, post = t < t1, t >= t2
            npre, npost = int(pre.sum()), int(post.sum())
            if npre < s.min_side_points + 1 or npost < s.min_side_points + 1:
                continue
            tau1, tau2 = t - t1, t - t2
            A = np.column_stack([
                np.ones_like(t),
                np.where(pre, tau1, 0.0), np.where(pre, 0.5 * tau1**2, 0.0),
                np.where(pre, 0.0, np.minimum(t, t2) - t1),
                np.where(post, tau2, 0.0), np.where(post, 0.5 * tau2**2, 0.0),
            ])
            if len(t) <= A.shape[1] + 1:
                continue
            chi2 = 0.0
            coefs, covs = [], []
            for i in range(2):
                w = 1.0 / sig[:, i]
                Aw = A * w[:, None]
                c, *_ = np.linalg.lstsq(Aw, xy[:, i] * w, rcond=None)
                r = xy[:, i] * w - Aw @ c
                chi2 += float(r @ r)
                coefs.append(c)
                covs.append(np.linalg.pinv(Aw.T @ Aw))
            if best is None or chi2 < best[0]:
                best = (chi2, t1, t2, coefs, covs, max(2 * len(t) - 2 * A.shape[1], 1))
    if best is None:
        return None
    chi2, t1, t2, coefs, covs, dof = best
    red = max(chi2 / dof, 1.0)
    out = []
    for (iv0, iv1), tb in (((1, 3), t1), ((3, 4), t2)):
        v0 = np.array([coefs[0][iv0], coefs[1][iv0]])
        v1 = np.array([coefs[0][iv1], coefs[1][iv1]])
        cov = np.diag([C[iv0, iv0] + C[iv1, iv1] - 2 * C[iv0, iv1] for C in covs]) * red
        out.append(KinkFit(float(tb), v0, v1, cov, red, chi2=chi2, lo=lo, hi=hi))
    return out[0], out[1]


def kink_fit_windows(b: BallSamples, t_c: float, lo_lim: float, hi_lim: float, guard: float, dt: float,
                     s: PhysicsSettings, n: np.ndarray | None = None, escalate: bool = True,
                     edge_ok: bool = True) -> KinkFit | None:
    """:func:`kink_fit` over the standard window (``side_window_s``, at least ``side_window_frames``
    periods, limited to (lo_lim, hi_lim)); while the jump along ``n`` (or its 2-D size if n is
    None) is below ``dv_z`` standard errors and ``escalate`` is set, longer windows
    (``s.kink_window_scales``) are tried and the most significant fit is returned (a longer window only while
    the model fits it, ``s.kink_escalate_max_chi2``). Without ``edge_ok`` a fit whose break sits at the edge
    of the scanned frame is no evidence (the change it sees may have happened at another time)."""
    w0 = max(s.side_window_s, s.side_window_frames * dt)
    best, best_z, prev = None, -1.0, None
    for scale in s.kink_window_scales if escalate else s.kink_window_scales[:1]:
        lo = max(lo_lim + guard, t_c - scale * w0)
        hi = min(hi_lim - guard, t_c + scale * w0)
        if prev is not None and (lo, hi) == prev:
            break
        prev = (lo, hi)
        f = kink_fit(b, t_c, lo, hi, guard, dt, s)
        if f is None:
            continue
        edge = abs(f.t_b - t_c) > 0.95 * dt
        if (scale > 1.0 and f.chi2_red > s.kink_escalate_max_chi2) or (edge and not edge_ok):
            continue  # a window that holds another change, or a break at the scan's edge
        dv = f.v_post - f.v_pre
        if n is not None:
            z = abs(dv @ n) / max(float(np.sqrt(n @ f.dv_cov @ n)), 1e-9)
        else:
            z = float(np.sqrt(dv @ np.linalg.solve(f.dv_cov + 1e-9 * np.eye(2), dv)))
        if z > best_z:
            best, best_z = f, z
        if best_z > s.dv_z:
            break
    return best


def energy_gain_z(v_pre: np.ndarray, dv: np.ndarray, dv_cov: np.ndarray, s: PhysicsSettings) -> float:
    """Rise of the balls' translational kinetic energy across a change, in standard errors.

    v_pre (N,2) mm/s fitted velocities just before, dv (N,2) their jumps, dv_cov (N,2,2); equal
    masses. (sum |v_pre + dv|^2 - (1 + ke_gain_tol) sum |v_pre|^2) / sigma: a contact cannot add
    energy, so a value above ``dv_z`` says the balls were not pushed by each other.

    >>> import numpy as np
    >>> s = PhysicsSettings()
    >>> cov = np.tile(np.eye(2) * 25.0, (2, 1, 1))
    >>> head_on = energy_gain_z(np.array([[1000.0, 0], [0, 0]]), np.array([[-950.0, 0], [950, 0]]), cov, s)
    >>> bool(head_on < 0)
    True
    >>> resting = energy_gain_z(np.zeros((2, 2)), np.array([[-300.0, 0], [300, 0]]), cov, s)
    >>> bool(resting > s.dv_z)
    True
    """
    v0 = np.asarray(v_pre, float)
    v1 = v0 + np.asarray(dv, float)
    gain = float((v1**2).sum() - (1.0 + s.ke_gain_tol) * (v0**2).sum())
    # the jump's error moves |v1|^2 by 2 v1 . d(dv); the before-velocities' error is smaller than
    # the jump's (one side of the fit), so counting it with the jump's covariance is conservative
    var = sum(4.0 * float(a @ C @ a) + 4.0 * float(b @ C @ b) for a, b, C in zip(v1, v0, dv_cov))
    return gain / max(float(np.sqrt(var)), 1e-9)


def kink_fit_own(b: BallSamples, t_c: float, lo_lim: float, hi_lim: float, guard: float, dt: float,
                 s: PhysicsSettings, n: np.ndarray | None = None, escalate: bool = True) -> KinkFit | None:
    """:func:`kink_fit_windows`, but a window that holds the ball's own larger change at another
    time is cut there first.

    A ball changes velocity only at its contacts; a change-point fit scanned near ``t_c`` over a
    window that reaches another change (a resting neighbour's window reaching the hit that
    starts it, a few frames later) finds a jump at the wrong time. The single break that fits
    the window best is looked for over the whole window; when it lies more than 2.5 frame
    periods from ``t_c`` and fits better by more than dv_z^2 in chi^2, the window ends there
    and the fit is repeated (the jump at ``t_c`` must stand on its own samples).
    """
    f = kink_fit_windows(b, t_c, lo_lim, hi_lim, guard, dt, s, n, escalate=escalate)
    if f is None or not np.isfinite(f.lo):
        return f
    inside = b.t[(b.t > f.lo) & (b.t < f.hi)]
    if len(inside) < 6:
        return f
    mids = 0.5 * (inside[1:] + inside[:-1])
    g = kink_fit(b, t_c, f.lo, f.hi, guard, dt, s, scan=mids[np.abs(mids - t_c) > 2.5 * dt])
    if g is None or f.chi2 - g.chi2 <= s.dv_z**2:
        return f
    if g.t_b > t_c:
        hi_lim = min(hi_lim, g.t_b)
    else:
        lo_lim = max(lo_lim, g.t_b)
    return kink_fit_windows(b, t_c, lo_lim, hi_lim, guard, dt, s, n, escalate=escalate)


@dataclass
class ContactCandidate:
    """A contact with geometric and kinematic evidence.

    kind 'ball-ball' or 'ball-cushion'; ball_a (striking ball), ball_b ('' for a cushion);
    cushion ('' for ball-ball); t_init_s: break time from the change-point fit (s); normal (2,)
    a->b or into the table; gap_mm: smallest sampled gap; z: jump significance (standard errors).
    """

    kind: str
    ball_a: str
    ball_b: str
    cushion: str
    t_init_s: float
    normal: np.ndarray
    gap_mm: float
    z: float
    dv_a: np.ndarray = field(default_factory=lambda: np.zeros(2))
    dv_b: np.ndarray = field(default_factory=lambda: np.zeros(2))
    #: compound event (physics.compound): group id (> 0) shared by its links, 0 for none
    group: int = 0
    simultaneous: bool = False


def pair_gaps(P, S, V, names, radius_mm: float, dt: float, s: PhysicsSettings) -> dict:
    """Per ball pair (a, b) on the common time grid: centre offset d (K,2) mm, gap g (K,) mm
    (centre distance - 2R), summed speeds vrel (K,) mm/s and the touching margin (K,) mm that
    allows for the position sigmas and ``gap_margin_frames`` frames of travel."""
    out = {}
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            d = P[b] - P[a]
            g = np.hypot(d[:, 0], d[:, 1]) - 2 * radius_mm
            vrel = np.nan_to_num(V[a], nan=0.0) + np.nan_to_num(V[b], nan=0.0)
            sg = np.hypot(np.nan_to_num(S[a], nan=1.0), np.nan_to_num(S[b], nan=1.0))
            margin = s.gap_margin_mm + s.gap_margin_sigma * sg + s.gap_margin_frames * vrel * dt
            out[(a, b)] = (d, g, vrel, margin)
    return out


def gap_step(g: np.ndarray) -> np.ndarray:
    """Per sample of a gap sequence (K,) mm: the larger change to its neighbouring samples (mm),
    0 where no neighbour exists (NaN samples count as missing).

    >>> import numpy as np
    >>> gap_step(np.array([30.0, 2.0, 26.0, np.nan])).tolist()
    [28.0, 28.0, 24.0, 0.0]
    """
    g = np.asarray(g, dtype=float)
    d = np.abs(np.diff(g))
    d = np.where(np.isfinite(d), d, 0.0)
    left = np.concatenate([[0.0], d])
    right = np.concatenate([d, [0.0]])
    return np.maximum(left, right)


def _local_minima(g: np.ndarray) -> np.ndarray:
    """Indices of interior local minima of a sequence with NaNs (NaN neighbours count as larger)."""
    gg = np.where(np.isfinite(g), g, np.inf)
    left = np.concatenate([[np.inf], gg[:-1]])
    right = np.concatenate([gg[1:], [np.inf]])
    idx = np.flatnonzero(np.isfinite(g) & (gg <= left) & (gg < right))
    return idx


def _run_start(below: np.ndarray, k: int) -> int:
    """First index of the run of True values of ``below`` that contains index k."""
    j = k
    while j > 0 and below[j - 1]:
        j -= 1
    return j


def _run_span(below: np.ndarray, k: int, cap: int) -> tuple[int, int]:
    """Frames (first, last) of the run of True values of ``below`` that holds index k, at most
    ``cap`` frames either side of k."""
    j0 = _run_start(below, k)
    j1 = k
    while j1 + 1 < len(below) and below[j1 + 1] and j1 + 1 - k <= cap:
        j1 += 1
    return max(j0, k - cap), j1


def run_change_point(samples: dict[str, BallSamples], balls: tuple[str, ...], n: np.ndarray, t_lo: float,
                     t_hi: float, lo: dict[str, float], hi: dict[str, float], dt: float,
                     s: PhysicsSettings) -> float | None:
    """Break time (s) in [t_lo, t_hi] that best fits the balls' positions along the contact
    normal ``n``: per ball, position-continuous quadratics either side of the break (one change of
    velocity and acceleration), weighted least squares on the samples within one standard window
    (``side_window_s``, at least ``side_window_frames`` periods) beyond the range and inside
    (lo[ball], hi[ball]); the chi^2 summed over the balls (one instant for both balls of a pair)
    is minimised over a grid of dt / 4. All samples are used (no guard): the two-line corner of a
    contact that lasts a few samples still lies where the velocity turns.

    A touching run (frames within the touching margin) can span many frames at high frame rates
    (15 ms at 700 mm/s and 1000 fps), and noise minima of the sampled gap lie anywhere in it; the
    velocity change is located by all samples on both sides. None if no break has 3 samples on
    each side for every ball."""
    w0 = max(s.side_window_s, s.side_window_frames * dt)
    data = []
    for ball in balls:
        b = samples[ball]
        m = (b.t > max(lo.get(ball, -np.inf), t_lo - w0)) & (b.t < min(hi.get(ball, np.inf), t_hi + w0))
        sn = np.sqrt((b.sig[m] ** 2) @ (n**2))
        data.append((b.t[m], (b.xy[m] @ n) / sn, 1.0 / sn))
    best, best_t = np.inf, None
    for tb in np.arange(t_lo, t_hi + 1e-9 * dt, dt / 4.0):
        chi2 = 0.0
        for t, yw, w in data:
            pre = t < tb
            if pre.sum() < 3 or (~pre).sum() < 3:
                chi2 = np.inf
                break
            tau = t - tb
            A = np.column_stack([np.ones_like(tau), np.where(pre, tau, 0.0), np.where(pre, 0.0, tau),
                                 np.where(pre, 0.5 * tau**2, 0.0), np.where(pre, 0.0, 0.5 * tau**2)]) * w[:, None]
            coef, *_ = np.linalg.lstsq(A, yw, rcond=None)
            r = yw - A @ coef
            chi2 += float(r @ r)
        if chi2 < best:
            best, best_t = chi2, float(tb)
    return best_t


def _relocate(geo: list[tuple], run: dict, extent: dict, raw_t: dict, samples: dict[str, BallSamples],
              times: np.ndarray, P: dict, dt: float, s: PhysicsSettings) -> tuple[list[tuple], dict, dict]:
    """Each cushion candidate moved to the frame nearest the change point of its touching run
    (:func:`run_change_point`, over the frames of :func:`_run_span` +- one period; windows end at
    the ball's candidates of other pairs / cushions); minima of one run that land on one frame are
    one candidate (the deepest gap kept). Returns the candidates, their runs and their change
    points (kind, a, b, cushion, k) -> s."""
    out: dict[tuple, tuple] = {}
    new_run: dict[tuple, int] = {}
    cps: dict[tuple, float] = {}
    for item in geo:
        kind, a, b, c, k, gap, n = item
        k0, k1 = extent[(kind, a, b, c, k)]
        t_lo, t_hi = float(times[k0]) - dt, float(times[k1]) + dt
        key = (kind, frozenset((a, b)), c)
        lo, hi = {}, {}
        balls = (a, b) if b else (a,)
        for ball in balls:
            others = [x for x, kx in raw_t[ball] if kx != key and not (t_lo - 2.5 * dt < x < t_hi + 2.5 * dt)]
            lo[ball] = max([x for x in others if x < t_lo], default=-np.inf)
            hi[ball] = min([x for x in others if x > t_hi], default=np.inf)
        k_new, tb = k, None
        # two balls keep the gap's minimum: a pair's run change point also sees each ball's other
        # changes along that line (a struck rack neighbour, a graze beside a hit: pymunk scene in
        # tests/test_events_rack_slow_push.py moved a graze onto the hit and reported it). Only
        # where the cushion guard spans a frame period or more (>= 250 fps) is the run many frames
        # wide with the change-point fit blind around the candidate; below, nothing changes
        if kind == "ball-cushion" and s.guard_cushion_s >= dt and k1 > k0:
            tb = run_change_point(samples, balls, n, t_lo, t_hi, lo, hi, dt, s)
            if tb is not None:
                k_new = int(np.clip(np.round((tb - times[0]) / dt), 0, len(times) - 1))
        n_new = n
        if b and k_new != k:
            d = P[b][k_new] - P[a][k_new]
            if np.all(np.isfinite(d)) and np.hypot(*d) > 0:
                n_new = d / np.hypot(*d)
        ident = (kind, a, b, c, k_new)
        if ident not in out or gap < out[ident][5]:
            out[ident] = (kind, a, b, c, k_new, gap, n_new)
            new_run[ident] = run[(kind, a, b, c, k)]
            if tb is not None:
                cps[ident] = tb
    return list(out.values()), new_run, cps


def _grid(samples: dict[str, BallSamples], dt: float):
    """Common time grid: frame index k -> (T_all,) times; per ball (K,2) positions (NaN = none)."""
    t_all = np.concatenate([b.t for b in samples.values()])
    t0 = float(t_all.min())
    k_all = np.round((t_all - t0) / dt).astype(int)
    K = int(k_all.max()) + 1
    times = t0 + dt * np.arange(K)
    P, S, V = {}, {}, {}
    for name, b in samples.items():
        k = np.round((b.t - t0) / dt).astype(int)
        p = np.full((K, 2), np.nan)
        sg = np.full(K, np.nan)
        p[k] = b.xy
        sg[k] = b.sig.mean(axis=1)
        P[name], S[name] = p, sg
        sp, _ = local_speed(b, dt, PhysicsSettings())
        v = np.full(K, np.nan)
        v[k] = sp
        V[name] = v
    return times, P, S, V


def find_contacts(
    samples: dict[str, BallSamples],
    length_mm: float,
    width_mm: float,
    radius_mm: float,
    dt: float,
    s: PhysicsSettings,
    onsets: dict[str, Onset] | None = None,
) -> list[ContactCandidate]:
    """Accepted ball-ball and ball-cushion contacts, sorted by time.

    ``onsets`` (ball -> :class:`Onset`): a resting ball that starts to move was hit; where no
    contact found from the samples explains its start (samples near the hit missing or wrong,
    e.g. two touching balls seen as one blob), the striking ball's path before the onset gives
    the geometric candidate (:func:`onset_candidates`). Every candidate still needs the
    kinematic evidence."""
    times, P, S, V = _grid(samples, dt)
    names = sorted(samples)
    geo: list[tuple] = []  # (kind, a, b, cushion, k, gap, normal)
    run: dict[tuple, int] = {}  # (kind, a, b, cushion, k) -> first frame of its touching run
    extent: dict[tuple, tuple[int, int]] = {}  # ... -> frames of its run (at most one window either side)
    cap = int(np.ceil(max(s.side_window_s, s.side_window_frames * dt) / dt))
    for a in names:
        for c, n in CUSHION_NORMALS.items():
            g = cushion_distance(P[a], c, length_mm, width_mm) - radius_mm
            # travel in one frame: the local speed, or the sampled gap's own step to a neighbour
            # beyond its noise allowance, whichever is larger (a centred speed fit across a bounce
            # sees the reversal, not the speed: a ball meeting the cushion at 1.8 m/s at 60 fps
            # leaves samples up to 30 mm from the nose while its centred speed is ~100 mm/s; a
            # slow ball's step is mostly noise and must not widen the margin)
            noise = s.gap_margin_sigma * np.nan_to_num(S[a], nan=1.0)
            margin = (s.gap_margin_mm + noise + s.gap_margin_frames
                      * np.maximum(np.nan_to_num(V[a], nan=0.0) * dt, gap_step(g) - noise))
            for k in _local_minima(g):
                if g[k] < margin[k] and V[a][k] > s.rest_speed_mm_s:
                    geo.append(("ball-cushion", a, "", c, k, float(g[k]), n))
                    run[("ball-cushion", a, "", c, k)] = _run_start(g < margin, k)
                    extent[("ball-cushion", a, "", c, k)] = _run_span(g < margin, k, cap)
    for (a, b), (d, g, vrel, margin) in pair_gaps(P, S, V, names, radius_mm, dt, s).items():
        mins = []
        for k in _local_minima(g):
            if g[k] < margin[k] and vrel[k] > s.rest_speed_mm_s:
                n = d[k] / np.hypot(*d[k])
                geo.append(("ball-ball", a, b, "", k, float(g[k]), n))
                run[("ball-ball", a, b, "", k)] = _run_start(g < margin, k)
                extent[("ball-ball", a, b, "", k)] = _run_span(g < margin, k, cap)
                mins.append(k)
        # balls that stay at the touching distance after a touch (a stop shot into a ball that
        # passes the push on, a frozen pair) can have their smallest sampled gap frames after
        # it: a run of touching frames that begins with an arrival is a candidate at its start
        below = np.isfinite(g) & (g < margin)
        for k0 in np.flatnonzero(below[1:] & ~below[:-1]) + 1:
            k1 = k0
            while k1 + 1 < len(g) and below[k1 + 1]:
                k1 += 1
            if k1 - k0 >= 2 and vrel[k0] > s.rest_speed_mm_s and not any(abs(k - k0) <= 1 for k in mins):
                n = d[k0] / np.hypot(*d[k0])
                geo.append(("ball-ball", a, b, "", int(k0), float(g[k0]), n))
                run[("ball-ball", a, b, "", int(k0))] = int(k0)
                extent[("ball-ball", a, b, "", int(k0))] = _run_span(below, int(k0), cap)
    # compound events are judged on the sampled minima themselves (physics.compound)
    raw_bb = [g for g in geo if g[0] == "ball-ball"]
    raw_t: dict[str, list[tuple[float, tuple]]] = {nm: [] for nm in names}
    for kind, a, b, c, k, gap, n in geo:
        for ball in (a, b) if b else (a,):
            raw_t[ball].append((times[k], (kind, frozenset((a, b)), c)))
    if s.run_change_point:
        geo, run, cps = _relocate(geo, run, extent, raw_t, samples, times, P, dt, s)
    else:
        cps = {}
    # candidate times per ball: limit the change-point windows to the neighbouring candidates
    cand_t: dict[str, list[tuple[float, tuple]]] = {nm: [] for nm in names}
    same: dict[tuple, int] = {}  # (key, time) -> touching run: minima in one run are one contact
    deepest: dict[tuple, float] = {}  # (key, run) -> smallest gap of the run
    for kind, a, b, c, k, gap, n in geo:
        key = (kind, frozenset((a, b)), c)
        cand_t[a].append((times[k], key))
        same[(key, times[k])] = r = run[(kind, a, b, c, k)]
        deepest[(key, r)] = min(deepest.get((key, r), np.inf), gap)
        if b:
            cand_t[b].append((times[k], key))
    def evaluate(item: tuple, limits: dict[str, list[float]]) -> ContactCandidate | None:
        """Kinematic test of one geometric candidate; ``limits``: ball -> times of contacts
        already accepted, which also bound the change-point windows. A candidate that passes is
        tested again with windows cut at each ball's own larger change (:func:`kink_fit_own`)."""
        if judge(item, limits, False) is None:
            return None
        cand = judge(item, limits, True)
        # the break time: the run's change point, from all samples, where the fit above leaves
        # out more than one frame period around the candidate (the guard of a cushion contact at
        # >= 250 fps): no sample there fixes its break, which lies anywhere in the gap
        guard = s.guard_ball_s if item[0] == "ball-ball" else s.guard_cushion_s
        t_cp = cps.get(item[:5]) if guard >= dt else None
        if cand is not None and t_cp is not None and abs(t_cp - cand.t_init_s) <= max(dt, s.contact_time_floor_s):
            cand.t_init_s = t_cp
        return cand

    def judge(item: tuple, limits: dict[str, list[float]], own: bool) -> ContactCandidate | None:
        kind, a, b, c, k, gap, n = item
        t_c = float(times[k])
        guard = s.guard_ball_s if kind == "ball-ball" else s.guard_cushion_s
        fits = {}
        key = (kind, frozenset((a, b)), c)
        for ball in (a, b) if b else (a,):
            # neighbouring candidates limit the windows, except noise minima of the same contact
            # (the same pair's minima while the gap stays within the margin: a slow pair can stay
            # that close for many frames after a touch)
            others = [x for x, kx in cand_t[ball]
                      if abs(x - t_c) > 2.5 * dt and not (kx == key and (
                          abs(x - t_c) < s.same_contact_s or same[(kx, x)] == same[(key, times[k])]))]
            others += limits.get(ball, [])
            lo = max([x for x in others if x < t_c], default=-np.inf)
            hi = min([x for x in others if x > t_c], default=np.inf)
            # longer windows only at the deepest minimum of a touching run: the others are the same
            # touch seen through noise, or re-touches that must stand on the standard window
            fit = kink_fit_own if own else kink_fit_windows
            fits[ball] = fit(samples[ball], t_c, lo, hi, guard, dt, s, n,
                             escalate=gap <= deepest[(key, same[(key, times[k])])])
        if kind == "ball-cushion":
            def cushion_ok(f):
                vn_pre, vn_post = f.v_pre @ n, f.v_post @ n
                dvn = vn_post - vn_pre
                sd = float(np.sqrt(n @ f.dv_cov @ n))
                z = dvn / max(sd, 1e-9)
                return (vn_pre < 0 and vn_post > -sd and dvn > s.dv_min_mm_s and z > s.dv_z), z

            # another cushion of the same ball a few frames away (a corner): one-sided windows
            # then hold too few samples, or (closer than 2.5 frames) one change-point fit sees both
            # changes as one; both changes are fitted together, the single fit is the fallback
            for f in (_corner_fit(a, t_c, key, limits), fits[a]):
                if f is not None:
                    ok, z = cushion_ok(f)
                    if ok:
                        return ContactCandidate(kind, a, "", c, f.t_b, n, gap, float(z), f.v_post - f.v_pre)
            # two cushions met within about a frame (a corner at speed): neither a one-change fit
            # here (its window mixes both changes) nor a two-change fit (the changes are closer
            # than one sample apart) separates them, but one change at the other cushion's time
            # holds both; this cushion's normal velocity reversing there is the evidence
            if s.corner_shared_fit:
                for f in _shared_corner_fits(a, t_c, key, n, limits, own):
                    ok, z = cushion_ok(f)
                    if ok:
                        return ContactCandidate(kind, a, "", c, f.t_b, n, gap, float(z), f.v_post - f.v_pre)
            return None
        zs, dvs, tbs, J, sJ = {}, {}, {}, {}, {}
        ok_any, bad, z2 = False, False, 0.0
        for ball, sign in ((a, -1.0), (b, 1.0)):
            f = fits[ball]
            if f is None:
                continue
            dv = f.v_post - f.v_pre
            dvn = sign * (dv @ n)
            sd = float(np.sqrt(n @ f.dv_cov @ n))
            z = dvn / max(sd, 1e-9)
            zs[ball], dvs[ball], tbs[ball], J[ball], sJ[ball] = z, dv, f.t_b, dvn, sd
            if dvn > s.dv_min_mm_s:
                z2 += z * z  # independent evidence from the two balls adds up
                ok_any = ok_any or z > s.dv_z
            if z < -s.dv_z and -dvn > s.dv_min_mm_s:
                bad = True
        if not (ok_any or np.sqrt(z2) > s.dv_z) or bad:
            return None
        if len(J) == 2:
            # no energy source: a jump found between resting neighbours (a window that reaches
            # a later hit) raises their energy from nothing
            if energy_gain_z(np.array([fits[a].v_pre, fits[b].v_pre]), np.array([dvs[a], dvs[b]]),
                             np.array([fits[a].dv_cov, fits[b].dv_cov]), s) > s.dv_z:
                return None
            # one impulse pushes both balls apart: equal masses change their normal velocities by
            # the same amount. A ball that changes far less than its partner was pushed by
            # something else at that time (a resting neighbour of a struck ball), or passed the
            # push on within the frame (a compound event: physics.compound finds those)
            lo_b, hi_b = sorted(J, key=J.get)
            r = s.pair_impulse_ratio_min
            slack = s.dv_z * float(np.hypot(sJ[lo_b], r * sJ[hi_b]))
            if J[lo_b] < r * J[hi_b] - slack:
                return None
            # ... along their line of centres: across the tangent each ball changes only by the
            # throw, at most mu_bb of the normal change (ball-ball friction, feltlab.standards.
            # MU_BALL_BALL_RANGE). A ball that changes mostly across the line was pushed by another
            # ball: a rack neighbour pushed away from this one by a third, or a slow ball that hit
            # one of two side-by-side balls and grazed the other
            if s.pair_tangent_check:
                tang = np.array([-n[1], n[0]])
                for ball in (a, b):
                    dvt = float(dvs[ball] @ tang)
                    sdt = float(np.sqrt(max(tang @ fits[ball].dv_cov @ tang, 0.0)))
                    if abs(dvt) > MU_BALL_BALL_RANGE[1] * J[hi_b] + s.dv_z * sdt:
                        return None
        # the striking ball approaches faster along the normal
        fa, fb = fits[a], fits[b]
        va = fa.v_pre @ n if fa is not None else 0.0
        vb = fb.v_pre @ n if fb is not None else 0.0
        best = max(zs, key=zs.get)
        if va - 0.0 >= -vb:  # a moves towards b more than b towards a
            A, B, nn = a, b, n
        else:
            A, B, nn = b, a, -n
        return ContactCandidate(kind, A, B, "", tbs[best], nn, gap, float(zs[best]),
                                dvs.get(A, np.zeros(2)), dvs.get(B, np.zeros(2)))

    reach = max(s.kink_window_scales) * max(s.side_window_s, s.side_window_frames * dt) + dt

    def _corner_fit(a: str, t_c: float, key: tuple, limits: dict[str, list[float]]) -> KinkFit | None:
        """Change at ``t_c`` from a two-change fit with the nearest other cushion candidate of
        ball ``a`` when that lies within ``s.corner_frames`` frame periods (and more than 1)."""
        near = [(x, kx) for x, kx in cand_t[a] if kx[0] == "ball-cushion" and kx != key
                and dt < abs(x - t_c) <= s.corner_frames * dt]
        if not near:
            return None
        t_o, k_o = min(near, key=lambda xk: abs(xk[0] - t_c))
        t1c, t2c = sorted((t_c, t_o))
        w0 = max(s.side_window_s, s.side_window_frames * dt)
        # noise minima of the same two contacts do not cut the windows (as in judge)
        others = [x for x, kx in cand_t[a] if min(abs(x - t1c), abs(x - t2c)) > 2.5 * dt
                  and not (kx in (key, k_o) and min(abs(x - t1c), abs(x - t2c)) < s.same_contact_s)]
        others += [x for x in limits.get(a, []) if min(abs(x - t1c), abs(x - t2c)) > 2.5 * dt]
        lo = max([x for x in others if x < t1c] + [t1c - w0])
        hi = min([x for x in others if x > t2c] + [t2c + w0])
        g = s.guard_cushion_s
        pair = kink_fit_double(samples[a], t1c, t2c, lo + g, hi - g, g, dt, s)
        if pair is None:
            return None
        return pair[0] if t_c == t1c else pair[1]

    def _shared_corner_fits(a: str, t_c: float, key: tuple, n: np.ndarray, limits: dict[str, list[float]],
                            own: bool) -> list[KinkFit]:
        """One-change fits of ball ``a`` at each other cushion candidate of it within 2.5 frame
        periods of ``t_c`` (nearest first), judged along this cushion's normal ``n``."""
        near = sorted(((abs(x - t_c), x, kx) for x, kx in cand_t[a]
                       if kx[0] == "ball-cushion" and kx[2] != key[2] and 0 < abs(x - t_c) <= 2.5 * dt),
                      key=lambda q: q[0])
        out = []
        for _, t_o, k_o in near:
            # noise minima of the same two contacts do not cut the windows (as in judge)
            others = [x for x, kx in cand_t[a] if min(abs(x - t_c), abs(x - t_o)) > 2.5 * dt
                      and not (kx in (key, k_o) and min(abs(x - t_c), abs(x - t_o)) < s.same_contact_s)]
            others += limits.get(a, [])
            lo = max([x for x in others if x < min(t_c, t_o)], default=-np.inf)
            hi = min([x for x in others if x > max(t_c, t_o)], default=np.inf)
            fit = kink_fit_own if own else kink_fit_windows
            f = fit(samples[a], t_o, lo, hi, s.guard_cushion_s, dt, s, n, escalate=True)
            if f is not None:
                out.append(f)
        return out

    def settle(tested: list[tuple[ContactCandidate, int]], fixed: list[ContactCandidate]):
        """One velocity jump belongs to one contact: candidates are taken in order of significance,
        and a candidate whose windows reach over a contact already taken (``fixed`` first, then
        the more significant ones; more than 2.5 frame periods away) is tested again with its
        windows ending there."""
        kept: list[tuple[ContactCandidate, int]] = []
        for cand, gi in sorted(tested, key=lambda x: -x[0].z):
            t_c = float(times[geo[gi][4]])
            lim: dict[str, list[float]] = {}
            for o in list(fixed) + [x[0] for x in kept]:
                if abs(o.t_init_s - t_c) > 2.5 * dt and abs(o.t_init_s - t_c) < reach:
                    for ball in {cand.ball_a, cand.ball_b} & {o.ball_a, o.ball_b} - {""}:
                        lim.setdefault(ball, []).append(o.t_init_s)
            if lim:
                cand = evaluate(geo[gi], lim)
            if cand is not None:
                kept.append((cand, gi))
        return kept

    first = [(cand, gi) for gi, item in enumerate(geo) if (cand := evaluate(item, {})) is not None]
    tested = settle(first, [])
    if onsets and s.onset_candidates:
        # a resting ball's start that no contact found from the samples explains: the striker's
        # path gives the geometric candidate, judged like any other
        w_on = max(s.speed_window_s, 3 * dt)
        for a, b, k, gap, n in onset_candidates(samples, onsets, times, radius_mm, dt, s):
            t_k = float(times[k])
            if any(b in (c.ball_a, c.ball_b) and abs(c.t_init_s - t_k) < w_on + 2 * dt for c, _ in tested):
                continue
            item = ("ball-ball", a, b, "", k, gap, n)
            key = ("ball-ball", frozenset((a, b)), "")
            geo.append(item)
            raw_bb.append(item)
            raw_t[a].append((t_k, key))
            raw_t[b].append((t_k, key))
            run[("ball-ball", a, b, "", k)] = k
            same[(key, t_k)] = k
            deepest[(key, k)] = min(deepest.get((key, k), np.inf), gap)
            cand_t[a].append((t_k, key))
            cand_t[b].append((t_k, key))
            lim: dict[str, list[float]] = {}
            for o, _ in tested:
                if 2.5 * dt < abs(o.t_init_s - t_k) < reach:
                    for ball in {a, b} & {o.ball_a, o.ball_b} - {""}:
                        lim.setdefault(ball, []).append(o.t_init_s)
            cand = evaluate(item, lim)
            if cand is not None:
                tested.append((cand, len(geo) - 1))
    gi_of = {id(c): gi for c, gi in tested}
    out = _dedupe([c for c, _ in tested], dt, s.contact_time_floor_s)
    # compound events: links inside a group touching within one frame replace the pairwise view
    from physics.compound import find_groups, merge_groups  # noqa: PLC0415 - compound uses this module

    covered: list = []
    grouped = find_groups(samples, times, P, S, V, raw_bb, raw_t if s.run_change_point else cand_t,
                          radius_mm, dt, s, out, covered)
    if grouped:
        # the groups' jumps are taken: pairwise candidates whose windows reached over them again
        out = _dedupe([c for c, _ in settle([(c, gi_of[id(c)]) for c in out], grouped)], dt, s.contact_time_floor_s)
    out = merge_groups(out, grouped, dt, covered)
    return sorted(out, key=lambda c: c.t_init_s)


def onset_candidates(samples: dict[str, BallSamples], onsets: dict[str, Onset], times: np.ndarray,
                     radius_mm: float, dt: float, s: PhysicsSettings) -> list[tuple]:
    """Geometric ball-ball candidates from motion onsets: (striker, struck, frame k on ``times``,
    gap mm, unit normal striker -> struck).

    A resting ball only starts to move when something pushes it. For each ball resting at its
    first samples with an onset at ``t_on`` (s), every other ball moving just before is followed
    along its path: a quadratic per coordinate fitted to its samples within ``side_window_s``
    before ``t_on - speed_window_s`` (the onset estimate is uncertain by about the speed window
    it is measured over), extrapolated over ``t_on`` +- ``speed_window_s``. If that path comes
    within 2R + ``gap_margin_mm`` + ``gap_margin_sigma`` sigma of the resting centre while
    approaching it, the first time it does is a candidate. Only geometry: the candidate is then
    judged by the same kinematic test as any other (velocity jumps along the line of centres).
    """
    out = []
    w = max(s.speed_window_s, 3 * dt)
    wf = max(s.side_window_s, s.side_window_frames * dt)
    for b, on in onsets.items():
        if not (on.rest_first and on.t_onset is not None and on.rest_xy is not None) or b not in samples:
            continue
        t_on = float(on.t_onset)
        sig_b = float(np.median(samples[b].sig))
        for a, sa in samples.items():
            if a == b:
                continue
            oa = onsets.get(a)
            if oa is not None and oa.rest_first and (oa.t_onset is None or oa.t_onset > t_on - w):
                continue  # the other ball is not moving before this onset
            m = (sa.t < t_on - w) & (sa.t >= t_on - w - wf)
            if m.sum() < s.min_side_points + 1:
                continue
            tt = sa.t[m] - t_on
            coef = [np.polyfit(tt, sa.xy[m, i], 2, w=1.0 / sa.sig[m, i]) for i in range(2)]
            tg = np.arange(-w, w + 1e-9, dt / 4.0)
            path = np.column_stack([np.polyval(c, tg) for c in coef])
            vel = np.column_stack([np.polyval(np.polyder(c), tg) for c in coef])
            d = on.rest_xy[None, :] - path
            dist = np.hypot(d[:, 0], d[:, 1])
            gap = dist - 2 * radius_mm
            margin = s.gap_margin_mm + s.gap_margin_sigma * float(np.hypot(np.median(sa.sig), sig_b))
            approach = np.einsum("ij,ij->i", vel, d) / np.maximum(dist, 1e-9) > s.rest_speed_mm_s
            hit = (gap < margin) & approach
            if not hit.any():
                continue
            i = int(np.argmax(hit))
            # the path must reach this ball first: a ball resting in the way is hit before it
            # (a chain or cluster passes the push on within a frame: physics.compound judges those)
            blocked = False
            for c, oc in onsets.items():
                if c in (a, b) or oc.rest_xy is None or not oc.rest_first:
                    continue
                if oc.t_onset is not None and oc.t_onset < t_on - w:
                    continue  # moving already
                dc = np.hypot(*(oc.rest_xy[None, :] - path[: i + 1]).T) - 2 * radius_mm
                if (dc < margin).any():
                    blocked = True
                    break
            if blocked:
                continue
            t_hit = t_on + tg[i]
            k = int(np.clip(np.round((t_hit - times[0]) / dt), 0, len(times) - 1))
            out.append((a, b, k, float(gap[i]), d[i] / max(dist[i], 1e-9)))
    return out


def _dedupe(cands: list[ContactCandidate], dt: float, floor_s: float = 0.0) -> list[ContactCandidate]:
    """Keep one candidate per (pair or ball+cushion) within 2 frame periods (at least 2 x
    ``floor_s``, settings.contact_time_floor_s): the most significant."""
    keep: list[ContactCandidate] = []
    win = 2.0 * max(dt, floor_s)
    for c in sorted(cands, key=lambda c: -c.z):
        key = (c.kind, frozenset((c.ball_a, c.ball_b)), c.cushion)
        clash = any(
            (k.kind, frozenset((k.ball_a, k.ball_b)), k.cushion) == key
            and abs(k.t_init_s - c.t_init_s) < win
            for k in keep
        )
        if not clash:
            keep.append(c)
    return keep
