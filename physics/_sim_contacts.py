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

from dataclasses import dataclass

import numpy as np

Z = np.array([0.0, 0.0, 1.0])


def _as3(v2: np.ndarray) -> np.ndarray:
    return np.array([v2[0], v2[1], 0.0])


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

    t3 = np.cross(Z, n3)
    ca = _as3(va) + np.cross(wa, Ra * n3)
    cb = _as3(vb) + np.cross(wb, -Rb * n3)
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
    wa2 = wa + np.cross(Ra * n3, p3) / (0.4 * ma * Ra * Ra)
    wb2 = wb + np.cross(-Rb * n3, -p3) / (0.4 * mb * Rb * Rb)
    return ContactOutcome(va2, wa2, vb2, wb2, ja_h, jn, p3)


def ball_cushion(
    v: np.ndarray, w: np.ndarray, m: float, R: float, n: np.ndarray,
    height_mm: float, e: float, mu: float, min_speed_mm_s: float,
) -> ContactOutcome:
    """Bounce a ball off a cushion whose inward unit normal is n (2,).

    Rigid-cushion model with the contact at the cushion nose height h above
    the cloth (Mathavan, Jackson & Parkin, Proc. IMechE C 224(9):1863, 2010,
    describe this geometry): the contact point sits at ``r_c = -R cos(theta) n
    + (h - R) z`` from the centre, ``sin(theta) = (h - R) / R``, and the
    contact normal ``N = -r_c / R`` is tilted downwards. The normal impulse
    along N is sized so the centre's horizontal normal velocity is reversed
    times e (its vertical part goes into the cloth); Coulomb friction acts in
    the plane normal to N, limited by mu times the impulse along N, with
    compliance 7/(2m) along the cushion and ((b.n)^2 + 5/2)/m along the tilted
    direction b. Side spin therefore changes the rebound angle and top/back
    spin the rebound speed, so the measured restitution differs from e.
    Simplification: friction between ball and cloth during the impact is
    ignored.

    Low-speed rule: below ``min_speed_mm_s`` approach speed the ball comes to
    rest against the cushion in the normal direction and the spin that would
    curve it back into the cushion is removed (no endless micro-bounces).
    """
    n3 = _as3(n)
    v_n = float(v @ n)  # < 0 when approaching
    if -v_n < min_speed_mm_s:
        v2 = v - v_n * n
        m_dir = np.cross(Z, n3)  # spin along z x n curves the ball into the cushion
        w2 = w - (w @ m_dir) * m_dir
        imp = m * (v2 - v)
        return ContactOutcome(v2, w2, None, None, imp, m * (-v_n), np.zeros(3), resting=True)

    sin_t = (height_mm - R) / R
    cos_t = np.sqrt(max(1.0 - sin_t * sin_t, 0.0))
    r_c = -R * cos_t * n3 + (height_mm - R) * Z
    N = -r_c / R
    j_h = m * (1.0 + e) * (-v_n)  # horizontal normal impulse
    j_N = j_h / cos_t
    t3 = np.cross(Z, n3)
    b3 = np.cross(N, t3)
    c_vel = _as3(v) + np.cross(w, r_c)
    s_tb = np.array([c_vel @ t3, c_vel @ b3])
    p3 = np.zeros(3)
    if mu > 0.0:
        bn = float(b3 @ n3)
        p_tb = _friction(s_tb, np.array([3.5 / m, (bn * bn + 2.5) / m]), mu * j_N)
        p3 = p_tb[0] * t3 + p_tb[1] * b3
    imp = j_h * n + p3[:2]
    v2 = v + imp / m
    w2 = w + np.cross(r_c, p3) / (0.4 * m * R * R)
    if float(v2 @ n) < 0.0:  # friction overwhelmed the rebound: stop normal motion
        v2 = v2 - float(v2 @ n) * n
        imp = m * (v2 - v)
    return ContactOutcome(v2, w2, None, None, imp, j_N, p3)
