"""Instantaneous contact laws for the simulator (ball-ball, ball-cushion).

Private helper of :mod:`physics.simulate`. Units: velocities mm/s, spins
rad/s, masses kg, impulses kg mm/s inside this module (the caller converts to
N s). Vectors are 3-D in the table frame (z up) unless stated.

Friction at a contact (both laws): Coulomb friction in the contact's tangent
plane, limited by ``mu`` times the normal impulse. The impulse that would stop
the tangential slip is computed from the contact's compliance (slip change per
unit impulse, per tangent direction); if it is within the limit the contact
sticks, otherwise the full limit acts against the initial slip direction,
clamped per direction so the slip never reverses (so friction never adds
energy). Vertical linear impulses are taken up by the cloth (balls stay on the
table; the tiny hops they would cause are ignored).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

Z = np.array([0.0, 0.0, 1.0])


def _as3(v2: np.ndarray) -> np.ndarray:
    return np.array([v2[0], v2[1], 0.0])


def _cross(a, b) -> np.ndarray:
    """3-D cross product of two length-3 sequences (faster than np.cross for one pair)."""
    a0, a1, a2 = float(a[0]), float(a[1]), float(a[2])
    b0, b1, b2 = float(b[0]), float(b[1]), float(b[2])
    return np.array([a1 * b2 - a2 * b1, a2 * b0 - a0 * b2, a0 * b1 - a1 * b0])


def _friction(slip: np.ndarray, compliance: np.ndarray, limit: float) -> np.ndarray:
    """Friction impulse components (kg mm/s) along the tangent basis.

    slip: slip-velocity components (mm/s); compliance: slip change per unit
    impulse (1/kg) along each basis direction; limit: mu * normal impulse.
    """
    stick = -slip / compliance
    mag = float(np.linalg.norm(stick))
    if mag <= limit or mag == 0.0:
        return stick
    s = float(np.linalg.norm(slip))
    p = -limit * slip / s
    # Never push the slip past zero in any direction.
    return np.clip(p, -np.abs(stick), np.abs(stick))


@dataclass
class ContactOutcome:
    """Post-contact velocities/spins and what was applied."""

    va: np.ndarray  # (2,) mm/s
    wa: np.ndarray  # (3,) rad/s
    vb: np.ndarray | None
    wb: np.ndarray | None
    impulse_a: np.ndarray  # (2,) horizontal impulse on ball a, kg mm/s
    normal_impulse: float  # kg mm/s, along the contact normal
    friction_impulse: np.ndarray  # (3,) kg mm/s on ball a
    resting: bool = False  # low-speed cushion rule applied


def ball_ball(
    va: np.ndarray, wa: np.ndarray, ma: float, Ra: float,
    vb: np.ndarray, wb: np.ndarray, mb: float, Rb: float,
    n: np.ndarray, e: float, mu: float, min_separation_mm_s: float,
) -> ContactOutcome:
    """Collide ball a with ball b; n (2,) is the unit line of centres a -> b.

    Normal: impulse ``(1 + e) m_eff w`` for approach speed ``w`` (Newton's
    restitution law), except that the separation speed is never below
    ``min_separation_mm_s`` (a numerical floor that ends endless micro-bounces
    of balls pushed together by cloth friction). Tangential: Coulomb friction
    at the contact point (throw, spin transfer); tangent basis t = z x n
    (horizontal) and z. Compliance per direction: t: 7/2 (1/ma + 1/mb)
    (linear + rotational), z: 5/2 (1/ma + 1/mb) (rotational only; the cloth
    takes the vertical linear part). For a stun shot this reproduces the
    throw closed form arctan(min(mu, 2 tan(phi) / (7 (1 + e)))).
    """
    n3 = _as3(n)
    m_eff = ma * mb / (ma + mb)
    w_app = float((va - vb) @ n)  # > 0 when approaching
    sep = max(e * w_app, min_separation_mm_s)
    jn = m_eff * (w_app + sep)

    t3 = _cross(Z, n3)
    ca = _as3(va) + _cross(wa, Ra * n3)
    cb = _as3(vb) + _cross(wb, -Rb * n3)
    slip = ca - cb
    s_tz = np.array([slip @ t3, slip @ Z])
    inv = 1.0 / ma + 1.0 / mb
    p_tz = np.zeros(2)
    if mu > 0.0:
        p_tz = _friction(s_tz, np.array([3.5 * inv, 2.5 * inv]), mu * jn)
    p3 = p_tz[0] * t3 + p_tz[1] * Z  # friction impulse on a

    ja_h = -jn * n + p3[:2]
    va2 = va + ja_h / ma
    vb2 = vb - ja_h / mb
    wa2 = wa + _cross(Ra * n3, p3) / (0.4 * ma * Ra * Ra)
    wb2 = wb + _cross(-Rb * n3, -p3) / (0.4 * mb * Rb * Rb)
    return ContactOutcome(va2, wa2, vb2, wb2, ja_h, jn, p3)


def ball_cushion(
    v: np.ndarray, w: np.ndarray, m: float, R: float, n: np.ndarray,
    height_mm: float, e: float, mu: float, mu_cloth: float, min_speed_mm_s: float,
    steps: int = 1000,
) -> ContactOutcome:
    """Bounce a ball off a rigid cushion whose inward unit normal is n (2,).

    Model (following the approach of Mathavan, Jackson & Parkin, Proc.
    IMechE C 224(9):1863, 2010; our own implementation): the cushion touches the ball at the nose height h above the cloth,
    at ``r_c = -R cos(theta) n + (h - R) z`` from the centre with
    ``sin(theta) = (h - R) / R``; its normal impulse acts along
    ``N = -r_c / R`` (tilted down into the cloth). The cloth carries the
    downward part, so it pushes back at the ball's bottom point, with sliding
    friction ``mu_cloth`` there; Coulomb friction ``mu`` acts at the cushion
    contact. The impact is integrated in small steps of normal impulse with
    each friction force against its contact's current slip (sticking when the
    slip reaches zero), and ends by Stronge's energetic restitution: the
    work of the normal force during restitution is e^2 times that during
    compression (W. J. Stronge, Impact Mechanics, CUP 2000). Without friction
    this reverses the horizontal normal velocity times e exactly; with
    friction, spin changes the rebound and the measured e differs.
    Every step removes energy (friction against slip, e <= 1).

    Low-speed rule: below ``min_speed_mm_s`` approach speed the ball comes to
    rest against the cushion in the normal direction and the spin that would
    curve it back into the cushion is removed (no endless micro-bounces).
    """
    n3 = _as3(n)
    v_n = float(v @ n)  # < 0 when approaching
    if -v_n < min_speed_mm_s:
        v2 = v - v_n * n
        m_dir = _cross(Z, n3)  # spin along z x n curves the ball into the cushion
        w2 = w - (w @ m_dir) * m_dir
        imp = m * (v2 - v)
        return ContactOutcome(v2, w2, None, None, imp, m * (-v_n), np.zeros(3), resting=True)

    sin_t = (height_mm - R) / R
    cos_t = math.sqrt(max(1.0 - sin_t * sin_t, 0.0))
    nx, ny = float(n[0]), float(n[1])
    # Contact offset r_c and normal N (into the ball), as plain floats.
    rcx, rcy, rcz = -R * cos_t * nx, -R * cos_t * ny, height_mm - R
    Nx, Ny, Nz = cos_t * nx, cos_t * ny, -sin_t
    inv_m = 1.0 / m
    inv_i = 1.0 / (0.4 * m * R * R)
    k_rot = R * R * inv_i  # 5 / (2 m)
    vx, vy = float(v[0]), float(v[1])
    wx, wy, wz = (float(x) for x in w)
    # Normal impulse to end compression without friction: m |c_N| / cos^2.
    p_comp = m * (-v_n) / max(cos_t, 1e-6)
    dp = p_comp / (0.5 * steps)
    work = 0.0
    work_min = 0.0
    p_total = 0.0
    fcx = fcy = fcz = 0.0

    def contact_vel(vx, vy, wx, wy, wz):
        # v + w x r_c
        return (vx + wy * rcz - wz * rcy, vy + wz * rcx - wx * rcz, wx * rcy - wy * rcx)

    def step(state, d):
        vx, vy, wx, wy, wz = state
        cx, cy, cz = contact_vel(vx, vy, wx, wy, wz)
        cn = cx * Nx + cy * Ny + cz * Nz
        sx, sy, sz = cx - cn * Nx, cy - cn * Ny, cz - cn * Nz
        s = math.sqrt(sx * sx + sy * sy + sz * sz)
        fx = fy = fz = 0.0
        if mu > 0.0 and s > 0.0:
            ux, uy, uz = sx / s, sy / s, sz / s
            k = (ux * ux + uy * uy) * inv_m + k_rot  # compliance along the slip
            f = min(mu * d, s / k)
            fx, fy, fz = -f * ux, -f * uy, -f * uz
        jx, jy, jz = d * Nx + fx, d * Ny + fy, d * Nz + fz  # cushion impulse
        pt = max(0.0, -jz)  # cloth normal impulse keeps the ball on the cloth
        tx = ty = 0.0
        if mu_cloth > 0.0 and pt > 0.0:
            bx, by = vx - R * wy, vy + R * wx  # bottom-point slip
            b = math.hypot(bx, by)
            if b > 0.0:
                f = min(mu_cloth * pt, b / (inv_m + k_rot))
                tx, ty = -f * bx / b, -f * by / b
        vx2 = vx + (jx + tx) * inv_m
        vy2 = vy + (jy + ty) * inv_m
        # r_c x J + (-R z) x (T + pt z); (-R z) x (tx, ty, 0) = (R ty, -R tx, 0)
        wx2 = wx + (rcy * jz - rcz * jy + R * ty) * inv_i
        wy2 = wy + (rcz * jx - rcx * jz - R * tx) * inv_i
        wz2 = wz + (rcx * jy - rcy * jx) * inv_i
        new = (vx2, vy2, wx2, wy2, wz2)
        cx2, cy2, cz2 = contact_vel(vx2, vy2, wx2, wy2, wz2)
        cn2 = cx2 * Nx + cy2 * Ny + cz2 * Nz
        return new, cn, cn2, (fx, fy, fz)

    state = (vx, vy, wx, wy, wz)
    compressed = False
    for _ in range(50 * steps):
        new, cn, cn2, fr = step(state, dp)
        dw = 0.5 * (cn + cn2) * dp
        if cn2 > 0.0:
            compressed = True
        target = -(1.0 - e * e) * (-work_min) if compressed else None
        if compressed and cn > 0.0 and work + dw >= target:
            frac = (target - work) / dw if dw > 0 else 0.0
            new, cn, cn2, fr = step(state, frac * dp)
            state = new
            p_total += frac * dp
            fcx, fcy, fcz = fcx + fr[0], fcy + fr[1], fcz + fr[2]
            break
        state = new
        work += dw
        work_min = min(work_min, work)
        p_total += dp
        fcx, fcy, fcz = fcx + fr[0], fcy + fr[1], fcz + fr[2]
        if compressed and e == 0.0:
            break
    v2 = np.array(state[:2])
    w2 = np.array(state[2:])
    if float(v2 @ n) < 0.0:  # friction overwhelmed the rebound: stop normal motion
        v2 = v2 - float(v2 @ n) * n
    imp = m * (v2 - v)
    return ContactOutcome(v2, w2, None, None, imp, p_total, np.array([fcx, fcy, fcz]))
