"""The static table: cloth, cushions, wooden rails with sights, pockets, floor.

Geometry (table frame, mm): the cloth is the plane z = 0 inside the playing
surface [0, L] x [0, W]; each cushion is a strip of width CUSHION_WIDTH_MM
whose top is at the nose height h, with a vertical face at the nose line
(x = 0, x = L, y = 0, y = W); the wooden rail continues at z = h out to
RAIL_WIDTH_MM beyond the cushion, with sights 93.7 mm behind the nose at every
1/8 of the length (WPA); pockets are dark discs cut through cushion and cloth;
the floor lies below. Every pixel's ray (undistorted through the camera model)
is intersected with these surfaces, so lens distortion is exact.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from feltlab.render import settings as S
from feltlab.render.effects import srgb_to_linear
from feltlab.standards import TablePreset
from tracking.camera import CameraModel

CLOTH, CUSHION_TOP, CUSHION_FACE, RAIL, SIGHT, POCKET, FLOOR, BODY = range(8)


@dataclass
class TableGeometry:
    """Playing surface L x W (mm), nose height (mm), furniture sizes (mm)."""

    length_mm: float
    width_mm: float
    nose_height_mm: float
    pockets: list[tuple[float, float, float]] = field(default_factory=list)  # (x, y, radius) mm
    sights: list[tuple[float, float]] = field(default_factory=list)  # (x, y) mm on the rail top
    cushion_width_mm: float = S.CUSHION_WIDTH_MM
    rail_width_mm: float = S.RAIL_WIDTH_MM

    @classmethod
    def from_preset(cls, preset: TablePreset) -> "TableGeometry":
        L, W = preset.length_mm, preset.width_mm
        h = preset.cushion_nose_height_mm or S.NOSE_HEIGHT_FRACTION * preset.ball.diameter_mm
        pockets: list[tuple[float, float, float]] = []
        if preset.pockets:
            c, cs = S.CORNER_POCKET_SETBACK_MM / np.sqrt(2), S.CORNER_POCKET_RADIUS_MM
            for x, sx in ((0.0, -1), (L, 1)):
                for y, sy in ((0.0, -1), (W, 1)):
                    pockets.append((x + sx * c, y + sy * c, cs))
            for y, sy in ((0.0, -1), (W, 1)):
                pockets.append((L / 2, y + sy * S.SIDE_POCKET_SETBACK_MM, S.SIDE_POCKET_RADIUS_MM))
        d = S.SIGHT_BEHIND_NOSE_MM
        sights = []
        for k in range(1, 8):  # long rails: every 1/8 of the length (WPA)
            if preset.pockets and k == 4:
                continue  # side pocket
            sights += [(k * L / 8, -d), (k * L / 8, W + d)]
        n_short = max(1, int(round(W / (L / 8))))
        for k in range(1, n_short):  # short rails: same spacing
            sights += [(-d, k * W / n_short), (L + d, k * W / n_short)]
        return cls(L, W, h, pockets, sights)

    def corners(self, z_mm: float = 0.0) -> np.ndarray:
        """Playing-surface corners (4, 3) mm: (0,0), (L,0), (L,W), (0,W) at height z."""
        L, W = self.length_mm, self.width_mm
        return np.array([[0, 0, z_mm], [L, 0, z_mm], [L, W, z_mm], [0, W, z_mm]], dtype=float)


def _value_noise(x: np.ndarray, y: np.ndarray, cell: float, seed: int) -> np.ndarray:
    """Smooth pseudo-random field in [-1, 1] on a grid of ``cell`` mm (bilinear value noise)."""
    gx, gy = x / cell, y / cell
    ix, iy = np.floor(gx).astype(np.int64), np.floor(gy).astype(np.int64)
    fx, fy = gx - ix, gy - iy
    fx, fy = fx * fx * (3 - 2 * fx), fy * fy * (3 - 2 * fy)

    def h(a, b):
        v = (a * 374761393 + b * 668265263 + seed * 982451653) & 0xFFFFFFFF
        v = ((v ^ (v >> 13)) * 1274126177) & 0xFFFFFFFF
        return (v & 0xFFFF) / 32767.5 - 1.0

    return (h(ix, iy) * (1 - fx) * (1 - fy) + h(ix + 1, iy) * fx * (1 - fy)
            + h(ix, iy + 1) * (1 - fx) * fy + h(ix + 1, iy + 1) * fx * fy)


@dataclass
class SurfaceHits:
    """Per-ray results: hit point (N,3) mm, unit normal (N,3), linear albedo (N,3), kind (N,), ambient occlusion (N,)."""

    point: np.ndarray
    normal: np.ndarray
    albedo: np.ndarray
    kind: np.ndarray
    ao: np.ndarray


def trace_table(origin: np.ndarray, dirs: np.ndarray, geo: TableGeometry, colours: dict, seed: int = 0) -> SurfaceHits:
    """Intersect rays (origin (3,), unit dirs (N,3)) with the static table; see the module docstring."""
    L, W, h = geo.length_mm, geo.width_mm, geo.nose_height_mm
    cw, rw = geo.cushion_width_mm, geo.rail_width_mm
    n = dirs.shape[0]
    dz = np.minimum(dirs[:, 2], -1e-9)
    point = np.zeros((n, 3))
    normal = np.zeros((n, 3))
    normal[:, 2] = 1.0
    albedo = np.zeros((n, 3))
    kind = np.full(n, FLOOR, dtype=np.int8)
    ao = np.ones(n)

    s_h = (h - origin[2]) / dz
    ph = origin[None, :] + s_h[:, None] * dirs
    # distance outside the playing surface at the cushion-top height (0 inside)
    out_h = np.maximum.reduce([-ph[:, 0], ph[:, 0] - L, -ph[:, 1], ph[:, 1] - W, np.zeros(n)])
    inside_outer = out_h <= cw + rw
    inner = inside_outer & (out_h <= 0)
    top = inside_outer & (out_h > 0)

    def in_pocket(p):
        m = np.zeros(len(p), dtype=bool)
        for (px, py, pr) in geo.pockets:
            m |= (p[:, 0] - px) ** 2 + (p[:, 1] - py) ** 2 < pr * pr
        return m

    # --- cushion tops and rails (z = h)
    pock_h = in_pocket(ph) & top
    cush = top & (out_h < cw) & ~pock_h
    rail = top & (out_h >= cw) & ~pock_h
    point[top] = ph[top]
    kind[cush] = CUSHION_TOP
    kind[rail] = RAIL
    cloth_alb = srgb_to_linear(colours["cloth"])
    rail_alb = srgb_to_linear(colours["rail"])
    # rounded nose: the normal leans into the table over the first few mm
    if np.any(cush):
        o = out_h[cush]
        lean = np.clip(1.0 - o / 10.0, 0.0, 1.0) * 0.6
        p = ph[cush]
        gx = np.where(p[:, 0] < 0, 1.0, np.where(p[:, 0] > L, -1.0, 0.0))
        gy = np.where(p[:, 1] < 0, 1.0, np.where(p[:, 1] > W, -1.0, 0.0))
        nn = np.stack([gx * lean, gy * lean, np.ones_like(lean)], axis=1)
        normal[cush] = nn / np.linalg.norm(nn, axis=1, keepdims=True)
        tex = 1.0 + S.CLOTH_TEXTURE_DEPTH * _value_noise(p[:, 0], p[:, 1], S.CLOTH_TEXTURE_CELL_MM, seed)
        albedo[cush] = cloth_alb[None, :] * 0.95 * tex[:, None]
    if np.any(rail):
        p = ph[rail]
        along = np.where((p[:, 1] < 0) | (p[:, 1] > W), p[:, 0], p[:, 1])
        across = np.where((p[:, 1] < 0) | (p[:, 1] > W), p[:, 1], p[:, 0])
        grain = 1.0 + 0.10 * _value_noise(along * 0.02, across * 1.5, 1.0, seed + 7) + 0.04 * np.sin(across * 0.9 + 3 * _value_noise(along, across, 60.0, seed + 9))
        alb = rail_alb[None, :] * grain[:, None]
        sight = np.zeros(len(p), dtype=bool)
        for sx, sy in geo.sights:
            sight |= (p[:, 0] - sx) ** 2 + (p[:, 1] - sy) ** 2 < S.SIGHT_RADIUS_MM ** 2
        alb[sight] = srgb_to_linear(S.SIGHT_RGB)
        albedo[rail] = alb
        kr = kind[rail]
        kr[sight] = SIGHT
        kind[rail] = kr
    # --- inside the noses: cloth or cushion face
    if np.any(inner):
        idx = np.nonzero(inner)[0]
        d = dirs[idx]
        p0 = origin[None, :] + ((0.0 - origin[2]) / dz[idx])[:, None] * d
        on_cloth = (p0[:, 0] >= 0) & (p0[:, 0] <= L) & (p0[:, 1] >= 0) & (p0[:, 1] <= W)
        # cloth
        ic = idx[on_cloth]
        pc = p0[on_cloth]
        point[ic] = pc
        kind[ic] = CLOTH
        tex = 1.0 + S.CLOTH_TEXTURE_DEPTH * _value_noise(pc[:, 0], pc[:, 1], S.CLOTH_TEXTURE_CELL_MM, seed)
        tex += 0.01 * _value_noise(pc[:, 0], pc[:, 1], 200.0, seed + 3)
        albedo[ic] = cloth_alb[None, :] * tex[:, None]
        dist = np.minimum.reduce([pc[:, 0], L - pc[:, 0], pc[:, 1], W - pc[:, 1]])
        ao[ic] = 1.0 - 0.45 * np.exp(-dist / (0.8 * h))  # cushion occludes sky near the nose
        # cushion face: leave the inner box through a nose line between z = h and z = 0
        iface = idx[~on_cloth]
        if iface.size:
            pf0 = ph[iface]
            df = dirs[iface]
            with np.errstate(divide="ignore", invalid="ignore"):
                sx = np.where(df[:, 0] > 0, (L - pf0[:, 0]) / df[:, 0], np.where(df[:, 0] < 0, -pf0[:, 0] / df[:, 0], np.inf))
                sy = np.where(df[:, 1] > 0, (W - pf0[:, 1]) / df[:, 1], np.where(df[:, 1] < 0, -pf0[:, 1] / df[:, 1], np.inf))
            s = np.maximum(np.minimum(sx, sy), 0.0)
            pf = pf0 + s[:, None] * df
            point[iface] = pf
            kind[iface] = CUSHION_FACE
            nf = np.zeros((iface.size, 3))
            xs = sx <= sy
            nf[xs, 0] = -np.sign(df[xs, 0])
            nf[~xs, 1] = -np.sign(df[~xs, 1])
            normal[iface] = nf
            albedo[iface] = cloth_alb[None, :] * 0.8
            ao[iface] = 0.6 * np.clip(pf[:, 2] / h, 0.2, 1.0)
    # --- pockets: dark holes, slightly lit near the rim
    pock = pock_h.copy()
    if geo.pockets:
        p0all = origin[None, :] + ((0.0 - origin[2]) / dz)[:, None] * dirs
        pock |= in_pocket(p0all) & (kind == CLOTH)
        pock |= in_pocket(point) & (kind == CUSHION_FACE)  # the cushion stops at the pocket mouth
    if np.any(pock):
        point[pock] = ph[pock]
        kind[pock] = POCKET
        albedo[pock] = srgb_to_linear(S.POCKET_RGB)
        ao[pock] = 0.5
    # --- below the rail: table body if under the footprint, else floor
    rest = ~inside_outer
    if np.any(rest):
        ir = np.nonzero(rest)[0]
        pfl = origin[None, :] + ((S.FLOOR_Z_MM - origin[2]) / dz[ir])[:, None] * dirs[ir]
        under = (pfl[:, 0] > -(cw + rw)) & (pfl[:, 0] < L + cw + rw) & (pfl[:, 1] > -(cw + rw)) & (pfl[:, 1] < W + cw + rw)
        point[ir] = pfl
        tex = 1.0 + 0.12 * _value_noise(pfl[:, 0], pfl[:, 1], 4.0, seed + 5)
        albedo[ir] = srgb_to_linear(colours["floor"])[None, :] * tex[:, None]
        ao[ir] = np.where(under, 0.15, 1.0)
        kb = np.where(under, BODY, FLOOR).astype(np.int8)
        kind[ir] = kb
        albedo[ir[under]] = rail_alb * 0.5
    return SurfaceHits(point, normal, albedo, kind, ao)


def lamp_irradiance(points: np.ndarray, normals: np.ndarray, lamp_pos: np.ndarray) -> np.ndarray:
    """Relative irradiance (N,) from a small downward-facing lamp: cos(surface) cos(lamp) / d^2 (mm^-2)."""
    v = lamp_pos[None, :] - points
    d2 = np.sum(v * v, axis=1)
    d = np.sqrt(d2)
    cos_s = np.clip(np.sum(v * normals, axis=1) / d, 0.0, None)
    cos_l = np.clip(v[:, 2] / d, 0.0, None)
    return cos_s * cos_l / d2


def pixel_rays(camera: CameraModel, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """Unit ray directions (N,3), table frame, for (distorted) pixel coordinates xs, ys (exact, slow)."""
    _, d = camera.rays(np.column_stack([xs.ravel(), ys.ravel()]))
    return d


class RayField:
    """Fast pixel -> ray lookup: the camera's exact undistortion on a grid every ``step`` px,
    interpolated with cubic splines (scipy.ndimage.map_coordinates). The undistortion map
    is a smooth polynomial inverse, so the interpolation error is far below 1e-3 px
    (checked in tests/test_render.py against CameraModel.undistort_pixels)."""

    def __init__(self, camera: CameraModel, step: int = 4) -> None:
        from scipy.ndimage import spline_filter

        self.camera, self.step = camera, step
        w, h = camera.image_size
        # a margin of 10 cells keeps the spline's boundary effects (decaying ~0.27x per cell) out of the image
        self.gx = np.arange(-10 * step, w + 10 * step + 1, step, dtype=float)
        self.gy = np.arange(-10 * step, h + 10 * step + 1, step, dtype=float)
        GY, GX = np.meshgrid(self.gy, self.gx, indexing="ij")
        xy = camera.undistort_pixels(np.column_stack([GX.ravel(), GY.ravel()]))
        self.coef = [spline_filter(xy[:, i].reshape(GX.shape), order=3, mode="mirror") for i in (0, 1)]

    def normalised(self, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
        """Undistorted normalised coordinates (N,2) at pixel positions."""
        from scipy.ndimage import map_coordinates

        if not self.camera.has_distortion:
            return self.camera.undistort_pixels(np.column_stack([np.ravel(xs), np.ravel(ys)]))
        cy = (np.ravel(ys) - self.gy[0]) / self.step
        cx = (np.ravel(xs) - self.gx[0]) / self.step
        return np.stack([map_coordinates(c, [cy, cx], order=3, prefilter=False, mode="mirror") for c in self.coef], axis=1)

    def rays(self, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
        """Unit ray directions (N,3) in the table frame."""
        xy = self.normalised(xs, ys)
        d = np.concatenate([xy, np.ones((len(xy), 1))], axis=1) @ self.camera.R
        return d / np.linalg.norm(d, axis=1, keepdims=True)
