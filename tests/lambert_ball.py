"""Closed-form test images of one ball on flat cloth (shared by the detection tests).

The ball is a Lambertian sphere (shade = ambient + (1 - ambient) max(0, n.l))
seen straight down, anti-aliased by ss x ss supersampling, on uniform cloth;
colours are linear light 0-1 (BGR). :func:`encode_frame` blurs in linear
light, applies the sRGB transfer curve (IEC 61966-2-1) and adds sensor noise.
"""
from __future__ import annotations

import cv2
import numpy as np


def srgb_encode(lin: np.ndarray) -> np.ndarray:
    """Linear 0-1 -> sRGB 0-255 (IEC 61966-2-1 closed form)."""
    lin = np.clip(lin, 0.0, 1.0)
    return 255.0 * np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)


def lambert_ball(cx: float, cy: float, r: float, ball_bgr, cloth_bgr, light, ambient: float,
                 size: tuple[int, int] = (63, 55), ss: int = 8) -> np.ndarray:
    """Linear-light BGR image (H, W, 3) of one ball (centre cx, cy px, radius r px) on the cloth.

    ``light``: lamp direction (x right, y down, z towards the camera).
    """
    w, h = size
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:h, 0:w]
    dx = (xs[..., None, None] + sub[None, None, None, :] - cx) / r
    dy = (ys[..., None, None] + sub[None, None, :, None] - cy) / r
    q2 = dx * dx + dy * dy
    nz = np.sqrt(np.clip(1.0 - q2, 0.0, 1.0))
    lv = np.asarray(light, float) / np.linalg.norm(light)
    shade = ambient + (1.0 - ambient) * np.clip(dx * lv[0] + dy * lv[1] + nz * lv[2], 0.0, None)
    img = np.empty((h, w, 3))
    for c in range(3):
        img[..., c] = np.where(q2 < 1.0, ball_bgr[c] * shade, cloth_bgr[c]).mean(axis=(2, 3))
    return img


def encode_frame(img_lin: np.ndarray, cloth_bgr, *, blur_px: float = 0.8, noise_dn: float = 1.0,
                 seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Blur (linear light), sRGB-encode, add noise: (frame uint8, empty-cloth background float32 DN)."""
    img = cv2.GaussianBlur(img_lin, (0, 0), blur_px)
    rng = np.random.default_rng(seed)
    frame = np.clip(np.round(srgb_encode(img) + rng.normal(0.0, noise_dn, img.shape)), 0, 255).astype(np.uint8)
    bg = np.broadcast_to(srgb_encode(np.asarray(cloth_bgr, float)), img.shape).astype(np.float32)
    return frame, np.ascontiguousarray(bg)


def soft_shadow(img_lin: np.ndarray, cx: float, cy: float, r: float, cloth_bgr, offset, depth: float,
                soft_px: float) -> np.ndarray:
    """``img_lin`` with the ball's cast shadow on the cloth: the cloth outside the ball's disc is scaled by
    1 - depth x (the disc of radius r moved by ``offset`` (dx, dy) px, Gaussian-blurred by ``soft_px``: a
    lamp of finite size). The ball itself is untouched (pixels whose 8x8 sub-samples are partly ball keep
    their drawn mixture; only the cloth share is shaded)."""
    h, w = img_lin.shape[:2]
    ss = 8
    sub = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:h, 0:w]
    q2 = ((xs[..., None, None] + sub[None, None, None, :] - cx) ** 2
          + (ys[..., None, None] + sub[None, None, :, None] - cy) ** 2) / (r * r)
    cover = (q2 < 1.0).mean(axis=(2, 3))
    sx, sy = cx + offset[0], cy + offset[1]
    q2s = ((xs[..., None, None] + sub[None, None, None, :] - sx) ** 2
           + (ys[..., None, None] + sub[None, None, :, None] - sy) ** 2) / (r * r)
    shade = (q2s < 1.0).mean(axis=(2, 3))
    if soft_px > 0:
        shade = cv2.GaussianBlur(shade, (0, 0), soft_px)
    cloth = np.asarray(cloth_bgr, float)[None, None, :]
    return img_lin - (1.0 - cover)[..., None] * cloth * depth * shade[..., None]
