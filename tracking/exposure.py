"""Frame-to-frame brightness changes (lamp flicker, auto exposure) taken out before detection.

Lamps on mains power pulse at twice the mains frequency (100 or 120 Hz). A
camera whose exposure is shorter than that period, as at 120-1000 fps, sees
each frame a few to tens of per cent brighter or darker than the last; so does
any camera with automatic exposure or gain. The detector compares each frame
with a fixed empty-cloth background, so a global change of brightness shows up
as colour difference everywhere (worst in dark, quiet corners, whose noise
threshold is lowest) and yields false balls.

Model: light adds linearly, so a brightness change multiplies the linear-light
image by a gain G(x, y) (smooth: one or several lamps, plus steady ambient
light). On sRGB-encoded video (IEC 61966-2-1: v = 1.055 lin^(1/2.4) - 0.055
above the toe) that is exactly

    (v' + a) = (v + a) * G^(1/2.4),  a = 0.055 x 255 DN,

so the fit and the correction work on q = (v_frame + a) / (v_background + a):
a low-order polynomial field q(x, y) per colour channel, fitted robustly
(Tukey biweight, Holland & Welsch 1977) over a grid of cloth pixels of the
background mask (balls, shadows and a cue are outliers), then
v_corrected = (v + a) / q - a. Below ~10 DN (the linear toe of the curve) the
power law is approximate; such pixels carry little weight in colour
differences anyway.

>>> bg = np.full((60, 80, 3), 120.0, np.float32)
>>> mask = np.ones((60, 80), np.uint8)
>>> m = ExposureMatcher(bg, mask)
>>> frame = np.clip((bg + SRGB_A) * 1.04 - SRGB_A, 0, 255).astype(np.uint8)
>>> out = m.correct(frame)
>>> int(np.abs(out.astype(int) - 120).max()) <= 1
True
"""
from __future__ import annotations

import cv2
import numpy as np

from tracking.settings import ExposureSettings

#: Offset of the sRGB transfer curve in DN (IEC 61966-2-1: 0.055 of full scale).
SRGB_A = 0.055 * 255.0


def _design(x: np.ndarray, y: np.ndarray, order: int) -> np.ndarray:
    cols = [np.ones_like(x)]
    for d in range(1, order + 1):
        for i in range(d + 1):
            cols.append(x ** (d - i) * y ** i)
    return np.stack(cols, axis=1)


class ExposureMatcher:
    """Fits and removes each frame's brightness change against one background.

    background: float32 (H, W, 3) BGR DN (empty cloth); mask: uint8 (H, W),
    1 where the playing surface is (the pixels sampled).
    """

    def __init__(self, background: np.ndarray, mask: np.ndarray, settings: ExposureSettings = ExposureSettings()):
        self.s = settings
        h, w = mask.shape
        self.shape = (h, w)
        s = settings.step_px
        ys, xs = np.mgrid[s // 2:h:s, s // 2:w:s]
        ys, xs = ys.ravel(), xs.ravel()
        bgv = background[ys, xs].astype(np.float64)
        ok = (mask[ys, xs] > 0) & (bgv.min(axis=1) >= settings.min_dn)
        self.ys, self.xs = ys[ok], xs[ok]
        self.den = bgv[ok] + SRGB_A
        # Rounding to whole DN alone spreads q by 1/sqrt(12) DN over the
        # denominator: a floor for the robust scale (integer video often has
        # most ratios exactly equal, and a zero MAD would freeze the fit).
        self.q_floor = float(1.0 / np.sqrt(12.0) / np.median(self.den)) if len(self.den) else 1e-3
        self.cx, self.cy, self.sc = w / 2.0, h / 2.0, max(w, h) / 2.0
        self.A = _design((self.xs - self.cx) / self.sc, (self.ys - self.cy) / self.sc, settings.order)
        # The field on a coarse grid, upsampled to full size when applied.
        self.gs = max(4, s)
        gy, gx = np.mgrid[0:h:self.gs, 0:w:self.gs]
        self.grid_shape = gy.shape
        self.G = _design((gx.ravel() - self.cx) / self.sc, (gy.ravel() - self.cy) / self.sc, settings.order)
        self.last_change = 0.0

    def fit(self, frame: np.ndarray) -> np.ndarray | None:
        """Coefficients (n_terms, 3) of q(x, y) per channel, or None (too few samples)."""
        if len(self.xs) < 4 * self.A.shape[1]:
            return None
        q = (frame[self.ys, self.xs].astype(np.float64) + SRGB_A) / self.den
        coef = np.zeros((self.A.shape[1], 3))
        for c in range(3):
            w = np.ones(len(q))
            y = q[:, c]
            # start from the median ratio (robust to balls covering a part)
            beta = np.zeros(self.A.shape[1])
            beta[0] = np.median(y)
            for _ in range(self.s.iters):
                r = y - self.A @ beta
                scale = max(1.4826 * np.median(np.abs(r)), self.q_floor)
                u = r / (self.s.tukey_c * scale)
                w = np.where(np.abs(u) < 1, (1 - u * u) ** 2, 0.0)
                Aw = self.A * w[:, None]
                beta = np.linalg.lstsq(Aw.T @ self.A + 1e-9 * np.eye(len(beta)), Aw.T @ y, rcond=None)[0]
            coef[:, c] = beta
        return coef

    def field(self, coef: np.ndarray) -> np.ndarray:
        """q(x, y) per channel at full size, float32 (H, W, 3)."""
        g = (self.G @ coef).reshape(*self.grid_shape, 3).astype(np.float32)
        h, w = self.shape
        # grid nodes sit at multiples of gs; INTER_LINEAR with the matching scale
        return cv2.resize(g, (g.shape[1] * self.gs, g.shape[0] * self.gs), interpolation=cv2.INTER_LINEAR)[:h, :w]

    def correct(self, frame: np.ndarray) -> np.ndarray:
        """The frame with its brightness change removed (uint8 BGR); the frame itself when steady."""
        coef = self.fit(frame)
        if coef is None:
            return frame
        change = float(np.max(np.abs(self.A @ coef - 1.0)))  # over the sampled cloth only
        self.last_change = change
        if change < self.s.min_change or change > self.s.max_change:
            return frame
        q = self.field(coef)
        out = (frame.astype(np.float32) + SRGB_A) / q - SRGB_A
        return np.clip(np.rint(out), 0, 255).astype(np.uint8)
