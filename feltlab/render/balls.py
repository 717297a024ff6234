"""Balls: ray-sphere shading with a texture that turns with the ball, and their shadows.

Frames: table frame (mm). A ball's orientation Q (3x3) maps body coordinates
to the table frame; it is integrated from the simulator's angular velocity
omega (rad/s, table frame): dQ/dt = [omega]x Q.

Silhouettes are anti-aliased analytically: a pixel whose ray passes at
perpendicular distance delta from the centre is covered by
clip(0.5 + (R - delta) / footprint, 0, 1), footprint = the pixel's width
(mm) at that depth. This is a box-filtered edge, so a ball's intensity
centroid sits on its silhouette's centre to well under 0.1 px.

Shadows on the table come from disc lamps: the fraction of a lamp a ball
hides, seen from a table point, is the overlap of two small circles of
angular radii asin(R/d) (ball) and atan(r_lamp/d_lamp) (lamp); plus the
sphere's ambient occlusion (R/d)^2 cos(theta) (the form factor of a sphere,
e.g. Howell's catalogue of configuration factors).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from feltlab.render import settings as S
from feltlab.render.effects import srgb_to_linear


@dataclass
class BallLook:
    """How one ball looks: linear albedo (3,), pattern 'solid'|'stripe', printed number (0: none)."""

    albedo: np.ndarray
    pattern: str = "solid"
    number: int = 0

    @classmethod
    def from_rgb(cls, rgb255, pattern: str = "solid", number: int = 0) -> "BallLook":
        return cls(srgb_to_linear(rgb255), pattern, number)


@dataclass
class LampSet:
    """Lamps as arrays: positions (K,3) mm, radii (K,) mm, power (K,3) linear RGB * mm^2."""

    pos: np.ndarray
    radius: np.ndarray
    power: np.ndarray


# ------------------------------------------------------------ orientation
def _quat_mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    aw, ax, ay, az = np.moveaxis(a, -1, 0)
    bw, bx, by, bz = np.moveaxis(b, -1, 0)
    return np.stack([aw * bw - ax * bx - ay * by - az * bz,
                     aw * bx + ax * bw + ay * bz - az * by,
                     aw * by - ax * bz + ay * bw + az * bx,
                     aw * bz + ax * by - ay * bx + az * bw], axis=-1)


def _quat_from_rotvec(v: np.ndarray) -> np.ndarray:
    ang = np.linalg.norm(v, axis=-1, keepdims=True)
    half = 0.5 * ang
    with np.errstate(invalid="ignore", divide="ignore"):
        axis = np.where(ang > 1e-12, v / np.where(ang > 0, ang, 1.0), 0.0)
    return np.concatenate([np.cos(half), axis * np.sin(half)], axis=-1)


def _quat_to_matrix(q: np.ndarray) -> np.ndarray:
    q = q / np.linalg.norm(q, axis=-1, keepdims=True)
    w, x, y, z = np.moveaxis(q, -1, 0)
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)], -1),
        np.stack([2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)], -1),
        np.stack([2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)], -1),
    ], -2)


def integrate_orientations(times_s: np.ndarray, omega_at, n_balls: int, t_end_s: float,
                           initial: np.ndarray | None = None,
                           max_step_rad: float = S.MAX_ROTATION_STEP_RAD, t_start: float = 0.0) -> np.ndarray:
    """Orientation matrices (T, N, 3, 3) body->table at ``times_s`` (s, >= t_start).

    omega_at(times (M,)) -> (M, N, 3) rad/s. Integrates from ``t_start``
    (orientation ``initial`` (N,3,3), default identity) with midpoint steps no
    larger than ``max_step_rad`` of rotation.
    """
    times_s = np.asarray(times_s, dtype=float)
    t_max = max(float(np.max(times_s)), t_start) if times_s.size else t_start
    probe = np.linspace(t_start, max(t_end_s, t_max), 2001)
    w_max = float(np.max(np.linalg.norm(omega_at(probe), axis=-1))) if n_balls else 0.0
    n_steps = max(1, int(np.ceil(w_max * (t_max - t_start) / max_step_rad)))
    grid = np.linspace(t_start, t_max, n_steps + 1)
    dt = grid[1] - grid[0] if n_steps else 0.0
    mids = 0.5 * (grid[:-1] + grid[1:])
    dq = _quat_from_rotvec(omega_at(mids) * dt) if n_steps else np.zeros((0, n_balls, 4))
    q = np.zeros((n_steps + 1, n_balls, 4))
    if initial is None:
        q[0, :, 0] = 1.0
    else:
        from scipy.spatial.transform import Rotation

        xyzw = Rotation.from_matrix(initial).as_quat()
        q[0] = np.concatenate([xyzw[:, 3:], xyzw[:, :3]], axis=1)
    for k in range(n_steps):
        q[k + 1] = _quat_mul(dq[k], q[k])
    # partial step from the grid point at or below each requested time
    k = np.clip(np.floor((times_s - t_start) / dt).astype(int) if dt > 0 else np.zeros(times_s.shape, int), 0, n_steps)
    rem = times_s - grid[k]
    w_mid = omega_at(grid[k] + rem / 2)  # (T, N, 3)
    qt = _quat_mul(_quat_from_rotvec(w_mid * rem[:, None, None]), q[k])
    return _quat_to_matrix(qt)


# ------------------------------------------------------------ texture
_SEGMENTS = {  # 7-segment digits: a b c d e f g
    0: "abcdef", 1: "bc", 2: "abged", 3: "abgcd", 4: "fgbc", 5: "afgcd", 6: "afgedc", 7: "abc", 8: "abcdefg", 9: "abcdfg",
}


def _digit_mask(p: np.ndarray, q: np.ndarray, digit: int) -> np.ndarray:
    """7-segment glyph in a box |p| <= 0.5, |q| <= 1 (p right, q up)."""
    t = 0.22
    segs = {
        "a": (np.abs(p) <= 0.5) & (np.abs(q - 1 + t / 2) <= t / 2),
        "g": (np.abs(p) <= 0.5) & (np.abs(q) <= t / 2),
        "d": (np.abs(p) <= 0.5) & (np.abs(q + 1 - t / 2) <= t / 2),
        "f": (np.abs(p + 0.5 - t / 2) <= t / 2) & (q >= 0) & (q <= 1),
        "b": (np.abs(p - 0.5 + t / 2) <= t / 2) & (q >= 0) & (q <= 1),
        "e": (np.abs(p + 0.5 - t / 2) <= t / 2) & (q <= 0) & (q >= -1),
        "c": (np.abs(p - 0.5 + t / 2) <= t / 2) & (q <= 0) & (q >= -1),
    }
    m = np.zeros(p.shape, dtype=bool)
    for s in _SEGMENTS[digit]:
        m |= segs[s]
    return m


def ball_albedo(u: np.ndarray, look: BallLook) -> np.ndarray:
    """Linear albedo (M,3) at body-frame unit vectors u (M,3).

    Stripe: coloured band |u_z| < STRIPE_HALF_HEIGHT on white. Number: white
    circles around body +x and -x with the number printed dark inside.
    """
    white = srgb_to_linear(S.BALL_COLOURS["white"])
    alb = np.repeat(look.albedo[None, :], len(u), axis=0)
    if look.pattern == "stripe":
        alb[np.abs(u[:, 2]) >= S.STRIPE_HALF_HEIGHT] = white
    if look.number > 0:
        rc = np.sin(S.NUMBER_CIRCLE_RAD)
        for sgn in (1.0, -1.0):
            front = sgn * u[:, 0] > np.cos(S.NUMBER_CIRCLE_RAD)
            if not np.any(front):
                continue
            alb[front] = white
            p = sgn * u[front, 1] / rc  # glyph axes on the circle: right = body y, up = body z
            q = u[front, 2] / rc
            digits = [int(c) for c in str(look.number)]
            ink = np.zeros(p.shape, dtype=bool)
            scale = 0.42 if len(digits) == 1 else 0.34
            for j, dgt in enumerate(digits):
                off = 0.0 if len(digits) == 1 else (j - 0.5) * 1.25 * scale
                ink |= _digit_mask((p - off) / scale, q / (scale * 1.3), dgt)
            sub = alb[front]
            sub[ink] = srgb_to_linear((25, 25, 25))
            alb[front] = sub
    return alb


# ------------------------------------------------------------ shadows
#: Reach of a ball's ambient occlusion and of its lamp shadows, in ball radii
#: (the renderer's patch boxes cover these).
AO_REACH = 3.5
SHADOW_REACH = 6.0
def _circle_overlap(r1, r2, d):
    """Area of the intersection of two circles (radii r1, r2, centre distance d), elementwise."""
    r1, r2, d = np.broadcast_arrays(r1, r2, d)
    out = np.zeros(r1.shape)
    full = d <= np.abs(r1 - r2)
    out[full] = np.pi * np.minimum(r1, r2)[full] ** 2
    part = (~full) & (d < r1 + r2)
    if np.any(part):
        a, b, c = r1[part], r2[part], d[part]
        x1 = np.clip((c * c + a * a - b * b) / (2 * c * a), -1, 1)
        x2 = np.clip((c * c + b * b - a * a) / (2 * c * b), -1, 1)
        k = (-c + a + b) * (c + a - b) * (c - a + b) * (c + a + b)
        out[part] = a * a * np.arccos(x1) + b * b * np.arccos(x2) - 0.5 * np.sqrt(np.clip(k, 0, None))
    return out


def ball_shadow(points: np.ndarray, normals: np.ndarray, centre: np.ndarray, radius: float,
                lamps: LampSet) -> tuple[np.ndarray, np.ndarray]:
    """One ball's effect on table points (M,3) with normals (M,3).

    Returns (ambient factor (M,), visible lamp fractions (K, M)): multiply the
    ambient and each lamp's direct light by them.
    """
    K = len(lamps.pos)
    ao = np.ones(len(points))
    vis = np.ones((K, len(points)))
    a = centre[None, :] - points
    da2 = np.einsum("ij,ij->i", a, a)
    # ambient occlusion: sphere form factor, faded out between 2R and AO_REACH R (< 3 % there)
    near = np.nonzero(da2 < (AO_REACH * radius) ** 2)[0]
    if near.size:
        da = np.sqrt(da2[near])
        cos_t = np.einsum("ij,ij->i", a[near], normals[near]) / da
        fade = np.clip((AO_REACH * radius - da) / ((AO_REACH - 2.0) * radius), 0, 1)
        fade = fade * fade * (3 - 2 * fade)
        ao[near] = 1.0 - np.clip(cos_t, 0, 1) * np.minimum(radius * radius / da2[near], 1.0) * fade
    for k in range(K):
        lp = lamps.pos[k]
        hgt = max(lp[2] - centre[2], 1e-6)
        f = lp[2] / hgt
        sc = lp[:2] + (centre[:2] - lp[:2]) * f  # shadow centre on the cloth
        reach = radius * (1.3 + np.hypot(*(centre[:2] - lp[:2])) / hgt) * f + lamps.radius[k] * radius / hgt + 2.0
        dxy = points[:, :2] - sc[None, :]
        m = np.nonzero(np.einsum("ij,ij->i", dxy, dxy) < reach * reach)[0]
        if not m.size:
            continue
        am = a[m]
        da = np.sqrt(da2[m])
        alpha = np.arcsin(np.clip(radius / da, 0, 1))
        bv = lp[None, :] - points[m]
        db = np.sqrt(np.einsum("ij,ij->i", bv, bv))
        beta = np.arctan(lamps.radius[k] / db)
        gamma = np.arccos(np.clip(np.einsum("ij,ij->i", am, bv) / (da * db), -1, 1))
        frac = _circle_overlap(alpha, beta, gamma) / (np.pi * beta * beta)
        vis[k, m] = 1.0 - np.clip(frac, 0, 1)
    return ao, vis


# ------------------------------------------------------------ ball shading
def shade_ball(origin: np.ndarray, dirs: np.ndarray, pitch_rad: float, centre: np.ndarray, radius: float,
               orient: np.ndarray, look: BallLook, lamps: LampSet, ambient: float, bounce_rgb: np.ndarray,
               ) -> tuple[np.ndarray, np.ndarray]:
    """Coverage (M,) in [0,1] and linear radiance (M,3) of one ball for rays (M,3) from ``origin``.

    pitch_rad: angular width of one pixel. orient: body->table (3,3).
    """
    oc = centre - origin
    b = dirs @ oc  # distance along each ray to the closest approach
    d2 = float(oc @ oc) - b * b
    delta = np.sqrt(np.clip(d2, 0, None))
    cov = np.clip(0.5 + (radius - delta) / np.maximum(b * pitch_rad, 1e-9), 0.0, 1.0)
    cov[b <= 0] = 0.0
    hit = cov > 0
    col = np.zeros((len(dirs), 3))
    if not np.any(hit):
        return cov, col
    d = dirs[hit]
    s = b[hit] - np.sqrt(np.clip(radius * radius - d2[hit], 0, None))
    p = origin[None, :] + s[:, None] * d
    n = p - centre[None, :]
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    u = n @ orient  # body coordinates: Q^T n
    alb = ball_albedo(u, look)
    view = -d
    nz = n[:, 2]
    light = (ambient * (0.5 + 0.5 * np.clip(nz, -1, 1)))[:, None] * np.ones(3)
    light += (ambient * S.CLOTH_BOUNCE * np.clip(-nz, 0, 1))[:, None] * bounce_rgb[None, :]
    spec = np.zeros_like(light)
    for k in range(len(lamps.pos)):
        lv = lamps.pos[k][None, :] - p
        dl2 = np.sum(lv * lv, axis=1)
        lv /= np.sqrt(dl2)[:, None]
        ndl = np.clip(np.sum(n * lv, axis=1), 0, None)
        cos_l = np.clip(lv[:, 2], 0, None)
        e = (cos_l / dl2)[:, None] * lamps.power[k][None, :]
        light += e * ndl[:, None]
        hv = lv + view
        hv /= np.linalg.norm(hv, axis=1, keepdims=True)
        ndh = np.clip(np.sum(n * hv, axis=1), 0, None)
        lobe = S.SPEC_BROAD[0] * ndh ** S.SPEC_BROAD[1] + S.SPEC_SHARP[0] * ndh ** S.SPEC_SHARP[1]
        spec += (lamps.power[k][None, :] / dl2[:, None]) * lobe[:, None]
    col[hit] = alb * light + spec
    return cov, col
