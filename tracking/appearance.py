"""Ball colour with the scene's light taken out, for naming balls.

The detector's colour summary (:func:`tracking.detect.colour_summary`) uses
fixed thresholds (a pixel is white above value 0.62, dark below 0.22). Under
one lamp the cloth at a table's ends can get a third of the light it gets in
the middle, and a dim exposure darkens everything: a white cue ball then has
no "white" pixel and a purple ball turns "black" (seen on a 240 fps clip lit
by one lamp: the cue was named a stripe and the purple ball ``black-2``).

Two physical facts give the light back:

* The cloth is one material all over, so its brightness in the empty-table
  background is proportional to the light falling on it. Divided into the
  best-lit cloth level, it gives a **local gain** >= 1 for every point of
  the table (:func:`light_field`).
* Every cue-sport shot has a white ball (the cue ball; common practice).
  The whitest unsaturated ball seen in the first frames, after the local
  gain, sets a **global gain** so that it reads as a well-exposed white.

The colour summary is then taken again on the gained pixels
(:func:`add_appearance`, columns ending ``_n``), together with the colour of
the ball's rim (0.80-0.95 radius), which the inner-disc summary never sees:
a stripe ball resting cap-up shows a white disc like the cue, but its band
shows at the rim (a band of half-height 0.55 R seen from above lies beyond
0.83 R; tracking/labels.py).

Units: pixels and 8-bit DN in the image frame; gains are dimensionless.
"""
from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np
import pandas as pd

from tracking.detect import Background, colour_summary, to_lab
from tracking.settings import DetectionSettings

#: Cloth level taken as "fully lit": this percentile of the smoothed cloth
#: brightness over the playing surface (our choice: the lamp's pool of light,
#: not a single hot spot).
CLOTH_REF_PERCENTILE = 95.0
#: Largest local gain. One lamp over a 9 ft table leaves the ends with about a
#: third of the centre's light (inverse square and cosine at a 2 m lamp
#: height, common practice); beyond 4x the pixels are mostly noise.
MAX_LOCAL_GAIN = 4.0
#: Value (0..1, HSV max channel) a well-exposed white ball's lit top shows:
#: above the detector's white threshold (0.62) even at 0.75 R, where Lambert
#: shading leaves cos(asin 0.75) = 0.66 of the top's level (0.62 / 0.66 = 0.94).
WHITE_TARGET = 0.94
#: Largest global gain (exposure correction from the white ball).
MAX_GLOBAL_GAIN = 3.0
#: A ball counts as the white reference only when its lit top is this
#: unsaturated (HSV saturation; the detector's white_saturation).
WHITE_REF_MAX_SAT = 0.28
#: Rim annulus sampled for a stripe's band, in ball radii.
RIM_INNER, RIM_OUTER = 0.80, 0.95
#: A rim pixel is "coloured" (part of a band) when its saturation is at least
#: this and it is not cloth: Delta-E*ab to the background at that pixel above
#: RIM_CLOTH_DE (the rim of a moving or blurred ball mixes in the cloth).
RIM_MIN_SAT = 0.45
RIM_CLOTH_DE = 20.0
#: A rim pixel is "white" (a stripe's cap) when unsaturated (the detector's
#: white_saturation) and at least this value: Lambert shading leaves a white
#: surface 0.48-0.70 of its top's level across the rim annulus (ambient aside).
RIM_WHITE_MAX_SAT = 0.28
RIM_WHITE_MIN_VAL = 0.35

#: A clip is monochrome (a grey-level camera, common in high-speed work, or
#: footage converted to grey) when no spot anywhere in its sampled frames
#: shows a channel spread (max - min of B, G, R, after a 5 px median that
#: drops hot pixels and codec speckle) above this many DN. Grey video coded
#: as YUV returns equal channels within 1-2 DN of rounding; any coloured
#: ball, cloth, rail or pocket in a colour clip spreads its channels by tens
#: of DN (a cloth sold as grey still shows 5-10 DN of tint under warm light,
#: its balls far more). Ours.
MONO_MAX_SPREAD_DN = 8.0

APPEARANCE_COLUMNS = ["r_n", "g_n", "b_n", "hue_deg_n", "sat_n", "val_n", "white_frac_n", "dark_frac_n",
                      "rim_col_frac", "rim_white_frac", "rim_hue_deg", "light_gain"]


def channel_spread(image: np.ndarray) -> np.ndarray:
    """Per-pixel max - min over the B, G, R channels (DN, uint8), median-filtered over 5 px.

    A grey-level image has none (0 everywhere); a grey image read as BGR has
    equal channels.

    >>> img = np.zeros((9, 9, 3), np.uint8); img[..., 1] = 40
    >>> int(channel_spread(img).max()), int(channel_spread(img[..., :1].repeat(3, 2)).max())
    (40, 0)
    """
    if image.ndim == 2 or image.shape[2] == 1:
        return np.zeros(image.shape[:2], np.uint8)
    spread = (image.max(axis=2) - image.min(axis=2)).astype(np.uint8)
    return cv2.medianBlur(spread, 5)


def is_monochrome(images: list[np.ndarray], max_spread_dn: float = MONO_MAX_SPREAD_DN) -> bool:
    """True when no sampled frame shows colour anywhere (:data:`MONO_MAX_SPREAD_DN`).

    images: BGR (or grey) uint8 frames. Ball names then come from lightness,
    not hue (tracking/labels.py).
    """
    if not images:
        return False
    return all(float(channel_spread(im).max()) <= max_spread_dn for im in images)


@dataclass(frozen=True)
class LightField:
    """Gain that brings a point of the image to the best-lit, well-exposed level.

    local: float32 (gh, gw) local gain (>= 1) on a grid of ``step`` px cells
    (cell (i, j) covers rows i*step.. and columns j*step..);
    global_gain: the exposure gain from the white ball (>= 1);
    cloth_ref_dn: the cloth level taken as fully lit (DN, HSV value x 255).
    """

    local: np.ndarray
    step: int
    global_gain: float
    cloth_ref_dn: float

    def at(self, x: float, y: float) -> float:
        """Total gain at image point (x, y) px (bilinear over the grid)."""
        gh, gw = self.local.shape
        fx = min(max(x / self.step - 0.5, 0.0), gw - 1.0)
        fy = min(max(y / self.step - 0.5, 0.0), gh - 1.0)
        i, j = min(int(fy), gh - 2) if gh > 1 else 0, min(int(fx), gw - 2) if gw > 1 else 0
        ty, tx = (fy - i if gh > 1 else 0.0), (fx - j if gw > 1 else 0.0)
        a = self.local
        i1, j1 = min(i + 1, gh - 1), min(j + 1, gw - 1)
        v = ((1 - ty) * ((1 - tx) * a[i, j] + tx * a[i, j1]) + ty * ((1 - tx) * a[i1, j] + tx * a[i1, j1]))
        return float(v) * self.global_gain


def local_gain_grid(cloth_bgr: np.ndarray, mask: np.ndarray, step: int) -> tuple[np.ndarray, float]:
    """Local gain grid from an empty-cloth image.

    cloth_bgr: (H, W, 3) BGR DN; mask: (H, W) non-zero on the playing surface;
    step: grid cell size px. Each cell's level is the median HSV value of its
    surface pixels; cells with too few surface pixels take their nearest
    neighbour's level; a 3x3 median over cells removes leftovers (a resting
    ball, a spot). Returns (gain grid float32 clipped to [1, MAX_LOCAL_GAIN],
    reference level DN).

    >>> img = np.full((40, 80, 3), 100, np.float32); img[:, 40:] = 50
    >>> g, ref = local_gain_grid(img, np.ones((40, 80), np.uint8), 10)
    >>> float(ref), float(g[0, 0]), float(g[0, -1])
    (100.0, 1.0, 2.0)
    """
    v = np.asarray(cloth_bgr, np.float32).max(axis=2)
    h, w = v.shape
    gh, gw = -(-h // step), -(-w // step)
    lev = np.full((gh, gw), np.nan, np.float32)
    m = np.asarray(mask) > 0
    for i in range(gh):
        for j in range(gw):
            sl = (slice(i * step, (i + 1) * step), slice(j * step, (j + 1) * step))
            mm = m[sl]
            if mm.sum() >= 0.25 * mm.size:
                lev[i, j] = float(np.median(v[sl][mm]))
    ok = np.isfinite(lev) & (lev > 0)
    if not ok.any():
        return np.ones((gh, gw), np.float32), float("nan")
    if not ok.all():  # nearest surface cell for the rest
        from scipy.ndimage import distance_transform_edt
        _, (ii, jj) = distance_transform_edt(~ok, return_indices=True)
        lev = lev[ii, jj]
    if min(gh, gw) >= 3:
        lev = cv2.medianBlur(lev.astype(np.float32), 3)
    ref = float(np.percentile(lev[ok], CLOTH_REF_PERCENTILE))
    gain = np.clip(ref / np.maximum(lev, 1e-3), 1.0, MAX_LOCAL_GAIN).astype(np.float32)
    return gain, ref


def gained_patch(image: np.ndarray, x: float, y: float, r: float, gain: float) -> tuple[np.ndarray, float, float]:
    """Patch of ``image`` round (x, y) px reaching 1.05 r, scaled by ``gain`` (uint8, clipped).

    Returns (patch, x, y) with the centre in the patch's own pixel frame.
    """
    n = int(np.ceil(1.05 * r)) + 1
    h, w = image.shape[:2]
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
    p = image[ya:yb, xa:xb].astype(np.float32)
    if gain != 1.0:
        p = p * np.float32(gain)
    return np.clip(p, 0, 255).astype(np.uint8), x - xa, y - ya


def rim_colour(patch: np.ndarray, cloth: np.ndarray, x: float, y: float, r: float) -> tuple[float, float, float]:
    """(coloured fraction, white fraction, circular-mean hue deg of the coloured pixels) of the 0.80-0.95 r annulus.

    patch: gained BGR uint8; cloth: the gained background over the same
    pixels (BGR); (x, y) the centre in the patch's frame, r the radius px.
    Pixels within RIM_CLOTH_DE of the cloth are neither. Coloured: saturation
    >= RIM_MIN_SAT; white: saturation < RIM_WHITE_MAX_SAT and value >=
    RIM_WHITE_MIN_VAL (a white surface near the limb, darkened by Lambert
    shading). NaN hue when no pixel is coloured.
    """
    nan = float("nan")
    hh, ww = patch.shape[:2]
    if hh == 0 or ww == 0:
        return nan, nan, nan
    yy, xx = np.mgrid[0:hh, 0:ww]
    rr = np.hypot(xx - x, yy - y)
    ring = (rr >= RIM_INNER * r) & (rr <= RIM_OUTER * r)
    if ring.sum() < 8:
        return nan, nan, nan
    px = patch[ring][:, None, :]  # (N, 1, 3): only the ring's pixels are converted
    hsv = cv2.cvtColor(px, cv2.COLOR_BGR2HSV_FULL)[:, 0, :].astype(np.float32)
    sat = hsv[:, 1] / 255.0
    val = hsv[:, 2] / 255.0
    cl = np.clip(np.asarray(cloth, np.float32)[ring], 0, 255)[:, None, :]
    ball = np.linalg.norm(to_lab(px) - to_lab(cl), axis=2)[:, 0] > RIM_CLOTH_DE
    col = ball & (sat >= RIM_MIN_SAT) & (val >= 0.22)
    white = ball & (sat < RIM_WHITE_MAX_SAT) & (val >= RIM_WHITE_MIN_VAL)
    n = float(ring.sum())
    if col.sum() < 3:
        return col.sum() / n, white.sum() / n, nan
    ang = np.radians(hsv[:, 0][col] * (360.0 / 256.0))
    return col.sum() / n, white.sum() / n, float(np.degrees(np.arctan2(np.sin(ang).sum(), np.cos(ang).sum())) % 360)


def white_level(patch: np.ndarray, x: float, y: float, r: float) -> tuple[float, float]:
    """(lit-top level 0..1, median saturation) of a ball: 75th percentile of the
    smallest colour channel inside 0.5 r (a white ball is bright in every channel,
    a coloured one dark in at least one), and the HSV saturation there."""
    hh, ww = patch.shape[:2]
    yy, xx = np.mgrid[0:hh, 0:ww]
    inside = np.hypot(xx - x, yy - y) <= 0.5 * r
    if inside.sum() < 5:
        return float("nan"), float("nan")
    px = patch[inside].astype(np.float32)
    lo = px.min(axis=1)
    hi = px.max(axis=1)
    sat = np.where(hi > 0, (hi - lo) / np.maximum(hi, 1e-3), 0.0)
    return float(np.percentile(lo, 75) / 255.0), float(np.median(sat))


def light_field(background: Background, sample_dets: list[tuple[np.ndarray, pd.DataFrame]] = ()) -> LightField:
    """Local gain from the empty cloth, global gain from the whitest ball.

    background: the clip's background (its ``image`` is the empty cloth,
    ``mask`` the surface); sample_dets: (BGR frame, its detections with
    ``x_px``, ``y_px``) pairs, e.g. the frames the background was built from.
    The global gain brings the whitest unsaturated ball's lit top (after the
    local gain) to WHITE_TARGET, never below 1 or above MAX_GLOBAL_GAIN; with
    no unsaturated ball it is 1.
    """
    step = max(8, int(round(2.0 * background.radius_px)))
    gain, ref = local_gain_grid(background.image, background.mask, step)
    field = LightField(gain, step, 1.0, ref)
    best = float("nan")
    for img, det in sample_dets:
        for x, y, r in _centres(det, background):
            g = field.at(x, y)
            p, px, py = gained_patch(img, x, y, r, g)
            lvl, sat = white_level(p, px, py, r)
            if np.isfinite(lvl) and sat <= WHITE_REF_MAX_SAT and not (lvl <= best):
                best = lvl
    if np.isfinite(best) and best > 0:
        g = float(np.clip(WHITE_TARGET / best, 1.0, MAX_GLOBAL_GAIN))
        field = LightField(gain, step, g, ref)
    return field


def _centres(det: pd.DataFrame, background: Background):
    """(silhouette x, y px, expected radius px) of each detection."""
    if det is None or len(det) == 0:
        return
    for x, y in zip(det["x_px"].to_numpy(float), det["y_px"].to_numpy(float)):
        if not (np.isfinite(x) and np.isfinite(y)):
            continue
        if background.radius_grid is not None:
            r, ox, oy = background.lookup(x, y)
        else:
            r, ox, oy = background.radius_px, 0.0, 0.0
        yield x + ox, y + oy, r


def add_appearance(det: pd.DataFrame, image: np.ndarray, background: Background, light: LightField,
                   settings: DetectionSettings = DetectionSettings()) -> pd.DataFrame:
    """Detections with the light-free colour columns :data:`APPEARANCE_COLUMNS` added.

    ``r_n`` ... ``dark_frac_n``: :func:`tracking.detect.colour_summary` of the
    gained pixels; ``rim_col_frac``, ``rim_white_frac``, ``rim_hue_deg``: :func:`rim_colour`;
    ``light_gain``: the gain used. image: the BGR frame the detections came from.
    """
    if det is None or len(det) == 0:
        out = det.copy() if det is not None else pd.DataFrame()
        for c in APPEARANCE_COLUMNS:
            out[c] = pd.Series(dtype=float)
        return out
    rows = []
    for x, y, r in _centres(det, background):
        g = light.at(x, y)
        p, px, py = gained_patch(image, x, y, r, g)
        cs = colour_summary(p, px, py, r, settings)
        bp, _, _ = gained_patch(background.image, x, y, r, g)
        rim = rim_colour(p, bp, px, py, r)
        rows.append({"r_n": cs["r"], "g_n": cs["g"], "b_n": cs["b"], "hue_deg_n": cs["hue_deg"],
                     "sat_n": cs["sat"], "val_n": cs["val"], "white_frac_n": cs["white_frac"],
                     "dark_frac_n": cs["dark_frac"], "rim_col_frac": rim[0], "rim_white_frac": rim[1],
                     "rim_hue_deg": rim[2],
                     "light_gain": g})
    finite = np.isfinite(det["x_px"].to_numpy(float)) & np.isfinite(det["y_px"].to_numpy(float))
    vals = np.full((len(det), len(APPEARANCE_COLUMNS)), np.nan)
    if rows:
        vals[finite] = np.array([[row[c] for c in APPEARANCE_COLUMNS] for row in rows], float)
    out = det.copy()
    for k, c in enumerate(APPEARANCE_COLUMNS):
        out[c] = vals[:, k]
    return out
