"""A ball of (nearly) the cloth's colour, outlined on a brightness-free tint map.

Under a light of one colour, a surface's camera colour scales with its
irradiance: a lamp's cast shadow, the unlit limb of a ball and the contact
shadow at its foot change how bright a pixel is, not its chromaticity. In
CIELAB's cube-root branch (CIE 15:2004) an intensity scale k multiplies
v = (L* + 16, a*, b*) by k^(1/3), so the unit vector u = v / |v| is blind to
every shading (the brightness / chromaticity split of Horprasert, Harwood &
Davis, ICCV 1999 Frame-Rate workshop, taken to its end). The sRGB encoding
is a power law up to its short linear toe, so this holds for decoded video
too.

A ball whose colour is close to the cloth's (a red ball on red cloth, a
green one on green) still has its own chromaticity: a saturated ball dye
is not the cloth's dye. Its lit cap and its dark limb share it; the cast
shadows beside it share the cloth's. With u_c the cloth's unit colour (the
background image, pixel by pixel) and u_b the ball's (the median over the
darker half of its pixels within ``tint_core`` radii of the centre: a
white highlight is the brightest part), the map

``m(x) = (u(x) - u_c) . (u_b - u_c) / |u_b - u_c|^2``

is 0 on the cloth and on every shadow on it and 1 on the whole ball
however it is lit. Along each ray from the centre the silhouette is where
the map crosses half way between the ray's own ball level (``tint_in_band``
radii) and its level beyond the blurred edge (``tint_out_band``: open
cloth 0, a shadow whose tint leans away from the ball's below 0), taking
the outermost such crossing (a white highlight dips the map inside). A
circle fitted to the crossings (Tukey IRLS,
:func:`tracking.detect.fit_circle_robust`, free radius; twice, the ball's
tint re-read about the new centre) gives the centre. It is kept only when
the map says one ball of one tint is there: the cloth dyed (chroma C* at least
``tint_min_cloth_chroma``: on grey cloth an off-white ball's tint is the
cloth's up to white balance), the tint separation below
``tint_near_sep`` (a clearly coloured ball keeps its colour fit) and
``tint_min_snr`` times the map's noise on the cloth, at least
``tint_min_rays`` of the rays crossing, the radius within
``tint_radius_tol`` of the expected one, and ``tint_min_fill`` of the
darker half of the disc's pixels above ``tint_fill_level`` (a stripe whose
band is the cloth's colour is not one tint all over:
:mod:`tracking.stripe_outline` handles it). A streak fit is replaced only
by a tint circle that is one (``tint_streak_rays``, ``tint_streak_scale_px``):
two shadows either side of a resting ball can look like a smear, while a
smeared ball's outline is a stadium.

Why: the colour fit of :func:`tracking.detect.refine_centre` traces where
the ball's colour difference drops below its edge level; for a ball of
nearly the cloth's colour that happens where the limb darkens, not at the
silhouette, so it outlines the lit cap (too small a free radius, or a
pinned radius slid towards the lamps), and the dark-ring centre of
:mod:`tracking.dark_ring` is pulled towards the cast shadow. The sigma here
is the circle fit's centre covariance with the rays' correlation along the
blurred edge counted (``tint_edge_px``), plus ``tint_model_frac`` x r.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from tracking.calibration import Calibration
from tracking.detect import Background, fit_circle_robust, to_lab
from tracking.settings import DetectionSettings


def unit_colour(lab: np.ndarray) -> np.ndarray:
    """(L* + 16, a*, b*) / its length, per pixel (H,W,3 float32): the colour with its brightness removed."""
    v = np.asarray(lab, np.float32) + np.float32([16.0, 0.0, 0.0])
    return v / (np.sqrt(np.einsum("...k,...k->...", v, v))[..., None] + np.float32(1e-6))


def tint_map(lab: np.ndarray, bg_lab: np.ndarray, u_ball: np.ndarray) -> tuple[np.ndarray, float]:
    """(m (H,W float32), separation |u_b - u_c|): 0 on the cloth's tint, 1 on the ball's (see the module doc).

    u_c is the background's unit colour per pixel; the separation is taken
    against its median over the patch.
    """
    u = unit_colour(lab)
    uc = unit_colour(bg_lab)
    d = np.asarray(u_ball, np.float32)[None, None, :] - uc
    d2 = np.einsum("...k,...k->...", d, d) + np.float32(1e-9)
    m = np.einsum("...k,...k->...", u - uc, d) / d2
    sep = float(np.sqrt(np.median(d2)))
    return m.astype(np.float32), sep


def _crossings(m: np.ndarray, wgt: np.ndarray, x0: float, y0: float, r: float,
               settings: DetectionSettings) -> np.ndarray:
    """(N,2) points where m first falls below 0.5 going out along each ray from (x0, y0) (patch px)."""
    from tracking.dark_ring import RAY_STEP_PX, ray_profiles

    n = settings.tint_rays
    ang, rad, prof, wv = ray_profiles(m, wgt, x0, y0, n, settings.tint_ray_span[0] * r, settings.tint_ray_span[1] * r)
    step = RAY_STEP_PX
    # each ray's own levels: the ball's (inside) and what lies beyond the
    # blurred edge (open cloth 0, a shadow whose tint leans away from the ball's < 0)
    i_in = (rad >= settings.tint_in_band[0] * r) & (rad <= settings.tint_in_band[1] * r)
    o0 = max(settings.tint_out_band[0] * r, r + settings.tint_edge_px + 0.5)
    i_out = (rad >= o0) & (rad <= o0 + (settings.tint_out_band[1] - settings.tint_out_band[0]) * r)
    if not i_in.any() or not i_out.any():
        return np.zeros((0, 2))
    pts = []
    for k in range(n):
        if wv[k].min() <= 0:
            continue
        hi, lo = float(np.median(prof[k, i_in])), float(np.median(prof[k, i_out]))
        if hi - lo < 0.5:
            continue  # no step from the ball's tint to the cloth's along this ray
        lev = 0.5 * (hi + lo)
        # the outermost point still at the ball's side of the mid level before the
        # outside band (a white highlight inside the ball dips the map too)
        start, stop = int(np.argmax(i_in)), int(np.argmax(i_out))
        above = np.nonzero(prof[k, start:stop] >= lev)[0]
        if not len(above):
            continue
        j = start + int(above[-1])
        a, b = float(prof[k, j]), float(prof[k, j + 1])
        rr = rad[j] + step * (a - lev) / max(a - b, 1e-6)
        pts.append((x0 + np.cos(ang[k]) * rr, y0 + np.sin(ang[k]) * rr))
    return np.array(pts, float).reshape(-1, 2)


def tint_fit(image: np.ndarray, background: Background, wgt: np.ndarray, seed: tuple[float, float], r: float,
             box: tuple[int, int, int, int], settings: DetectionSettings = DetectionSettings()) -> dict | None:
    """The silhouette of a ball of its own tint about ``seed`` (image px), expected radius r px.

    box (xa, ya, xb, yb): the image box the weight patch ``wgt`` covers
    (0: another ball's disc or off the cloth). Returns dict(x, y (image px),
    radius, sigma_px, sep, snr, fill, n_rays) or None when the map does not
    show one ball of one tint there (see the module doc).
    """
    s = settings
    xa, ya, xb, yb = box
    lab = to_lab(image[ya:yb, xa:xb])
    bg = background.lab_image()[ya:yb, xa:xb]
    if bg.shape[:2] != lab.shape[:2]:
        return None
    u = unit_colour(lab)
    x0, y0 = seed[0] - xa, seed[1] - ya
    yy, xx = np.mgrid[0:lab.shape[0], 0:lab.shape[1]]
    # open cloth beyond the ring's reach: the map's noise there
    far = (np.hypot(xx - x0, yy - y0) > s.ring_outer[1] * r) & (wgt > 0)
    if far.sum() < 30:
        return None
    vn = float(np.median(np.linalg.norm(bg[far] + [16.0, 0.0, 0.0], axis=1)))
    cx, cy = x0, y0
    fit = None
    for _ in range(2):
        # the ball's tint: the median over its core about the current centre
        core = (np.hypot(xx - cx, yy - cy) <= s.tint_core * r) & (wgt > 0)
        if core.sum() < 8:
            return None
        # its darker half: a white highlight (the lamps' mirror images) is the brightest part
        lc = lab[..., 0][core]
        u_b = np.median(u[core][lc <= np.median(lc)], axis=0)
        u_b /= np.linalg.norm(u_b) + 1e-9
        m, sep = tint_map(lab, bg, u_b)
        if sep > s.tint_near_sep:
            return None  # a ball of its own clear colour: the colour fit's outline stands
        # the map's per-pixel noise on open cloth: its spread about the background, not below
        # half a DN of quantisation on the cloth's brightness
        noise = max(float(np.std(m[far])), 0.5 / max(vn, 1.0) / max(sep, 1e-6))
        snr = 1.0 / noise
        if snr < s.tint_min_snr:
            return None
        pts = _crossings(m, wgt, cx, cy, r, s)
        if len(pts) < s.tint_min_rays * s.tint_rays:
            return None
        fit = fit_circle_robust(pts, np.ones(len(pts)), np.array([cx, cy]), None, s.tukey_c)
        cx, cy = float(fit["centre"][0]), float(fit["centre"][1])
        if not (np.isfinite(cx) and np.isfinite(cy)) or np.hypot(cx - x0, cy - y0) > s.tint_max_shift * r:
            return None
    rad = float(fit["radius"])
    if abs(rad / r - 1.0) > s.tint_radius_tol:
        return None
    d_new = np.hypot(xx - cx, yy - cy)
    disc = (d_new <= s.tint_fill_radius * r) & (wgt > 0)
    # over the disc's darker half (its highlights are white, not the ball's tint)
    ld = lab[..., 0][disc]
    fill = float(np.mean(m[disc][ld <= np.median(ld)] > s.tint_fill_level)) if disc.any() else 0.0
    if fill < s.tint_min_fill:
        return None
    # rays closer than the edge's blur width share pixels: the covariance of
    # independent points is scaled by the number of rays per independent edge stretch
    n_in = int(np.sum(fit["weights"] > 0))
    per = max(1.0, n_in * s.tint_edge_px / (2 * np.pi * rad))
    cov = np.asarray(fit["cov"], float) * per
    sig_fit = float(np.sqrt(max(np.trace(cov) / 2.0, 0.0))) if np.all(np.isfinite(cov)) else np.inf
    sig = float(np.hypot(sig_fit, s.tint_model_frac * r))
    return {"x": cx + xa, "y": cy + ya, "radius": rad, "sigma_px": sig, "sep": sep, "snr": snr, "fill": fill,
            "n_rays": n_in, "n_cross": len(pts), "scale": float(fit["scale"])}


def recentre_by_tint(det: pd.DataFrame, image: np.ndarray, calibration: Calibration, background: Background,
                     settings: DetectionSettings = DetectionSettings()) -> pd.DataFrame:
    """Detections of a ball of nearly the cloth's colour, re-centred on the tint map's silhouette (a new DataFrame).

    Every circle-fit detection (not a streak: a smeared ball's outline is
    not a circle) is tried; :func:`tint_fit` passes only for a ball whose
    tint lies within ``tint_near_sep`` of the cloth's (a clearly coloured
    ball keeps its colour fit) and shows one clear step to the cloth on
    enough rays. Other detections' discs carry no weight (rays through them
    are left out, so a ball touching another is refitted on its free side).
    The refit replaces the centre and its sigma (see the module doc).
    """
    if det.empty or not settings.tint_refit:
        return det
    from tracking.dark_ring import ball_centres_px, ring_patch

    streak = np.nan_to_num(det["streak_px"].to_numpy(float)) > 0
    cal = calibration
    cen, rad = ball_centres_px(det, background)
    out = det.copy()
    H, W = image.shape[:2]
    bl = background.lab_image()
    for i in range(len(det)):
        # quick look first: a ball of a clearly different tint (most balls) is left at once
        gx, gy = cen[i]
        h = int(np.ceil(settings.tint_core * rad[i]))
        xa, ya = max(0, int(round(gx)) - h), max(0, int(round(gy)) - h)
        xb, yb = min(W, int(round(gx)) + h + 1), min(H, int(round(gy)) + h + 1)
        if xb - xa < 3 or yb - ya < 3 or bl.shape[:2] != image.shape[:2]:
            continue
        lab = to_lab(image[ya:yb, xa:xb])
        lc = lab[..., 0].reshape(-1)
        u_b = np.median(unit_colour(lab).reshape(-1, 3)[lc <= np.median(lc)], axis=0)
        cloth = bl[ya:yb, xa:xb]
        if float(np.median(np.hypot(cloth[..., 1], cloth[..., 2]))) < settings.tint_min_cloth_chroma:
            continue  # a neutral cloth has no tint of its own to tell a ball by (tint_min_cloth_chroma)
        u_c = np.median(unit_colour(cloth).reshape(-1, 3), axis=0)
        if np.linalg.norm(u_b / (np.linalg.norm(u_b) + 1e-9) - u_c) > settings.tint_quick_margin * settings.tint_near_sep:
            continue
        got = ring_patch(image, background, cal, cen, rad, i, settings)
        if got is None:
            continue
        xa, ya, xb, yb, lp, wp = got
        fit = tint_fit(image, background, wp, cen[i], rad[i], (xa, ya, xb, yb), settings)
        if fit is None:
            continue
        if streak[i] and (fit["n_rays"] < settings.tint_streak_rays * fit["n_cross"]
                          or fit["scale"] > settings.tint_streak_scale_px):
            continue  # a smeared ball's outline is a stadium, not a circle: the streak fit stands
        r_new, ox, oy = background.lookup(fit["x"], fit["y"])
        p = np.array([[fit["x"] - ox, fit["y"] - oy]])
        xy = cal.px_to_table(p)[0]
        mmpp = cal.ball_radius_mm / r_new
        sig = float(fit["sigma_px"])
        j = out.index[i]
        out.loc[j, ["x_px", "y_px", "x_mm", "y_mm"]] = [p[0, 0], p[0, 1], xy[0], xy[1]]
        out.loc[j, ["sx_mm", "sy_mm", "sigma_px", "radius_px"]] = [sig * mmpp, sig * mmpp, sig, fit["radius"]]
    return out
