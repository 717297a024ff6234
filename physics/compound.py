"""Compound contacts: several balls touching within one frame period (cluster breaks, chains).

When a moving ball meets a group of touching or nearly touching balls, momentum runs along the
group in well under a millisecond (one ball-ball contact lasts ~0.3 ms, Hertz estimate in
REFERENCES.md), so video sees each ball's velocity only before and after the whole sequence. The
velocity changes still say how much impulse crossed each link. With equal masses m, a link l
between balls a and b pushes them apart along its line of centres n_l (a -> b) with a normal
impulse m J_l >= 0 (contact forces only push):

    dv_i = sum_l s_il J_l n_l        (s_il = +1 if i is b of link l, -1 if i is a),

solved for J >= 0 by weighted non-negative least squares (scipy.optimize.nnls, Lawson & Hanson,
"Solving Least Squares Problems", 1974). J is in mm/s (impulse / m). A link is a contact when J is
larger than ``dv_z`` of its standard errors and ``dv_floor_mm_s``. Ball-ball friction (throw) adds
a tangential impulse of up to mu_bb J (mu_bb 0.03-0.08, Physics of Pool FAQ;
:data:`feltlab.standards.MU_BALL_BALL_RANGE`) across the link's line of centres, on both of its
balls: an unknown T_l per link with the prior T_l ~ N(0, (mu_bb_max J_l)^2) (a ball that passes a
push on changes little, yet carries the throw of both its links).

Further physical conditions on a group: an impulse source (some link closing before the event)
and no energy source (the balls' kinetic energy does not rise, :func:`physics.events.energy_gain_z`).

Evidence rules: geometric - every link's sampled gap is ~0 (below the same margin as a single
contact: noise plus one frame of travel) within one frame of the group's time; kinematic - some
ball of the group jumps by more than ``dv_z`` standard errors, and every link reported carries a
significant impulse (a ball that only moves away from a neighbour is not in contact with it).

Restitution of a link needs the two balls' velocities just before and after that link; inside a
sub-frame sequence those are never seen, so such links get e = NaN with a note. The group's total
momentum in and out and its kinetic-energy loss are measurable and reported on every link of the
group (:func:`annotate_groups`). Table frame, mm, s, kg; impulses N·s; energies J.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import nnls

from feltlab.standards import MU_BALL_BALL_RANGE
from physics.events import (
    BallSamples,
    ContactCandidate,
    energy_gain_z,
    kink_fit_own,
    local_speed,
    pair_gaps,
)
from physics.settings import PhysicsSettings

#: Tangential (throw) impulse as a fraction of a link's normal impulse: the published maximum of
#: ball-ball friction (Physics of Pool FAQ, feltlab.standards.MU_BALL_BALL_RANGE).
MU_BB_MAX = MU_BALL_BALL_RANGE[1]
#: Note written on the links of a compound event.
NOTE_SEQUENCE = ("sub-frame sequence: the balls of this group touched within one frame period, so each "
                 "link's own before/after velocities are not seen; e is not measurable, the group's "
                 "momentum and energy are")


@dataclass
class LinkSolve:
    """Link impulses J (L,) mm/s (impulse / ball mass), sigmas (L,), reduced chi^2 and dof;
    ball_chi2 (N,): each ball's misfit (2 dof, NaN for a ball not measured); open_balls: balls
    touched by an unseen ball in :func:`solve_links_open`."""

    J: np.ndarray
    J_sigma: np.ndarray
    chi2_red: float
    dof: int
    ball_chi2: np.ndarray | None = None
    open_balls: tuple = ()
    #: the solve's whitened objective (data chi^2 plus throw prior)
    objective: float = np.nan


def solve_links(dv: np.ndarray, cov: np.ndarray, links: list[tuple[int, int]],
                normals: np.ndarray, mu_bb: float = MU_BB_MAX, throw_sd: np.ndarray | None = None) -> LinkSolve:
    """Non-negative link impulses from velocity changes.

    throw_sd (L,) mm/s: fixed prior sigmas of the links' throw impulses (one solve, a fixed
    convex problem); None: mu_bb times the link's own impulse, iterated with the solution.

    dv (N,2) mm/s velocity change of each ball; cov (N,2,2) its covariance (NaN rows: ball not
    measured, left out); links: (a, b) ball indices; normals (L,2) unit a -> b.

    >>> import numpy as np
    >>> dv = np.array([[-1000.0, 0], [0, 0], [1000.0, 0]])
    >>> cov = np.tile(np.eye(2) * 25.0, (3, 1, 1))
    >>> r = solve_links(dv, cov, [(0, 1), (1, 2)], np.array([[1.0, 0], [1.0, 0]]))
    >>> np.round(r.J).tolist()
    [1000.0, 1000.0]
    """
    N, L = len(dv), len(links)
    A = np.zeros((2 * N, L))
    for l, (a, b) in enumerate(links):
        A[2 * b : 2 * b + 2, l] += normals[l]
        A[2 * a : 2 * a + 2, l] -= normals[l]
    # throw: each link also carries a friction impulse across its line of centres, |T_l| <= mu_bb
    # J_l on both of its balls (a ball that passes a push on changes little but carries the throw
    # of both its links). T_l is an unknown of either sign (T+ - T-, both >= 0) with the prior
    # T_l ~ N(0, (mu_bb J_l)^2); J_l comes from the solve: start without throw, then repeat.
    tang = np.column_stack([-normals[:, 1], normals[:, 0]]) if L else np.zeros((0, 2))
    At = np.zeros((2 * N, L))
    for l, (a, b) in enumerate(links):
        At[2 * b : 2 * b + 2, l] += tang[l]
        At[2 * a : 2 * a + 2, l] -= tang[l]
    rows, y, used = [], [], []
    for i in range(N):
        if not np.all(np.isfinite(dv[i])) or not np.all(np.isfinite(cov[i])):
            continue
        Wi = np.linalg.cholesky(np.linalg.inv(cov[i])).T  # Wi^T Wi = cov^-1
        rows.append(Wi @ np.hstack([A[2 * i : 2 * i + 2], At[2 * i : 2 * i + 2], -At[2 * i : 2 * i + 2]]))
        y.append(Wi @ dv[i])
        used.append(i)
    if not rows:
        return LinkSolve(np.zeros(L), np.full(L, np.inf), np.nan, 0, np.full(N, np.nan))
    Ad, yd = np.vstack(rows), np.concatenate(y)
    n_data = len(yd)
    J, rnorm = nnls(Ad[:, :L], yd)
    Aw, yw, x = Ad[:, :L], yd, J
    for _ in range(3 if mu_bb > 0 or throw_sd is not None else 0):
        # mm/s; floor keeps the prior rows finite
        sd_t = np.maximum(mu_bb * J if throw_sd is None else np.asarray(throw_sd, float), 1.0)
        prior = np.zeros((L, 3 * L))
        prior[np.arange(L), L + np.arange(L)] = 1.0 / sd_t
        prior[np.arange(L), 2 * L + np.arange(L)] = -1.0 / sd_t
        Aw, yw = np.vstack([Ad, prior]), np.concatenate([yd, np.zeros(L)])
        x, rnorm = nnls(Aw, yw)
        J_new = x[:L]
        done = np.allclose(J_new, J, rtol=0.02, atol=1.0)
        J = J_new
        if done or throw_sd is not None:
            break
    dof = max(n_data - int((J > 0).sum()), 1)
    red = max(float(rnorm**2) / dof, 1.0)
    # each ball's own misfit (whitened residual, 2 dof)
    xa = x if len(x) == 3 * L else np.concatenate([x, np.zeros(2 * L)])
    res = Ad @ xa - yd
    ball_chi2 = np.full(N, np.nan)
    for j, i in enumerate(used):
        ball_chi2[i] = float(res[2 * j] ** 2 + res[2 * j + 1] ** 2)
    sig = np.full(L, np.inf)
    act = np.flatnonzero(x > 0)
    if len(act):
        C = np.linalg.pinv(Aw[:, act].T @ Aw[:, act]) * red
        sd = np.sqrt(np.clip(np.diag(C), 0, None))
        for j, a in enumerate(act):
            if a < L:
                sig[a] = sd[j]
    # a link at the bound: its one-sided sigma is that of the link fitted alone
    for l in np.flatnonzero(J <= 0):
        col = Aw[:, l]
        nrm = float(col @ col)
        sig[l] = np.sqrt(red / nrm) if nrm > 0 else np.inf
    return LinkSolve(J, sig, red, dof, ball_chi2, objective=float(rnorm**2))


def unseen_places(pos: np.ndarray, radius_mm: float, tol_mm: float, step_deg: float = 5.0) -> list[tuple]:
    """Where an untracked ball could rest among balls at ``pos`` (N,2) mm (NaN rows ignored):
    centres 2R from some ball, on a ``step_deg`` grid around it, overlapping no ball by more than
    ``tol_mm``. Returns (centre (2,), touched ball indices (k,), unit normals (k,2) from the
    place to each touched ball, within 2R + tol_mm), one per distinct set of touched balls."""
    ok_b = np.all(np.isfinite(pos), axis=1)
    th = np.radians(np.arange(0.0, 360.0, step_deg))
    u = np.column_stack([np.cos(th), np.sin(th)])
    seen, out = set(), []
    for i in np.flatnonzero(ok_b):
        for c in pos[i][None, :] + 2 * radius_mm * u:
            d = np.hypot(*(pos[ok_b] - c[None, :]).T)
            if np.any(d < 2 * radius_mm - tol_mm):
                continue
            idx = np.flatnonzero(ok_b)[d < 2 * radius_mm + tol_mm]
            key = tuple(idx.tolist())
            if key in seen:
                continue
            seen.add(key)
            nrm = (pos[idx] - c[None, :]) / np.hypot(*(pos[idx] - c[None, :]).T)[:, None]
            out.append((c, idx, nrm))
    return out


def solve_links_open(dv: np.ndarray, cov: np.ndarray, links: list[tuple[int, int]],
                     normals: np.ndarray, z: float, pos: np.ndarray, radius_mm: float,
                     tol_mm: float = 3.0, mu_bb: float = MU_BB_MAX) -> LinkSolve:
    """:func:`solve_links` for a group that may hold a ball the tracker lost.

    A ball's velocity change is the sum of the impulses of ALL its touching neighbours; when one
    of them is not tracked (a ball the colour of the cloth, hidden, merged with another), the
    known links cannot balance the balls it touched, and the misfit spreads over the solve (the
    links near it take wrong impulses, and the reduced chi^2 scales every sigma up). An untracked
    ball must sit where a ball fits: 2R from some ball, overlapping none
    (:func:`unseen_places`, ``pos`` (N,2) mm at the event, ``tol_mm`` for the place grid and
    position noise); it pushes every ball it touches along their line of centres with a
    non-negative impulse, and its own velocity is unknown. Such a ball is added where it lowers
    the group's objective by more than z^2 (a likelihood-ratio test at the same z as every other
    test here), the best place first, at most one per four tracked balls. The comparison holds
    each link's throw prior fixed at the current solve's (mu_bb J), a fixed convex problem in
    which more unknowns can only lower the objective. Returns the real links' solve (with throw);
    ``open_balls``: the tracked balls touched by an added unseen ball."""
    dv = np.asarray(dv, dtype=float)
    N, L = len(dv), len(links)
    links = list(links)
    normals = np.asarray(normals, dtype=float).reshape(L, 2)
    extra_l: list[tuple[int, int]] = []
    extra_n: list[np.ndarray] = []

    def solve(el, en, mu, tsd=None, n_unseen=0):
        d2 = np.vstack([dv, np.full((n_unseen, 2), np.nan)])
        c2 = np.concatenate([cov, np.full((n_unseen, 2, 2), np.nan)]) if n_unseen else cov
        nn = np.vstack([normals] + [e[None, :] for e in en]) if el else normals
        return solve_links(d2, c2, links + el, nn, mu, tsd)

    n_ok = int(np.sum(np.all(np.isfinite(dv), axis=1)))
    places = unseen_places(pos, radius_mm, tol_mm)
    opened: set[int] = set()
    n_un = 0
    sol = solve([], [], mu_bb)
    while sol.ball_chi2 is not None and n_un < max(n_ok // 4, 1) and places:
        tsd = mu_bb * sol.J
        chi0 = solve(extra_l, extra_n, 0.0, tsd, n_un).objective
        if chi0 <= z * z:
            break
        best = None
        for pi, (_, idx, nrm) in enumerate(places):
            el = extra_l + [(N + n_un, int(j)) for j in idx]
            en = extra_n + list(nrm)
            trial = solve(el, en, 0.0, np.append(tsd, np.zeros(len(idx))), n_un + 1)
            drop = chi0 - trial.objective
            if best is None or drop > best[0]:
                best = (drop, pi)
        if best is None or best[0] <= z * z:
            break
        _, idx, nrm = places.pop(best[1])
        extra_l += [(N + n_un, int(j)) for j in idx]
        extra_n += list(nrm)
        n_un += 1
        opened |= set(int(j) for j in idx)
        sol = solve(extra_l, extra_n, mu_bb, None, n_un)
    return LinkSolve(sol.J[:L], sol.J_sigma[:L], sol.chi2_red, sol.dof,
                     None if sol.ball_chi2 is None else sol.ball_chi2[:N], tuple(sorted(opened)))


def find_groups(samples: dict[str, BallSamples], times: np.ndarray, P, S, V, seeds, cand_t,
                radius_mm: float, dt: float, s: PhysicsSettings,
                accepted: list[ContactCandidate] = (), covered: list | None = None) -> list[ContactCandidate]:
    """Contacts of compound events (>= 3 balls linked by significant impulses within one frame).

    seeds: (kind, a, b, cushion, k, gap, normal) geometric ball-ball candidates of
    :func:`physics.events.find_contacts`; cand_t: ball -> [(t, key)] candidate times (they limit
    the change-point windows, except noise minima of the group's own pairs); accepted: contacts
    the pairwise test accepted (they always limit the windows); covered: if given, gets
    (frozenset pair, t) for every touching pair a compound event's solve weighed, significant or
    not. Returns one candidate per link, with ``group`` set.
    """
    names = sorted(samples)
    gaps = {k: (g, margin) for k, (_, g, _, margin) in pair_gaps(P, S, V, names, radius_mm, dt, s).items()}
    K = len(times)
    moving = {}
    for nm, bs in samples.items():
        sp, se = local_speed(bs, dt, s)
        kk = np.round((bs.t - times[0]) / dt).astype(int)
        mv = np.zeros(K, bool)
        mv[kk] = sp > np.maximum(s.rest_speed_mm_s, s.rest_speed_z * se)
        moving[nm] = mv
    out: list[ContactCandidate] = []
    done: list[tuple[int, frozenset]] = []
    # the most energetic seeds first: they set the group's time
    order = sorted(seeds, key=lambda c: -(np.nan_to_num(V[c[1]][c[4]]) + np.nan_to_num(V[c[2]][c[4]])))
    gid = 0
    events: list[tuple] = []  # (t_grp, pinned side, link pairs, group ids) per measured event
    for kind, a, b, _, k, _, _ in order:
        if any(abs(k - k0) <= 2 and (a in bs or b in bs) for k0, bs in done):
            continue
        near = slice(max(k - 1, 0), min(k + 2, K))
        if not (moving[a][near].any() or moving[b][near].any()):
            continue  # two resting neighbours: noise minima of a constant gap
        ks = slice(max(k - 1, 0), min(k + 2, K))
        touch = {}
        for (p, q), (g, mg) in gaps.items():
            gg = g[ks] - mg[ks]
            if np.isfinite(gg).any() and np.nanmin(gg) < 0:
                j = ks.start + int(np.nanargmin(gg))
                d = P[q][j] - P[p][j]
                touch[(p, q)] = d / np.hypot(*d)
        # the group: balls linked to the seed pair by touching pairs
        grp = {a, b}
        grew = True
        while grew:
            grew = False
            for p, q in touch:
                if (p in grp) != (q in grp):
                    grp |= {p, q}
                    grew = True
        if len(grp) < 3:
            continue
        done.append((k, frozenset(grp)))
        balls = sorted(grp)
        links = [(p, q) for (p, q) in touch if p in grp and q in grp]
        keys = {("ball-ball", frozenset(l), "") for l in links}
        t_c = float(times[k])
        guard = s.guard_ball_s
        dv = np.full((len(balls), 2), np.nan)
        cov = np.full((len(balls), 2, 2), np.nan)
        tb = np.full(len(balls), np.nan)
        vpre = np.full((len(balls), 2), np.nan)
        pb = np.full((len(balls), 2), np.nan)
        for i, ball in enumerate(balls):
            others = [x for x, kx in cand_t[ball] if abs(x - t_c) > 2.5 * dt and kx not in keys]
            others += [c.t_init_s for c in accepted
                       if ball in (c.ball_a, c.ball_b) and abs(c.t_init_s - t_c) > 2.5 * dt]
            lo = max([x for x in others if x < t_c], default=-np.inf)
            hi = min([x for x in others if x > t_c], default=np.inf)
            f = kink_fit_own(samples[ball], t_c, lo, hi, guard, dt, s)
            if f is None:
                continue
            dv[i] = f.v_post - f.v_pre
            cov[i] = f.dv_cov
            tb[i] = f.t_b
            vpre[i] = f.v_pre
            pb[i] = f.p_b
        # kinematic evidence: some ball of the group jumps
        jump = []
        for i in range(len(balls)):
            if np.all(np.isfinite(dv[i])):
                zi = float(np.sqrt(dv[i] @ np.linalg.solve(cov[i] + 1e-9 * np.eye(2), dv[i])))
                jump.append(zi > s.dv_z and np.hypot(*dv[i]) > s.link_dv_floor_mm_s)
            else:
                jump.append(False)
        if not any(jump):
            continue
        idx = {bl: i for i, bl in enumerate(balls)}
        li = [(idx[p], idx[q]) for p, q in links]
        # line of centres where the fits put the balls at their breaks (else from the samples)
        nrm = []
        for (p, q), (ip, iq) in zip(links, li):
            d = pb[iq] - pb[ip]
            nrm.append(d / np.hypot(*d) if np.all(np.isfinite(d)) and np.hypot(*d) > radius_mm else touch[(p, q)])
        nrm = np.array(nrm)
        # an impulse source: balls at rest do not start pushing each other, so some link of the
        # group must be closing (its balls approach along its line of centres) before the event;
        # a group of resting neighbours whose windows reach a later hit has none
        v0 = np.nan_to_num(vpre)
        closing = [float((v0[ip] - v0[iq]) @ n) for (ip, iq), n in zip(li, nrm)]
        if not any(c > s.dv_min_mm_s for c in closing):
            continue
        # ... and no energy source: the group's balls leave with no more energy than came in
        fit_ok = np.all(np.isfinite(dv), axis=1) & np.all(np.isfinite(vpre), axis=1)
        if fit_ok.any() and energy_gain_z(vpre[fit_ok], dv[fit_ok], cov[fit_ok], s) > s.dv_z:
            continue
        pos_k = np.array([P[bl][k] for bl in balls], dtype=float)
        pos_k = np.where(np.isfinite(pb), pb, pos_k)
        sol = (solve_links_open(dv, cov, li, nrm, s.dv_z, pos_k, radius_mm, s.compound_unseen_tol_mm)
               if s.compound_open_balls
               else solve_links(dv, cov, li, nrm))
        ok = [l for l in range(len(links))
              if sol.J[l] > max(s.link_dv_floor_mm_s, s.dv_z * sol.J_sigma[l])]
        # compound: accepted links that share balls (connected pieces of >= 2 links)
        comp = _components([li[l] for l in ok])
        t_grp = float(np.nanmedian(tb[[i for i in range(len(balls)) if jump[i]]]))
        # link order: hops from the fastest incoming ball (the sequence runs outwards from it)
        sp_in = np.nan_to_num(np.hypot(vpre[:, 0], vpre[:, 1]), nan=0.0)
        hops = _hops(int(np.argmax(sp_in)), [li[l] for l in ok], len(balls))
        if covered is not None and any(len(p) >= 2 for p in comp):
            covered.extend((frozenset(l), t_grp) for l in links)
        # the same sub-frame event found again from another seed (its time a frame or so off):
        # a pair cannot take part in two compound events within 2 frame periods
        if any(frozenset((c.ball_a, c.ball_b)) == frozenset(links[l]) and abs(c.t_init_s - t_grp) < 2 * dt
               for c in out for l in ok):
            continue
        multi = any(len(p) >= 2 for p in comp)
        # the jumping balls' median break pinned at the edge of the scanned frame: the change lies
        # at or beyond it, so t_grp is only a bound on the event's time
        side = _pinned_side(tb[np.asarray(jump, bool)], t_c, dt)
        ev = (t_grp, side, {frozenset(links[l]) for l in ok}, [])
        events.append(ev)
        for piece in comp:
            # a lone link counts inside a compound event (its pair test cannot judge a ball that
            # also passed a push on), else it is left to the pairwise test
            if len(piece) < 2 and not (multi and s.compound_lone_links):
                continue
            gid += 1
            ev[3].append(gid)
            for lp in piece:
                l = ok[[li[o] for o in ok].index(lp)]
                p, q = links[l]
                n = nrm[l]
                ip, iq = idx[p], idx[q]
                vp = vpre[ip] @ n if np.all(np.isfinite(vpre[ip])) else 0.0
                vq = vpre[iq] @ n if np.all(np.isfinite(vpre[iq])) else 0.0
                # ball a: nearer the incoming ball along the links, else the faster approach
                first_p = hops[ip] < hops[iq] or (hops[ip] == hops[iq] and vp >= -vq)
                A, B, nn = (p, q, n) if first_p else (q, p, -n)
                out.append(ContactCandidate(
                    "ball-ball", A, B, "", t_grp, nn, float(np.nanmin(gaps[(p, q)][0][ks])),
                    float(sol.J[l] / sol.J_sigma[l]), np.nan_to_num(dv[idx[A]]), np.nan_to_num(dv[idx[B]]),
                    group=gid, simultaneous=True))
    # one event seen from two seed frames: a slow ball is inside the touching margin for frames
    # before it arrives, so a group can be measured early, its fits reaching the real change and
    # pinned at the scan's edge. Such a group is a copy of a group that shares one of its links
    # and lies beyond that edge within ``compound_copy_frames`` frame periods: it is dropped
    drop = _copies(events, s.compound_copy_frames * dt)
    return [c for c in out if c.group not in drop]


def _copies(events: list[tuple], reach_s: float) -> set[int]:
    """Group ids of events measured early or late: events are (t_grp s, pinned side -1/0/+1,
    set of link pairs, list of group ids); an event pinned at one edge is a copy when another
    reported event (group ids not empty) sharing one of its link pairs lies beyond that edge
    within ``reach_s`` seconds and is not itself pinned back towards it (two events pinned towards
    each other bracket the change: neither is the better measurement, both stay).

    >>> ab, bc = frozenset("ab"), frozenset("bc")
    >>> sorted(_copies([(0.800, 1, {ab}, [3]), (0.842, 0, {ab, bc}, [4])], 0.05))
    [3]
    >>> sorted(_copies([(0.800, -1, {ab}, [3]), (0.842, 0, {ab, bc}, [4])], 0.05))
    []
    >>> sorted(_copies([(0.150, 1, {ab}, [1]), (0.167, -1, {ab}, [2])], 0.05))
    []
    >>> sorted(_copies([(0.800, 1, {ab}, [3]), (0.842, 0, {ab}, [])], 0.05))
    []
    """
    drop: set[int] = set()
    for i, (tg, side, prs, gids) in enumerate(events):
        if side and any(j != i and h[3] and prs & h[2] and 0.0 < side * (h[0] - tg) <= reach_s
                        and h[1] != -side for j, h in enumerate(events)):
            drop |= set(gids)
    return drop


def _pinned_side(tb: np.ndarray, t_c: float, dt: float) -> int:
    """+1 / -1 when the median of the break times ``tb`` (s) sits at the later / earlier edge of
    the frame scanned around frame time ``t_c`` (within 5 % of a frame period ``dt`` of t_c +- dt),
    else 0 (also for no finite break time).

    >>> _pinned_side(np.array([0.8, 0.8, 0.8, 0.7792]), 0.78333, 1 / 60)
    1
    >>> _pinned_side(np.array([0.2687, 0.2646, 0.2708]), 0.26667, 1 / 60)
    0
    """
    tb = np.asarray(tb, float)
    tb = tb[np.isfinite(tb)]
    if not len(tb):
        return 0
    off = float(np.median(tb)) - t_c
    return int(np.sign(off)) if abs(off) > 0.95 * dt else 0


def _hops(start: int, links: list[tuple[int, int]], n: int) -> np.ndarray:
    """Breadth-first link count from ball ``start`` to each of n balls (large if unlinked)."""
    d = np.full(n, 10**6)
    d[start] = 0
    frontier = [start]
    while frontier:
        nxt = []
        for u in frontier:
            for a, b in links:
                for x, y in ((a, b), (b, a)):
                    if x == u and d[y] > d[u] + 1:
                        d[y] = d[u] + 1
                        nxt.append(y)
        frontier = nxt
    return d


def _components(links: list[tuple[int, int]]) -> list[list[tuple[int, int]]]:
    """Connected pieces of a set of links (each piece a list of links)."""
    pieces: list[list[tuple[int, int]]] = []
    for l in links:
        hit = [p for p in pieces if any(set(l) & set(m) for m in p)]
        merged = [l] + [m for p in hit for m in p]
        pieces = [p for p in pieces if p not in hit] + [merged]
    return pieces


def merge_groups(pairwise: list[ContactCandidate], grouped: list[ContactCandidate],
                 dt: float, covered: list = ()) -> list[ContactCandidate]:
    """Pairwise candidates with those inside a compound event replaced by the event's links.

    covered: (pair, t) of every touching pair a compound event weighed (:func:`find_groups`); a
    pairwise candidate of such a pair within 1.5 frame periods is dropped too: the group's solve
    shares each ball's velocity change among all its touching neighbours, while the pairwise
    test gives the whole change to one of them."""
    if not grouped:
        return pairwise
    pairwise = [c for c in pairwise if not (c.kind == "ball-ball" and any(
        frozenset((c.ball_a, c.ball_b)) == pr and abs(c.t_init_s - t) < 1.5 * dt for pr, t in covered))]
    spans = {}
    for c in grouped:
        bs, t = spans.get(c.group, (set(), c.t_init_s))
        spans[c.group] = (bs | {c.ball_a, c.ball_b}, t)
    keep = []
    for c in pairwise:
        inside = c.kind == "ball-ball" and any(
            c.ball_a in bs and c.ball_b in bs and abs(c.t_init_s - t) < 1.5 * dt for bs, t in spans.values())
        if not inside:
            keep.append(c)
    return keep + grouped


# ---------------------------------------------------------------------------------------------
# contacts table: the group's measurable quantities


GROUP_COLUMNS = [
    "group", "simultaneous", "note", "group_balls",
    "group_px_in_Ns", "group_py_in_Ns", "group_px_out_Ns", "group_py_out_Ns",
    "group_momentum_residual_pct", "group_momentum_residual_sigma_pct",
    "group_ke_before_J", "group_ke_after_J", "group_ke_loss_frac", "group_ke_loss_sigma_frac",
    "impulse_n_sigma_Ns",
]


def _break_velocities(f, i: int):
    """(v_before (2,), v_after (2,), covariance (4,4)) of a fitted chain at break i, mm/s."""
    def fn(z):
        _, _, v0, v1 = f.at_break(i, z)
        return np.concatenate([v0, v1])

    y = fn(f.x)
    sd = np.sqrt(np.clip(np.diag(f.cov), 0, None))
    G = np.zeros((4, len(f.x)))
    for j in range(len(f.x)):
        if sd[j] <= 0:
            continue
        h = 1e-3 * sd[j]
        xp, xm = f.x.copy(), f.x.copy()
        xp[j] += h
        xm[j] -= h
        G[:, j] = (fn(xp) - fn(xm)) / (2 * h)
    return y[:2], y[2:], G @ f.cov @ G.T


def annotate_groups(contacts: pd.DataFrame, cands: list[ContactCandidate], fits: dict, maps: dict,
                    mass_kg: float) -> pd.DataFrame:
    """Add the compound-event columns (DEVELOPERS.md, contacts table) to a contacts table.

    Rows of a compound event (``_cand`` pointing at a candidate with ``group`` > 0) get e and
    e_sigma NaN with a note; their link impulse from the non-negative solve over the group's
    fitted velocity changes (impulse_n_Ns +- impulse_n_sigma_Ns; the tangential part is not
    separable: NaN); pair-only quantities that assume an isolated pair (momentum residual, KE loss
    of the pair, throw) NaN. Every row of a group carries the group's total momentum in/out (N·s,
    table frame), its residual |p_out - p_in| / |p_in| (%) with sigma, and translational kinetic
    energy before/after (J) with the loss fraction and its sigma. Other rows: group -1.
    """
    df = contacts.copy()
    for c in GROUP_COLUMNS:
        df[c] = np.nan
    df["group"] = -1
    df["simultaneous"] = False
    df["note"] = ""
    df["group_balls"] = ""
    if "_cand" not in df.columns or not len(df):
        return df
    k = 1e-3  # mm/s -> m/s
    m = mass_kg
    gids = sorted({c.group for c in cands if c.group > 0})
    for new_id, g in enumerate(gids, start=1):
        cis = [i for i, c in enumerate(cands) if c.group == g]
        rows = df.index[df["_cand"].isin(cis)]
        if not len(rows):
            continue
        balls = sorted({b for i in cis for b in (cands[i].ball_a, cands[i].ball_b)})
        vel = {}
        for ball in balls:
            f = fits.get(ball)
            if f is None or ball not in maps:
                continue
            br = next((maps[ball][0][i] for i in cis if i in maps[ball][0]), None)
            if br is None or not hasattr(f.layout, "n_seg") or br >= f.layout.n_seg - 1:
                continue
            vel[ball] = _break_velocities(f, br)
        if len(vel) != len(balls):
            note = NOTE_SEQUENCE + "; a ball of the group has no fitted motion: group totals not measured"
            df.loc[rows, ["group", "simultaneous", "note", "group_balls"]] = [new_id, True, note, " ".join(balls)]
            df.loc[rows, ["e", "e_sigma"]] = np.nan
            continue
        v0 = np.array([vel[b][0] for b in balls])
        v1 = np.array([vel[b][1] for b in balls])
        C = [vel[b][2] for b in balls]
        p0, p1 = m * v0.sum(0) * k, m * v1.sum(0) * k
        dp = p1 - p0
        cdp = sum(Ci[2:, 2:] + Ci[:2, :2] - Ci[:2, 2:] - Ci[2:, :2] for Ci in C) * (m * k) ** 2
        u = dp / max(np.hypot(*dp), 1e-15)
        # The residual is a fraction of the momentum brought in; balls all at rest before (moved by
        # a neighbouring group's touches) bring none, so there is no fraction to give.
        cp0 = sum(Ci[:2, :2] for Ci in C) * (m * k) ** 2
        u0 = p0 / max(np.hypot(*p0), 1e-15)
        brought_in = np.hypot(*p0) > 3.0 * np.sqrt(max(u0 @ cp0 @ u0, 0.0)) and np.hypot(*p0) > 0
        res_pct = 100 * np.hypot(*dp) / np.hypot(*p0) if brought_in else np.nan
        res_sig = 100 * np.sqrt(max(u @ cdp @ u, 0.0)) / np.hypot(*p0) if brought_in else np.nan
        ke0 = 0.5 * m * float((v0**2).sum()) * k * k
        ke1 = 0.5 * m * float((v1**2).sum()) * k * k
        # sigma of the loss fraction 1 - ke1/ke0 by linear propagation of each ball's velocities
        var = 0.0
        for i, Ci in enumerate(C):
            gv = np.concatenate([v0[i] * ke1 / ke0**2, -v1[i] / ke0]) * m * k * k if ke0 > 0 else np.zeros(4)
            var += float(gv @ Ci @ gv)
        # link impulses from the fitted velocity changes
        idx = {b: i for i, b in enumerate(balls)}
        dv = v1 - v0
        cdv = np.array([Ci[2:, 2:] + Ci[:2, :2] - Ci[:2, 2:] - Ci[2:, :2] for Ci in C])
        li, nrm, rws = [], [], []
        for r in rows:
            li.append((idx[df.at[r, "ball_a"]], idx[df.at[r, "ball_b"]]))
            nrm.append([df.at[r, "nx"], df.at[r, "ny"]])
            rws.append(r)
        sol = solve_links(dv, cdv, li, np.array(nrm, float))
        for l, r in enumerate(rws):
            df.at[r, "impulse_n_Ns"] = m * sol.J[l] * k
            df.at[r, "impulse_Ns"] = m * sol.J[l] * k
            df.at[r, "impulse_n_sigma_Ns"] = m * sol.J_sigma[l] * k
        df.loc[rows, ["e", "e_sigma", "impulse_t_Ns", "momentum_residual_pct", "ke_loss_frac",
                      "throw_deg"]] = np.nan
        df.loc[rows, "group"] = new_id
        df.loc[rows, "simultaneous"] = True
        df.loc[rows, "note"] = NOTE_SEQUENCE
        df.loc[rows, "group_balls"] = " ".join(balls)
        df.loc[rows, ["group_px_in_Ns", "group_py_in_Ns", "group_px_out_Ns", "group_py_out_Ns"]] = [*p0, *p1]
        df.loc[rows, "group_momentum_residual_pct"] = res_pct
        df.loc[rows, "group_momentum_residual_sigma_pct"] = res_sig
        df.loc[rows, "group_ke_before_J"] = ke0
        df.loc[rows, "group_ke_after_J"] = ke1
        df.loc[rows, "group_ke_loss_frac"] = 1 - ke1 / ke0 if ke0 > 0 else np.nan
        df.loc[rows, "group_ke_loss_sigma_frac"] = np.sqrt(var) if ke0 > 0 else np.nan
    return df
