"""Measured contact quantities from fitted chains: restitution, impulse, energy, geometry.

Definitions (table plane, mm, s, kg; results in N·s, J, degrees):

* normal ``n``: ball-ball, the unit line of centres from ball a to ball b at first touch (the
  touch time combines the time the pre-contact models are 2R apart with both balls' velocity
  breaks, weighted by their covariance: :func:`touch_time_weights`);
  ball-cushion, the in-plane cushion normal pointing into the table. The cushion nose is
  above the ball centre, so the real cushion force also has a vertical part; it is not seen
  from overhead and is not part of ``n``.
* velocities "in"/"out": the fitted model of the segment before/after the contact, evaluated
  at the segment break (where both segments meet; within one frame of first touch).
* restitution: ball-ball ``e = -(vb' - va')·n / ((vb - va)·n)``; cushion ``e = -(v'·n)/(v·n)``.
* impulse ``J = m (v' - v)`` on ball b (ball-ball) or on the ball (cushion), N·s, with normal
  part ``J·n`` and tangential part ``J·t`` (``t`` = ``n`` turned +90 degrees).
* momentum residual: ``|m(va'+vb') - m(va+vb)| / |m(va+vb)|`` in % (ball-ball only).
* kinetic energy: translational ``m v^2 / 2`` of the balls involved; the "total" columns add the
  rolling share ``(2/5)(m v^2 / 2)`` for a ball known to roll (NaN when a ball slides).
* cut angle: between the approach velocity ``va - vb`` and ``n``; throw: signed angle from ``n``
  to ball b's velocity change; departure angles are signed from a's incoming direction.
* cushion incidence: between ``-v`` and ``n``; rebound: between ``v'`` and ``n``.

Uncertainties come from first-order propagation of the chain covariances. The balls are fitted
one at a time, but the two balls of a ball-ball contact share the slip shift of their cloth-slip
priors, so their fits are correlated: their joint covariance is in :mod:`physics.pair_cov`.
"""
from __future__ import annotations

import numpy as np
from physics.segments import ChainFit, chain_eval


def _angle(u: np.ndarray, v: np.ndarray) -> float:
    """Signed angle from u to v, degrees (NaN if either is ~0)."""
    if np.hypot(*u) < 1e-9 or np.hypot(*v) < 1e-9:
        return float("nan")
    return float(np.degrees(np.arctan2(u[0] * v[1] - u[1] * v[0], u @ v)))


def _touch_time(pos_vel, target_mm: float, tb: float, dt: float) -> float:
    """Time (s) near the break ``tb`` where the pre-contact gap reaches ``target_mm`` (Newton
    steps on gap(t) = |d(t)| - target with d, d' from ``pos_vel(t) -> (d (2,), d' (2,))``);
    ``tb`` itself when no root lies within one frame period."""
    t = tb
    for _ in range(6):
        d, dd = pos_vel(t)
        dist = float(np.hypot(*d))
        rate = float(d @ dd) / max(dist, 1e-9)
        if abs(rate) < 1e-6:
            return tb
        step = (dist - target_mm) / rate
        t -= step
        if abs(step) < 1e-8:
            break
    return t if abs(t - tb) <= dt else tb


def ball_ball_core(fa: ChainFit, ia: int, xa, fb: ChainFit, ib: int, xb, radius_mm: float, dt: float,
                   time_weights: np.ndarray | None = None):
    """Core values of a ball-ball contact for parameter vectors xa, xb (also used for error
    propagation): touch time, the normal there, velocities at the breaks, e.

    The touch time is seen three ways: where the pre-contact models are 2R apart (``t_geo``) and
    at each ball's velocity break (``tba``, ``tbb``). ``time_weights`` (3,) combines them (see
    :func:`touch_time_weights`); None uses ``t_geo`` alone. The normal is the unit line of
    centres of the pre-contact models at that time."""
    tba, _, va0, va1 = fa.at_break(ia, xa)
    tbb, _, vb0, vb1 = fb.at_break(ib, xb)
    tb = 0.5 * (tba + tbb)

    def rel(t):
        Pa, Va, _ = chain_eval(xa, fa.layout, np.array([t]), seg=np.array([ia]))
        Pb, Vb, _ = chain_eval(xb, fb.layout, np.array([t]), seg=np.array([ib]))
        return Pb[0] - Pa[0], Vb[0] - Va[0]

    t_geo = _touch_time(rel, 2 * radius_mm, tb, dt)
    t1 = t_geo if time_weights is None else float(np.dot(time_weights, [t_geo, tba, tbb]))
    Pa, _, _ = chain_eval(xa, fa.layout, np.array([t1]), seg=np.array([ia]))
    d, _ = rel(t1)
    n = d / np.hypot(*d)
    den = (vb0 - va0) @ n
    e = -((vb1 - va1) @ n) / den if abs(den) > 1e-9 else np.nan
    return dict(t=t1, n=n, pa=Pa[0], va0=va0, va1=va1, vb0=vb0, vb1=vb1, e=e,
                t_geo=t_geo, tba=tba, tbb=tbb)


def touch_time_weights(cov3: np.ndarray) -> np.ndarray:
    """Weights (3,) of the minimum-variance unbiased combination of three estimates of one time
    with covariance ``cov3`` (3,3): ``w = C^-1 1 / (1^T C^-1 1)`` (generalised least squares,
    e.g. Aitken 1935). Estimates with a zero or non-finite variance (a break held at its bound,
    or not resolved) get weight 0; with none usable the first estimate alone is used.

    >>> import numpy as np
    >>> touch_time_weights(np.diag([1.0, 1.0, 2.0])).round(2).tolist()
    [0.4, 0.4, 0.2]
    """
    c = np.asarray(cov3, dtype=float)
    v = np.diag(c)
    ok = np.isfinite(v) & (v > 0) & np.isfinite(c).all(axis=1)
    w = np.zeros(3)
    if not ok[0]:
        w[0] = 1.0
        return w
    sub = c[np.ix_(ok, ok)]
    try:
        ci1 = np.linalg.solve(sub, np.ones(int(ok.sum())))
    except np.linalg.LinAlgError:
        w[0] = 1.0
        return w
    tot = float(ci1.sum())
    if not (np.isfinite(tot) and tot > 0):
        w[0] = 1.0
        return w
    w[ok] = ci1 / tot
    return w


def cushion_core(f: ChainFit, i: int, x, cushion: str, normal: np.ndarray,
                 length_mm: float, width_mm: float, contact_mm: float, dt: float):
    """Core values of a ball-cushion contact for parameter vector x: first touch where the
    pre-contact model is ``contact_mm`` from the nose line (the nose is above the ball's centre:
    physics/cushion_geometry.py), velocities at the break, e."""
    tb, _, v0, v1 = f.at_break(i, x)
    off = {"x0": np.array([0.0, 0.0]), "xL": np.array([length_mm, 0.0]),
           "y0": np.array([0.0, 0.0]), "yW": np.array([0.0, width_mm])}[cushion]

    def rel(t):
        P, V, _ = chain_eval(x, f.layout, np.array([t]), seg=np.array([i]))
        dn = (P[0] - off) @ normal
        return np.array([dn, 0.0]) if dn >= 0 else np.array([1e-9, 0.0]), np.array([V[0] @ normal, 0.0])

    t1 = _touch_time(rel, contact_mm, tb, dt)
    P, _, _ = chain_eval(x, f.layout, np.array([t1]), seg=np.array([i]))
    den = v0 @ normal
    e = -(v1 @ normal) / den if abs(den) > 1e-9 else np.nan
    return dict(t=t1, n=normal, pa=P[0], va0=v0, va1=v1, e=e)


def hidden_slide_dv(sigma_mm: float, fps: float, mu_s: float, g_mm_s2: float, t_guard_s: float,
                    z: float) -> float:
    """Largest velocity change (mm/s) of a slide that starts at a break and that samples with
    position noise ``sigma_mm`` at ``fps`` do not show at ``z`` sigmas (see
    PhysicsSettings.hidden_slide_sigma): ``mu_s g t_s`` with
    ``t_s = t_guard + (20 z^2 sigma^2 / (fps mu_s^2 g^2))^(1/5)``.

    >>> round(hidden_slide_dv(0.3, 60.0, 0.22, 9806.65, 0.004, 2.0))
    74
    """
    a = mu_s * g_mm_s2
    t_s = t_guard_s + (20.0 * z**2 * sigma_mm**2 / (fps * a**2)) ** 0.2
    return float(a * t_s)


def propagate_cov(fn, x: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Covariance matrix of the outputs of ``fn(x)`` (array) by central differences."""
    G = _jacobian(fn, x, cov)
    return G @ cov @ G.T


def _jacobian(fn, x: np.ndarray, cov: np.ndarray) -> np.ndarray:
    y0 = np.atleast_1d(np.asarray(fn(x), dtype=float))
    sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    G = np.zeros((len(y0), len(x)))
    for j in range(len(x)):
        if sd[j] <= 0:
            continue
        h = 1e-3 * sd[j]
        xp, xm = x.copy(), x.copy()
        xp[j] += h
        xm[j] -= h
        G[:, j] = (np.atleast_1d(fn(xp)) - np.atleast_1d(fn(xm))) / (2 * h)
    return G


def propagate(fn, x: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Variance of the scalar outputs of ``fn(x)`` (array) by central differences."""
    G = _jacobian(fn, x, cov)
    return np.einsum("ij,jk,ik->i", G, cov, G)


def derived(core: dict, mass_kg: float, two_balls: bool, a_roll: tuple[bool, bool],
            b_roll: tuple[bool, bool]) -> dict:
    """Impulse, momentum, energy and angles from core values (see module docstring)."""
    n = core["n"]
    tt = np.array([-n[1], n[0]])
    va0, va1 = core["va0"], core["va1"]
    out = {}
    m = mass_kg
    k = 1e-3  # mm/s -> m/s
    if two_balls:
        vb0, vb1 = core["vb0"], core["vb1"]
        J = m * (vb1 - vb0) * k
        out["speed_in_mm_s"] = float(-((vb0 - va0) @ n))
        p0 = m * (va0 + vb0)
        p1 = m * (va1 + vb1)
        out["momentum_residual_pct"] = float(100 * np.hypot(*(p1 - p0)) / max(np.hypot(*p0), 1e-12))
        ke0 = 0.5 * m * (va0 @ va0 + vb0 @ vb0) * k * k
        ke1 = 0.5 * m * (va1 @ va1 + vb1 @ vb1) * k * k
        rel = va0 - vb0
        out["cut_angle_deg"] = abs(_angle(n, rel))
        out["throw_deg"] = _angle(n, vb1 - vb0)
        out["a_departure_deg"] = _angle(va0, va1)
        out["b_departure_deg"] = _angle(va0, vb1)
        out["separation_deg"] = abs(_angle(va1, vb1))
        out["incidence_deg"] = np.nan
        out["rebound_deg"] = np.nan
        tot0 = _total(m, [(va0, a_roll[0]), (vb0, b_roll[0])])
        tot1 = _total(m, [(va1, a_roll[1]), (vb1, b_roll[1])])
    else:
        J = m * (va1 - va0) * k
        out["speed_in_mm_s"] = float(-(va0 @ n))
        out["momentum_residual_pct"] = np.nan
        ke0 = 0.5 * m * (va0 @ va0) * k * k
        ke1 = 0.5 * m * (va1 @ va1) * k * k
        out["cut_angle_deg"] = np.nan
        out["throw_deg"] = np.nan
        out["a_departure_deg"] = np.nan
        out["b_departure_deg"] = np.nan
        out["separation_deg"] = np.nan
        out["incidence_deg"] = abs(_angle(n, -va0))
        out["rebound_deg"] = abs(_angle(n, va1))
        tot0 = _total(m, [(va0, a_roll[0])])
        tot1 = _total(m, [(va1, a_roll[1])])
    out["impulse_Ns"] = float(np.hypot(*J))
    out["impulse_n_Ns"] = float(J @ n)
    out["impulse_t_Ns"] = float(J @ tt)
    out["ke_before_J"] = float(ke0)
    out["ke_after_J"] = float(ke1)
    out["ke_loss_frac"] = float(1 - ke1 / ke0) if ke0 > 0 else np.nan
    out["ke_total_before_J"] = tot0
    out["ke_total_after_J"] = tot1
    return out


def _total(m: float, items) -> float:
    """Translational + rotational KE (J) if every ball rolls or rests, else NaN."""
    tot = 0.0
    for v, rolls in items:
        sp2 = float(v @ v) * 1e-6
        if sp2 < 1e-8:
            continue
        if not rolls:
            return float("nan")
        tot += 0.5 * m * sp2 * (1 + 2.0 / 5.0)
    return tot


def ball_ball_e(va_in, va_out, vb_in, vb_out, n) -> float:
    """e = -(vb' - va')·n / ((vb - va)·n) for 2-vectors (mm/s) and unit normal n (a->b).

    >>> import numpy as np
    >>> round(ball_ball_e(np.array([1000.0, 0]), np.array([25.0, 0]), np.zeros(2),
    ...                   np.array([975.0, 0]), np.array([1.0, 0])), 3)
    0.95
    """
    return float(-((vb_out - va_out) @ n) / ((vb_in - va_in) @ n))


def cushion_e(v_in, v_out, n) -> float:
    """e = -(v'·n) / (v·n) for 2-vectors (mm/s) and inward unit normal n."""
    return float(-(v_out @ n) / (v_in @ n))
