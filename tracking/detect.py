"""Ball detection in one frame: candidates, sub-pixel centres, colour summary.

Method (all lengths in px unless named ``_mm``; image frame: x right, y down,
origin at the centre of the top-left pixel):

1. Background: the temporal median of frames sampled over the clip
   (:func:`build_background`). Balls that never move survive a median, so
   ball-sized blobs that differ from a large-kernel median of the cloth are
   painted over with the surrounding cloth (``cv2.inpaint``); the result is the
   empty cloth, and a resting ball shows up as foreground in every frame.
2. Foreground strength ``d`` = CIE 1976 colour difference Delta-E*ab
   between frame and background (CIELAB, D65; CIE 15:2004), scaled by the
   local noise level so that the threshold is a fixed multiple of the
   background's own Delta-E noise in every region (dark corners of a
   vignetted table are noisier in L*a*b* than the lit centre). A perceptual
   difference separates a ball of the cloth's luminance but another hue, and
   weights a shadow (mostly a drop of L*) far less than the RGB distance does
   on dark cloth. Candidates are the peaks of ``d > threshold`` correlated with a paraboloid
   disc of the expected ball radius (from the calibration), so touching balls
   in a cluster give one peak each (their centres are two radii apart).
3. Sub-pixel centre: rays are cast from the candidate; along each ray the
   silhouette edge is the steepest *drop* of ``d`` (ball -> empty cloth), found
   to sub-sample precision by a parabola through the peak. A circle is fitted
   to these edge points with Tukey-biweight IRLS (free radius when it agrees
   with the expected one, else fixed at the expected radius). This uses the
   silhouette only, so stripes, numbers and the specular highlight (all
   inside the ball, where ``d`` stays high) do not pull the centre; a shadow
   (low ``d``, one side only) is down-weighted as outlying rays.
   Motion blur: a disc swept over the exposure has a coverage image that is
   point-symmetric about the mid-exposure centre, and its half-coverage
   contour lies at ~1 radius along the motion, so the symmetric fit returns
   the mid-exposure centre; the contour's elongation is not used.
   Known bias: the ball's Lambertian limb darkening and its contact shadow
   make the colour difference fall off over the last few px inside the
   limb on the side away from the lamp, so the steepest drop sits up to
   ~1 px inside there (the centre is pulled towards the lamp, the radius
   comes out small). An opt-in second stage (``limb_linear``,
   :func:`_limb_points`) splits each rim pixel into ball and cloth parts in
   linear light and takes the 50 % coverage point; see the setting for what
   it was measured to do. A second opt-in (``edge_shade_free``,
   :func:`shade_free_de`) locates the edge on a colour difference that
   ignores darkening of the cloth along its own colour (the cast shadow the
   dark limb runs into), so the cloth just outside the limb no longer reads
   as foreground there. A ball whose rim is darker than the cloth along the
   cloth's own colour (a black ball, :func:`dark_rim`) is located on the
   lightness difference instead (:func:`edge_map`): on the shade-free map
   its rim reads as shadow and its white number circle as the ball.
4. Perspective: the silhouette of a sphere is the image of its tangent cone,
   whose centre is not exactly the projection of the sphere centre. We
   project the exact tangent circle through the calibrated camera (with lens
   distortion), fit it the same way and subtract the offset
   (:func:`silhouette_offset_px`); at 3 m camera height it is <= ~0.05 px.
5. Table position through the ball-centre plane z = R
   (``Calibration.px_to_table``) and an honest sigma from the fit residuals.
6. Outline re-seeding (:func:`_outline_reseed`): a seed from the blob of a
   ball and its cast shadow can lie most of a radius off and make the fit
   settle on the shadow; where a disc of the known radius best covers the
   shade-free map's not-cloth pixels, the fit is redone and the better-
   covering one kept (balls with parts darker than the cloth excepted).

References: circle fitting, N. Chernov, *Circular and Linear Regression*
(CRC, 2010); Tukey biweight, Holland & Welsch, Commun. Stat. 6:813 (1977);
sub-pixel localisation accuracy, Crocker & Grier, J. Colloid Interface Sci.
179:298 (1996).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np
import pandas as pd
from scipy.special import erf as _erf

from tracking.calibration import Calibration
from tracking.pockets import inside_corner_mouth
from tracking.settings import DetectionSettings
from tracking.streak import edge_patch, refine_streak, streak_axis

#: ``contrast_dn``: mean foreground strength inside 0.6 radius, in noise-weighted
#: CIE 1976 Delta-E*ab units since the CIELAB foreground test (name kept).
#: ``streak_px``, ``streak_deg``: smear length (px; 0 for a circle fit) and
#: its direction (degrees, image frame; NaN) of a ball centred by the streak
#: fit (tracking/streak.py); its ``radius_px`` is then the mean radius of the
#: fitted contour, not a silhouette radius.
DETECTION_COLUMNS = [
    "x_px", "y_px", "x_mm", "y_mm", "sx_mm", "sy_mm", "sigma_px", "confidence",
    "radius_px", "radius_expected_px", "support", "contrast_dn",
    "r", "g", "b", "hue_deg", "sat", "val", "white_frac", "dark_frac", "streak_px", "streak_deg",
]


# --------------------------------------------------------------------------- geometry
def surface_polygon_px(calibration: Calibration, margin_mm: float, z_mm: float | None = None,
                       n_per_edge: int = 24) -> np.ndarray:
    """Image polygon (N,2) px of the playing surface grown by ``margin_mm`` on each side."""
    L, W = calibration.table.length_mm, calibration.table.width_mm
    m = margin_mm
    s = np.linspace(0.0, 1.0, n_per_edge, endpoint=False)
    edges = [
        np.column_stack([-m + s * (L + 2 * m), np.full_like(s, -m)]),
        np.column_stack([np.full_like(s, L + m), -m + s * (W + 2 * m)]),
        np.column_stack([L + m - s * (L + 2 * m), np.full_like(s, W + m)]),
        np.column_stack([np.full_like(s, -m), W + m - s * (W + 2 * m)]),
    ]
    return calibration.table_to_px(np.vstack(edges), z_mm)


def expected_radius_px(calibration: Calibration, px: np.ndarray) -> np.ndarray:
    """Apparent ball radius (px) at image points (N,2) taken as ball centres."""
    xy = calibration.px_to_table(np.asarray(px, float).reshape(-1, 2))
    return calibration.ball_radius_px(xy)


def silhouette_offset_px(calibration: Calibration, xy_mm: np.ndarray, n: int = 48) -> np.ndarray:
    """Silhouette-centre minus projected-centre offset (N,2) px for balls at table (N,2) mm.

    The tangent cone from the camera centre O touches a sphere (centre C,
    radius R, distance d) along a circle of centre C + (R^2/d) n and radius
    R sqrt(1 - R^2/d^2), n = (O - C)/d. Its image, fitted by the same
    algebraic circle fit as the detector uses, minus the image of C.
    """
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    R = calibration.ball_radius_mm
    out = np.zeros((len(xy), 2))
    for i, (x, y) in enumerate(xy):
        C = np.array([x, y, R])
        sil = calibration.camera.sphere_silhouette(C, R, n)
        cx, cy, _ = fit_circle_algebraic(sil)
        out[i] = [cx, cy] - calibration.camera.project(C[None])[0]
    return out


# --------------------------------------------------------------------------- circle fits
def fit_circle_algebraic(pts: np.ndarray, w: np.ndarray | None = None) -> tuple[float, float, float]:
    """Weighted Kasa fit (x-a)^2+(y-b)^2=r^2 to points (N,2); returns (a, b, r) px."""
    p = np.asarray(pts, float)
    w = np.ones(len(p)) if w is None else np.asarray(w, float)
    x, y = p[:, 0], p[:, 1]
    m = np.average(p, axis=0, weights=w)
    u, v = x - m[0], y - m[1]
    A = np.column_stack([u, v, np.ones_like(u)])
    rhs = u * u + v * v
    sw = np.sqrt(w)
    sol, *_ = np.linalg.lstsq(A * sw[:, None], rhs * sw, rcond=None)
    a, b = sol[0] / 2, sol[1] / 2
    r = np.sqrt(max(sol[2] + a * a + b * b, 1e-12))
    return float(a + m[0]), float(b + m[1]), float(r)


def fit_circle_robust(pts: np.ndarray, w0: np.ndarray, centre0: np.ndarray, radius: float | None,
                      tukey_c: float = 4.685, iters: int = 4) -> dict:
    """Tukey-IRLS geometric circle fit to edge points (N,2) with prior weights w0.

    ``radius`` None fits the radius, else it is held fixed. Returns dict with
    centre (2,), radius, residuals (N,), weights (N,), scale (robust residual
    sigma, px), cov (2x2 centre covariance, px^2).
    """
    c = np.asarray(centre0, float).copy()
    rr = float(radius) if radius is not None else float(np.median(np.linalg.norm(pts - c, axis=1)))
    w = np.asarray(w0, float).copy()
    scale = 1.0
    res = np.zeros(len(pts))
    J = np.zeros((len(pts), 3))
    for it in range(iters):
        dvec = pts - c
        dist = np.linalg.norm(dvec, axis=1) + 1e-12
        res = dist - rr
        if it == 0:
            med = np.median(res)
            scale = max(1.4826 * np.median(np.abs(res - med)), 0.15)
        else:
            scale = max(1.4826 * np.median(np.abs(res[w > 0])) if np.any(w > 0) else 1.0, 0.1)
        z = res / (tukey_c * scale)
        tw = np.where(np.abs(z) < 1, (1 - z * z) ** 2, 0.0)
        w = w0 * tw
        if w.sum() < 3:
            break
        # Gauss-Newton on residual_i = |p_i - c| - r
        J = np.column_stack([-dvec[:, 0] / dist, -dvec[:, 1] / dist, -np.ones(len(pts))])
        if radius is not None:
            J = J[:, :2]
        Jw = J * w[:, None]
        try:
            step = np.linalg.solve(Jw.T @ J, -(Jw.T @ res))
        except np.linalg.LinAlgError:
            break
        c = c + step[:2]
        if radius is None:
            rr = rr + step[2]
        if np.max(np.abs(step)) < 1e-4:
            break
    dvec = pts - c
    dist = np.linalg.norm(dvec, axis=1) + 1e-12
    res = dist - rr
    inl = w > 0
    sig = np.sqrt(np.sum(w * res * res) / max(np.sum(w) - (3 if radius is None else 2), 1.0)) if inl.sum() > 3 else np.inf
    Jc = np.column_stack([-dvec[:, 0] / dist, -dvec[:, 1] / dist, -np.ones(len(pts))])
    if radius is not None:
        Jc = Jc[:, :2]
    try:
        cov = np.linalg.inv((Jc * w[:, None]).T @ Jc / max(w.max(), 1e-12) * 1.0) * sig ** 2
        cov = cov[:2, :2]
    except np.linalg.LinAlgError:
        cov = np.full((2, 2), np.inf)
    return {"centre": c, "radius": rr, "residuals": res, "weights": w, "scale": sig, "cov": cov}


# --------------------------------------------------------------------------- background
@dataclass
class Background:
    """Empty-cloth image and the masks/levels detection needs.

    image: float32 (H, W, 3) BGR, DN, the cloth with no balls; median: the raw
    temporal median (uint8); mask: uint8 (H, W), 1 where a ball's silhouette
    may appear; roi: (x0, y0, x1, y1) bounding box of ``mask``;
    noise_dn: robust per-axis noise sigma of the frame-background Delta-E*ab
    (CIELAB units, despite the historical name); threshold_dn: foreground
    level in the same units;
    radius_px: median expected ball radius over the table;
    static_px: (N,2) centres of blobs painted out of the median (balls that
    never moved).
    """

    image: np.ndarray
    median: np.ndarray
    mask: np.ndarray
    roi: tuple[int, int, int, int]
    noise_dn: float
    threshold_dn: float
    radius_px: float
    static_px: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    #: Expected ball radius (px) and silhouette-centre offset (px, 2 planes)
    #: sampled every ``grid_step`` px over the image; see :meth:`lookup`.
    radius_grid: np.ndarray | None = None
    offset_grid: np.ndarray | None = None
    grid_step: int = 32
    #: CIELAB image of ``image`` (float32 H,W,3); built on first use if None.
    lab: np.ndarray | None = None
    #: Per-pixel weight (float32 H,W) = mask x (global / local noise sigma):
    #: ``d`` = Delta-E x weight, so one threshold means the same number of
    #: local noise sigmas everywhere. None: the mask alone.
    weight: np.ndarray | None = None

    def lab_image(self) -> np.ndarray:
        """CIELAB background (float32 H,W,3), cached."""
        if self.lab is None:
            self.lab = to_lab(self.image)
        return self.lab

    def weight_map(self) -> np.ndarray:
        """Foreground weight (float32 H,W): mask x noise normalisation, cached."""
        if self.weight is None:
            self.weight = self.mask.astype(np.float32)
        return self.weight

    def lookup(self, x: float, y: float) -> tuple[float, float, float]:
        """(expected radius px, offset x px, offset y px) at image point (x, y), bilinear."""
        g = self.grid_step
        gy, gx = self.radius_grid.shape
        fx = min(max(x / g, 0.0), gx - 1.000001)
        fy = min(max(y / g, 0.0), gy - 1.000001)
        i, j = int(fy), int(fx)
        ty, tx = fy - i, fx - j

        def bil(a):
            return ((1 - ty) * ((1 - tx) * a[i, j] + tx * a[i, j + 1])
                    + ty * ((1 - tx) * a[i + 1, j] + tx * a[i + 1, j + 1]))
        return float(bil(self.radius_grid)), float(bil(self.offset_grid[..., 0])), float(bil(self.offset_grid[..., 1]))


def to_lab(bgr: np.ndarray) -> np.ndarray:
    """BGR image (0..255, any dtype) -> CIELAB float32 (L* 0..100, a*, b*), sRGB/D65.

    OpenCV converts float32 input in 0..1 without quantisation (true L*a*b*).

    >>> np.round(to_lab(np.array([[[255, 255, 255]]], np.uint8))[0, 0], 2).tolist()
    [100.0, 0.0, 0.0]
    """
    return cv2.cvtColor(np.asarray(bgr, np.float32) * np.float32(1.0 / 255.0), cv2.COLOR_BGR2Lab)


def delta_e76(lab_a: np.ndarray, lab_b: np.ndarray) -> np.ndarray:
    """CIE 1976 colour difference Delta-E*ab = |Lab_a - Lab_b| (float32, per pixel)."""
    diff = cv2.subtract(np.asarray(lab_a, np.float32), np.asarray(lab_b, np.float32))
    return cv2.sqrt(cv2.transform(cv2.multiply(diff, diff), np.ones((1, 3), np.float32)))


def shade_free_de(lab: np.ndarray, bg_lab: np.ndarray, min_light: float = 0.15) -> np.ndarray:
    """Colour difference (Delta-E*ab units) that ignores shadow-like darkening of the background.

    With v = (L* + 16, a*, b*) of the pixel and c the same of the background:
    a pure intensity scale k of a colour multiplies v by k^(1/3) (CIELAB's
    cube-root branch, CIE 15:2004), so a shadow on the cloth moves v along c,
    down to min_light^(1/3) |c| (a shadow keeps at least ``min_light`` of
    the light). Returns the part of v across c combined (root sum of
    squares) with any brightening past |c| and any darkening below that
    floor (float32).
    """
    v = np.asarray(lab, np.float32) + np.float32([16.0, 0.0, 0.0])
    c = np.asarray(bg_lab, np.float32) + np.float32([16.0, 0.0, 0.0])
    cn = np.sqrt(np.einsum("...k,...k->...", c, c)) + np.float32(1e-6)
    along = np.einsum("...k,...k->...", v, c) / cn
    perp2 = np.maximum(np.einsum("...k,...k->...", v, v) - along * along, 0.0)
    over = np.maximum(along - cn, 0.0) + np.maximum(np.float32(min_light ** (1.0 / 3.0)) * cn - along, 0.0)
    return np.sqrt(perp2 + over * over).astype(np.float32)


def edge_map(d: np.ndarray, de: np.ndarray | None, x: float, y: float, r: float,
             settings: DetectionSettings, dl: np.ndarray | None = None) -> np.ndarray:
    """The map to locate a ball's edge on near (x, y) px, radius r px.

    - ``dl`` (:func:`lightness_difference`) when given and the ball's rim
      keeps little of its Delta-E contrast on the shade-free map ``de``
      (:func:`dark_rim`): a rim darker than the cloth along the cloth's own
      colour (a black ball, whatever its number circle does inside);
    - else ``de`` (shade-free) when given and the ball keeps its contrast
      there: mean of ``de`` inside 0.6 r >= edge_shade_free_min_ratio x that
      of the Delta-E map ``d``;
    - else ``d``.
    """
    if de is None:
        return d
    if dl is not None and dark_rim(d, de, x, y, r, settings):
        return dl
    if _disc_mean(de, x, y, 0.6 * r) >= settings.edge_shade_free_min_ratio * _disc_mean(d, x, y, 0.6 * r):
        return de
    return d


def dark_rim(d: np.ndarray, de: np.ndarray, x: float, y: float, r: float, settings: DetectionSettings) -> bool:
    """True when, over the annulus ``dark_rim_inner``-``dark_rim_outer`` r about (x, y) px, the median of the
    shade-free map ``de`` is below ``dark_rim_ratio`` x the median of Delta-E ``d`` (a rim darker than the
    cloth along the cloth's own colour; medians, so that a number circle reaching into part of the annulus
    does not decide)."""
    vd = _ring_values(d, x, y, settings.dark_rim_inner * r, settings.dark_rim_outer * r)
    if not len(vd):
        return False
    md = float(np.median(vd))
    ve = _ring_values(de, x, y, settings.dark_rim_inner * r, settings.dark_rim_outer * r)
    return md > 0 and float(np.median(ve)) < settings.dark_rim_ratio * md


def lightness_difference(lab: np.ndarray, bg_lab: np.ndarray) -> np.ndarray:
    """|L* - L*_background| (float32, CIELAB lightness units; CIE 15:2004)."""
    return np.abs(np.asarray(lab, np.float32)[..., 0] - np.asarray(bg_lab, np.float32)[..., 0])


def _colour_distance(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Delta-E*ab between two BGR images (0..255)."""
    return delta_e76(to_lab(a), to_lab(b))


def local_noise(de_stack: np.ndarray, valid: np.ndarray, window_px: float, floor: float) -> np.ndarray:
    """Per-pixel Delta-E noise sigma (float32 H,W) from per-frame Delta-E maps (N,H,W).

    Per pixel: temporal median of Delta-E / 1.538 (the median length of 3-axis
    Gaussian noise is 1.538 sigma); then averaged over a box ``window_px``
    wide using ``valid`` pixels only (balls at rest or passing are excluded
    and filled from their surroundings; normalised convolution); >= floor.
    """
    sig = np.median(de_stack, axis=0).astype(np.float32) / np.float32(1.538)
    v = valid.astype(np.float32)
    k = max(3, int(round(window_px)) | 1)
    num = cv2.boxFilter(sig * v, -1, (k, k), normalize=True, borderType=cv2.BORDER_REFLECT)
    den = cv2.boxFilter(v, -1, (k, k), normalize=True, borderType=cv2.BORDER_REFLECT)
    ok = den > 1e-3
    loc = np.where(ok, num / np.maximum(den, 1e-6), np.median(sig[valid]) if valid.any() else floor)
    return np.maximum(loc, floor).astype(np.float32)


def build_background(frames: list[np.ndarray], calibration: Calibration,
                     settings: DetectionSettings = DetectionSettings()) -> Background:
    """Empty-cloth background from sampled frames (each HxWx3 uint8 BGR)."""
    if not frames:
        raise ValueError("no frames to build a background from")
    h, w = frames[0].shape[:2]
    stack = np.stack(frames, axis=0)
    med = np.median(stack, axis=0).astype(np.uint8)
    cal = calibration
    R = cal.ball_radius_mm
    centre = np.array([[cal.table.length_mm / 2, cal.table.width_mm / 2]])
    r_px = float(cal.ball_radius_px(centre)[0])
    # Pixel mask: ball centres up to one radius beyond the cushion nose (a ball
    # dropping into a pocket), plus the silhouette radius (x1.3 for blur).
    poly = surface_polygon_px(cal, margin_mm=R + 1.3 * R)
    mask = np.zeros((h, w), np.uint8)
    cv2.fillPoly(mask, [np.round(poly * 16).astype(np.int32)], 1, lineType=cv2.LINE_8, shift=4)
    ys, xs = np.nonzero(mask)
    if len(xs) == 0:
        raise ValueError("the calibrated playing surface does not fall inside the image")
    roi = (int(xs.min()), int(ys.min()), int(xs.max()) + 1, int(ys.max()) + 1)

    # Expected radius and silhouette offset on a coarse image grid.
    step = 64  # radius and offset vary slowly over the image
    gxs = np.arange(0, w + step, step, dtype=float)
    gys = np.arange(0, h + step, step, dtype=float)
    grid_px = np.array([[x, y] for y in gys for x in gxs])
    grid_xy = cal.px_to_table(grid_px)
    rad = cal.ball_radius_px(grid_xy).reshape(len(gys), len(gxs))
    off = silhouette_offset_px(cal, grid_xy, n=24).reshape(len(gys), len(gxs), 2)

    # Cloth model: a median over a window ~7 ball radii wide removes a ball
    # (it covers < 1/10 of the window) but keeps the slow vignetting.
    k = int(2 * round(3.5 * r_px) + 1)
    cloth = cv2.medianBlur(med, max(k, 5))
    d0 = _colour_distance(med, cloth)
    inner = np.abs(d0[mask > 0] - np.median(d0[mask > 0]))
    noise0 = max(1.4826 * np.median(inner), 1.0)
    # Balls that never moved: run the detector on the median against the cloth
    # model; keep balls whose centre lies on the cloth (a pocket or rail
    # feature cannot have its centre more than ~a radius inside the nose line).
    provisional = Background(image=cloth.astype(np.float32), median=med, mask=mask, roi=roi, noise_dn=noise0,
                             threshold_dn=float(max(settings.fg_sigma * noise0, settings.fg_min_de)),
                             radius_px=r_px, radius_grid=rad, offset_grid=off, grid_step=step)
    found = detect_frame(med, cal, settings, provisional)
    L, W = cal.table.length_mm, cal.table.width_mm
    m = 0.8 * R
    found = found[(found.x_mm >= m) & (found.x_mm <= L - m) & (found.y_mm >= m) & (found.y_mm <= W - m)]
    # the visible part of a corner pocket is a ball-sized dark blob where no ball can rest
    found = found[~inside_corner_mouth(found[["x_mm", "y_mm"]].to_numpy(float), cal.table,
                                       settings.corner_mouth_min_mm)]
    static = found[["x_px", "y_px"]].to_numpy()
    img = med.copy()
    if len(static):
        paint = np.zeros((h, w), np.uint8)
        for (x, y), rr in zip(static, found.radius_expected_px):
            # 1.8 radii: the ball, its blur and the darkest part of its shadow
            cv2.circle(paint, (int(round(x * 16)), int(round(y * 16))), int(round(1.8 * rr * 16)), 1, -1,
                       lineType=cv2.LINE_8, shift=4)
        img = cv2.inpaint(med, paint, int(round(r_px)), cv2.INPAINT_TELEA)
    bg = img.astype(np.float32)

    # Noise: per-axis sigma of the frame-to-background Delta-E (the length of
    # 3-axis Gaussian noise is sigma * chi_3, median 1.538 sigma), globally and
    # per region (normalised to the global level through ``weight``).
    x0, y0, x1, y1 = roi
    bg_lab = to_lab(bg)
    mroi = mask[y0:y1, x0:x1] > 0
    des = np.stack([delta_e76(to_lab(f[y0:y1, x0:x1]), bg_lab[y0:y1, x0:x1])
                    for f in frames[:: max(1, len(frames) // settings.noise_frames)]], axis=0)
    med_de = np.median(des, axis=0)
    noise0 = max(float(np.median(med_de[mroi])) / 1.538, settings.noise_min_de)
    # pixels that look like a ball in the median (a resting ball, painted out
    # of the background) say nothing about the cloth's noise
    quiet = mroi & (med_de < 0.5 * settings.fg_sigma * noise0)
    loc = local_noise(des, quiet, settings.noise_window * r_px, settings.noise_min_de)
    noise = float(np.median(loc[mroi]))
    thr = float(max(settings.fg_sigma * noise, settings.fg_min_de))
    # d = Delta-E x noise / local noise: one threshold = the same number of
    # local sigmas everywhere (clipped to [1/3, 3]: a bad estimate can neither
    # silence nor flood a region)
    weight = np.zeros((h, w), np.float32)
    weight[y0:y1, x0:x1] = np.clip(noise / loc, 1.0 / 3.0, 3.0) * mroi
    return Background(image=bg, median=med, mask=mask, roi=roi, noise_dn=noise, threshold_dn=thr,
                      radius_px=r_px, static_px=np.array(static).reshape(-1, 2),
                      radius_grid=rad, offset_grid=off, grid_step=step, lab=bg_lab, weight=weight)


# --------------------------------------------------------------------------- candidates

def find_candidates(fg: np.ndarray, radius_px: float, settings: DetectionSettings) -> np.ndarray:
    """Peaks (N,3: x, y, score) of the foreground map correlated with a ball-sized disc.

    Balls wider than ~12 px are searched on a half-resolution map (the
    candidate only seeds the sub-pixel fit).
    """
    if radius_px >= 6.0:
        small = cv2.resize(fg, (fg.shape[1] // 2, fg.shape[0] // 2), interpolation=cv2.INTER_AREA)
        c = _find_candidates(small, radius_px / 2.0, settings)
        c[:, :2] = c[:, :2] * 2.0 + 0.5
        return c
    return _find_candidates(fg, radius_px, settings)


def _find_candidates(fg: np.ndarray, radius_px: float, settings: DetectionSettings) -> np.ndarray:
    # Gaussian-weighted disc score (sigma r/2): a filled ball-sized disc scores
    # 1 - exp(-2) = 0.86 at its centre and peaks there; separable, so cheap.
    score = cv2.GaussianBlur(fg, (0, 0), 0.5 * radius_px, borderType=cv2.BORDER_CONSTANT)
    nr = max(1, int(round(settings.nms_radius * radius_px)))
    se = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * nr + 1, 2 * nr + 1))
    dil = cv2.dilate(score, se)
    ys, xs = np.nonzero((score >= dil - 1e-6) & (score > settings.disc_score_min))
    out = sorted(((float(x), float(y), float(score[y, x])) for y, x in zip(ys, xs)), key=lambda t: -t[2])
    kept: list[tuple[float, float, float]] = []
    for c in out:
        if all((c[0] - k[0]) ** 2 + (c[1] - k[1]) ** 2 > (settings.nms_radius * radius_px) ** 2 for k in kept):
            kept.append(c)
    return np.array(kept, float).reshape(-1, 3)


def cluster_candidates(image: np.ndarray, fg_mask: np.ndarray, radius_px: float,
                       settings: DetectionSettings) -> np.ndarray:
    """Ball centres (N,3: x, y, votes) inside one blob of touching balls (full-res crop coords).

    Circle Hough transform with the known radius (Duda & Hart, Commun. ACM
    15:11, 1972): every strong colour edge votes for the two points one
    radius away along its gradient; the votes pile up at ball centres, also
    where the blob has no background between balls.
    """
    img = image.astype(np.float32)
    gx = np.stack([cv2.Sobel(img[..., k], cv2.CV_32F, 1, 0, ksize=3) for k in range(3)], axis=-1)
    gy = np.stack([cv2.Sobel(img[..., k], cv2.CV_32F, 0, 1, ksize=3) for k in range(3)], axis=-1)
    mag2 = gx * gx + gy * gy
    best = np.argmax(mag2, axis=2)
    ii, jj = np.indices(best.shape)
    gxb, gyb = gx[ii, jj, best], gy[ii, jj, best]
    mag = np.sqrt(gxb * gxb + gyb * gyb)
    grown = cv2.dilate(fg_mask.astype(np.uint8), np.ones((5, 5), np.uint8)) > 0
    sel = grown & (mag > 0.2 * np.percentile(mag[grown], 99) if grown.any() else grown)
    ys, xs = np.nonzero(sel)
    if len(xs) == 0:
        return np.zeros((0, 3))
    ux, uy = gxb[ys, xs] / mag[ys, xs], gyb[ys, xs] / mag[ys, xs]
    acc = np.zeros(best.shape, np.float32)
    h, w = best.shape
    for sgn in (1.0, -1.0):
        cx = np.round(xs + sgn * radius_px * ux).astype(int)
        cy = np.round(ys + sgn * radius_px * uy).astype(int)
        ok = (cx >= 0) & (cx < w) & (cy >= 0) & (cy < h)
        np.add.at(acc, (cy[ok], cx[ok]), 1.0)
    acc = cv2.GaussianBlur(acc, (0, 0), 1.0)
    nr = max(1, int(round(settings.nms_radius * radius_px)))
    se = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * nr + 1, 2 * nr + 1))
    peaks = (acc >= cv2.dilate(acc, se) - 1e-6) & fg_mask.astype(bool) & (acc > 0)
    ys, xs = np.nonzero(peaks)
    # a full ball boundary gives ~2 pi r votes before blurring; keep >= 1/4 of
    # the peak of a blurred full ring (blur spreads a point over ~2 pi sigma^2).
    vmin = 0.25 * (2 * np.pi * radius_px) / (2 * np.pi * 1.0 ** 2)
    cand = sorted([(float(x), float(y), float(acc[y, x])) for y, x in zip(ys, xs) if acc[y, x] >= vmin],
                  key=lambda t: -t[2])
    kept: list[tuple[float, float, float]] = []
    for c in cand:
        if all((c[0] - k[0]) ** 2 + (c[1] - k[1]) ** 2 > (settings.nms_radius * radius_px) ** 2 for k in kept):
            kept.append(c)
    return np.array(kept, float).reshape(-1, 3)


# --------------------------------------------------------------------------- refinement
def _edge_points(dsm: np.ndarray, centre: np.ndarray, r_exp: float, settings: DetectionSettings,
                 rising: bool = False, edge_floor: float | None = None):
    """Steepest drop (or rise) of the smoothed image ``dsm`` along rays; returns (pts, strength, valid, end).

    ``end``: the profile value at the far end of each ray.
    """
    n = settings.n_rays
    th = np.linspace(0, 2 * np.pi, n, endpoint=False).astype(np.float32)
    s = np.arange(settings.ray_min * r_exp, settings.ray_max * r_exp + 1e-6, settings.ray_step_px,
                  dtype=np.float32)
    mx = (centre[0] + np.cos(th)[:, None] * s[None, :]).astype(np.float32)
    my = (centre[1] + np.sin(th)[:, None] * s[None, :]).astype(np.float32)
    h, w = dsm.shape
    inside = (mx >= 0) & (mx <= w - 1) & (my >= 0) & (my <= h - 1)
    prof = cv2.remap(dsm, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    drop = -(prof[:, 2:] - prof[:, :-2]) / (2 * settings.ray_step_px)  # -d/ds at s[1:-1]
    if rising:
        drop = -drop
    # Prefer drops near the expected radius (soft prior, sd 0.35 r).
    sm = s[1:-1]
    prior = np.exp(-0.5 * ((sm - r_exp) / (0.35 * r_exp)) ** 2)
    score = drop * prior[None, :]
    j = np.argmax(score, axis=1)
    if not rising:
        # The silhouette is the OUTERMOST clear drop: inner edges (number
        # circle, stripe, highlight) can be stronger than the limb of a ball
        # close to the cloth colour, but they are never outside it. A shadow's
        # soft outer edge is too weak (< 15% of the ray's strongest drop) or
        # too far out (> 1.3 radii) to count.
        rowmax = drop.max(axis=1, keepdims=True)
        floor = 0.2 * (edge_floor if edge_floor is not None else 0.0)
        strong = drop >= np.maximum(settings.edge_outer_frac * rowmax, floor)
        kk = np.arange(len(sm))[None, :]
        # outermost strong sample within 1.3 radii, then the peak of its run
        outer = np.where(strong & (sm[None, :] <= 1.3 * r_exp), kk, -1).max(axis=1)
        gap_before = np.where(~strong & (kk < outer[:, None]), kk, -1).max(axis=1)
        in_run = (kk > gap_before[:, None]) & (kk <= outer[:, None])
        jr = np.argmax(np.where(in_run, drop, -np.inf), axis=1)
        j = np.where(outer >= 0, jr, j)
    j = np.clip(j, 1, len(sm) - 2)
    idx = np.arange(n)
    strength = drop[idx, j]
    # Edge position: first moment of the drop over the contiguous run around
    # the peak where it exceeds 0.8 of the peak. For a sharp edge this is the
    # peak; for a motion-blurred edge (a ramp as long as the blur) it is the
    # middle of the ramp, i.e. the half-coverage contour.
    half = 0.8 * strength[:, None]
    above = drop >= half
    k = np.arange(len(sm))[None, :]
    # contiguous run containing j: no gap (below half) between k and j
    below = ~above
    left_gap = np.where(below & (k < j[:, None]), k, -1).max(axis=1)
    right_gap = np.where(below & (k > j[:, None]), k, len(sm)).min(axis=1)
    run = (k > left_gap[:, None]) & (k < right_gap[:, None])
    wgt = np.where(run, drop - half, 0.0)
    rad = (wgt * sm[None, :]).sum(axis=1) / np.maximum(wgt.sum(axis=1), 1e-12)
    valid = inside.all(axis=1) & (strength > 0)
    pts = np.column_stack([centre[0] + np.cos(th) * rad, centre[1] + np.sin(th) * rad])
    return pts, np.clip(strength, 0, None), valid, prof[:, -3:].mean(axis=1)


def _limb_points(lin: np.ndarray, centre: np.ndarray, radius: float, settings: DetectionSettings):
    """Limb points along rays from the cloth's share of each pixel's linear-light colour.

    Returns (pts (n,2), weight (n,) >= 0, ok (n,)).

    Near the rim a pixel's linear-light colour is ``P = k F + m (1 - a) C``:
    a the disc coverage (blurred by the lens), F and C the colour directions
    of the ball and of the cloth, k the ball's shading (it falls towards the
    limb: Lambertian limb darkening) and m the cloth's lighting (the ball's
    own shadow). Per ray, F and C are the mean colours of a window just
    inside and one just outside the first limb estimate (a guard band
    between them); least squares on the two directions splits each sample
    into a ball part and a cloth part beta = m (1 - a). beta is zero on the
    ball however dark its limb, and on the cloth follows the shadow, fitted
    as a straight line over the outer window. Under a symmetric blur of
    sigma px the limb is where beta reaches half that line, plus half its
    slope times the mean outward reach of the blur, sigma sqrt(2/pi). Rays
    whose ball and cloth colours are nearly parallel (the split is
    ill-conditioned) or whose edge is much wider than the ball's median
    (motion smear) are flagged not ok.
    """
    n = settings.n_rays
    th = np.linspace(0, 2 * np.pi, n, endpoint=False)
    idx = np.arange(n)
    st = settings.ray_step_px
    g, wi, wo = settings.limb_guard_px, settings.limb_inner_px, settings.limb_outer_px
    wi = min(wi, max(radius - g, 0.0) * 0.5)
    s = np.arange(radius - g - wi, radius + g + wo + 1e-6, st)
    mx = (centre[0] + np.cos(th)[:, None] * s[None, :]).astype(np.float32)
    my = (centre[1] + np.sin(th)[:, None] * s[None, :]).astype(np.float32)
    h, w = lin.shape[:2]
    inside = ((mx >= 0) & (mx <= w - 1) & (my >= 0) & (my <= h - 1)).all(axis=1)
    prof = cv2.remap(lin, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE).astype(np.float64)
    inn, out = s <= radius - g + 1e-9, s >= radius + g - 1e-9
    bad = (np.zeros((n, 2)), np.zeros(n), np.zeros(n, bool))
    if inn.sum() < 2 or out.sum() < 3:
        return bad
    F = prof[:, inn].mean(axis=1)  # (n, 3)
    C = prof[:, out].mean(axis=1)
    # beta(s) = second row of pinv([F C]) . P(s)
    ff, cc, fc = (F * F).sum(1), (C * C).sum(1), (F * C).sum(1)
    det = ff * cc - fc * fc
    sin2 = det / np.maximum(ff * cc, 1e-30)  # sin^2 of the angle between ball and cloth colours
    rowc = (C * ff[:, None] - F * fc[:, None]) / np.maximum(det, 1e-30)[:, None]  # (n, 3)
    beta = np.einsum("nmc,nc->nm", prof, rowc)
    so = s[out] - radius
    A = np.column_stack([np.ones(len(so)), so])
    bo = beta[:, out] @ np.linalg.pinv(A).T  # (n, 2): level and slope of the cloth share
    mid = ~inn & ~out
    sm, bm = s[mid], beta[:, mid]
    sigma = settings.limb_blur0_px
    pos = np.full(n, np.nan)
    sig_ray = np.full(n, np.inf)
    for _ in range(2):
        level = 0.5 * (bo[:, :1] + bo[:, 1:2] * ((sm - radius)[None, :] + sigma * np.sqrt(2.0 / np.pi)))
        t = bm - level  # < 0 on the ball side
        neg = t < 0
        cross = neg[:, :-1] & ~neg[:, 1:]
        dist = np.where(cross, np.abs(sm[:-1] + 0.5 * st - radius)[None, :], np.inf)
        j = np.argmin(dist, axis=1)
        has = np.isfinite(dist[idx, j])
        t0, t1 = t[idx, j], t[idx, j + 1]
        frac = np.clip(-t0 / np.where(t1 - t0 > 1e-12, t1 - t0, 1.0), 0, 1)
        pos = np.where(has, sm[j] + frac * st, np.nan)
        jl, jr = np.clip(j - 2, 0, len(sm) - 1), np.clip(j + 3, 0, len(sm) - 1)
        slope = (t[idx, jr] - t[idx, jl]) / np.maximum(sm[jr] - sm[jl], 1e-9) / np.maximum(bo[:, 0], 1e-9)
        sig_ray = np.where(slope > 0, 1.0 / (np.sqrt(2 * np.pi) * np.maximum(slope, 1e-9)), np.inf)
        okr = has & inside & (sin2 > settings.limb_min_sin ** 2) & (bo[:, 0] > 0)
        if okr.sum() < 6:
            return bad
        sigma = float(np.clip(np.median(sig_ray[okr]), settings.limb_blur_min_px, g))
    ok = (np.isfinite(pos) & inside & (sin2 > settings.limb_min_sin ** 2) & (bo[:, 0] > 0)
          & (sig_ray <= settings.limb_ray_blur_ratio * sigma))
    # weight: the cloth's colour component perpendicular to the ball's (what the split sees)
    wgt = np.sqrt(np.clip(cc * sin2, 0, None))
    pos = np.where(ok, pos, radius)
    pts = np.column_stack([centre[0] + np.cos(th) * pos, centre[1] + np.sin(th) * pos])
    return pts, wgt, ok


def _colour_edge_points(img: np.ndarray, centre: np.ndarray, r_exp: float, settings: DetectionSettings,
                        lo: float = 0.8, hi: float = 1.25):
    """Strongest colour change (vector derivative of BGR) along rays within [lo, hi] x radius.

    Used where a ray runs into a touching ball: the boundary between two
    balls is the strongest colour change one radius out (stripe and number
    boundaries lie further in on this ball, further out on the neighbour:
    the caller keeps [lo, hi] close to 1, DetectionSettings.touch_edge_lo/hi).
    """
    n = settings.n_rays
    th = np.linspace(0, 2 * np.pi, n, endpoint=False).astype(np.float32)
    s = np.arange(lo * r_exp, hi * r_exp + 1e-6, settings.ray_step_px, dtype=np.float32)
    mx = (centre[0] + np.cos(th)[:, None] * s[None, :]).astype(np.float32)
    my = (centre[1] + np.sin(th)[:, None] * s[None, :]).astype(np.float32)
    h, w = img.shape[:2]
    inside = (mx >= 0) & (mx <= w - 1) & (my >= 0) & (my <= h - 1)
    prof = cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)  # (n, m, 3)
    der = (prof[:, 2:] - prof[:, :-2]) / (2 * settings.ray_step_px)
    mag = np.sqrt((der * der).sum(axis=2))
    sm = s[1:-1]
    j = np.clip(np.argmax(mag, axis=1), 1, len(sm) - 2)
    idx = np.arange(n)
    y0, y1, y2 = mag[idx, j - 1], mag[idx, j], mag[idx, j + 1]
    den = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.clip(np.where(np.abs(den) > 1e-9, 0.5 * (y0 - y2) / den, 0.0), -1, 1)
    rad = sm[j] + off * settings.ray_step_px
    pts = np.column_stack([centre[0] + np.cos(th) * rad, centre[1] + np.sin(th) * rad])
    return pts, y1, inside.all(axis=1) & (y1 > 0)


def _toward_neighbour(c: np.ndarray, r: float, others: np.ndarray | None, n_rays: int,
                      near: float = 1.6, far: float = 2.6) -> np.ndarray:
    """(n_rays,) bool: rays from image point ``c`` (px) that cross the disc of radius ``r`` about
    another ball's centre ``near``-``far`` radii away (a touching or close neighbour; nearer is
    the same ball's second seed, rigid balls never being closer than 2 r)."""
    out = np.zeros(n_rays, bool)
    if others is None or len(others) == 0:
        return out
    v = np.asarray(others, float).reshape(-1, 2) - c
    dist = np.hypot(v[:, 0], v[:, 1])
    v = v[(dist >= near * r) & (dist <= far * r)]
    if not len(v):
        return out
    th = np.linspace(0, 2 * np.pi, n_rays, endpoint=False)
    u = np.column_stack([np.cos(th), np.sin(th)])
    along = u @ v.T  # (n_rays, n_other)
    perp = np.abs(u[:, :1] * v[None, :, 1] - u[:, 1:] * v[None, :, 0])
    return ((along > 0) & (perp < r)).any(axis=1)


def outline_kernel(r: float, ring_out: float) -> np.ndarray:
    """Disc-minus-annulus kernel (float32, sums to 0): +1/N over the disc of radius r px, -1/M over the
    annulus r + 1 px .. ring_out x r (pixel centres, 4x4 supersampled coverage)."""
    n = int(np.ceil(ring_out * r)) + 1
    sub = (np.arange(4) + 0.5) / 4 - 0.5
    yy, xx = np.mgrid[-n:n + 1, -n:n + 1].astype(np.float32)
    rr = np.hypot(xx[..., None, None] + sub[None, None, None, :], yy[..., None, None] + sub[None, None, :, None])
    disc = (rr <= r).mean(axis=(2, 3))
    ring = ((rr >= r + 1.0) & (rr <= ring_out * r)).mean(axis=(2, 3))
    return (disc / max(disc.sum(), 1e-9) - ring / max(ring.sum(), 1e-9)).astype(np.float32)


def outline_centre(em: np.ndarray, x0: float, y0: float, r: float, threshold_dn: float,
                   settings: DetectionSettings) -> tuple[float, float, float] | None:
    """Where a disc of the ball's known radius r (px) best covers the not-cloth pixels near (x0, y0).

    The ball's silhouette is a disc of known image radius and every part of
    the ball lies inside it; the cloth around it is empty. On the edge map
    ``em`` (Delta-E units) each pixel's not-cloth weight is clip(em /
    level, 0, 1), level from :func:`outline_level` (half the ball's own
    typical contrast, so that a cast shadow weaker than the ball weighs
    less); the score of a centre is the mean weight inside the disc minus
    that in the annulus r + 1 px to ``outline_ring_out`` r
    (:func:`outline_kernel`). Returns (x, y) of the score's maximum within
    ``outline_search`` r of (x0, y0) (sub-pixel: parabola through the peak)
    and the level used, or None near the image border.
    """
    reach = settings.outline_search * r
    kern = outline_kernel(r, settings.outline_ring_out)
    h = kern.shape[0] // 2
    half = int(np.ceil(reach)) + h + 2
    xi, yi = int(round(x0)), int(round(y0))
    if xi - half < 0 or yi - half < 0 or xi + half + 1 > em.shape[1] or yi + half + 1 > em.shape[0]:
        return None
    patch = em[yi - half:yi + half + 1, xi - half:xi + half + 1]
    level = outline_level(patch, threshold_dn, settings)
    w = np.clip(patch / level, 0, 1).astype(np.float32)
    sc = cv2.filter2D(w, cv2.CV_32F, kern, borderType=cv2.BORDER_CONSTANT)
    yy, xx = np.mgrid[-half:half + 1, -half:half + 1]
    sc = np.where(np.hypot(xx + xi - x0, yy + yi - y0) <= reach, sc, -np.inf)
    j, i = np.unravel_index(int(np.argmax(sc)), sc.shape)
    if not (0 < i < sc.shape[1] - 1 and 0 < j < sc.shape[0] - 1):
        return None

    def vertex(a: float, b: float, c: float) -> float:
        den = a - 2 * b + c
        return float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if np.isfinite(den) and den < -1e-9 else 0.0

    dx = vertex(sc[j, i - 1], sc[j, i], sc[j, i + 1])
    dy = vertex(sc[j - 1, i], sc[j, i], sc[j + 1, i])
    return xi - half + i + dx, yi - half + j + dy, level


def outline_level(patch: np.ndarray, threshold_dn: float, settings: DetectionSettings) -> float:
    """Edge-map level (Delta-E units) at which a pixel counts as wholly not-cloth: ``outline_level_frac`` x the
    patch's ``outline_level_pct`` percentile (the ball's own typical contrast), at least the threshold."""
    typical = float(np.percentile(patch, settings.outline_level_pct))
    return max(float(threshold_dn), settings.outline_level_frac * typical)


def outline_score(em: np.ndarray, x: float, y: float, r: float, level: float,
                  settings: DetectionSettings) -> float:
    """:func:`outline_centre`'s score of the disc about (x, y) px (nearest pixel) with its ``level``;
    -inf near the border."""
    kern = outline_kernel(r, settings.outline_ring_out)
    h = kern.shape[0] // 2
    xi, yi = int(round(x)), int(round(y))
    if xi - h < 0 or yi - h < 0 or xi + h + 1 > em.shape[1] or yi + h + 1 > em.shape[0]:
        return -np.inf
    w = np.clip(em[yi - h:yi + h + 1, xi - h:xi + h + 1] / level, 0, 1)
    return float((w * kern).sum())


def refine_centre(d: np.ndarray, x0: float, y0: float, r_exp: float,
                  settings: DetectionSettings = DetectionSettings(), image: np.ndarray | None = None,
                  threshold_dn: float | None = None, others: np.ndarray | None = None) -> dict | None:
    """Sub-pixel silhouette centre near (x0, y0) in foreground-strength image ``d`` (Delta-E units).

    With ``image`` (the BGR frame) and ``threshold_dn``, rays that end on
    other foreground (a touching ball in a cluster, or the ball's own
    motion smear) use the image instead: the strongest colour change. A
    blocked ray aimed at another ball's disc (``others``: (n, 2) image px of
    the frame's other seeds and fits, centres 1.6-2.6 radii away) looks for
    it within DetectionSettings.touch_edge_lo/hi radii (the boundary with a
    neighbour lies one radius out); other blocked rays within 0.8-1.25.
    Returns dict(x, y, radius, sigma_px, support, fixed_radius) or None when
    the silhouette is not ball-like.
    """
    half = int(np.ceil(settings.ray_max * r_exp + 3 * settings.edge_smooth_px + 3))
    got = edge_patch(d, x0, y0, half, settings.edge_smooth_px)
    if got is None:
        return None
    dsm, xa, ya = got
    xb, yb = xa + dsm.shape[1], ya + dsm.shape[0]
    c = np.array([x0 - xa, y0 - ya], float)
    own = None
    if image is not None and threshold_dn is not None:
        ip = image[ya:yb, xa:xb].astype(np.float32)
    fit = None
    fixed = False
    for it in range(3):
        pts, stren, valid, end = _edge_points(dsm, c, r_exp, settings, edge_floor=threshold_dn)
        if image is not None and threshold_dn is not None:
            blocked = end > threshold_dn
            if blocked.any():
                if own is None:
                    own = cv2.GaussianBlur(ip, (0, 0), settings.edge_smooth_px)
                p2, s2, v2 = _colour_edge_points(own, c, r_exp, settings)
                nb = blocked & _toward_neighbour(c + [xa, ya], r_exp, others, settings.n_rays)
                if nb.any():
                    p3, s3, v3 = _colour_edge_points(own, c, r_exp, settings, settings.touch_edge_lo,
                                                     settings.touch_edge_hi)
                    p2[nb], s2[nb], v2[nb] = p3[nb], s3[nb], v3[nb]
                pts[blocked], stren[blocked], valid[blocked] = p2[blocked], s2[blocked], v2[blocked]
        if valid.sum() < 6:
            return None
        w0 = np.where(valid, stren / (stren[valid].max() + 1e-9), 0.0)
        w0 = np.sqrt(w0)  # weak edges still vote, less
        fit = fit_circle_robust(pts, w0, c, None, settings.tukey_c)
        fixed = False
        if not np.isfinite(fit["radius"]) or abs(fit["radius"] - r_exp) > settings.radius_tol * r_exp:
            fit = fit_circle_robust(pts, w0, c, r_exp, settings.tukey_c)
            fixed = True
        step = np.linalg.norm(fit["centre"] - c)
        c = fit["centre"]
        if step < 0.02:
            break
    support = float(np.mean(fit["weights"] > 0.05))
    if support < settings.min_support or np.linalg.norm(c - [x0 - xa, y0 - ya]) > 0.8 * r_exp:
        return None
    if settings.limb_linear and image is not None:
        # Second stage: the 50 % coverage limb in linear light (see _limb_points);
        # rays that end on another ball, or whose edge is smeared wider than
        # the reference windows allow (motion), keep their first edge point.
        lin = srgb_to_linear(image[ya:yb, xa:xb] if image.dtype == np.uint8
                             else np.asarray(image[ya:yb, xa:xb], np.float32))
        blocked = (end > threshold_dn) if threshold_dn is not None else np.zeros(len(pts), bool)
        for _ in range(settings.limb_iters):
            rad0 = float(fit["radius"])
            lp, lc, lok = _limb_points(lin, c, rad0, settings)
            use = lok & ~blocked
            if use.sum() < max(6, settings.min_support * len(use)):
                break
            # the other rays keep their first-stage edge points
            pts2 = np.where(use[:, None], lp, pts)
            cmax = float(np.max(lc[use]))
            w2 = np.where(use, np.sqrt(np.clip(lc / (cmax + 1e-12), 0, 1)), w0)
            fit2 = fit_circle_robust(pts2, w2, c, None if not fixed else r_exp, settings.tukey_c)
            if not fixed and (not np.isfinite(fit2["radius"])
                              or abs(fit2["radius"] - r_exp) > settings.radius_tol * r_exp):
                fit2 = fit_circle_robust(pts2, w2, c, r_exp, settings.tukey_c)
                fixed = True
            if not np.all(np.isfinite(fit2["centre"])) or np.linalg.norm(fit2["centre"] - c) > 0.25 * r_exp:
                break
            step = float(np.linalg.norm(fit2["centre"] - c)) + abs(fit2["radius"] - rad0)
            fit, c = fit2, fit2["centre"]
            support = float(np.mean(fit["weights"] > 0.05))
            if step < 0.01:
                break
    # Centre sigma: residual scale over the effective number of independent
    # rays (neighbouring rays closer than ~1.5 px share pixels).
    n_in = float(np.sum(fit["weights"] > 0.05))
    n_eff = max(3.0, min(n_in, 2 * np.pi * r_exp * support / 1.5))
    sig = fit["scale"] * np.sqrt(2.0 / n_eff)
    sig = float(np.hypot(max(sig, settings.sigma_floor_px), settings.model_sigma_px))
    return {"x": c[0] + xa, "y": c[1] + ya, "radius": float(fit["radius"]), "sigma_px": sig,
            "support": support, "fixed_radius": fixed}


# --------------------------------------------------------------------------- photometric model fit
_SRGB_LUT = np.where(np.arange(256) / 255.0 <= 0.04045, np.arange(256) / 255.0 / 12.92,
                     ((np.arange(256) / 255.0 + 0.055) / 1.055) ** 2.4).astype(np.float32)


def srgb_to_linear(v: np.ndarray) -> np.ndarray:
    """8-bit-scale sRGB values (0-255, any float/uint8 array) -> linear light 0-1 (IEC 61966-2-1)."""
    if v.dtype == np.uint8:
        return _SRGB_LUT[v]
    x = np.clip(np.asarray(v, np.float32) / 255.0, 0.0, 1.0)
    return np.where(x <= 0.04045, x / 12.92, ((x + 0.055) / 1.055) ** 2.4).astype(np.float32)


_GH_X, _GH_W = np.polynomial.hermite_e.hermegauss(24)
_GH_W = _GH_W / _GH_W.sum()


def _ball_geometry(gx, gy, th, r, lam):
    """Coverage a, normal z nz, shadow fall-off e and rim normal (ux, uy) at pixels (gx, gy).

    th = (cx, cy, A, Bxy, C): centre (px) and the edge-blur variance along
    the rim normal u, A ux^2 + 2 Bxy ux uy + C uy^2 (px^2).
    """
    dx, dy = gx - th[0], gy - th[1]
    rho = np.hypot(dx, dy) + 1e-9
    ux, uy = dx / rho, dy / rho
    var = np.maximum(th[2] * ux * ux + 2 * th[3] * ux * uy + th[4] * uy * uy, 0.04)
    sd = np.sqrt(var)
    a = 0.5 * (1.0 + _erf((r - rho) / (np.sqrt(2.0) * sd)))
    # nz (zero off the disc) blurred along the rim normal: Gauss-Hermite
    # quadrature of the 1-D convolution (the rim is straight on the blur scale)
    t = rho[:, None] + sd[:, None] * _GH_X[None, :]
    nz = (np.sqrt(np.maximum(1.0 - (t / r) ** 2, 0.0)) @ _GH_W) / np.maximum(a, 1e-6)
    # the normal's horizontal part rho / r (on the disc), blurred the same way
    q = (np.where(t < r, t / r, 0.0) @ _GH_W) / np.maximum(a, 1e-6)
    e = (1.0 - a) * np.exp(-np.maximum(rho - r, 0.0) / lam)
    return a, nz, e, ux, uy, q


def _ball_design(B, tents, geo, rho_term: bool = False):
    """Per-channel design (3, n, mK+3) of :func:`fit_ball_model`: sector shading (m = 2, or 3 with
    ``rho_term``) and shadow columns."""
    a, nz, e, ux, uy, q = geo
    K = tents.shape[1]
    m = 3 if rho_term else 2
    D = np.empty((3, len(a), m * K + 3))
    D[:, :, :K] = (tents * a[:, None])[None]
    D[:, :, K:2 * K] = (tents * (a * nz)[:, None])[None]
    if rho_term:
        D[:, :, 2 * K:3 * K] = (tents * (a * q)[:, None])[None]
    sh = np.column_stack([e, e * ux, e * uy])
    for c in range(3):
        D[c, :, m * K:] = -sh * B[:, c:c + 1]
    return D


def _solve_linear(D: np.ndarray, rhs: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted least squares per channel via small normal equations (ridge 1e-9 of the trace)."""
    coef = np.empty((3, D.shape[2]))
    for c in range(3):
        Dw = D[c] * w[:, None]
        G = Dw.T @ D[c]
        G[np.diag_indices_from(G)] += 1e-9 * np.trace(G) + 1e-12
        coef[c] = np.linalg.solve(G, Dw.T @ rhs[c])
    return coef


def fit_ball_model(image: np.ndarray, background: np.ndarray, x0: float, y0: float, r: float,
                   settings: DetectionSettings = DetectionSettings(), free_radius: bool = False) -> dict | None:
    """Centre (px) of a ball of known image radius ``r`` by fitting its image round the rim.

    Model, in linear light (the sRGB encoding is undone first, so that the
    pixels at the rim mix ball and cloth light in proportion to coverage):
    ``I = (1 - a) B (1 - S) + a F`` with B the empty cloth; a the disc of
    radius r with a blurred edge, ``a = Phi((r - rho) / s(u))`` (rho the
    distance to the centre, u the rim normal, s^2 = u' M u a quadratic form:
    lens blur plus motion blur along one direction, so a swept ball keeps
    its mid-exposure centre, the coverage being point-symmetric about it);
    F the ball's colour, a + b nz per channel in each of ``model_sectors``
    angular sectors (nz the surface normal's z: the limb darkening of any
    Lambertian shading, so a dark limb is modelled, not lost); S the ball's
    shadow on the cloth, (s0 + s1 ux + s2 uy) exp(-(rho - r)/lambda). The
    centre comes from where the coverage changes, not from where the colour
    difference is large. Centre and M by Gauss-Newton with the linear
    coefficients re-solved each step (variable projection, Golub & Pereyra,
    SIAM J. Numer. Anal. 10:413, 1973), Tukey weights on the per-pixel
    colour residual (highlight, numbers, neighbours).

    Used by :func:`detect_frame` only with ``DetectionSettings.model_fit``
    (off: experimental, see the setting for what it was measured to do).

    ``free_radius``: the disc's radius is fitted too (starting from ``r``;
    used to measure the ball's size, :mod:`tracking.ball_size`): the rim is
    placed where the coverage is one half after the blur and the limb
    darkening are modelled, not where the colour difference drops fastest.

    image: BGR uint8 frame; background: float32 BGR DN (same size). Returns
    dict(x, y, radius (px; ``r`` unless free_radius), blur_px (geometric-mean
    edge sigma), motion_px (extra sigma along the most blurred direction),
    scale, cov) or None when it fails.
    """
    h, w = image.shape[:2]
    out = settings.model_out_px
    half = int(np.ceil(r + out + 1))
    xi, yi = int(round(x0)), int(round(y0))
    xa, ya, xb, yb = xi - half, yi - half, xi + half + 1, yi + half + 1
    if xa < 0 or ya < 0 or xb > w or yb > h:
        return None
    if settings.model_linear_light:
        I = srgb_to_linear(image[ya:yb, xa:xb]).reshape(-1, 3)
        B = srgb_to_linear(background[ya:yb, xa:xb]).reshape(-1, 3)
    else:
        I = image[ya:yb, xa:xb].reshape(-1, 3) / np.float32(255.0)
        B = background[ya:yb, xa:xb].reshape(-1, 3) / np.float32(255.0)
    gy, gx = np.mgrid[ya:yb, xa:xb]
    gx = gx.ravel().astype(np.float64)
    gy = gy.ravel().astype(np.float64)
    rho0 = np.hypot(gx - x0, gy - y0)
    sel = (rho0 >= r - max(settings.model_inner_px, settings.model_inner * r)) & (rho0 <= r + out)
    gx, gy, I, B = gx[sel], gy[sel], I[sel].astype(np.float64), B[sel].astype(np.float64)
    lam = settings.model_shadow_decay * r
    # angular tent functions about the first centre (fixed during the fit)
    K = settings.model_sectors
    ang = np.arctan2(gy - y0, gx - x0) * (K / (2 * np.pi)) % K
    k0 = np.floor(ang).astype(int)
    fr = ang - k0
    n = len(gx)
    tents = np.zeros((n, K))
    tents[np.arange(n), k0 % K] = 1.0 - fr
    tents[np.arange(n), (k0 + 1) % K] += fr
    T = (I - B).T  # (3, n)
    rhs0 = T.copy()
    s0 = settings.model_blur0_px ** 2
    th = np.array([float(x0), float(y0), s0, 0.0, s0] + ([float(r)] if free_radius else []))
    npar = len(th)
    vmax = (settings.model_max_motion * r) ** 2
    wts = np.ones(n)
    scale = np.inf
    H = np.eye(npar)
    hstep = np.array([0.02, 0.02, 0.05, 0.05, 0.05, 0.02][:npar])

    def rad(t):
        return t[5] if free_radius else r

    for it in range(settings.model_iters):
        geo = _ball_geometry(gx, gy, th, rad(th), lam)
        a = geo[0]
        D = _ball_design(B, tents, geo, settings.model_rho_term)
        coef = _solve_linear(D, rhs0 + a[None, :] * B.T, wts)
        pred = np.einsum("cnk,ck->cn", D, coef) - a[None, :] * B.T  # model of I - B
        res = rhs0 - pred
        e = np.sqrt((res * res).sum(axis=0))
        scale = max(1.4826 * float(np.median(e)), 1e-5)
        # Plain least squares until the rim is roughly in place (a misplaced
        # rim has large residuals exactly where the centre information is),
        # then Tukey weights against highlight, numbers and neighbours.
        if it >= settings.model_ls_iters:
            z = e / (settings.tukey_c * scale)
            wts = np.where(z < 1, (1 - z * z) ** 2, 0.0)
        # Jacobian of the variable-projection residual (linear coefficients
        # re-solved at each perturbed point; Golub & Pereyra 1973)
        J = np.empty((3 * n, npar))
        for k in range(npar):
            tk = th.copy()
            tk[k] += hstep[k]
            gk = _ball_geometry(gx, gy, tk, rad(tk), lam)
            Dk = _ball_design(B, tents, gk, settings.model_rho_term)
            rk = rhs0 + gk[0][None, :] * B.T
            ck = _solve_linear(Dk, rk, wts)
            pk = np.einsum("cnk,ck->cn", Dk, ck) - gk[0][None, :] * B.T
            J[:, k] = ((pk - pred) / hstep[k]).ravel()
        W = np.tile(wts, 3)
        H = (J * W[:, None]).T @ J
        g = (J * W[:, None]).T @ res.ravel()
        try:
            if not settings.model_motion:  # isotropic blur: dA = dC, dBxy = 0
                Tm = np.zeros((npar, npar - 2))
                Tm[0, 0] = Tm[1, 1] = Tm[2, 2] = Tm[4, 2] = 1.0
                if free_radius:
                    Tm[5, 3] = 1.0
                Hs, gs = Tm.T @ H @ Tm, Tm.T @ g
                step = Tm @ np.linalg.solve(Hs + (1e-6 * np.trace(Hs) + 1e-12) * np.eye(npar - 2), gs)
            else:
                step = np.linalg.solve(H + (1e-6 * np.trace(H) + 1e-12) * np.eye(npar), g)
        except np.linalg.LinAlgError:
            return None
        step[:2] = np.clip(step[:2], -1.0, 1.0)
        step[2:5] = np.clip(step[2:5], -0.5 * vmax, 0.5 * vmax)
        if free_radius:
            step[5] = float(np.clip(step[5], -0.5, 0.5))
        th = th + step
        th[2] = float(np.clip(th[2], 0.04, vmax))
        th[4] = float(np.clip(th[4], 0.04, vmax))
        lim = 0.99 * np.sqrt(th[2] * th[4])
        th[3] = float(np.clip(th[3], -lim, lim))
        if np.hypot(step[0], step[1]) < settings.model_tol_px:
            break
    try:
        cov = np.linalg.inv(H)[:2, :2] * scale * scale
    except np.linalg.LinAlgError:
        cov = np.full((2, 2), np.inf)
    cx, cy = float(th[0]), float(th[1])
    if not np.all(np.isfinite([cx, cy])) or np.hypot(cx - x0, cy - y0) > settings.model_max_shift * r:
        return None
    if free_radius and not (np.isfinite(th[5]) and abs(th[5] - r) <= settings.radius_tol * r):
        return None
    ev = np.linalg.eigvalsh(np.array([[th[2], th[3]], [th[3], th[4]]]))
    return {"x": cx, "y": cy, "radius": float(rad(th)), "blur_px": float(np.sqrt(np.sqrt(max(ev[0], 1e-6) * ev[1]))),
            "motion_px": float(np.sqrt(max(ev[1] - ev[0], 0.0))), "scale": scale, "cov": cov}


# --------------------------------------------------------------------------- colour
def colour_summary(image: np.ndarray, x: float, y: float, r: float,
                   settings: DetectionSettings = DetectionSettings()) -> dict:
    """Colour of the ball disc (inner 75% radius) in a BGR uint8 image.

    r, g, b: mean (0-255); hue_deg, sat, val: circular-mean hue (0-360) and
    medians (0-1) of the coloured pixels (neither white nor dark);
    white_frac, dark_frac: fractions of white / dark pixels (stripes, cue, black).
    """
    rr = 0.75 * r
    n = int(np.ceil(rr))
    h, w = image.shape[:2]
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
    patch = image[ya:yb, xa:xb]
    if patch.size == 0:
        return {"r": np.nan, "g": np.nan, "b": np.nan, "hue_deg": np.nan, "sat": np.nan, "val": np.nan,
                "white_frac": np.nan, "dark_frac": np.nan}
    yy, xx = np.mgrid[ya:yb, xa:xb]
    inside = (xx - x) ** 2 + (yy - y) ** 2 <= rr * rr
    px = patch[inside].astype(np.float32)
    hsv = cv2.cvtColor(patch, cv2.COLOR_BGR2HSV_FULL)[inside].astype(np.float32)
    hue = hsv[:, 0] * (360.0 / 256.0)
    sat = hsv[:, 1] / 255.0
    val = hsv[:, 2] / 255.0
    white = (sat < settings.white_saturation) & (val > settings.white_value)
    dark = val < 0.22
    col = ~white & ~dark
    if col.sum() >= 3:
        ang = np.radians(hue[col])
        wgt = sat[col]
        hmean = float(np.degrees(np.arctan2(np.sum(wgt * np.sin(ang)), np.sum(wgt * np.cos(ang)))) % 360)
        smed, vmed = float(np.median(sat[col])), float(np.median(val[col]))
    else:
        hmean, smed, vmed = np.nan, float(np.median(sat)), float(np.median(val))
    mean = px.mean(axis=0)
    return {"r": float(mean[2]), "g": float(mean[1]), "b": float(mean[0]), "hue_deg": hmean, "sat": smed,
            "val": vmed, "white_frac": float(white.mean()), "dark_frac": float(dark.mean())}


# --------------------------------------------------------------------------- one frame
def foreground_strength(image: np.ndarray, background: Background) -> np.ndarray:
    """Noise-weighted Delta-E*ab of image vs background inside the surface ROI, 0 elsewhere (float32)."""
    x0, y0, x1, y1 = background.roi
    d = np.zeros(image.shape[:2], np.float32)
    d[y0:y1, x0:x1] = delta_e76(to_lab(image[y0:y1, x0:x1]), background.lab_image()[y0:y1, x0:x1]) \
        * background.weight_map()[y0:y1, x0:x1]
    return d


def _half_res_background(bg: Background) -> tuple[np.ndarray, np.ndarray]:
    """Half-resolution CIELAB background and weight over the ROI (cached on the Background)."""
    cache = getattr(bg, "_half", None)
    if cache is None:
        x0, y0, x1, y1 = bg.roi
        size = ((x1 - x0) // 2, (y1 - y0) // 2)
        sb = to_lab(cv2.resize(bg.image[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA))
        sm = cv2.resize(bg.mask[y0:y1, x0:x1].astype(np.float32), size, interpolation=cv2.INTER_AREA)
        sw = cv2.resize(bg.weight_map()[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA)
        cache = (sb.astype(np.float32), ((sm > 0.5) * sw).astype(np.float32))
        bg._half = cache
    return cache


def detect_frame(image: np.ndarray, calibration: Calibration, settings: DetectionSettings = DetectionSettings(),
                 background: Background | None = None) -> pd.DataFrame:
    """Balls in one BGR uint8 frame -> DataFrame with :data:`DETECTION_COLUMNS`.

    Without a ``background`` the frame's own large-kernel median stands in for
    the empty cloth (fine for a single still; a clip should pass the
    temporal background from :func:`build_background`).
    """
    if image is None or image.ndim != 3 or image.shape[2] != 3:
        raise ValueError("detect_frame needs an HxWx3 BGR image")
    if background is None:
        background = build_background([image], calibration, settings)
    cal = calibration
    r0 = background.radius_px
    x0, y0, x1, y1 = background.roi
    thr = background.threshold_dn
    bg_lab, bg_w = background.lab_image(), background.weight_map()
    half_res = r0 >= 6.0
    # Edge-location strength: Delta-E, or the shade-free difference (see
    # DetectionSettings.edge_shade_free), or the lightness difference for a
    # dark-rimmed ball (DetectionSettings.dark_rim_luminance), filled alongside d.
    de = None
    dl = None
    if half_res:
        # Seeds from a half-resolution foreground map (4x fewer pixels); the
        # full-resolution strength is computed only in patches round the seeds.
        sb, sm_mask = _half_res_background(background)
        small_img = cv2.resize(image[y0:y1, x0:x1], (sb.shape[1], sb.shape[0]), interpolation=cv2.INTER_AREA)
        small = delta_e76(to_lab(small_img), sb) * sm_mask
        d = np.zeros(image.shape[:2], np.float32)
        filled = np.zeros(image.shape[:2], bool)
    else:
        d = foreground_strength(image, background)
        small = d[y0:y1, x0:x1]
        filled = np.ones(image.shape[:2], bool)
        if settings.edge_shade_free:
            lab_roi = to_lab(image[y0:y1, x0:x1])
            de = np.zeros(image.shape[:2], np.float32)
            de[y0:y1, x0:x1] = shade_free_de(lab_roi, bg_lab[y0:y1, x0:x1], settings.shade_min_light) \
                * bg_w[y0:y1, x0:x1]
            if settings.dark_rim_luminance:
                dl = np.zeros(image.shape[:2], np.float32)
                dl[y0:y1, x0:x1] = lightness_difference(lab_roi, bg_lab[y0:y1, x0:x1]) * bg_w[y0:y1, x0:x1]
    if half_res and settings.edge_shade_free:
        de = np.zeros(image.shape[:2], np.float32)
        if settings.dark_rim_luminance:
            dl = np.zeros(image.shape[:2], np.float32)
    pad = int(np.ceil(settings.ray_max * float(np.max(background.radius_grid)) + 3 * settings.edge_smooth_px)) + 8

    def fill(xa_: int, ya_: int, xb_: int, yb_: int) -> None:
        """Full-resolution strength over an image box (clipped to the ROI)."""
        xa_, ya_, xb_, yb_ = max(xa_, x0), max(ya_, y0), min(xb_, x1), min(yb_, y1)
        if xb_ <= xa_ or yb_ <= ya_ or filled[ya_:yb_, xa_:xb_].all():
            return
        lab_p = to_lab(image[ya_:yb_, xa_:xb_])
        d[ya_:yb_, xa_:xb_] = delta_e76(lab_p, bg_lab[ya_:yb_, xa_:xb_]) * bg_w[ya_:yb_, xa_:xb_]
        if de is not None:
            de[ya_:yb_, xa_:xb_] = shade_free_de(lab_p, bg_lab[ya_:yb_, xa_:xb_], settings.shade_min_light) * bg_w[ya_:yb_, xa_:xb_]
        if dl is not None:
            dl[ya_:yb_, xa_:xb_] = lightness_difference(lab_p, bg_lab[ya_:yb_, xa_:xb_]) * bg_w[ya_:yb_, xa_:xb_]
        filled[ya_:yb_, xa_:xb_] = True
    fg = np.clip(small / thr - 0.5, 0, 1).astype(np.float32)
    if half_res:
        cands = _find_candidates(fg, r0 / 2.0, settings)
        cands[:, :2] = cands[:, :2] * 2.0 + 0.5
    else:
        cands = _find_candidates(fg, r0, settings)
    scale = 2 if half_res else 1
    # Blobs bigger than ~1.7 balls: touching balls; find their centres by Hough voting.
    # (components found at half resolution: 4x cheaper, boxes scaled back)
    n_cc, lab_s, stats, _ = cv2.connectedComponentsWithStats((small > thr).astype(np.uint8), connectivity=8)
    ball_area = np.pi * r0 * r0
    extra = []
    blobs: list[tuple[int, int, np.ndarray]] = []  # (x, y) image offset and full-res mask of each cluster
    lab = None
    for i in range(1, n_cc):
        if scale * scale * stats[i, cv2.CC_STAT_AREA] < 1.7 * ball_area:
            continue
        if lab is None:
            lab = cv2.resize(lab_s.astype(np.int32).astype(np.float32), (x1 - x0, y1 - y0),
                             interpolation=cv2.INTER_NEAREST).astype(np.int32)
        bx, by, bw, bh = scale * stats[i, :4]
        m = int(np.ceil(r0)) + 2
        xa, ya = max(bx - m, 0), max(by - m, 0)
        xb, yb = min(bx + bw + m, x1 - x0), min(by + bh + m, y1 - y0)
        fill(x0 + xa, y0 + ya, x0 + xb, y0 + yb)
        lab[ya:yb, xa:xb][d[y0 + ya:y0 + yb, x0 + xa:x0 + xb] <= thr] = 0
        sub_mask = lab[ya:yb, xa:xb] == i
        blobs.append((x0 + xa, y0 + ya, sub_mask.copy()))
        hc = cluster_candidates(image[y0 + ya:y0 + yb, x0 + xa:x0 + xb], sub_mask, r0, settings)
        if len(hc):
            hc[:, 0] += xa
            hc[:, 1] += ya
            # Hough seeds first; a disc-score seed in the blob survives only away
            # from all of them (a low-contrast ball next to a bright one casts
            # few votes; a plateau seed between touching balls is dropped)
            inside = lab[np.clip(np.round(cands[:, 1]).astype(int), 0, lab.shape[0] - 1),
                         np.clip(np.round(cands[:, 0]).astype(int), 0, lab.shape[1] - 1)] == i
            near = np.array([np.any(np.hypot(hc[:, 0] - x, hc[:, 1] - y) < settings.nms_radius * r0)
                             for x, y in cands[:, :2]]) if len(cands) else np.zeros(0, bool)
            cands = cands[~(inside & near)]
            extra.append(hc)
    if extra:
        cands = np.vstack([cands] + extra)
    found = []

    def streak_centre(gx: float, gy: float, r_exp: float, dl: np.ndarray | None) -> dict | None:
        """Mid-exposure centre of a motion streak round seed (gx, gy) px, or None (not a streak)."""
        hw = int(np.ceil(r_exp * (1.0 + 0.5 * settings.streak_max_len))) + 3
        fill(int(gx) - hw, int(gy) - hw, int(gx) + hw + 2, int(gy) + hw + 2)
        ax = streak_axis(d, gx, gy, r_exp, thr, settings, fill)
        if ax is None or not ax["ok"] or ax["length"] < settings.streak_min_len * r_exp:
            return None
        hw = int(np.ceil((r_exp + 0.5 * ax["length"]) * settings.streak_ray_max + 3 * settings.edge_smooth_px)) + 5
        fill(int(ax["x"]) - hw, int(ax["y"]) - hw, int(ax["x"]) + hw + 2, int(ax["y"]) + hw + 2)
        # the streak's rim on the same map as the circle fit's (edge_map; see
        # DetectionSettings.streak_shade_free)
        em = edge_map(d, de, gx, gy, r_exp, settings, dl) if settings.streak_shade_free else d
        return refine_streak(em, ax, r_exp, settings, thr)

    def accept(gx: float, gy: float, min_contrast: float = settings.min_inner_contrast) -> bool:
        """Refine a seed at image (gx, gy) px; append it to ``found`` when ball-like.

        min_contrast: least mean strength inside 0.6 radius, x threshold.
        """
        fill(int(gx) - pad, int(gy) - pad, int(gx) + pad + 2, int(gy) + pad + 2)
        if _disc_mean(d, gx, gy, 0.6 * r0) < settings.min_inner_contrast * thr:
            return False  # not a ball-sized patch that differs from the cloth
        r_exp, _, _ = background.lookup(gx, gy)
        # a pocket is a dark hole: its rim would read as a black ball's (dark_rim); the lightness map
        # only where a ball can be (centre half a radius or more inside the nose lines, not in a corner mouth)
        dl_here = dl if dl is not None and _ball_room(cal.px_to_table(np.array([[gx, gy]]))[0], cal,
                                                      settings.corner_mouth_min_mm) else None
        ref = streak_centre(gx, gy, r_exp, dl_here) if settings.streak_fit else None
        if ref is None:
            others = np.vstack([seeds_px] + [[[f[0]["x"], f[0]["y"]]] for f in found])
            em = edge_map(d, de, gx, gy, r0, settings, dl_here)
            ref = refine_centre(em, gx, gy, r_exp, settings, image, thr, others)
            if settings.outline_reseed and de is not None and em is not de:
                p2 = pad + int(np.ceil(settings.outline_search * r_exp)) + 2  # the refit's rays, from up to r away
                fill(int(gx) - p2, int(gy) - p2, int(gx) + p2 + 2, int(gy) + p2 + 2)
                ref = _outline_reseed(ref, d, de, em, gx, gy, r_exp, settings, image, thr, others)
        if ref is None:
            return False
        r_exp, ox, oy = background.lookup(ref["x"], ref["y"])
        if _disc_mean(d, ref["x"], ref["y"], 0.6 * r_exp) < min_contrast * thr:
            return False
        if settings.model_fit and r_exp >= settings.model_min_radius_px:
            mf = fit_ball_model(image, background.image, ref["x"], ref["y"], r_exp, settings)
            if mf is not None:
                ref = {**ref, "x": mf["x"], "y": mf["y"]}
                r_exp, ox, oy = background.lookup(ref["x"], ref["y"])
        found.append((ref, r_exp, ox, oy))
        return True

    # every seed: where another ball may touch the one being fitted (refine_centre's others)
    seeds_px = cands[:, :2] + [x0, y0] if len(cands) else np.zeros((0, 2))
    for cx, cy, sc in cands:
        accept(cx + x0, cy + y0)
    if settings.explain_clusters:
        for bx0, by0, bmask in blobs:
            _explain_cluster(bmask, bx0, by0, found, accept, background, settings)
    found = _drop_streak_ends(found, settings)
    rows = []
    if found:
        pc = np.array([[f[0]["x"] - f[2], f[0]["y"] - f[3]] for f in found])
        xy_all = cal.px_to_table(pc)
        L, W = cal.table.length_mm, cal.table.width_mm
        m = cal.ball_radius_mm  # centres up to one radius past the cushion nose
        for (ref, r_exp, ox, oy), p, xy in zip(found, pc, xy_all):
            if not (-m <= xy[0] <= L + m and -m <= xy[1] <= W + m):
                continue
            mmpp = cal.ball_radius_mm / r_exp  # local scale in the ball-centre plane
            col = colour_summary(image, ref["x"], ref["y"], r_exp, settings)
            contrast = _disc_mean(d, ref["x"], ref["y"], 0.6 * r_exp)
            conf = float(np.clip(ref["support"], 0, 1) * np.clip(contrast / (3 * thr), 0, 1)
                         * (0.7 if ref["fixed_radius"] else 1.0))
            rows.append({
                "x_px": p[0], "y_px": p[1], "x_mm": xy[0], "y_mm": xy[1],
                "sx_mm": ref["sigma_px"] * mmpp, "sy_mm": ref["sigma_px"] * mmpp, "sigma_px": ref["sigma_px"],
                "confidence": conf, "radius_px": ref["radius"], "radius_expected_px": r_exp,
                "support": ref["support"], "contrast_dn": contrast, **col,
                "streak_px": ref.get("smear_px", 0.0), "streak_deg": float(np.degrees(ref.get("smear_angle", np.nan))),
            })
    rows = _drop_duplicates(rows, r0)
    return pd.DataFrame(rows, columns=DETECTION_COLUMNS)


def _outline_reseed(ref: dict | None, d: np.ndarray, de: np.ndarray | None, em: np.ndarray, gx: float, gy: float,
                    r_exp: float, settings: DetectionSettings, image: np.ndarray, thr: float,
                    others: np.ndarray) -> dict | None:
    """The circle fit ``ref`` from the seed (gx, gy) px, or the one redone from the outline's best disc when that
    covers the ball better.

    A seed placed on a ball and its cast shadow together (the shadow of a
    ball of the cloth's colour is as strong in Delta-E as the ball) can lie
    most of a radius off; there the shadow also decides the edge map
    (:func:`edge_map` reads the shade-free map's contrast at the seed: low,
    so Delta-E ``d``, or the lightness map when the annulus about the seed
    takes the shadow for a dark rim: :func:`dark_rim`) and the ray fit
    settles on the shadow's side. When the edge map ``em`` was not ``de``
    but a shade-free map ``de`` exists,
    :func:`outline_centre` on ``de`` finds where a disc of the known radius
    best covers the not-cloth pixels. Only where the ball keeps all its
    contrast on ``de`` (mean inside 0.6 r at least ``outline_reseed_min_ratio``
    of ``d``'s: no part of it reads as shadow, unlike a black ball or a dark
    band, whose fits stay on ``d``; nor where the rim there is dark,
    :func:`dark_rim`) is the fit redone from there on ``de``;
    of the two, the one whose disc scores higher on ``de``
    (:func:`outline_score`) is kept.
    """
    if de is None or em is de:
        return ref
    oc = outline_centre(de, gx, gy, r_exp, thr, settings)
    if oc is None:
        return ref
    if em is not d and dark_rim(d, de, oc[0], oc[1], r_exp, settings):
        return ref  # a dark-rimmed ball (the lightness map) there too: its fit stays
    if _disc_mean(de, oc[0], oc[1], 0.6 * r_exp) < settings.outline_reseed_min_ratio * _disc_mean(d, oc[0], oc[1],
                                                                                                    0.6 * r_exp):
        return ref
    alt = refine_centre(de, oc[0], oc[1], r_exp, settings, image, thr, others)
    if alt is None or ref is None:
        return alt if ref is None else ref
    s_ref = outline_score(de, ref["x"], ref["y"], r_exp, oc[2], settings)
    s_alt = outline_score(de, alt["x"], alt["y"], r_exp, oc[2], settings)
    return alt if s_alt > s_ref else ref


def _drop_streak_ends(found: list, settings: DetectionSettings) -> list:
    """Drop circle-fit detections that sit on the smear path of a streak-fit one.

    A seed near one end of a long streak that did not pass as a streak
    itself is fitted to that end; its centre lies within
    ``streak_end_sep`` radii of the streak's path (the mid-exposure centre
    +- half the smear length). A touching ball's centre is two radii from
    the moving ball's, at least 2 - L/(2r) radii from the path. The length
    from the blob's moments runs short, so a detection within
    ``streak_end_sep`` radii of the smear axis and inside the streak's fitted
    outline (its reach along the axis) is dropped too; for smears over ~2
    radii that can take a touching ball straight ahead at the contact frame.
    """
    streaks = [f for f in found if "smear_px" in f[0]]
    if not streaks:
        return found
    keep = []
    for f in found:
        ref, r_exp = f[0], f[1]
        on_path = False
        if "smear_px" not in ref:
            for g in streaks:
                u = np.array([np.cos(g[0]["smear_angle"]), np.sin(g[0]["smear_angle"])])
                v = np.array([ref["x"] - g[0]["x"], ref["y"] - g[0]["y"]])
                t = float(np.clip(v @ u, -0.5 * g[0]["smear_px"], 0.5 * g[0]["smear_px"]))
                on_path |= bool(np.linalg.norm(v - t * u) < settings.streak_end_sep * g[1])
                # or inside the streak's own fitted outline, near its axis
                on_path |= bool(abs(v @ u) < g[0].get("reach_px", 0.0)
                                and abs(v @ [-u[1], u[0]]) < settings.streak_end_sep * g[1])
        if not on_path:
            keep.append(f)
    return keep


def _explain_cluster(blob: np.ndarray, bx0: int, by0: int, found: list, accept, background: Background,
                     settings: DetectionSettings) -> None:
    """Seed balls in the part of a cluster blob that no accepted ball explains.

    Every foreground pixel of a blob of touching balls belongs to some ball
    of known image radius. Discs of the expected radius round the accepted
    centres (``found``, image px) are removed from ``blob`` (bool mask whose
    top-left pixel is image (bx0, by0)); while the rest holds a part at
    least ``explain_min_area`` balls large with an inscribed circle of at
    least ``explain_min_inradius`` radii, the maximum of its Euclidean
    distance transform (Borgefors 1986, as in ``cv2.distanceTransform``) is
    refined like any seed (``accept``) and kept only when ball-like and
    at least ``explain_min_sep`` radii from every accepted centre (rigid
    balls: centres never closer than one diameter). A seed that fails is
    blanked with a disc of its own so the search moves on.
    """
    free = blob.astype(np.uint8)
    h, w = free.shape
    r0 = background.radius_px
    pad = settings.explain_disc_pad_px

    def blank(x: float, y: float, r: float) -> None:
        cv2.circle(free, (int(round((x - bx0) * 16)), int(round((y - by0) * 16))), int(round((r + pad) * 16)), 0, -1,
                   lineType=cv2.LINE_8, shift=4)

    n_in = 0
    for ref, r_exp, _, _ in found:
        if -2 * r_exp <= ref["x"] - bx0 <= w + 2 * r_exp and -2 * r_exp <= ref["y"] - by0 <= h + 2 * r_exp:
            blank(ref["x"], ref["y"], r_exp)
            xi, yi = int(round(ref["x"] - bx0)), int(round(ref["y"] - by0))
            n_in += bool(0 <= xi < w and 0 <= yi < h and blob[yi, xi])
    if n_in < 2:
        # one ball and a remainder: its own motion smear or shadow rather than
        # a missed neighbour (two touching balls already give a disc-score peak each)
        return
    for _ in range(settings.explain_max_seeds):
        n_cc, lab, stats, _c = cv2.connectedComponentsWithStats(free, connectivity=8)
        big = [j for j in range(1, n_cc) if stats[j, cv2.CC_STAT_AREA] >= settings.explain_min_area * np.pi * r0 * r0]
        if not big:
            return
        part = np.isin(lab, big).astype(np.uint8)
        dt = cv2.distanceTransform(part, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
        yy, xx = np.unravel_index(int(np.argmax(dt)), dt.shape)
        gx, gy = float(xx + bx0), float(yy + by0)
        r_exp, _, _ = background.lookup(gx, gy)
        if dt[yy, xx] < settings.explain_min_inradius * r_exp:
            return
        n_before = len(found)
        if accept(gx, gy, settings.explain_min_contrast):
            ref, r_new = found[-1][0], found[-1][1]
            sep = min((np.hypot(ref["x"] - f[0]["x"], ref["y"] - f[0]["y"]) / f[1] for f in found[:n_before]),
                      default=np.inf)
            if sep >= settings.explain_min_sep and _mask_fill(blob, ref["x"] - bx0, ref["y"] - by0,
                                                              settings.explain_fill_radius * r_new) \
                    >= settings.explain_min_fill:
                blank(ref["x"], ref["y"], found[-1][1])
                continue
            found.pop()  # refined onto a ball we already have
        blank(gx, gy, r_exp)


def _ball_room(xy_mm: np.ndarray, cal: Calibration, mouth_mm: float) -> bool:
    """Away from the pockets' dark holes: table point xy_mm at least half a radius inside the nose lines (a
    ball touches a cushion at one radius; the seed is a few px off), not inside a corner pocket's mouth, and
    (tables with pockets) over two radii from a side pocket's mouth (the middle of a long side)."""
    R = cal.ball_radius_mm
    L, W = cal.table.length_mm, cal.table.width_mm
    x, y = float(xy_mm[0]), float(xy_mm[1])
    if not (0.5 * R <= x <= L - 0.5 * R and 0.5 * R <= y <= W - 0.5 * R):
        return False
    if getattr(cal.table, "pockets", False) and abs(x - 0.5 * L) < 2 * R and min(y, W - y) < 2 * R:
        return False
    return not bool(inside_corner_mouth(np.array([[x, y]]), cal.table, mouth_mm)[0])


def _mask_fill(mask: np.ndarray, x: float, y: float, r: float) -> float:
    """Share of the disc of radius r (px) about (x, y) that is inside the image and True in ``mask``."""
    n = int(np.ceil(r))
    yy, xx = np.mgrid[-n:n + 1, -n:n + 1]
    inside = xx * xx + yy * yy <= r * r
    px, py = np.round(x).astype(int) + xx[inside], np.round(y).astype(int) + yy[inside]
    ok = (px >= 0) & (px < mask.shape[1]) & (py >= 0) & (py < mask.shape[0])
    return float(mask[py[ok], px[ok]].sum()) / max(int(inside.sum()), 1)


def _ring_values(d: np.ndarray, x: float, y: float, r_in: float, r_out: float) -> np.ndarray:
    """Values of image ``d`` over the annulus r_in..r_out (px) about (x, y), pixels inside the image only."""
    n = int(np.ceil(r_out))
    h, w = d.shape
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
    if xb <= xa or yb <= ya:
        return np.zeros(0, d.dtype)
    yy, xx = np.mgrid[ya:yb, xa:xb]
    rr = (xx - x) ** 2 + (yy - y) ** 2
    return d[ya:yb, xa:xb][(rr >= r_in * r_in) & (rr <= r_out * r_out)]


def _disc_mean(d: np.ndarray, x: float, y: float, r: float) -> float:
    """Mean of image ``d`` over the disc of radius r (px) centred at (x, y)."""
    n = int(np.ceil(r))
    h, w = d.shape
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
    if xb <= xa or yb <= ya:
        return 0.0
    yy, xx = np.mgrid[ya:yb, xa:xb]
    inside = (xx - x) ** 2 + (yy - y) ** 2 <= r * r
    return float(d[ya:yb, xa:xb][inside].mean()) if inside.any() else 0.0


def _drop_duplicates(rows: list[dict], r_px: float) -> list[dict]:
    """Two candidates refined onto the same ball: keep the more confident."""
    rows = sorted(rows, key=lambda r: -r["confidence"])
    keep: list[dict] = []
    for r in rows:
        if all(np.hypot(r["x_px"] - k["x_px"], r["y_px"] - k["y_px"]) > 1.2 * r_px for k in keep):
            keep.append(r)
    return keep
