"""Motion models between contacts and their robust weighted fits.

Table frame, mm and s throughout. Between two breaks (strike, contacts) a ball is in one
*move segment* with time ``tau`` (s) counted from the segment start:

* slide phase, ``0 <= tau < t_roll``: constant acceleration ``a`` (mm/s^2). Under Coulomb
  friction with the cloth the contact-point slip velocity keeps its direction while the ball
  slides, so ``a = -mu_s g u_hat`` is constant and the path is a parabola
  ``p = p0 + v0 tau + a tau^2 / 2`` (it curves when the ball carries spin).
* roll phase, ``tau >= t_roll``: deceleration ``a_r = mu_r g`` along the velocity (a straight
  line) until the ball stops, then rest.

Position and velocity are continuous at ``t_roll``. A ball that rests before its first break
is in a *rest segment* (constant position).

A ball's whole path is a *chain*: one start position, the parameters of each move segment and
the break times. Each segment starts where the previous one is at the break, so positions are
continuous through a contact (the contact itself lasts well under a frame, see
:mod:`physics.settings`) and only velocities jump. :func:`fit_chain` fits a chain to the raw
samples by robust weighted least squares (``scipy.optimize.least_squares``) and returns the
parameter covariance.

Example (a ball rolling from rest-free start at 1000 mm/s with mu_r = 0.01):

>>> import numpy as np
>>> d, v = move_motion(np.array([0.0, 1.0]), np.array([1000.0, 0]), np.zeros(2), 0.0, 98.0665)
>>> round(float(v[1, 0]), 1), round(float(d[1, 0]), 1)
(901.9, 951.0)
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from physics.settings import PhysicsSettings

#: Parameters per move segment: v0x, v0y, ax, ay, t_roll, a_r.
N_MOVE = 6


def move_motion(
    tau: np.ndarray, v0: np.ndarray, a: np.ndarray, t_roll: float, a_r: float
) -> tuple[np.ndarray, np.ndarray]:
    """Displacement (T,2) mm and velocity (T,2) mm/s of a move segment at times ``tau`` (s).

    ``v0`` mm/s and ``a`` mm/s^2 are 2-vectors (table frame); ``t_roll`` s from the segment
    start (<= 0: rolling from the start); ``a_r`` >= 0 rolling deceleration, mm/s^2.
    Negative ``tau`` extrapolates the slide parabola backwards.
    """
    tau = np.atleast_1d(np.asarray(tau, dtype=float))
    tr0 = max(float(t_roll), 0.0)
    vr = v0 + a * tr0
    speed = float(np.hypot(vr[0], vr[1]))
    u = vr / speed if speed > 1e-12 else np.zeros(2)
    t_stop = speed / a_r if a_r > 1e-12 else np.inf
    ts = np.minimum(tau, tr0)
    tr = np.clip(tau - tr0, 0.0, t_stop)
    sr = speed * tr - 0.5 * a_r * tr**2
    disp = np.outer(ts, v0) + np.outer(0.5 * ts**2, a) + np.outer(sr, u)
    vel = v0[None, :] + np.outer(ts, a) - np.outer(a_r * tr, u)
    return disp, vel


@dataclass
class ChainLayout:
    """Structure of one ball's chain.

    t_start: reference time of segment 0 (s; its first sample). rest_first: segment 0 is a
    rest segment. break_kinds: one label per break ('strike', 'ball-ball', 'ball-cushion').
    break_init: initial break times (s); break_halfwidth: how far (s) each break may move.
    guards: samples closer than this (s) to each break are left out of the fit.
    """

    ball: str
    t_start: float
    rest_first: bool
    break_kinds: list[str]
    break_init: np.ndarray
    break_halfwidth: np.ndarray
    guards: np.ndarray
    #: per break: the cloth-slip continuity prior links the segments on both sides (only for
    #: breaks made of ball-ball contacts alone, see :func:`slip_residuals`); None: every
    #: 'ball-ball' break.
    slip_link: np.ndarray | None = None
    #: per break (n_break, 3): expected slip shift from vertical friction at the contact, as
    #: (X mm/s, nx, ny) with the contact normal n (the shift is X n), and ``slip_shift_sigma``
    #: (n_break,) mm/s its sigma along n; None: X = 0, n = dv direction, sigma from settings.
    slip_shift: np.ndarray | None = None
    slip_shift_sigma: np.ndarray | None = None
    #: per break (n_break,): where the shift prior is the OTHER ball's estimate (pass 3,
    #: physics.pipeline._shared_slip_shifts), the sigma (mm/s) of the pass-2 prior both balls
    #: started from, NaN elsewhere; used for the two balls' joint covariance (physics.pair_cov).
    slip_shift_s0: np.ndarray | None = None
    #: per break: the cushion nose lines it touches, as tuples (nx, ny, c) with n the cushion's
    #: inward normal and c = n . (a point of the nose line) + the centre's distance from the nose
    #: line at first touch; the centre at the break is then at n . p <= c (touch prior,
    #: :func:`touch_residuals`). None, or an empty tuple at a break: no such prior.
    touch_lines: list | None = None

    @property
    def links(self) -> np.ndarray:
        if self.slip_link is not None:
            return np.asarray(self.slip_link, dtype=bool)
        return np.array([k == "ball-ball" for k in self.break_kinds], dtype=bool)

    @property
    def n_seg(self) -> int:
        return len(self.break_kinds) + 1

    @property
    def n_move(self) -> int:
        return self.n_seg - (1 if self.rest_first else 0)

    @property
    def n_par(self) -> int:
        return 2 + N_MOVE * self.n_move + (self.n_seg - 1)

    def move_offset(self, seg: int) -> int | None:
        """Index of segment ``seg``'s first parameter, None for a rest segment."""
        if self.rest_first and seg == 0:
            return None
        j = seg - (1 if self.rest_first else 0)
        return 2 + N_MOVE * j

    @property
    def break_offset(self) -> int:
        return 2 + N_MOVE * self.n_move


def unpack_segment(x: np.ndarray, lay: ChainLayout, seg: int):
    """(v0, a, t_roll, a_r) of a move segment, or None for a rest segment."""
    o = lay.move_offset(seg)
    if o is None:
        return None
    return x[o : o + 2], x[o + 2 : o + 4], float(x[o + 4]), float(x[o + 5])


def segment_starts(x: np.ndarray, lay: ChainLayout) -> tuple[np.ndarray, np.ndarray]:
    """Start times (n_seg,) s and start positions (n_seg, 2) mm of every segment."""
    br = x[lay.break_offset : lay.break_offset + lay.n_seg - 1]
    starts = np.concatenate([[lay.t_start], br])
    pos = np.zeros((lay.n_seg, 2))
    pos[0] = x[0:2]
    for k in range(1, lay.n_seg):
        pos[k] = _segment_eval(x, lay, k - 1, np.array([starts[k]]), starts, pos)[0][0]
    return starts, pos


def _segment_eval(x, lay, seg, t, starts, pos):
    par = unpack_segment(x, lay, seg)
    if par is None:
        return np.repeat(pos[seg][None, :], len(t), 0), np.zeros((len(t), 2))
    v0, a, t_roll, a_r = par
    d, v = move_motion(t - starts[seg], v0, a, t_roll, a_r)
    return pos[seg][None, :] + d, v


def chain_eval(
    x: np.ndarray, lay: ChainLayout, t: np.ndarray, seg: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Positions (T,2) mm, velocities (T,2) mm/s and segment index (T,) at times ``t`` (s).

    ``seg`` forces the segment used for each time (e.g. to extrapolate a segment past its end).
    """
    t = np.atleast_1d(np.asarray(t, dtype=float))
    starts, pos = segment_starts(x, lay)
    if seg is None:
        seg = np.clip(np.searchsorted(starts, t, side="right") - 1, 0, lay.n_seg - 1)
    seg = np.broadcast_to(np.asarray(seg, dtype=int), t.shape)
    P = np.zeros((len(t), 2))
    V = np.zeros((len(t), 2))
    for k in np.unique(seg):
        m = seg == k
        P[m], V[m] = _segment_eval(x, lay, int(k), t[m], starts, pos)
    return P, V, seg


def _priors(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings, seg_priors=None) -> np.ndarray:
    """Prior residuals on each move segment's slide deceleration |a| and roll deceleration a_r.

    ``seg_priors``: optional {segment: (mu_s, mu_s_sigma, mu_r, mu_r_sigma)} overriding the
    settings' priors (the pipeline passes the shot's other segments' estimates)."""
    out = []
    g = s.g_mm_s2
    for k in range(lay.n_seg):
        par = unpack_segment(x, lay, k)
        if par is None:
            continue
        _, a, _, a_r = par
        ms, ss, mr, sr = (seg_priors or {}).get(
            k, (s.mu_s_prior, s.mu_s_prior_sigma, s.mu_r_prior, s.mu_r_prior_sigma))
        out.append((np.hypot(*a) - ms * g) / (ss * g))
        out.append((a_r - mr * g) / (sr * g))
    out = np.asarray(out, dtype=float)
    if s.touch_prior and lay.touch_lines is not None:
        out = np.concatenate([out, touch_residuals(x, lay, s)])
    if s.slip_prior:
        return np.concatenate([out, slip_residuals(x, lay, s)])
    return out


def touch_residuals(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings) -> np.ndarray:
    """Prior residuals (one per cushion of each break, in sigmas): a ball's velocity cannot
    change at a cushion before it touches it, so at the break its centre is no farther from the
    cushion's nose line than at first touch: ``max(n . p(t_b) - c, 0) / s.touch_sigma_mm``
    (``lay.touch_lines``). One-sided: the centre moves on into the cushion while it is compressed,
    so a later break is free."""
    if lay.touch_lines is None:
        return np.zeros(0)
    _, pos = segment_starts(x, lay)
    out = []
    for i, lines in enumerate(lay.touch_lines):
        for nx, ny, c in lines or ():
            out.append(max(nx * pos[i + 1][0] + ny * pos[i + 1][1] - c, 0.0) / s.touch_sigma_mm)
    return np.asarray(out, dtype=float)


def slip_velocity(v0: np.ndarray, a: np.ndarray, t_roll: float, tau: float) -> np.ndarray:
    """Slip velocity (2,) mm/s of the cloth contact point of a move segment at ``tau`` (s).

    ``u = v + omega x (-R z_hat)``. For a uniform solid sphere (I = 2/5 m R^2) under Coulomb cloth
    friction ``a = -mu_s g u_hat`` while it slides and ``du/dt = -(7/2) mu_s g u_hat = (7/2) a``, so
    with roll-over at ``t_roll`` ``u(tau) = -(7/2) a (t_roll - tau)``; ``u = 0`` once rolling.

    >>> import numpy as np
    >>> float(slip_velocity(np.array([700.0, 0]), np.array([-2000.0, 0]), 0.1, 0.0)[0])
    700.0
    """
    return -3.5 * np.asarray(a, dtype=float) * max(float(t_roll) - float(tau), 0.0)


def break_slip(x: np.ndarray, lay: ChainLayout, i: int) -> tuple[np.ndarray, np.ndarray]:
    """(slip u (2,) mm/s, velocity v (2,) mm/s) at the end of the segment before break ``i``
    (zeros for a rest segment)."""
    prev = unpack_segment(x, lay, i)
    if prev is None:
        return np.zeros(2), np.zeros(2)
    br = x[lay.break_offset : lay.break_offset + lay.n_seg - 1]
    starts = np.concatenate([[lay.t_start], br])
    tau = float(br[i] - starts[i])
    v0, a, t_roll, a_r = prev
    _, v = move_motion(np.array([tau]), v0, a, t_roll, a_r)
    return slip_velocity(v0, a, t_roll, tau), v[0]


def slip_residuals(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings) -> np.ndarray:
    """Prior residuals (2 per linked break, in sigmas) of cloth-slip continuity across a
    ball-ball contact: ``u_start(k+1) - u_end(k) - dv``.

    Equal balls on the cloth touch at the height of their centres, so the contact's normal and
    friction (throw) impulses are horizontal at equator height: they change ``v`` by
    ``dv = J / m`` and the spin only about the vertical axis, which does not move the cloth
    contact point; hence ``u_after = u_before + dv``. A rest segment has ``u = v = 0``. Not used
    across strikes (the cue tip adds any spin) or cushions (nose above the centre). The sigma
    (see :class:`physics.settings.PhysicsSettings`) allows for vertical friction at the contact
    (spin transfer along the impulse direction), cloth friction during the contact and
    non-ideal balls.
    """
    links = lay.links
    if not links.any():
        return np.zeros(0)
    out: list[float] = []
    for i in np.flatnonzero(links):
        out += _link_residuals(x, lay, s, int(i))
    return np.asarray(out, dtype=float)


def slip_link_chi2(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings) -> np.ndarray:
    """Per break (n_break,): sum of squared slip-prior residuals (see :func:`slip_residuals`)
    of a linked break, 0 for an unlinked one. Dimensionless (chi^2, 2 degrees of freedom)."""
    out = np.zeros(lay.n_seg - 1)
    for i in np.flatnonzero(lay.links):
        r = _link_residuals(x, lay, s, int(i))
        out[i] = float(np.sum(np.square(r)))
    return out


def _link_state(x: np.ndarray, lay: ChainLayout, i: int):
    """Motion either side of break i, or None when segment i+1 has no motion parameters.

    Returns (prev, tau, v_end, u_end, v1, u_start, dv): segment i's parameters (None: at rest)
    and its duration tau (s); its velocity and cloth slip at the break (mm/s; zero at rest);
    segment i+1's start velocity and slip (mm/s); the velocity change dv = v1 - v_end (mm/s).
    """
    br = x[lay.break_offset : lay.break_offset + lay.n_seg - 1]
    starts = np.concatenate([[lay.t_start], br])
    prev, nxt = unpack_segment(x, lay, i), unpack_segment(x, lay, i + 1)
    if nxt is None:
        return None
    tau = float(br[i] - starts[i])
    if prev is None:
        v_end = u_end = np.zeros(2)
    else:
        v0, a, t_roll, a_r = prev
        _, v_end = move_motion(np.array([tau]), v0, a, t_roll, a_r)
        v_end = v_end[0]
        u_end = slip_velocity(v0, a, t_roll, tau)
    v1, a1, t_roll1, _ = nxt
    u_start = slip_velocity(v1, a1, t_roll1, 0.0)
    return prev, tau, v_end, u_end, v1, u_start, v1 - v_end


def link_sigma_along(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings, i: int) -> float:
    """Sigma (mm/s) of break i's slip-prior residual along the shift direction n, as used in the
    fit (:func:`_link_residuals`; includes the shift prior's own sigma); NaN without a shift."""
    st = _link_state(x, lay, i)
    if st is None or lay.slip_shift is None or not np.all(np.isfinite(lay.slip_shift[i])):
        return float("nan")
    sp = float(np.hypot(*st[6]))
    return float(np.hypot(np.hypot(s.slip_sigma_rel * sp, s.slip_sigma_mm_s), float(lay.slip_shift_sigma[i])))


def _link_residuals(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings, i: int) -> list[float]:
    """The two slip-prior residuals (along, across the shift direction; in sigmas) of break i."""
    st = _link_state(x, lay, i)
    if st is None:
        return []
    _, _, v_end, u_end, _, u_start, dv = st
    r = u_start - u_end - dv
    sp = float(np.hypot(*dv))
    sig_perp = np.hypot(s.slip_sigma_rel * sp, s.slip_sigma_mm_s)
    if lay.slip_shift is not None and np.all(np.isfinite(lay.slip_shift[i])):
        X, nx, ny = lay.slip_shift[i]
        d = np.array([nx, ny])
        r = r - X * d
        sig_par = np.hypot(sig_perp, float(lay.slip_shift_sigma[i]))
        return [(r @ d) / sig_par, (d[0] * r[1] - d[1] * r[0]) / sig_perp]
    if sp > 1e-9:
        d = dv / sp
        sig_par = np.hypot(sig_perp, s.slip_sigma_rel_along * sp)
        return [(r @ d) / sig_par, (d[0] * r[1] - d[1] * r[0]) / sig_perp]
    return list(r / sig_perp)


def robust_residuals(r: np.ndarray, s: PhysicsSettings) -> np.ndarray:
    """Data residuals (in sigmas) transformed so that half their sum of squares is the robust
    cost: soft_l1, rho(z) = 2 (sqrt(1 + z) - 1) with z = (r / f)^2 (as in scipy's least_squares),
    or Huber; 'linear' leaves them unchanged. Priors are kept quadratic by not transforming them."""
    f = s.f_scale
    z = (r / f) ** 2
    if s.loss == "soft_l1":
        rho = 2.0 * (np.sqrt(1.0 + z) - 1.0)
    elif s.loss == "huber":
        rho = np.where(z <= 1.0, z, 2.0 * np.sqrt(z) - 1.0)
    else:
        return r
    return f * np.sign(r) * np.sqrt(rho)


@dataclass
class ChainFit:
    """A fitted chain: parameters ``x``, covariance ``cov`` (scaled by the reduced chi^2),
    ``rms_mm`` of the used samples, ``n_points`` used, ``chi2_red``, the samples, and the final
    robust cost (half the sum of squared transformed residuals and priors)."""

    layout: ChainLayout
    x: np.ndarray
    cov: np.ndarray
    rms_mm: float
    n_points: int
    chi2_red: float
    t: np.ndarray = field(repr=False)
    xy: np.ndarray = field(repr=False)
    used: np.ndarray = field(repr=False)
    cost: float = float("nan")
    #: k of ``cov = k (J^T J)^-1``: reduced chi^2 (floored) x residual autocorrelation time
    cov_scale: float = float("nan")
    #: information of the samples alone (the J^T J / k of the data rows; priors left out): the
    #: sampling part of the covariance is ``cov @ info_data @ cov`` (physics.pair_cov)
    info_data: np.ndarray | None = field(default=None, repr=False)
    #: per segment (n_seg,): lack-of-fit variance factor >= 1 (:func:`misfit_scales`); None: all 1
    seg_misfit: np.ndarray | None = field(default=None, repr=False)

    def misfit_sd(self) -> np.ndarray:
        """Per parameter (n_par,): factor on its standard error for lack of fit (1 where the
        samples agree with the model), see :func:`misfit_scales` and :func:`widened_cov`."""
        return param_misfit_sd(self.layout, self.seg_misfit)

    def state(self, t, x: np.ndarray | None = None):
        """Positions (T,2) mm and velocities (T,2) mm/s of the fitted model at times ``t`` (s)."""
        P, V, _ = chain_eval(self.x if x is None else x, self.layout, t)
        return P, V

    def breaks(self, x: np.ndarray | None = None) -> np.ndarray:
        x = self.x if x is None else x
        o = self.layout.break_offset
        return x[o : o + self.layout.n_seg - 1]

    def at_break(self, i: int, x: np.ndarray | None = None):
        """(t_b s, position (2,) mm, velocity before (2,), velocity after (2,)) at break ``i``."""
        x = self.x if x is None else x
        tb = float(self.breaks(x)[i])
        P0, V0, _ = chain_eval(x, self.layout, np.array([tb]), seg=np.array([i]))
        P1, V1, _ = chain_eval(x, self.layout, np.array([tb]), seg=np.array([i + 1]))
        return tb, P1[0], V0[0], V1[0]

    def segment_at(self, t: float, x: np.ndarray | None = None) -> int:
        x = self.x if x is None else x
        starts, _ = segment_starts(x, self.layout)
        return int(np.clip(np.searchsorted(starts, t, side="right") - 1, 0, self.layout.n_seg - 1))

    def phase_at(self, seg: int, t: float, x: np.ndarray | None = None) -> str:
        """'rest', 'slide' or 'roll' of segment ``seg`` at time ``t`` (s)."""
        x = self.x if x is None else x
        par = unpack_segment(x, self.layout, seg)
        if par is None:
            return "rest"
        starts, _ = segment_starts(x, self.layout)
        v0, a, t_roll, a_r = par
        tau = t - starts[seg]
        if tau < t_roll:
            return "slide"
        vr = v0 + a * max(t_roll, 0.0)
        sp = float(np.hypot(*vr))
        if a_r > 0 and tau - max(t_roll, 0.0) >= sp / a_r:
            return "rest"
        return "roll"


def _residuals(x, lay, t, xy, sig, s, seg_priors=None):
    P, _, _ = chain_eval(x, lay, t)
    r = robust_residuals(((P - xy) / sig).ravel(), s)
    return np.concatenate([r, _priors(x, lay, s, seg_priors)])


def used_mask(t: np.ndarray, lay: ChainLayout) -> np.ndarray:
    """Samples outside every break's guard interval."""
    m = np.ones(len(t), dtype=bool)
    for b, gd in zip(lay.break_init, lay.guards):
        m &= np.abs(t - b) > gd
    return m


def _bounds(lay: ChainLayout, t_end: float, s: PhysicsSettings):
    n = lay.n_par
    lo = np.full(n, -np.inf)
    hi = np.full(n, np.inf)
    starts = np.concatenate([[lay.t_start], lay.break_init])
    ends = np.concatenate([lay.break_init, [t_end]])
    g = s.g_mm_s2
    # next to a linked ball-ball break the slip prior gives a roll-over beyond the segment's end
    # a meaning (the slip at the break): there the physical limit bounds it (settings)
    linked = np.zeros(lay.n_seg, bool)
    if s.slip_prior and s.slide_through_restart and lay.n_seg > 1:
        lk = lay.links
        linked[:-1] |= lk
        linked[1:] |= lk
    for k in range(lay.n_seg):
        o = lay.move_offset(k)
        if o is None:
            continue
        lo[o + 2 : o + 4] = -s.mu_s_max * g
        hi[o + 2 : o + 4] = s.mu_s_max * g
        hi_roll = 3.0 * (ends[k] - starts[k]) + 0.1
        lo[o + 4], hi[o + 4] = 0.0, max(hi_roll, s.t_roll_max_s) if linked[k] else hi_roll
        lo[o + 5], hi[o + 5] = 0.0, s.mu_r_max * g
    b = lay.break_offset
    for i in range(lay.n_seg - 1):
        lo[b + i] = lay.break_init[i] - lay.break_halfwidth[i]
        hi[b + i] = lay.break_init[i] + lay.break_halfwidth[i]
    if s.ordered_breaks:
        # two breaks whose ranges overlap may not pass each other (a segment of negative
        # duration): the overlap is split halfway between their initial times
        for i in range(lay.n_seg - 2):
            if hi[b + i] > lo[b + i + 1]:
                mid = 0.5 * (lay.break_init[i] + lay.break_init[i + 1])
                hi[b + i] = min(hi[b + i], mid)
                lo[b + i + 1] = max(lo[b + i + 1], mid)
    return lo, hi


def _grid_linear(tau, xy, w, grid, s: PhysicsSettings):
    """Best (cost, t_roll, (cx, cy)) over roll times ``grid`` (s) of the linearised move model
    (see :func:`_move_start_guess`) on samples ``tau`` (s from the segment start), ``xy`` mm with
    weights ``w`` (1/mm)."""
    best = None
    for tr0 in grid:
        ts = np.minimum(tau, tr0)
        tr = np.maximum(tau - tr0, 0.0)
        cols = [np.ones_like(tau), tau, 0.5 * ts**2 + tr0 * tr]
        n_roll = int((tr > 0).sum())
        if n_roll >= 3:
            cols.append(0.5 * tr**2)
        A = np.column_stack(cols)
        if len(tau) < A.shape[1] + 1:
            A = A[:, :2]
        cost = 0.0
        coefs = []
        for i in range(2):
            Aw = A * w[:, i : i + 1]
            c, *_ = np.linalg.lstsq(Aw, xy[:, i] * w[:, i], rcond=None)
            r = xy[:, i] * w[:, i] - Aw @ c
            cost += float(r @ r)
            coefs.append(np.concatenate([c, np.zeros(4 - len(c))]))
        if n_roll >= 3 and A.shape[1] == 4:
            # a "roll" phase decelerating faster than any cloth lets a ball roll is a slide: a
            # quadratic fits as well with t_roll = 0 as with t_roll = the end, and only the
            # latter is physical (the model's roll phase cannot follow it)
            vr_g = np.array([coefs[0][1] + coefs[0][2] * tr0, coefs[1][1] + coefs[1][2] * tr0])
            b_g = np.array([coefs[0][3], coefs[1][3]])
            sp_g = float(np.hypot(*vr_g))
            if sp_g > 1e-9 and -(b_g @ vr_g) / sp_g > s.mu_r_max * s.g_mm_s2:
                cost += 1e6
        if best is None or cost < best[0] - 1e-9:
            best = (cost, tr0, coefs)
    return best


def _move_start_guess(t, xy, sig, s: PhysicsSettings):
    """Independent start values for one move segment (samples t, xy): (p0, v0, a, t_roll, a_r).

    For each roll time on a grid the path is linear in its parameters if the roll phase is
    approximated by a second constant acceleration (p0 + v0 tau + a (ts^2/2 + t_roll tr) +
    b tr^2/2 with ts = min(tau, t_roll), tr = max(tau - t_roll, 0)); the grid point with the
    smallest weighted residual is kept and then refined with the exact model.

    Two grids are tried: 21 roll times over the whole segment, and every sample interval of an
    early window (``s.guess_windows_s``) fitted on that window alone. A short slide right after a
    contact (tens of ms) falls between the coarse grid's points, and over a long segment the
    quadratic stand-in for roll-then-rest misfits the tail more than the slide misfits the head,
    so the whole-segment grid alone can settle on a wrong roll time. Both starts are refined on
    the whole segment with the exact model; an early-window start is kept where its robust cost
    is lower by more than ``s.ambiguity_dcost``.
    """
    t0 = t[0]
    tau = t - t0
    dur = max(tau[-1], 1e-3)
    w = 1.0 / sig
    g = s.g_mm_s2
    grid = np.unique(np.concatenate([np.linspace(0.0, dur, 21), [1.5 * dur]]))
    starts = [_grid_linear(tau, xy, w, grid, s)]
    for win in s.guess_windows_s:
        m = tau <= win
        if win >= dur or m.sum() < 8:
            continue
        mids = 0.5 * (tau[m][1:] + tau[m][:-1])
        starts.append(_grid_linear(tau[m], xy[m], w[m], np.concatenate([[0.0], mids]), s))
    lay = ChainLayout("", t0, False, [], np.zeros(0), np.zeros(0), np.zeros(0))
    lo, hi = _bounds(lay, t[-1], s)
    best = None
    for j, (_, tr0, (cx, cy)) in enumerate(starts):
        p0 = np.array([cx[0], cy[0]])
        v0 = np.array([cx[1], cy[1]])
        a = np.array([cx[2], cy[2]])
        b = np.array([cx[3], cy[3]])
        vr = v0 + a * tr0
        sp = np.hypot(*vr)
        a_r = float(-(b @ vr) / sp) if sp > 1e-9 else s.mu_r_prior * g
        a_r = float(np.clip(a_r, 0.0, s.mu_r_max * g))
        if tr0 >= dur:
            a_r = s.mu_r_prior * g
        x0 = np.clip(np.concatenate([p0, v0, a, [tr0, a_r]]), lo, hi)
        try:
            r = least_squares(
                _residuals, x0, bounds=(lo, hi), args=(lay, t, xy, sig, s),
                x_scale="jac", max_nfev=100,
            )
            x, cost = r.x, float(r.cost)
        except ValueError:
            x, cost = x0, np.inf
        # an early-window start must fit clearly better (half a chi^2 difference of
        # 2 ambiguity_dcost): a slide of one or two samples barely changes the cost but leaves
        # its deceleration and roll time undetermined
        if best is None or cost < best[0] - (s.ambiguity_dcost if j else 1e-9):
            best = (cost, x)
    x = best[1]
    return x[0:2], x[2:4], x[4:6], x[6], x[7]


def _chain_start(tu, xyu, sgu, xy, lay: ChainLayout, s: PhysicsSettings) -> np.ndarray:
    """Start values of a chain from independent fits of its segments."""
    x0 = np.zeros(lay.n_par)
    t = tu
    edges = np.concatenate([[lay.t_start], lay.break_init, [tu[-1] + 1e-9]])
    prev_end = None
    for k in range(lay.n_seg):
        m = (tu >= edges[k]) & (tu < edges[k + 1]) if k < lay.n_seg - 1 else (tu >= edges[k])
        o = lay.move_offset(k)
        if o is None:
            x0[0:2] = np.median(xyu[m], axis=0) if m.any() else xy[0]
            continue
        if m.sum() >= 3:
            p0, v0, a, tr, ar = _move_start_guess(tu[m], xyu[m], sgu[m], s)
            # the segment starts at the break, not at its first sample
            d, vv = move_motion(np.array([edges[k] - tu[m][0]]), v0, a, tr, ar)
            p0 = p0 + d[0]
            v0 = vv[0]
            tr = max(tr - (edges[k] - tu[m][0]), 0.0)
        else:
            p0 = prev_end if prev_end is not None else (xyu[m][0] if m.any() else xy[0])
            v0 = np.zeros(2)
            a = np.zeros(2)
            tr, ar = 0.0, s.mu_r_prior * s.g_mm_s2
        if k == 0:
            x0[0:2] = p0
        x0[o : o + 6] = np.concatenate([v0, a, [tr, ar]])
    x0[lay.break_offset : lay.break_offset + lay.n_seg - 1] = lay.break_init
    return x0


def fit_chain(
    t: np.ndarray,
    xy: np.ndarray,
    sig: np.ndarray,
    lay: ChainLayout,
    s: PhysicsSettings,
    x_init: np.ndarray | None = None,
    seg_priors: dict | None = None,
) -> ChainFit:
    """Fit a ball's chain to samples ``t`` (T,) s, ``xy`` (T,2) mm with sigmas ``sig`` (T,2) mm.

    Samples inside a break's guard are left out. Each move segment is first fitted on its own
    (grid on the roll time) unless ``x_init`` is given; the chain is then fitted as a whole with continuous
    positions. Covariance: (J^T J)^-1 times the reduced chi^2 (floored, see settings).
    """
    used = used_mask(t, lay)
    tu, xyu, sgu = t[used], xy[used], sig[used]
    if x_init is None:
        x0 = _chain_start(tu, xyu, sgu, xy, lay, s)
    else:
        x0 = np.asarray(x_init, dtype=float).copy()
    lo, hi = _bounds(lay, t[-1], s)
    x0 = np.clip(x0, lo, hi)
    res = least_squares(
        _residuals, x0, bounds=(lo, hi), args=(lay, tu, xyu, sgu, s, seg_priors),
        x_scale="jac", max_nfev=400,
    )
    J = np.asarray(res.jac)
    n_data = 2 * len(tu)
    free = res.active_mask == 0  # parameters held at a bound count as known (conditional cov)
    x_fit = res.x.copy()
    starts, _ = segment_starts(x_fit, lay)
    linked_after = np.concatenate([[False], lay.links]) if s.slip_prior else np.zeros(lay.n_seg, bool)
    for k in range(lay.n_seg):
        o = lay.move_offset(k)
        if o is None:
            continue
        # a slide phase that contains no sample is not resolved: the ball rolls from the start
        # (same path to well below the noise); its slide parameters are then not free. Not so
        # after a linked ball-ball break: there the slip prior resolves the slide.
        if (x_fit[o + 4] > 0 and not linked_after[k]
                and not np.any((tu > starts[k]) & (tu < starts[k] + x_fit[o + 4]))):
            # keep the velocity the samples see (the roll-start velocity); the path moves by
            # |a| t_roll^2 / 2, far below a sample interval's worth of travel
            x_fit[o : o + 2] = x_fit[o : o + 2] + x_fit[o + 2 : o + 4] * x_fit[o + 4]
            x_fit[o + 4] = 0.0
            free[o + 2 : o + 5] = False
    dof = max(n_data - int(free.sum()), 1)
    chi2 = 2.0 * res.cost / dof
    chi2 = max(chi2, s.chi2_floor)
    cov = np.zeros((lay.n_par, lay.n_par))
    Jf = J[:, free]
    # scale columns first: parameters span mm, mm/s, mm/s^2 and s, and an unscaled J^T J is
    # too ill-conditioned for a faithful inverse
    d = np.linalg.norm(Jf, axis=0)
    d[d == 0] = 1.0
    Js = Jf / d
    cov[np.ix_(free, free)] = np.linalg.pinv(Js.T @ Js, rcond=1e-12) / np.outer(d, d) * chi2
    P, _, seg_u = chain_eval(x_fit, lay, tu)
    k_cov = chi2
    tau = 1.0
    if s.residual_corr_inflation and len(tu):
        # detection errors of a moving ball are correlated from frame to frame (shading and
        # blur change slowly along its path): the covariance of white errors is too small by
        # the residuals' integrated autocorrelation time
        r = np.clip((P - xyu) / sgu, -s.f_scale, s.f_scale)
        series = [r[seg_u == k, i] for k in np.unique(seg_u) for i in range(2)]
        tau = max(integrated_autocorr_time(series, s.corr_max_lag), 1.0)
        cov *= tau
        k_cov *= tau
    if s.unresolved_bounded and free.any():
        # directions the samples and priors leave (nearly) undetermined: the pseudo-inverse
        # gives them zero (or unbounded) variance; they are bounded by the fit's box instead
        cov[np.ix_(free, free)] = bounded_cov(Js, d, k_cov, _box_widths(lay, lo, hi, s)[free])
    rms = float(np.sqrt(np.mean(np.sum((P - xyu) ** 2, axis=1)))) if len(tu) else float("nan")
    info = np.zeros((lay.n_par, lay.n_par))
    Jd = J[:n_data][:, free]
    info[np.ix_(free, free)] = Jd.T @ Jd / k_cov
    scales = misfit_scales(P, xyu, sgu, seg_u, lay, chi2, tau, s)
    return ChainFit(lay, x_fit, cov, rms, int(len(tu)), float(chi2), t, xy, used, float(res.cost),
                    float(k_cov), info, scales)


def _box_widths(lay: ChainLayout, lo: np.ndarray, hi: np.ndarray, s: PhysicsSettings) -> np.ndarray:
    """Per parameter (n_par,): width of the range it can take, the fit's bounds where finite;
    start position and velocities (unbounded in the fit) from settings (unresolved_*)."""
    w = np.where(np.isfinite(lo) & np.isfinite(hi), hi - lo, np.nan)
    w[0:2] = s.unresolved_position_mm
    for k in range(lay.n_seg):
        o = lay.move_offset(k)
        if o is not None:
            w[o : o + 2] = 2.0 * s.unresolved_speed_mm_s
    return np.where(np.isfinite(w) & (w > 0), w, 2.0 * s.unresolved_speed_mm_s)


def bounded_cov(Js: np.ndarray, d: np.ndarray, k: float, width: np.ndarray,
                rcond: float = 1e-12) -> np.ndarray:
    """Parameter covariance (n, n) ``k (J^T J)^-1`` of a fit whose column-scaled Jacobian is
    ``Js`` (parameter x = x_s / d, ``d`` (n,)), with each direction's variance capped by the
    parameters' ranges ``width`` (n,).

    A chain with a segment that holds no sample (two contacts closer than the guards leave
    room for, at a low frame rate) fits its samples along a whole family of such segments:
    ``J^T J`` is singular, and its pseudo-inverse (cut at ``rcond`` x the largest eigenvalue, as
    before) reports zero variance along the family, so every quantity that moves along it looks
    exact; nearly singular, it reports variances far beyond anything the fit's bounds allow.
    Each parameter is a priori spread uniformly over its range (variance width^2 / 12, the
    moment-matched Gaussian has inverse variances W = diag(12 / width^2)). Along the null space N
    (orthonormal) the covariance is ``N (N^T W N)^-1 N^T``; along every other eigenvector v of
    ``J^T J`` (eigenvalue lam) the variance is ``min(k / lam, 1 / (v^T W v))``: the data's where
    they say more than the range, so a determined direction keeps exactly its variance.

    >>> import numpy as np
    >>> Js = np.array([[1.0, 1.0], [1.0, 1.0]]) / np.sqrt(2)  # only x0 + x1 is measured
    >>> C = bounded_cov(Js, np.ones(2), 1.0, np.array([np.sqrt(12.0), np.sqrt(12.0)]))
    >>> np.round(C, 3).tolist()  # (x0 + x1)/sqrt 2: 1/2 from the data; (x0 - x1)/sqrt 2: 1 from ranges
    [[0.75, -0.25], [-0.25, 0.75]]
    >>> C = bounded_cov(np.eye(2) * 10, np.ones(2), 1.0, np.array([1.0, 1.0]))
    >>> np.round(np.diag(C), 4).tolist()  # well measured: the data's variance, ranges unused
    [0.01, 0.01]
    """
    n = Js.shape[1]
    A = Js.T @ Js
    ev, V = np.linalg.eigh(A)
    w_inv = 12.0 / (np.asarray(width, float) * d) ** 2
    null = ev <= rcond * max(float(ev.max()) if n else 0.0, 1e-300)
    C = np.zeros((n, n))
    if null.any():
        N = V[:, null]
        C += N @ np.linalg.inv(N.T @ (w_inv[:, None] * N)) @ N.T
    if (~null).any():
        Vd = V[:, ~null]
        var = np.minimum(k / ev[~null], 1.0 / np.einsum("ij,i,ij->j", Vd, w_inv, Vd))
        C += (Vd * var) @ Vd.T
    return C / np.outer(d, d)


def misfit_scales(P: np.ndarray, xy: np.ndarray, sig: np.ndarray, seg: np.ndarray, lay: ChainLayout,
                  chi2_red: float, tau: float, s: PhysicsSettings) -> np.ndarray:
    """Per segment (n_seg,): variance factor >= 1 for a local lack of fit.

    The chain's covariance is scaled by the reduced chi^2 of ALL its samples (:func:`fit_chain`),
    so a misfit over a few frames next to a contact (a slide->roll time in the wrong place, an
    unmodelled hop) is diluted by hundreds of well-fitted samples elsewhere and does not show in
    the contact's sigmas. Here each move segment's residuals (fitted ``P`` vs samples ``xy``, mm,
    in units of ``sig``; robust as in the fit) are pooled over three windows: the whole segment,
    its first and its last ``s.misfit_window`` samples (those that fix the velocities at its
    breaks). A window's reduced chi^2 over the one already in the covariance (``chi2_red``: the
    chain's, floored) that fails a chi^2 test at level ``s.misfit_alpha`` (effective degrees of freedom
    2 n / tau, ``tau`` the residuals' autocorrelation time) becomes the segment's factor (largest
    window wins), times the window's residual autocorrelation time where it exceeds the chain's
    (a misfit is a run of same-signed residuals; same correction as the chain's, see
    :func:`integrated_autocorr_time`). Standard practice when a least-squares fit's chi^2/dof
    exceeds 1: scale the parameter errors by sqrt(chi^2/dof) (Particle Data Group, Review of
    Particle Physics, introduction, scale factor S; from memory), applied locally. 1 for a
    segment that fits.
    """
    from scipy.stats import chi2 as chi2_dist

    out = np.ones(lay.n_seg)
    if not s.misfit_inflation or len(P) == 0:
        return out
    z = robust_residuals(((P - xy) / sig).ravel(), s).reshape(-1, 2)
    z2 = np.sum(z**2, axis=1)
    w = int(s.misfit_window)
    for k in range(lay.n_seg):
        if lay.move_offset(k) is None:
            continue
        idx = np.flatnonzero(seg == k)
        if len(idx) < 3:
            continue
        for win in (idx, idx[:w], idx[-w:]):
            n = len(win)
            ratio = float(z2[win].sum()) / (2 * n) / max(chi2_red, 1e-12)
            dof = max(2 * n / max(tau, 1.0), 1.0)
            if ratio > chi2_dist.ppf(1.0 - s.misfit_alpha, dof) / dof:
                # a misfit is a run of same-signed residuals: like correlated noise it informs
                # the parameters less than white residuals would, by its autocorrelation time
                # beyond the chain's (already in the covariance, see fit_chain)
                tau_w = integrated_autocorr_time([z[win, 0], z[win, 1]], s.corr_max_lag)
                out[k] = max(out[k], ratio * max(tau_w / max(tau, 1.0), 1.0))
    return out


def param_misfit_sd(lay: ChainLayout, seg_misfit: np.ndarray | None) -> np.ndarray:
    """Per parameter (n_par,): sqrt of the lack-of-fit factor of the segment it belongs to (the
    start position: segment 0; a break time: the larger of its two segments)."""
    d = np.ones(lay.n_par)
    if seg_misfit is None:
        return d
    sc = np.sqrt(np.maximum(np.asarray(seg_misfit, float), 1.0))
    d[0:2] = sc[0]
    for k in range(lay.n_seg):
        o = lay.move_offset(k)
        if o is not None:
            d[o : o + N_MOVE] = sc[k]
    b = lay.break_offset
    for i in range(lay.n_seg - 1):
        d[b + i] = max(sc[i], sc[i + 1])
    return d


def widened_cov(cov: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """``D cov D`` with ``D = diag(sd)``: each parameter's standard error times its lack-of-fit
    factor, correlations kept (positive semi-definite whenever ``cov`` is)."""
    return cov * np.outer(sd, sd)


def integrated_autocorr_time(series: list[np.ndarray], max_lag: int = 50) -> float:
    """Integrated autocorrelation time tau (in samples) of zero-mean residual series pooled
    (autocorrelations from pairs within each series only): the variance of a mean, and of a
    least-squares slope over a long series, is tau times the white-noise value.

    tau = 1 + 2 sum_k rho_k, summed by Geyer's initial positive sequence (Geyer, Statistical
    Science 7:473, 1992): pairs rho_2m + rho_2m+1 are added while positive. 1 for white noise;
    (1 + phi) / (1 - phi) for an AR(1) series with coefficient phi (standard result).

    >>> import numpy as np
    >>> round(integrated_autocorr_time([np.array([1.0, -1.0] * 50)]), 2)
    1.0
    """
    series = [np.asarray(r, float) for r in series if len(r) > 2]
    den = sum(float(r @ r) for r in series)
    if den <= 0:
        return 1.0
    n_max = max(len(r) for r in series)
    lags = min(max_lag, n_max // 2)

    def rho(k: int) -> float:
        return sum(float(r[:-k] @ r[k:]) for r in series if len(r) > k) / den

    tau, prev = -1.0, 1.0  # rho_0 = 1
    for m in range(0, lags // 2):
        g = (prev if m == 0 else rho(2 * m)) + rho(2 * m + 1)
        if g <= 0:
            break
        tau += 2.0 * g
    return max(tau, 1.0)


def _seg_residuals(q, p0, t0, t, xy, sig, s, prior):
    d, _ = move_motion(t - t0, q[0:2], q[2:4], q[4], q[5])
    r = robust_residuals(((p0[None, :] + d - xy) / sig).ravel(), s)
    g = s.g_mm_s2
    ms, ss, mr, sr = prior
    return np.concatenate([r, [(np.hypot(*q[2:4]) - ms * g) / (ss * g), (q[5] - mr * g) / (sr * g)]])


def restart_after_breaks(x: np.ndarray, lay: ChainLayout, t: np.ndarray, xy: np.ndarray,
                         sig: np.ndarray, s: PhysicsSettings, seg_priors: dict | None = None) -> np.ndarray:
    """Better start values for the segments that follow a break.

    Each such segment is refitted alone (its start position held where the chain puts it) from
    two starts, keeping the better: the current values, and the slide a ball gets when its spin
    passes through the contact unchanged (a ball rolling in leaves with slip ``v_out - v_in``,
    so it decelerates at ``mu_s g`` along ``-(v_out - v_in)`` for ``2 |slip| / (7 mu_s g)``; exact
    for a frictionless ball-ball contact, a good start for cushions and strikes; after a linked
    ball-ball contact the slip brought in is added, see :func:`slip_residuals`).
    """
    x = x.copy()
    used = used_mask(t, lay)
    tu, xyu, sgu = t[used], xy[used], sig[used]
    g = s.g_mm_s2
    for k in range(1, lay.n_seg):
        o = lay.move_offset(k)
        if o is None:
            continue
        starts, pos = segment_starts(x, lay)
        t0 = starts[k]
        t1 = starts[k + 1] if k + 1 < lay.n_seg else np.inf
        m = (tu > t0) & (tu < t1)
        if m.sum() < 4:
            continue
        prior = (seg_priors or {}).get(k, (s.mu_s_prior, s.mu_s_prior_sigma, s.mu_r_prior, s.mu_r_prior_sigma))
        _, v_in = chain_eval(x, lay, np.array([t0]), seg=np.array([k - 1]))[:2]
        v_in = v_in[0]
        q_now = x[o : o + 6].copy()
        slip = q_now[0:2] - v_in
        prev = unpack_segment(x, lay, k - 1)
        if s.slip_prior and lay.links[k - 1]:
            # across a ball-ball contact the slip a ball brings in is carried through
            if prev is not None:
                slip = slip + slip_velocity(prev[0], prev[1], prev[2], t0 - starts[k - 1])
            if lay.slip_shift is not None and np.all(np.isfinite(lay.slip_shift[k - 1])):
                slip = slip + lay.slip_shift[k - 1][0] * lay.slip_shift[k - 1][1:]
        us = float(np.hypot(*slip))
        cands = [q_now]
        if us > 1e-6:
            mu = prior[0]
            a = -mu * g * slip / us
            cands.append(np.concatenate([q_now[0:2], a, [2 * us / (7 * mu * g)], [q_now[5]]]))
        dur = float(tu[m][-1] - t0)
        lo = np.array([-np.inf, -np.inf, -s.mu_s_max * g, -s.mu_s_max * g, 0.0, 0.0])
        hi = np.array([np.inf, np.inf, s.mu_s_max * g, s.mu_s_max * g, 3.0 * dur + 0.1, s.mu_r_max * g])
        best = None
        for q0 in cands:
            q0 = np.clip(q0, lo, hi)
            try:
                r = least_squares(_seg_residuals, q0, bounds=(lo, hi), x_scale="jac", max_nfev=100,
                                  args=(pos[k], t0, tu[m], xyu[m], sgu[m], s, prior))
            except ValueError:
                continue
            if best is None or r.cost < best.cost:
                best = r
        if best is not None:
            x[o : o + 6] = best.x
    return x


def slide_into_breaks(x: np.ndarray, lay: ChainLayout, s: PhysicsSettings,
                      seg_priors: dict | None = None, side: str = "before",
                      min_sigmas: float = 1.0) -> np.ndarray | None:
    """Start values in which a ball slides through a linked ball-ball break as its slip link says.

    Over a few frames the samples hardly tell a slide from a roll (the paths differ by
    ``|a| t^2 / 2``), so a fit can put a roll-over just before a contact, or just before the end
    of the segment after it. Rolling at the break, the slip is 0 with no gradient in ``t_roll``
    and the cloth-slip prior (:func:`slip_residuals`: ``u_start(k+1) = u_end(k) + dv + X n``)
    cannot move it; a short slide after the break has a gradient, but the fit reaches the long
    slide the prior asks for only past a ridge of data cost. Each such start is therefore tried
    as a whole: ``side="before"``: segment k, rolling at the break, becomes one slide (a ball
    sliding at a break slid through its whole segment: while sliding the slip keeps its
    direction and only shrinks, module docstring) with slip ``u_in = u_start(k+1) - dv - X n``
    there; ``side="after"``: segment k+1 starts with slip ``u_out = u_end(k) + dv + X n``. The
    slide decelerates at ``mu_s g`` along ``-u`` and rolls over ``|u| / (7/2 mu_s g)`` later; the
    velocity at the break is kept. Only breaks whose slip disagrees with the link by more than
    ``min_sigmas`` link sigmas are changed; None when there is none.

    Units: x as in :func:`fit_chain` (mm, mm/s, mm/s^2, s); ``seg_priors`` as in :func:`fit_chain`.
    """
    if not (s.slip_prior and s.slide_through_restart):
        return None
    x = np.asarray(x, dtype=float).copy()
    changed = False
    g = s.g_mm_s2
    for i in np.flatnonzero(lay.links):
        i = int(i)
        st = _link_state(x, lay, i)
        if st is None or (st[0] is None and side == "before"):
            continue
        prev, tau, v_end, u_end, v1, u_start, dv = st
        shift = np.zeros(2)
        sig = np.hypot(s.slip_sigma_rel * float(np.hypot(*dv)), s.slip_sigma_mm_s)
        if lay.slip_shift is not None and np.all(np.isfinite(lay.slip_shift[i])):
            X, nx, ny = lay.slip_shift[i]
            shift = X * np.array([nx, ny])
            sig = np.hypot(sig, float(lay.slip_shift_sigma[i]))
        if side == "before":
            if prev[2] > tau:  # t_roll of segment i
                continue  # already sliding at the break: the prior has a gradient there
            u, k, t_b, v_b = u_start - dv - shift, i, tau, v_end
        else:
            u, k, t_b, v_b = u_end + dv + shift, i + 1, 0.0, v1
            if float(np.hypot(*(u - u_start))) <= min_sigmas * sig:
                continue
        us = float(np.hypot(*u))
        if us <= min_sigmas * sig:
            continue
        mu = (seg_priors or {}).get(k, (s.mu_s_prior,))[0]
        a_new = -mu * g * u / us
        o = lay.move_offset(k)
        x[o : o + 2] = v_b - a_new * t_b
        x[o + 2 : o + 4] = a_new
        x[o + 4] = t_b + us / (3.5 * mu * g)
        changed = True
    return x if changed else None
