"""Frame composition: a static background rendered once, ball patches per frame.

For each frame the renderer averages ``n`` sub-frame renders spread over the
exposure (motion blur), but only inside boxes around the balls and their
shadows; the rest of the frame is the precomputed background. Camera effects
are linear (vignetting, Gaussian blur), so a patch's change from the
background is vignetted and blurred on its own and added back; noise and the
tone curve are applied to the whole frame.

Images are float32 linear RGB (H, W, 3), 1.0 = full scale; output uint8 BGR.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import cv2
import numpy as np

from feltlab.render import settings as S
from feltlab.render.balls import AO_REACH, BallLook, LampSet, ball_shadow, integrate_orientations, shade_ball
from feltlab.render.effects import (add_sensor_noise, encode_srgb8, flicker_gain, optical_blur, srgb_to_linear,
                                    vignetting_map)
from feltlab.render.scene import RayField, TableGeometry, lamp_irradiance, trace_table
from tracking.camera import CameraModel


#: Large shadow rectangles are evaluated on every SHADOW_STRIDE-th pixel (see FrameRenderer._shadow_rect).
SHADOW_STRIDE = 2
#: Frames whose states and orientations are prepared together (bounds memory on long clips).
FRAME_BLOCK = 240


class Motion(Protocol):
    """Ball states over time (table frame): what the renderer needs from a simulator."""

    ball_ids: list[str]

    def states(self, times_s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """-> pos (T,N,2) mm, vel (T,N,2) mm/s, omega (T,N,3) rad/s, on_table (T,N) bool."""
        ...


class SimMotion:
    """Adapter from physics.simulate.SimResult to :class:`Motion`."""

    def __init__(self, sim) -> None:
        self.sim = sim
        self.ball_ids = list(sim.ball_ids)

    def states(self, times_s):
        st = self.sim.state_at(np.asarray(times_s, dtype=float))
        return (np.asarray(st.pos, float), np.asarray(st.vel, float), np.asarray(st.omega, float),
                np.asarray(st.on_table, bool))


class LinearMotion:
    """Balls gliding at constant velocity while rolling without slip (for tests and previews).

    pos0 (N,2) mm at t = 0, vel (N,2) mm/s, radius mm.
    """

    def __init__(self, ball_ids: list[str], pos0, vel, radius_mm: float) -> None:
        self.ball_ids = list(ball_ids)
        self.pos0 = np.asarray(pos0, float).reshape(-1, 2)
        self.vel = np.asarray(vel, float).reshape(-1, 2)
        self.radius = radius_mm

    def states(self, times_s):
        t = np.asarray(times_s, float)[:, None, None]
        pos = self.pos0[None] + t * self.vel[None]
        vel = np.broadcast_to(self.vel[None], pos.shape).copy()
        omega = np.zeros(pos.shape[:2] + (3,))
        omega[..., 0] = -vel[..., 1] / self.radius  # rolling: omega = z x v / R
        omega[..., 1] = vel[..., 0] / self.radius
        return pos, vel, omega, np.ones(pos.shape[:2], bool)


@dataclass
class Look:
    """Everything about appearance that stays fixed over a clip."""

    cloth_rgb: tuple
    rail_rgb: tuple
    floor_rgb: tuple
    ambient: float
    lamps_pos: np.ndarray  # (K,3) mm
    lamps_radius: np.ndarray  # (K,) mm
    lamps_rgb: np.ndarray  # (K,3) sRGB 0-255
    lamps_intensity: np.ndarray  # (K,)
    read_noise: float = 0.0
    shot_noise: float = 0.0
    vignetting: float = 0.0
    blur_px: float = 0.0
    white_balance: tuple = (1.0, 1.0, 1.0)
    brightness: float = 1.0
    flicker: float = 0.0
    flicker_hz: float = 100.0
    max_subframes: int = S.MAX_SUBFRAMES
    supersample: int = S.BACKGROUND_SUPERSAMPLE


class FrameRenderer:
    """Renders frames of one clip; build once per camera/lighting, then call :meth:`render`."""

    def __init__(self, camera: CameraModel, geo: TableGeometry, ball_radius_mm: float, looks: list[BallLook],
                 look: Look, seed: int = 0) -> None:
        self.camera, self.geo, self.R, self.looks, self.look = camera, geo, ball_radius_mm, looks, look
        self.rng = np.random.default_rng(seed)
        self.seed = seed
        w, h = camera.image_size
        self.w, self.h = w, h
        self.origin = camera.centre_mm
        # lamp power: normalise so a white diffuse surface at the table centre reads WHITE_TARGET_LINEAR
        centre = np.array([[geo.length_mm / 2, geo.width_mm / 2, 0.0]])
        up = np.array([[0.0, 0.0, 1.0]])
        lum = np.array([0.2126, 0.7152, 0.0722])
        lin = srgb_to_linear(look.lamps_rgb).reshape(-1, 3)
        e_centre = sum(look.lamps_intensity[k] * float(lin[k] @ lum) * lamp_irradiance(centre, up, look.lamps_pos[k])[0]
                       for k in range(len(lin)))
        if e_centre > 1e-20:
            scale = S.WHITE_TARGET_LINEAR / (e_centre * (1.0 + look.ambient))
            self.ambient = look.ambient * scale * e_centre
        else:  # lamps off: room light only
            scale = 0.0
            self.ambient = S.WHITE_TARGET_LINEAR if look.ambient > 0 else 0.0
        self.lamps = LampSet(look.lamps_pos.astype(float), look.lamps_radius.astype(float),
                             lin * look.lamps_intensity[:, None] * scale)
        self.cloth_lin = srgb_to_linear(look.cloth_rgb)
        self._build_background()
        self._still_cache: dict = {}
        self._base = optical_blur(self.bg * self.vig[..., None], look.blur_px)  # finished background, linear
        gain = np.asarray(look.white_balance, np.float32) * np.float32(look.brightness)
        self.gain = gain
        self.px_per_mm = self._max_px_per_mm()

    # ------------------------------------------------------------ background
    def _build_background(self) -> None:
        w, h, ss = self.w, self.h, max(1, int(self.look.supersample))
        K = len(self.lamps.pos)
        colours = {"cloth": self.look.cloth_rgb, "rail": self.look.rail_rgb, "floor": self.look.floor_rgb}
        self.rays = np.zeros((h, w, 3), np.float32)
        self.pts = np.zeros((h, w, 3), np.float32)
        self.nrm = np.zeros((h, w, 3), np.float32)
        self.amb = np.zeros((h, w, 3), np.float32)
        self.direct = np.zeros((K, h, w, 3), np.float32)
        offs = (np.arange(ss) + 0.5) / ss - 0.5
        rows_per_chunk = max(1, 120000 // (w * ss * ss))
        xs = np.arange(w, dtype=float)
        field = RayField(self.camera)
        for y0 in range(0, h, rows_per_chunk):
            y1 = min(h, y0 + rows_per_chunk)
            ys = np.arange(y0, y1, dtype=float)
            gy, gx = np.meshgrid(ys, xs, indexing="ij")
            self.rays[y0:y1] = field.rays(gx, gy).reshape(y1 - y0, w, 3)
            acc = {k: 0.0 for k in ("pts", "nrm", "amb", "dir")}
            for oy in offs:
                for ox in offs:
                    d = field.rays(gx + ox, gy + oy)
                    hit = trace_table(self.origin, d, self.geo, colours, self.seed)
                    acc["pts"] = acc["pts"] + hit.point
                    acc["nrm"] = acc["nrm"] + hit.normal
                    acc["amb"] = acc["amb"] + hit.albedo * (self.ambient * hit.ao)[:, None]
                    acc["dir"] = acc["dir"] + np.stack([hit.albedo * (lamp_irradiance(hit.point, hit.normal, self.lamps.pos[k])[:, None]
                                                        * self.lamps.power[k][None, :]) for k in range(K)])
            n = ss * ss
            shp = (y1 - y0, w, 3)
            self.pts[y0:y1] = (acc["pts"] / n).reshape(shp)
            nn = (acc["nrm"] / n).reshape(shp)
            self.nrm[y0:y1] = nn / np.linalg.norm(nn, axis=2, keepdims=True)
            self.amb[y0:y1] = (acc["amb"] / n).reshape(shp)
            self.direct[:, y0:y1] = (acc["dir"] / n).reshape((K,) + shp)
        self.bg = self.amb + self.direct.sum(axis=0)
        optical_axis = self.camera.R[2]  # camera z axis in the table frame
        cos_axis = self.rays @ optical_axis.astype(np.float32)
        self.vig = vignetting_map(cos_axis, self.look.vignetting)

    def _max_px_per_mm(self) -> float:
        pts = np.vstack([self.geo.corners(self.R), [[self.geo.length_mm / 2, self.geo.width_mm / 2, self.R]]])
        vals = []
        for p in pts:
            try:
                vals.append(1.0 / self.camera.mm_per_px(p))
            except Exception:  # noqa: BLE001 - a point behind the camera
                pass
        return max(vals) if vals else 1.0

    # ------------------------------------------------------------ planning
    def subframe_times(self, t_mid: np.ndarray, exposure_s: float, speeds_mm_s: np.ndarray) -> list[np.ndarray]:
        """Sub-frame times (s) per frame: enough samples that a ball moves <= SUBFRAME_STEP_PX between them."""
        out = []
        for t, v in zip(t_mid, speeds_mm_s):
            n = 1 if exposure_s <= 0 else int(np.clip(np.ceil(v * exposure_s * self.px_per_mm / S.SUBFRAME_STEP_PX),
                                                       1, self.look.max_subframes))
            out.append(t + ((np.arange(n) + 0.5) / n - 0.5) * exposure_s)
        return out

    def _rect(self, P: np.ndarray, margin_px: float) -> tuple[int, int, int, int] | None:
        """Pixel rectangle (x0, y0, x1, y1), clipped to the image, around the projections of points P (M,3)."""
        pc = self.camera.to_camera(P)
        P = P[pc[:, 2] > 1.0]
        if len(P) == 0:
            return None
        q = self.camera.project(P)
        x0 = max(int(np.floor(q[:, 0].min() - margin_px)), 0)
        y0 = max(int(np.floor(q[:, 1].min() - margin_px)), 0)
        x1 = min(int(np.ceil(q[:, 0].max() + margin_px)) + 1, self.w)
        y1 = min(int(np.ceil(q[:, 1].max() + margin_px)) + 1, self.h)
        if x1 <= x0 or y1 <= y0:
            return None
        return x0, y0, x1, y1

    def _silhouette_points(self, c: np.ndarray) -> np.ndarray:
        """Corners of a cube around the ball (8,3): its projection contains the silhouette."""
        return c[None, :] + self.R * 1.02 * np.array([[i, j, k] for i in (-1, 1) for j in (-1, 1) for k in (-1, 1)])

    def _shadow_points(self, c: np.ndarray) -> np.ndarray:
        """Cloth points bounding a ball's ambient occlusion and lamp shadows (M,3)."""
        R = self.R
        foot = [(c[0], c[1], AO_REACH * R)]
        for lp, lr in zip(self.lamps.pos, self.lamps.radius):
            hgt = max(lp[2] - c[2], 1e-6)
            f = lp[2] / hgt
            sx, sy = lp[:2] + (c[:2] - lp[:2]) * f  # shadow centre on the cloth
            obl = np.hypot(*(c[:2] - lp[:2])) / hgt  # elongation of an oblique shadow
            foot.append((sx, sy, R * (1.2 + obl) * f + lr * R / hgt + 2.0))
        return np.array([[fx + i * rad, fy + j * rad, 0.0] for fx, fy, rad in foot for i in (-1, 1) for j in (-1, 1)])

    def _box(self, centres: np.ndarray, margin_px: float) -> tuple[int, int, int, int] | None:
        """Pixel box covering balls at centres (M,3) and their shadows."""
        P = np.vstack([np.vstack([self._silhouette_points(c), self._shadow_points(c)]) for c in centres])
        return self._rect(P, margin_px)

    @staticmethod
    def _merge(boxes: list[tuple[int, int, int, int]]) -> list[tuple[int, int, int, int]]:
        boxes = list(boxes)
        merged = True
        while merged:
            merged = False
            out: list[tuple[int, int, int, int]] = []
            for b in boxes:
                for i, o in enumerate(out):
                    if b[0] < o[2] and o[0] < b[2] and b[1] < o[3] and o[1] < b[3]:
                        out[i] = (min(b[0], o[0]), min(b[1], o[1]), max(b[2], o[2]), max(b[3], o[3]))
                        merged = True
                        break
                else:
                    out.append(b)
            boxes = out
        return boxes

    # ------------------------------------------------------------ rendering
    def render_linear(self, pos: np.ndarray, on_table: np.ndarray, orient: np.ndarray) -> np.ndarray:
        """Linear frame (H,W,3) after vignetting and blur, before gain and noise.

        pos (n,N,2) mm, on_table (n,N), orient (n,N,3,3): the n sub-frame states to average.
        """
        n_sub, N = pos.shape[:2]
        centres = np.concatenate([pos, np.full(pos.shape[:2] + (1,), self.R)], axis=2)
        proj = self.camera.project(centres.reshape(-1, 3)).reshape(n_sub, N, 2)
        boxes = []
        for i in range(N):
            if not np.any(on_table[:, i]):
                continue
            b = self._box(centres[on_table[:, i], i], margin_px=2.0)
            if b is not None:
                boxes.append(b)
        frame = self._base.copy()
        blur = self.look.blur_px
        pad = int(np.ceil(4.0 * blur)) + 1 if blur > 0 else 0
        new_cache: dict = {}
        for (x0, y0, x1, y1) in self._merge(boxes):
            # balls inside this box; if none of them moves during the exposure, one sample suffices
            inside = [i for i in range(N) if np.any(on_table[:, i]) and np.any(
                (proj[:, i, 0] >= x0 - 1) & (proj[:, i, 0] <= x1) & (proj[:, i, 1] >= y0 - 1) & (proj[:, i, 1] <= y1))]
            still = all(np.all(on_table[:, i] == on_table[0, i]) and
                        float(np.max(np.abs(pos[:, i] - pos[0, i]))) * self.px_per_mm < 0.02 for i in inside)
            subs = [n_sub // 2] if still else list(range(n_sub))
            key = None
            if still:  # unchanged since the last frame -> reuse
                j = subs[0]
                key = ((x0, y0, x1, y1), tuple(inside), np.round(centres[j, inside], 6).tobytes(),
                       np.round(orient[j, inside], 6).tobytes(), on_table[j].tobytes())
                if key in self._still_cache:
                    patch = self._still_cache[key]
                    new_cache[key] = patch
                    self._add_patch(frame, patch, x0, y0, x1, y1, pad)
                    continue
            # balls that keep still during this exposure are shaded once and reused for every sub-frame
            static = {i for i in inside if np.all(on_table[:, i] == on_table[0, i])
                      and float(np.max(np.abs(pos[:, i] - pos[0, i]))) * self.px_per_mm < 0.02
                      and float(np.max(np.abs(orient[:, i] - orient[0, i]))) < 1e-6}
            memo: dict = {}
            acc = np.zeros((y1 - y0, x1 - x0, 3), np.float32)
            for j in subs:
                acc += self._shade_box(x0, y0, x1, y1, centres[j], on_table[j], orient[j], static, memo)
            patch = acc / len(subs)
            if key is not None:
                new_cache[key] = patch
            self._add_patch(frame, patch, x0, y0, x1, y1, pad)
        self._still_cache = new_cache
        return frame

    def _add_patch(self, frame: np.ndarray, patch: np.ndarray, x0: int, y0: int, x1: int, y1: int, pad: int) -> None:
        """Add a patch's change from the background, vignetted and blurred, to a finished linear frame.

        Blur and vignetting are linear, so blur(vig * (bg + delta)) = base + blur(vig * delta);
        boxes do not overlap, and delta is zero outside its box.
        """
        delta = (patch - self.bg[y0:y1, x0:x1]) * self.vig[y0:y1, x0:x1, None]
        if pad:
            X0, Y0, X1, Y1 = max(x0 - pad, 0), max(y0 - pad, 0), min(x1 + pad, self.w), min(y1 + pad, self.h)
            big = np.zeros((Y1 - Y0, X1 - X0, 3), np.float32)
            big[y0 - Y0:y1 - Y0, x0 - X0:x1 - X0] = delta
            frame[Y0:Y1, X0:X1] += optical_blur(big, self.look.blur_px)
        else:
            frame[y0:y1, x0:x1] += delta

    def _shade_box(self, x0: int, y0: int, x1: int, y1: int, centres: np.ndarray, on: np.ndarray,
                   orient: np.ndarray, static: set[int] | None = None, memo: dict | None = None) -> np.ndarray:
        """Linear radiance (h,w,3) of one image box at one instant: table with shadows, then balls.

        Results for balls in ``static`` are kept in ``memo`` and reused (same box, same exposure).
        """
        static = static or set()
        memo = {} if memo is None else memo
        K = len(self.lamps.pos)
        live = np.nonzero(on)[0]
        ao = np.ones((y1 - y0, x1 - x0), np.float32)
        vis = np.ones((K, y1 - y0, x1 - x0), np.float32)
        for i in live:
            r = self._rect(self._shadow_points(centres[i]), 1.0)
            if r is None:
                continue
            a0, b0, a1, b1 = max(r[0], x0), max(r[1], y0), min(r[2], x1), min(r[3], y1)
            if a1 <= a0 or b1 <= b0:
                continue
            if ("shadow", i) in memo:
                ao_i, vis_i = memo[("shadow", i)]
            else:
                ao_i, vis_i = self._shadow_rect(a0, b0, a1, b1, centres[i])
                if i in static:
                    memo[("shadow", i)] = (ao_i, vis_i)
            ao[b0 - y0:b1 - y0, a0 - x0:a1 - x0] *= ao_i
            vis[:, b0 - y0:b1 - y0, a0 - x0:a1 - x0] *= vis_i
        img = self.amb[y0:y1, x0:x1] * ao[..., None]
        for k in range(K):
            img += self.direct[k, y0:y1, x0:x1] * vis[k][..., None]
        order = live[np.argsort(-np.linalg.norm(centres[live] - self.origin[None, :], axis=1))]
        for i in order:
            r = self._rect(self._silhouette_points(centres[i]), 2.0)
            if r is None:
                continue
            a0, b0, a1, b1 = max(r[0], x0), max(r[1], y0), min(r[2], x1), min(r[3], y1)
            if a1 <= a0 or b1 <= b0:
                continue
            if ("ball", i) in memo:
                cov, col = memo[("ball", i)]
            else:
                dirs = self.rays[b0:b1, a0:a1].reshape(-1, 3).astype(float)
                yc, xc = (b0 + b1) // 2, min((a0 + a1) // 2, self.w - 2)
                pitch = float(np.arccos(np.clip(self.rays[yc, xc].astype(float) @ self.rays[yc, xc + 1].astype(float), -1, 1)))
                cov, col = shade_ball(self.origin, dirs, pitch, centres[i], self.R, orient[i], self.looks[i],
                                      self.lamps, self.ambient, self.cloth_lin * self.ambient)
                if i in static:
                    memo[("ball", i)] = (cov, col)
            sub = img[b0 - y0:b1 - y0, a0 - x0:a1 - x0]
            cov = cov.reshape(b1 - b0, a1 - a0, 1)
            sub[...] = sub * (1.0 - cov) + col.reshape(b1 - b0, a1 - a0, 3) * cov
        return img

    def _shadow_rect(self, a0: int, b0: int, a1: int, b1: int, centre: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """One ball's (ambient factor (h,w), lamp visibility (K,h,w)) over an image rectangle.

        Shadows and ambient occlusion are smooth (penumbrae span several px), so
        large rectangles are evaluated on every second pixel and interpolated
        bilinearly at the exact in-between positions.
        """
        K = len(self.lamps.pos)
        hh, ww = b1 - b0, a1 - a0
        step = SHADOW_STRIDE if hh * ww > 4000 and hh > 8 and ww > 8 else 1
        ys = np.arange(b0, b1 + step - 1, step).clip(max=b1 - 1) if step > 1 else np.arange(b0, b1)
        xs = np.arange(a0, a1 + step - 1, step).clip(max=a1 - 1) if step > 1 else np.arange(a0, a1)
        pts = self.pts[np.ix_(ys, xs)].reshape(-1, 3).astype(float)
        nrm = self.nrm[np.ix_(ys, xs)].reshape(-1, 3).astype(float)
        ao_i, vis_i = ball_shadow(pts, nrm, centre, self.R, self.lamps)
        ao_i = ao_i.reshape(len(ys), len(xs)).astype(np.float32)
        vis_i = vis_i.reshape(K, len(ys), len(xs)).astype(np.float32)
        if step == 1:
            return ao_i, vis_i
        mx, my = np.meshgrid(np.arange(ww, dtype=np.float32) / step, np.arange(hh, dtype=np.float32) / step)
        up = lambda a: cv2.remap(a, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)  # noqa: E731
        return up(ao_i), np.stack([up(v) for v in vis_i])

    def finish(self, frame_lin: np.ndarray, t_mid: float, exposure_s: float) -> np.ndarray:
        """Gain, white balance, flicker, sensor noise, sRGB encoding -> uint8 BGR (H,W,3)."""
        g = self.gain * np.float32(flicker_gain(t_mid, exposure_s, self.look.flicker, self.look.flicker_hz))
        frame_lin *= g
        add_sensor_noise(frame_lin, self.look.read_noise, self.look.shot_noise)
        return encode_srgb8(frame_lin)


def render_frames(renderer: FrameRenderer, motion: Motion, times_s: np.ndarray, exposure_s: float, t_end_s: float):
    """Yield (k, uint8 BGR frame) for frames centred at ``times_s`` (s); orientation integrated from t = 0."""
    times_s = np.asarray(times_s, float)
    _, vel, _, on = motion.states(times_s)
    # fastest ball speed over each exposure (sample its ends as well as the middle)
    speeds = np.linalg.norm(vel, axis=2).max(axis=1) if vel.shape[1] else np.zeros(len(times_s))
    for dt in (-exposure_s / 2, exposure_s / 2):
        _, v2, _, _ = motion.states(np.clip(times_s + dt, 0, None))
        if v2.shape[1]:
            speeds = np.maximum(speeds, np.linalg.norm(v2, axis=2).max(axis=1))
    subs = renderer.subframe_times(times_s, exposure_s, speeds)
    cv2.setRNGSeed(int(renderer.seed) + 1)
    n_balls = len(motion.ball_ids)

    def omega_at(t):
        return motion.states(np.asarray(t, float))[2]

    # each ball starts in its own seeded random orientation (numbers and stripes show at random angles)
    from scipy.spatial.transform import Rotation

    q0 = Rotation.random(n_balls, random_state=int(renderer.seed) + 17).as_matrix() if n_balls else None
    t_prev = 0.0
    # blocks of frames keep memory bounded on long high-speed clips
    for b0 in range(0, len(subs), FRAME_BLOCK):
        block = subs[b0:b0 + FRAME_BLOCK]
        bt = np.clip(np.concatenate(block), 0.0, None)
        orient = integrate_orientations(bt, omega_at, n_balls, t_end_s, initial=q0, t_start=t_prev)
        pos_all, _, _, on_all = motion.states(bt)
        last = int(np.argmax(bt))
        q0, t_prev = orient[last], float(bt[last])
        start = 0
        for j, sub in enumerate(block):
            k = b0 + j
            sl = slice(start, start + len(sub))
            start += len(sub)
            lin = renderer.render_linear(pos_all[sl], on_all[sl], orient[sl])
            yield k, renderer.finish(lin, float(times_s[k]), exposure_s)
