"""Camera effects on linear-light images: vignetting, optical blur, noise, tone curve.

Images here are float32 (H, W, 3) in linear light, RGB order, 1.0 = sensor
full scale. The last step encodes to 8-bit sRGB (IEC 61966-2-1 transfer
curve) in BGR order for OpenCV writers.
"""
from __future__ import annotations

import cv2
import numpy as np


def srgb_to_linear(rgb255) -> np.ndarray:
    """sRGB 0-255 values -> linear 0-1 (IEC 61966-2-1).

    >>> [round(float(v), 4) for v in srgb_to_linear([0, 255, 128])]
    [0.0, 1.0, 0.2159]
    """
    c = np.asarray(rgb255, dtype=float) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _encode_lut(levels: int = 4096) -> np.ndarray:
    x = np.linspace(0.0, 1.0, levels)
    y = np.where(x <= 0.0031308, 12.92 * x, 1.055 * np.power(x, 1 / 2.4) - 0.055)
    return np.clip(np.round(y * 255.0), 0, 255).astype(np.uint8)


_LUT = _encode_lut()


def encode_srgb8(img_lin: np.ndarray) -> np.ndarray:
    """Linear RGB float image -> 8-bit sRGB, BGR channel order (clips at full scale)."""
    idx = np.clip(img_lin * (len(_LUT) - 1) + 0.5, 0, len(_LUT) - 1).astype(np.int32)
    out = _LUT[idx]
    return cv2.cvtColor(out, cv2.COLOR_RGB2BGR)


def vignetting_map(cos_axis: np.ndarray, strength: float) -> np.ndarray:
    """Relative illumination (H, W): natural cos^4 falloff raised to ``strength``.

    cos_axis: cosine of each pixel ray's angle to the optical axis. The cos^4
    law is the thin-lens natural vignetting (e.g. Smith, *Modern Optical
    Engineering*); strength 0 turns it off, 2 doubles the falloff.
    """
    return np.power(np.clip(cos_axis, 1e-3, 1.0), 4.0 * strength).astype(np.float32)


def optical_blur(img: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian blur (sigma in px) standing in for lens/sensor blur."""
    if sigma_px <= 0:
        return img
    return cv2.GaussianBlur(img, (0, 0), sigmaX=sigma_px, sigmaY=sigma_px, borderType=cv2.BORDER_REFLECT)


def add_sensor_noise(img: np.ndarray, read_noise: float, shot_noise: float) -> np.ndarray:
    """Photon (shot) noise, variance shot_noise^2 * signal, plus Gaussian read noise (in place).

    Uses OpenCV's random generator (cv2.randn, about 3x faster than numpy's
    here); seed it with cv2.setRNGSeed for repeatable clips.
    """
    if read_noise <= 0 and shot_noise <= 0:
        return img
    n = np.empty(img.shape, np.float32)
    cv2.randn(n.reshape(img.shape[0], -1), 0.0, 1.0)
    var = cv2.max(img, 0.0) * np.float32(shot_noise ** 2) + np.float32(read_noise ** 2)
    img += cv2.sqrt(var) * n
    return img


def flicker_gain(t_s: float, exposure_s: float, depth: float, hz: float) -> float:
    """Mean lamp output over an exposure for light varying as 1 - depth*(1 - cos(2 pi hz t))/2."""
    if depth <= 0 or hz <= 0:
        return 1.0
    w = 2 * np.pi * hz
    if exposure_s > 0:
        mean_cos = (np.sin(w * (t_s + exposure_s / 2)) - np.sin(w * (t_s - exposure_s / 2))) / (w * exposure_s)
    else:
        mean_cos = np.cos(w * t_s)
    return float(1.0 - depth * (1.0 - mean_cos) / 2.0)
