"""Model-based refinement of measured contacts: refit each contact with the shot simulator.

For one measured contact (a row of ``ShotPhysics.contacts``) a local window is taken: from the
latest previous break (strike or contact) of the balls involved to each ball's next break (or
``max_side_s`` either side of the contact). The balls' states at the window start are free
parameters -- centre (mm), velocity (mm/s), cloth slip velocity ``u = v + w x (-R z)`` (mm/s,
which fixes the horizontal spin) and side spin ``wz`` (rad/s); a ball at rest there has only its
centre -- together with the cloth's ``mu_s`` and ``mu_r`` and the contact's restitution
(``e_ball_ball``, or ``e_cushion`` plus ``mu_cushion`` for a cushion). The window is simulated with
:func:`physics.simulate.simulate` holding only the balls involved, and the simulated centres are
fitted to the raw samples (weighted, robust ``soft_l1`` least squares, started from the analytic
result). The contact time follows from the simulated geometry; the reported restitution is the
simulated contact's measured ratio (normal separation over approach speed), and its sigma comes
from the fit's Jacobian covariance (scaled by the reduced chi^2, floored as in
:class:`physics.settings.PhysicsSettings`) plus the same finite-contact-time model term the
analytic stage adds.

Units: mm, s, mm/s, rad/s, kg. Table frame per DEVELOPERS.md.

Whether this beats the analytic chain fit is measured by ``scripts/bench_refine.py`` on data the
simulator did not make (outside footage truth, pymunk shots). It does not: the refit ties the
motion after a contact to the motion before it through our contact laws, another engine's (or
real balls') contact details differ, and the fit bends e to absorb the difference (median |e
error| several times the analytic one, sigmas too small). So the pipeline does not use it (no
``--refine`` option); see DEVELOPERS.md for the figures.
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

from feltlab.errors import FeltlabError
from feltlab.standards import MU_BALL_BALL_RANGE, MU_CUSHION, TablePreset
from physics.events import BallSamples, ball_samples
from physics.settings import PhysicsSettings
from physics.simulate import BallInit, SimParams, simulate

__all__ = ["RefineSettings", "RefinedContact", "refine_contact", "refine_contacts", "REFINED_COLUMNS"]

REFINED_COLUMNS = [
    "contact", "e_refined", "e_refined_sigma", "t_refined_s", "converged", "n_samples",
    "chi2_red", "n_sim", "time_s", "note",
]


@dataclass(frozen=True)
class RefineSettings:
    """Settings of :func:`refine_contacts` (each value with its source)."""

    #: Ball-ball friction, fixed: mid of the measured 0.03-0.08 range (Physics of Pool FAQ, in
    #: feltlab.standards; from memory). Throw only tilts the object ball by ~1-3 degrees, which
    #: the window data cannot separate from the normal well, so it is not fitted.
    mu_ball_ball: float = 0.5 * (MU_BALL_BALL_RANGE[0] + MU_BALL_BALL_RANGE[1])
    #: Fit mu_ball_ball too (prior: the value above with this sigma, half the published range).
    fit_mu_ball_ball: bool = False
    mu_ball_ball_prior_sigma: float = 0.5 * (MU_BALL_BALL_RANGE[1] - MU_BALL_BALL_RANGE[0])
    #: Cushion friction prior: Mathavan et al. 2010 value (feltlab.standards) with a wide sigma
    #: (design choice: cushions and rubbers vary).
    mu_cushion_prior: float = MU_CUSHION
    mu_cushion_prior_sigma: float = 0.1
    #: Side-spin prior sigma (rad/s): weak, ~ a hard side-spin stroke (v/R at 3 m/s ~ 100 rad/s;
    #: design choice, only keeps wz defined where the window says nothing about it).
    wz_prior_sigma: float = 100.0
    #: Largest stretch of samples used on each side of the contact (s). Design choice: about the
    #: slide phase after a medium-speed contact (2|u| / (7 mu_s g) ~ 0.2 s at 1.4 m/s, mu_s 0.2),
    #: so the window holds the contact's direct effect and little of the rolling-resistance model.
    max_side_s: float = 0.3
    #: Fewest samples wanted on each side of the contact (per moving ball before, per ball after).
    min_side_samples: int = 4
    #: Limit on residual evaluations of the least-squares solver (each is one simulation; the
    #: Jacobian costs one simulation per free parameter). Design choice: cost per contact.
    max_nfev: int = 40
    #: Relative finite-difference step of the Jacobian (scipy's diff_step). Simulated positions
    #: are exact to ~1e-9 mm, so 1e-6 keeps the difference noise far below the signal.
    diff_step: float = 1e-6


@dataclass
class RefinedContact:
    """Refit of one contact: restitution and sigma, simulated contact time (s), fit facts."""

    contact: int
    e_refined: float
    e_refined_sigma: float
    t_refined_s: float
    converged: bool
    n_samples: int
    chi2_red: float
    n_sim: int
    time_s: float
    note: str = ""


# --------------------------------------------------------------------------- window
_BREAK_KINDS = ("strike", "ball-ball", "ball-cushion")


def _window(ph, contact: pd.Series, balls: list[str], samples: dict[str, BallSamples],
            s: PhysicsSettings, rs: RefineSettings):
    """(t_start, {ball: t_end}, guard): the local window of one contact."""
    tc = float(contact.t_s)
    ev = ph.events
    t_start = tc - rs.max_side_s
    ends: dict[str, float] = {}
    for b in balls:
        e = ev[(ev["ball"] == b) & (ev["contact"] != int(contact.contact))]
        brk = e[e["kind"].isin(_BREAK_KINDS)]
        before = brk[brk["t_s"] < tc - 1e-9]
        after = e[(e["t_s"] > tc + 1e-9) & e["kind"].isin(_BREAK_KINDS + ("leave",))]
        if len(before):
            k = before.iloc[int(np.argmax(before["t_s"].to_numpy()))]
            t_start = max(t_start, float(k.t_s) + _guard(k.kind, s))
        t_start = max(t_start, float(samples[b].t[0]) - 1e-9)
        t_end = min(tc + rs.max_side_s, float(samples[b].t[-1]) + 1e-9)
        if len(after):
            k = after.iloc[int(np.argmin(after["t_s"].to_numpy()))]
            t_end = min(t_end, float(k.t_s) - _guard(k.kind, s))
        ends[b] = t_end
    return t_start, ends, _guard(contact.kind, s)


def _guard(kind: str, s: PhysicsSettings) -> float:
    return {"ball-ball": s.guard_ball_s, "ball-cushion": s.guard_cushion_s}.get(kind, s.guard_strike_s)


def _slide_slip(ph, ball: str, t: float, v: np.ndarray) -> np.ndarray:
    """Start guess of the slip velocity (mm/s) at t from the analytic segments table."""
    seg = ph.segments
    rows = seg[(seg["ball"] == ball) & (seg["t0_s"] <= t + 1e-9) & (seg["t1_s"] > t)]
    if not len(rows):
        return np.zeros(2)
    r = rows.iloc[0]
    if r.phase != "slide":
        return np.zeros(2)
    a = np.array([r.ax_mm_s2, r.ay_mm_s2], float)
    if not np.all(np.isfinite(a)):
        return np.zeros(2)
    t_roll = float(r.t_roll_s) if np.isfinite(r.t_roll_s) else float(r.t1_s)
    return -3.5 * a * max(t_roll - t, 0.0)  # u(t) = -(7/2) a (t_roll - t), see physics.segments


# --------------------------------------------------------------------------- model
class _Model:
    """Parameter vector <-> simulation of the window; residuals against the samples."""

    def __init__(self, kind, cushion, balls, moving, t0, data, table, R, m, s, rs, mu):
        self.kind, self.cushion, self.balls, self.moving = kind, cushion, balls, moving
        self.t0, self.data, self.table, self.R, self.m = t0, data, table, R, m
        self.s, self.rs, self.mu = s, rs, mu
        self.t_sim = max(float(d[0][-1]) for d in data.values()) - t0 + 1e-6
        self.n_sim = 0
        off = 0
        self.off = {}
        for b in balls:
            self.off[b] = off
            off += 7 if moving[b] else 2
        self.i_mus, self.i_mur, self.i_e = off, off + 1, off + 2
        self.i_muc = off + 3 if kind == "ball-cushion" else None
        self.i_mub = off + 3 if kind == "ball-ball" and rs.fit_mu_ball_ball else None
        self.n_par = off + (4 if self.i_muc is not None or self.i_mub is not None else 3)

    def inits(self, p: np.ndarray) -> list[BallInit]:
        L, W, R = self.table.length_mm, self.table.width_mm, self.R
        out = []
        for b in self.balls:
            o = self.off[b]
            x = min(max(p[o], R + 1e-6), L - R - 1e-6)
            y = min(max(p[o + 1], R + 1e-6), W - R - 1e-6)
            if self.moving[b]:
                vx, vy, ux, uy, wz = p[o + 2 : o + 7]
                # u = v + w x (-R z) = (vx - R wy, vy + R wx)
                out.append(BallInit(b, x, y, vx, vy, (uy - vy) / R, (vx - ux) / R, wz,
                                    radius_mm=R, mass_kg=self.m))
            else:
                out.append(BallInit(b, x, y, radius_mm=R, mass_kg=self.m))
        return out

    def params(self, p: np.ndarray) -> SimParams:
        kw = dict(mu_slide=float(p[self.i_mus]), mu_roll=float(p[self.i_mur]),
                  mu_ball_ball=self.rs.mu_ball_ball, g_mm_s2=self.s.g_mm_s2)
        if self.kind == "ball-ball":
            kw["e_ball_ball"] = float(min(max(p[self.i_e], 0.0), 1.0))
            if self.i_mub is not None:
                kw["mu_ball_ball"] = float(max(p[self.i_mub], 0.0))
        else:
            kw["e_cushion"] = float(min(max(p[self.i_e], 0.0), 1.0))
            kw["mu_cushion"] = float(max(p[self.i_muc], 0.0))
        return SimParams.for_table(self.table, **kw)

    def run(self, p: np.ndarray):
        self.n_sim += 1
        try:
            return simulate(self.inits(p), self.params(p), self.t_sim)
        except FeltlabError:
            return None

    def data_residuals(self, p: np.ndarray, res=None) -> np.ndarray | None:
        res = res if res is not None else self.run(p)
        if res is None:
            return None
        out = []
        for k, b in enumerate(res.ball_ids):
            t, xy, sig = self.data[b]
            st = res.state_at(np.clip(t - self.t0, 0.0, self.t_sim))
            out.append(((st.pos[:, k] - xy) / sig).ravel())
        return np.concatenate(out)

    def prior_residuals(self, p: np.ndarray) -> np.ndarray:
        mus, sds, mur, sdr = self.mu
        r = [(p[self.i_mus] - mus) / sds, (p[self.i_mur] - mur) / sdr]
        for b in self.balls:
            if self.moving[b]:
                r.append(p[self.off[b] + 6] / self.rs.wz_prior_sigma)
        if self.i_muc is not None:
            r.append((p[self.i_muc] - self.rs.mu_cushion_prior) / self.rs.mu_cushion_prior_sigma)
        if self.i_mub is not None:
            r.append((p[self.i_mub] - self.rs.mu_ball_ball) / self.rs.mu_ball_ball_prior_sigma)
        return np.array(r, float)

    def n_data(self) -> int:
        return sum(2 * len(d[0]) for d in self.data.values())

    def residuals(self, p: np.ndarray) -> np.ndarray:
        r = self.data_residuals(p)
        if r is None:  # impossible start (overlap): a large, flat penalty
            r = np.full(self.n_data(), 1e3)
        return np.concatenate([r, self.prior_residuals(p)])

    def the_contact(self, res, tc: float):
        """The simulated contact that stands for the measured one (nearest in time), or None."""
        best, bd = None, np.inf
        for c in res.contacts:
            if c.micro or c.kind != self.kind:
                continue
            if self.kind == "ball-cushion" and (c.ball_a != self.balls[0] or c.cushion != self.cushion):
                continue
            d = abs(c.t_s + self.t0 - tc)
            if d < bd:
                best, bd = c, d
        return best


# --------------------------------------------------------------------------- fit
def refine_contact(ph, contact: pd.Series, samples: dict[str, BallSamples], table: TablePreset,
                   ball_radius_mm: float, ball_mass_kg: float, fps: float,
                   settings: PhysicsSettings = PhysicsSettings(),
                   refine: RefineSettings = RefineSettings()) -> RefinedContact:
    """Refit one measured contact (a row of ``ph.contacts``) with the simulator; see the module doc."""
    t_wall = time.perf_counter()
    s, rs, R, m = settings, refine, float(ball_radius_mm), float(ball_mass_kg)
    ci = int(contact.contact)
    kind = str(contact.kind)
    balls = [str(contact.ball_a)] + ([str(contact.ball_b)] if kind == "ball-ball" else [])

    def fail(note: str) -> RefinedContact:
        return RefinedContact(ci, float("nan"), float("nan"), float("nan"), False, 0, float("nan"), 0,
                              time.perf_counter() - t_wall, note)

    if any(b not in samples or b not in ph.fits for b in balls):
        return fail("no samples or fitted motion for a ball of this contact")
    tc = float(contact.t_s)
    t0, ends, guard = _window(ph, contact, balls, samples, s, rs)
    data, moving, p0 = {}, {}, []
    for b in balls:
        smp = samples[b]
        keep = (smp.t >= t0) & (smp.t <= ends[b]) & (np.abs(smp.t - tc) >= guard)
        n_before = int((keep & (smp.t < tc)).sum())
        n_after = int((keep & (smp.t > tc)).sum())
        P, V = ph.state(b, t0 + 1e-9)
        moving[b] = bool(np.hypot(*V) > s.rest_speed_mm_s)
        if n_after < rs.min_side_samples or (moving[b] and n_before < rs.min_side_samples):
            return fail(f"too few samples of {b} in the window ({n_before} before, {n_after} after)")
        if not moving[b] and n_before < 1:
            return fail(f"no sample of resting ball {b} before the contact")
        data[b] = (smp.t[keep], smp.xy[keep], smp.sig[keep])
        p0 += [P[0], P[1]]
        if moving[b]:
            u = _slide_slip(ph, b, t0, V)
            p0 += [V[0], V[1], u[0], u[1], 0.0]
    if not any(moving.values()):
        return fail("no ball of this contact moves at the window start")
    mus = ph.mu_s if np.isfinite(ph.mu_s) and 0.05 < ph.mu_s < s.mu_s_max else s.mu_s_prior
    sds = max(ph.mu_s_sigma, s.shot_mu_s_rel_sigma * mus) if np.isfinite(ph.mu_s_sigma) else s.fallback_mu_s_sigma
    mur = ph.mu_r if np.isfinite(ph.mu_r) and 0 < ph.mu_r < s.mu_r_max else s.mu_r_prior
    sdr = max(ph.mu_r_sigma, s.shot_mu_r_rel_sigma * mur) if np.isfinite(ph.mu_r_sigma) else s.fallback_mu_r_sigma
    model = _Model(kind, str(contact.cushion) if kind == "ball-cushion" else None, balls, moving, t0,
                   data, table, R, m, s, rs, (mus, sds, mur, sdr))
    e0 = float(contact.e) if np.isfinite(contact.e) else 0.9
    p0 += [mus, mur, e0]
    lo = [-np.inf] * (len(p0) - 3) + [0.03, 0.0005, 0.05]
    hi = [np.inf] * (len(p0) - 3) + [s.mu_s_max, s.mu_r_max, 1.0]
    if kind == "ball-cushion":
        p0.append(rs.mu_cushion_prior)
        lo.append(0.0)
        hi.append(0.8)
    elif rs.fit_mu_ball_ball:
        p0.append(rs.mu_ball_ball)
        lo.append(0.0)
        hi.append(0.3)
    p0 = np.array(p0, float)
    lo, hi = np.array(lo), np.array(hi)
    p0 = np.clip(p0, lo + 1e-6 * (hi - lo).clip(max=1), hi - 1e-6 * (hi - lo).clip(max=1))
    scale = np.ones(len(p0))
    for b in balls:
        o = model.off[b]
        if moving[b]:
            scale[o + 2 : o + 6] = 10.0
            scale[o + 6] = 10.0
    scale[model.i_mus], scale[model.i_mur], scale[model.i_e] = 0.01, 0.001, 0.01
    for i in (model.i_muc, model.i_mub):
        if i is not None:
            scale[i] = 0.01
    try:
        sol = least_squares(model.residuals, p0, bounds=(lo, hi), x_scale=scale, loss=s.loss,
                            f_scale=s.f_scale, diff_step=rs.diff_step, max_nfev=rs.max_nfev,
                            method="trf")
    except (ValueError, np.linalg.LinAlgError) as exc:
        return fail(f"least squares failed: {exc}")
    p = sol.x
    res = model.run(p)
    if res is None:
        return fail("fitted start state is impossible (balls overlap or off the table)")
    c = model.the_contact(res, tc)
    if c is None:
        return fail("the fitted motion has no such contact")
    rd = model.data_residuals(p, res)
    nd = len(rd)
    dof = max(nd - len(p), 1)
    chi2 = float(np.sum(rd**2) / dof)
    # covariance from the solver's (loss-weighted) Jacobian
    J = sol.jac
    cov = np.linalg.pinv(J.T @ J) * max(chi2, s.chi2_floor)
    # gradient of the simulated contact's e (and t) by forward differences
    g = np.zeros((2, len(p)))
    base = np.array([c.e_measured, c.t_s])
    for k in range(len(p)):
        h = rs.diff_step * 100 * max(1.0, abs(p[k])) * (1 if p[k] + 1e-12 < hi[k] else -1)
        q = p.copy()
        q[k] += h
        rk = model.run(q)
        ck = model.the_contact(rk, tc) if rk is not None else None
        if ck is not None:
            g[:, k] = (np.array([ck.e_measured, ck.t_s]) - base) / h
    var = np.einsum("ij,jk,ik->i", g, cov, g)
    # finite contact time: cloth friction acts on an unmodelled schedule (as the analytic stage)
    ph_after = res.phase_at([min(c.t_s + 1e-6, res.t_end_s)])[0]
    n_slide = sum(ph_after[k] == "slide" for k in range(len(res.ball_ids)))
    t_model = s.model_time_ball_s if kind == "ball-ball" else s.model_time_cushion_s
    var[0] += n_slide * (float(p[model.i_mus]) * s.g_mm_s2 * t_model / max(c.speed_in_mm_s, 1e-9)) ** 2
    idx = [model.i_mus, model.i_mur, model.i_e]
    at_bound = any(min(p[i] - lo[i], hi[i] - p[i]) < 1e-6 for i in idx)
    ok = bool(sol.status > 0) and np.isfinite(var[0]) and not at_bound
    note = "" if ok else ("a parameter at its bound" if at_bound else f"solver: {sol.message}")
    return RefinedContact(ci, float(c.e_measured), float(math.sqrt(max(var[0], 0.0))), float(c.t_s + t0), ok,
                          nd // 2, chi2, model.n_sim, time.perf_counter() - t_wall, note)


def refine_contacts(ph, tracks: pd.DataFrame, detections: pd.DataFrame | None, table: TablePreset,
                    ball_radius_mm: float, ball_mass_kg: float, fps: float,
                    settings: PhysicsSettings = PhysicsSettings(),
                    refine: RefineSettings = RefineSettings()) -> pd.DataFrame:
    """Refit every measured contact of ``ph`` (a :class:`physics.pipeline.ShotPhysics` made from the
    same tracks/detections); one row per contact with the columns in ``REFINED_COLUMNS``."""
    samples = ball_samples(tracks, detections, settings)
    rows = []
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        for _, c in ph.contacts.iterrows():
            rows.append(refine_contact(ph, c, samples, table, ball_radius_mm, ball_mass_kg, fps,
                                       settings, refine))
    return pd.DataFrame([r.__dict__ for r in rows], columns=REFINED_COLUMNS)
