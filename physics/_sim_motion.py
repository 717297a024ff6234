"""Closed-form ball motion between events, and the times of the next events.

Private helper of :mod:`physics.simulate`. Units: mm, s, mm/s, rad/s, kg.
Frame: table frame (x along the long side, y along the short side, z up);
angular velocity ``w = (wx, wy, wz)`` in rad/s about the ball centre.

Between events every ball is in one phase and its motion is a polynomial in
the time since the segment start ``tau``:

* position ``r0 + v0 tau + a tau^2 / 2`` (mm), velocity ``v0 + a tau`` (mm/s),
* horizontal spin ``w0_xy + alpha tau`` (rad/s),
* vertical spin ``sign(wz0) max(|wz0| - wz_decel tau, 0)`` (rad/s).

Sliding: the contact-point slip ``u = v + w x (-R z) = (vx - R wy, vy + R wx)``
keeps its direction and shrinks at ``7/2 mu_s g`` (Coulomb friction
``-mu_s m g u_hat`` at the cloth, moment of inertia ``2/5 m R^2``), so
sliding ends after ``2 |u0| / (7 mu_s g)``. Rolling: ``u = 0``, deceleration
``mu_r g`` against the velocity (the "force / weight" definition of rolling
resistance), rest after ``|v0| / (mu_r g)``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

PHASES = ("slide", "roll", "rest", "off")

#: Slip / speed below which a ball counts as rolling / at rest (mm/s).
#: Numerical zero only (1 nm/s); the physics never depends on it.
SPEED_EPS_MM_S = 1e-6


@dataclass(frozen=True)
class Segment:
    """One ball's motion from ``t0`` (s) until ``t1`` (s; the phase's own end).

    r0, v0, a: (2,) mm, mm/s, mm/s^2; w0: (3,) rad/s; alpha: (2,) rad/s^2 for
    (wx, wy); wz_decel: rad/s^2 (>= 0); phase: one of PHASES.
    """

    t0: float
    r0: np.ndarray
    v0: np.ndarray
    a: np.ndarray
    w0: np.ndarray
    alpha: np.ndarray
    wz_decel: float
    phase: str
    t1: float

    def state(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Position (mm), velocity (mm/s) and spin (rad/s) at absolute time t (s)."""
        tau = t - self.t0
        (rx, ry), (vx, vy), (ax, ay) = self._rva
        (wx, wy, wz0), (bx, by) = self._w
        h = 0.5 * tau * tau
        wz = max(abs(wz0) - self.wz_decel * tau, 0.0)
        return (np.array([rx + vx * tau + ax * h, ry + vy * tau + ay * h]),
                np.array([vx + ax * tau, vy + ay * tau]),
                np.array([wx + bx * tau, wy + by * tau, wz if wz0 >= 0.0 else -wz]))

    def __post_init__(self) -> None:
        # Plain-float copies for fast scalar evaluation in the event loop.
        object.__setattr__(self, "_rva", (tuple(map(float, self.r0)), tuple(map(float, self.v0)),
                                          tuple(map(float, self.a))))
        object.__setattr__(self, "_w", (tuple(map(float, self.w0)), tuple(map(float, self.alpha))))


def slip_velocity(v: np.ndarray, w: np.ndarray, radius_mm: float) -> np.ndarray:
    """Velocity (mm/s, (2,)) of the ball's cloth contact point: v + w x (-R z).

    >>> slip_velocity(np.array([100.0, 0.0]), np.array([0.0, 100.0 / 20.0, 0.0]), 20.0)
    array([0., 0.])
    """
    return np.array([v[0] - radius_mm * w[1], v[1] + radius_mm * w[0]])


def make_segment(
    t0: float,
    r: np.ndarray,
    v: np.ndarray,
    w: np.ndarray,
    radius_mm: float,
    mu_slide: float,
    mu_roll: float,
    wz_decel: float,
    g_mm_s2: float,
    force_phase: str | None = None,
) -> Segment:
    """Start a segment at t0 from a state; the phase follows from the slip.

    ``force_phase`` ('roll' or 'rest') is used at the exact end of a phase, so
    that round-off in the slip cannot restart a tiny sliding phase.
    """
    r = np.asarray(r, float).copy()
    v = np.asarray(v, float).copy()
    w = np.asarray(w, float).copy()
    R = radius_mm
    u = slip_velocity(v, w, R)
    if force_phase is None:
        if np.hypot(*u) > SPEED_EPS_MM_S:
            phase = "slide"
        elif np.hypot(*v) > SPEED_EPS_MM_S:
            phase = "roll"
        else:
            phase = "rest"
    else:
        phase = force_phase
        if phase == "roll" and np.hypot(*v) <= SPEED_EPS_MM_S:
            phase = "rest"

    zero2 = np.zeros(2)
    if phase == "slide":
        speed_u = float(np.hypot(*u))
        if mu_slide > 0.0:
            a = -mu_slide * g_mm_s2 * u / speed_u
            t1 = t0 + 2.0 * speed_u / (7.0 * mu_slide * g_mm_s2)
        else:
            a = zero2
            t1 = np.inf
        # Torque (-R z) x (m a) over I = 2/5 m R^2.
        alpha = np.array([2.5 * a[1] / R, -2.5 * a[0] / R])
    elif phase == "roll":
        speed = float(np.hypot(*v))
        w[0], w[1] = -v[1] / R, v[0] / R  # rolling constraint u = 0
        if mu_roll > 0.0:
            a = -mu_roll * g_mm_s2 * v / speed
            t1 = t0 + speed / (mu_roll * g_mm_s2)
        else:
            a = zero2
            t1 = np.inf
        alpha = np.array([-a[1] / R, a[0] / R])
    elif phase in ("rest", "off"):
        v = zero2.copy()
        w[0] = w[1] = 0.0
        if phase == "off":
            w[2] = 0.0
        a = zero2
        alpha = zero2
        t1 = np.inf
    else:  # pragma: no cover - internal misuse
        raise ValueError(f"unknown phase {phase!r}")
    return Segment(float(t0), r, v, np.asarray(a, float), w, np.asarray(alpha, float),
                   float(wz_decel), phase, float(t1))


def _quadratic_roots(c2: float, c1: float, c0: float) -> list[float]:
    """Real roots of c2 x^2 + c1 x + c0 (numerically stable form)."""
    scale = max(abs(c2), abs(c1), abs(c0), 1e-300)
    if abs(c2) <= 1e-14 * scale:
        if abs(c1) <= 1e-300:
            return []
        return [-c0 / c1]
    disc = c1 * c1 - 4.0 * c2 * c0
    if disc < 0.0:
        return []
    q = -0.5 * (c1 + np.copysign(np.sqrt(disc), c1))
    roots = [q / c2]
    if q != 0.0:
        roots.append(c0 / q)
    return roots


def _cubic_real_roots(c3: float, c2: float, c1: float, c0: float) -> list[float]:
    """Real roots of c3 x^3 + c2 x^2 + c1 x + c0 (Cardano / trigonometric form,
    each root polished by Newton steps on the original cubic).

    >>> sorted(round(x, 12) for x in _cubic_real_roots(1.0, -6.0, 11.0, -6.0))
    [1.0, 2.0, 3.0]
    """
    scale = max(abs(c3), abs(c2), abs(c1), abs(c0))
    if scale == 0.0:
        return []
    if abs(c3) <= 1e-13 * scale:
        return _quadratic_roots(c2, c1, c0)
    b, c, d = c2 / c3, c1 / c3, c0 / c3
    p = c - b * b / 3.0
    q = 2.0 * b**3 / 27.0 - b * c / 3.0 + d
    disc = 0.25 * q * q + p**3 / 27.0
    if disc > 0.0:
        s = np.sqrt(disc)
        A = -np.copysign(np.cbrt(abs(0.5 * q) + s), q)
        ys = [A - p / (3.0 * A) if A != 0.0 else 0.0]
    elif p == 0.0:
        ys = [0.0]
    else:
        r = np.sqrt(-p / 3.0)
        arg = min(1.0, max(-1.0, (1.5 * q / p) * np.sqrt(-3.0 / p)))
        ph = np.arccos(arg) / 3.0
        ys = [2.0 * r * np.cos(ph - 2.0 * np.pi * k / 3.0) for k in range(3)]
    roots = []
    for y in ys:
        x = float(y - b / 3.0)
        for _ in range(3):
            fx = ((x + b) * x + c) * x + d
            dfx = (3.0 * x + 2.0 * b) * x + c
            if dfx == 0.0:
                break
            step = fx / dfx
            x -= step
            if abs(step) <= 1e-15 * max(1.0, abs(x)):
                break
        roots.append(x)
    return roots


#: Gap (mm) within which a ball counts as touching a cushion or another ball
#: for "contact now" decisions; 1 nm, numerical zero.
TOUCH_TOL_MM = 1e-6
#: Approach speed (mm/s) below which a touching pair counts as not approaching.
APPROACH_TOL_MM_S = 1e-9


def cushion_time(
    r: np.ndarray, v: np.ndarray, a: np.ndarray, normal: np.ndarray, offset_mm: float,
    horizon_s: float,
) -> float | None:
    """Delay (s) until the gap ``normal . r - offset`` closes while approaching.

    ``normal`` is the cushion's inward unit normal; the ball touches when the
    gap is 0. Returns None if it does not happen within ``horizon_s``.
    """
    nx, ny = normal[0], normal[1]
    g0 = float(nx * r[0] + ny * r[1]) - offset_mm
    g1 = float(nx * v[0] + ny * v[1])
    g2 = 0.5 * float(nx * a[0] + ny * a[1])
    if g0 <= TOUCH_TOL_MM and (g1 < -APPROACH_TOL_MM_S or (g1 <= APPROACH_TOL_MM_S and g2 < 0.0)):
        return 0.0  # touching and approaching, or at rest against it and being pushed in
    best = None
    for tau in _quadratic_roots(g2, g1, g0):
        if 0.0 < tau <= horizon_s and g1 + 2.0 * g2 * tau < 0.0:
            if best is None or tau < best:
                best = tau
    return best


def pair_time(
    dr: np.ndarray, dv: np.ndarray, da: np.ndarray, contact_mm: float, horizon_s: float,
) -> float | None:
    """Delay (s) until two balls' centre distance first falls to ``contact_mm``.

    dr, dv, da: (2,) relative position (mm), velocity (mm/s), acceleration
    (mm/s^2) of ball b minus ball a. The squared distance minus contact^2 is a
    quartic f(tau); we split [0, horizon] at the real roots of f' (a cubic)
    so that f is monotone on each piece, then bracket the first sign change
    from + to - and polish it with Brent's method (machine precision).
    """
    if not horizon_s > 0.0 or horizon_s == np.inf:
        return None
    px, py = float(dr[0]), float(dr[1])
    vx, vy = float(dv[0]), float(dv[1])
    qx, qy = 0.5 * float(da[0]), 0.5 * float(da[1])
    # Cheap reject: the gap cannot close within the horizon.
    reach = math.hypot(vx, vy) * horizon_s + math.hypot(qx, qy) * horizon_s**2
    if math.hypot(px, py) - contact_mm > reach + TOUCH_TOL_MM:
        return None
    c4 = qx * qx + qy * qy
    c3 = 2.0 * (vx * qx + vy * qy)
    c2 = vx * vx + vy * vy + 2.0 * (px * qx + py * qy)
    c1 = 2.0 * (px * vx + py * vy)
    c0 = px * px + py * py - contact_mm * contact_mm
    if c4 == 0.0 and c3 == 0.0 and c2 == 0.0 and c1 == 0.0:
        return None

    def f(t: float) -> float:
        return (((c4 * t + c3) * t + c2) * t + c1) * t + c0

    touch_f = 2.0 * contact_mm * TOUCH_TOL_MM
    tol1 = 2.0 * contact_mm * APPROACH_TOL_MM_S
    if c0 <= touch_f and (c1 < -tol1 or (c1 <= tol1 and c2 < 0.0)):
        return 0.0  # touching and approaching, or touching and being pushed together
    crit = [x for x in _cubic_real_roots(4.0 * c4, 3.0 * c3, 2.0 * c2, c1) if 0.0 < x < horizon_s]
    points = [0.0] + sorted(crit) + [horizon_s]
    f_prev = f(0.0)
    for lo, hi in zip(points[:-1], points[1:]):
        f_hi = f(hi)
        if f_prev > 0.0 and f_hi <= 0.0:
            if hi - lo <= 0.0:
                return lo
            return float(brentq(f, lo, hi, xtol=1e-15, rtol=1e-15, maxiter=200))
        f_prev = f_hi
    return None
