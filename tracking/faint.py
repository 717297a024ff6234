"""Faint balls: balls whose colour is close to the cloth's (green on green, maroon on red).

The per-pixel foreground test of :mod:`tracking.detect` asks each pixel to
differ from the cloth by a threshold of ``fg_sigma`` noise sigmas. A ball
covers N ~ pi r^2 pixels, so the mean of the *signed* CIELAB difference to
the background over a disc of the ball's radius (a matched filter for a
flat disc; North 1943, Turin, IRE Trans. Inf. Theory 6:311, 1960) has a noise
of about sigma / sqrt(N / kappa), kappa the area over which the noise is
correlated (compression blocks, chroma subsampling, demosaicing). A ball
with a per-pixel contrast well below the threshold then stands out.

Method (half resolution for the search, lengths px unless named _mm):

1. ``Delta = Lab(frame) - Lab(background)`` (3 channels, signed).
2. Centre-surround vector ``v(x)`` = mean of Delta over the disc of radius
   r about x minus its mean over the ring 1.3 r..2.2 r (normalised
   convolution: pixels of balls already detected, and off the playing
   surface, carry weight 0). The ring removes slow lighting changes (lamp
   flicker, vignetting the background missed) and the offset of a
   compressed frame.
3. Its noise: a robust 3x3 covariance of ``v`` over the frame's own
   positions (reweighted: points beyond the chi-square 97.5% quantile are
   dropped and the covariance corrected for the cut; Croux & Haesbroeck,
   J. Multivariate Anal. 71:161, 1999). Measured per frame, so compression
   correlation, residual cloth texture and background errors are in it,
   none assumed independent.
4. Seeds: local maxima of ``q = v' C^-1 v`` (chi-square with 3 degrees of
   freedom for Gaussian noise) above a level with false-alarm probability
   ``faint_false_alarm`` per frame over the frame's independent disc
   positions (area / (pi r^2)): the larger of the chi-square level and the
   level read off the frame's own tail of q (:func:`tail_level`, peaks over
   threshold), since clutter is heavier-tailed than Gaussian noise. Where
   part of a disc or ring is excluded, v is rescaled to the noise of a full
   one. A maximum counts only if it is one before the exclusions round
   detected balls are applied (a shadow growing towards its ball gives no
   peak at the edge of the exclusion); the centre must lie on the playing
   surface and at least ``faint_isolation`` radii from every detected ball
   (closer, the neighbours' rims and shadows pull the centre).
5. Guards against false balls: the ring round a seed must not be mostly
   strong foreground that no detected ball explains (a cue stick, a hand, a
   motion streak), the disc must be ball-shaped - along the seed's own
   colour direction the ring lies below the disc in all but one of the 8
   sectors that can be seen (a ball's silhouette is closed; a line or a
   crescent is not) - and a darkening of the cloth's own colour next to a
   detected ball is that ball's shadow.
6. Centre: the silhouette fit of :func:`tracking.detect.refine_centre`
   when it succeeds and agrees with the template peak (the sub-pixel peak
   of the full-resolution disc-minus-ring correlation along the seed's
   colour direction, other balls masked out); else the template peak.
   Sigma: the fit's sigma plus a model error, the larger of the two
   estimates' disagreement / sqrt(2) and ``faint_model_frac`` x r;
   the template alone: its Cramer-Rao bound (:func:`template_sigma_px`,
   times sqrt(kappa) for correlated noise) plus that floor. Confidence at
   most 0.5, growing as q clears its level.

Resting balls are in the temporal-median background; :func:`faint_background`
runs the same search on the background image itself (the ring, cloth pixels
only, is the local reference) and paints faint resting balls out as
:func:`tracking.detect.build_background` does bright ones, so they show up in
every frame.
"""
from __future__ import annotations

from dataclasses import replace

import cv2
import numpy as np
import pandas as pd
from scipy import fft as sp_fft
from scipy import stats

from tracking.calibration import Calibration
from tracking.detect import (DETECTION_COLUMNS, Background, _half_res_background, colour_summary, delta_e76,
                             refine_centre, surface_polygon_px, to_lab)
from tracking.pockets import inside_corner_mouth
from tracking.settings import DetectionSettings


#: Extra columns of :func:`find_faint`: the seed's chi-square statistic and
#: its detection level, the cosine of its colour change to a pure darkening
#: of the cloth, its distance to the nearest detected ball (x radius), and the
#: template-peak centre (table mm) with its sigma (px) beside the centre used.
FAINT_COLUMNS = ["faint_q", "faint_level", "faint_cos_shadow", "faint_d_known", "faint_tx_mm", "faint_ty_mm",
                 "faint_tsig_px"]


# --------------------------------------------------------------------------- kernels and fields
def disc_kernel(r: float, r_in: float = 0.0) -> np.ndarray:
    """Float32 kernel of ones on the disc (or ring r_in..r) of radius r px, summing to 1.

    Pixel coverage is sampled 4x4 per pixel so small radii keep their area.

    >>> k = disc_kernel(5.0); round(float(k.sum()), 6), k.shape
    (1.0, (11, 11))
    """
    n = int(np.ceil(r))
    s = (np.arange(4) + 0.5) / 4 - 0.5
    yy, xx = np.mgrid[-n:n + 1, -n:n + 1].astype(np.float64)
    sx = xx[..., None, None] + s[None, None, :, None]
    sy = yy[..., None, None] + s[None, None, None, :]
    rr = sx * sx + sy * sy
    cov = ((rr <= r * r) & (rr >= r_in * r_in)).mean(axis=(2, 3))
    return (cov / cov.sum()).astype(np.float32)


def _convolve_same(stack: np.ndarray, kernels: tuple[np.ndarray, ...]) -> list[np.ndarray]:
    """Zero-padded 'same' correlation of every channel of stack (H,W,C) with each (odd, symmetric) kernel, by FFT."""
    h, w = stack.shape[:2]
    n = max(k.shape[0] for k in kernels)
    sh = (sp_fft.next_fast_len(h + n, real=True), sp_fft.next_fast_len(w + n, real=True))
    F = sp_fft.rfft2(stack, s=sh, axes=(0, 1))
    out = []
    for k in kernels:
        m = k.shape[0] // 2
        K = sp_fft.rfft2(k, s=sh)
        full = sp_fft.irfft2(F * K[..., None], s=sh, axes=(0, 1))
        out.append(full[m:m + h, m:m + w].astype(np.float32))
    return out


def centre_surround(diff: np.ndarray, weight: np.ndarray, r: float,
                    settings: DetectionSettings = DetectionSettings()) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Disc-minus-ring mean of ``diff`` (H,W,C) with pixel weights ``weight`` (H,W) 0..1.

    Returns (v (H,W,C), cover_in (H,W), cover_out (H,W)): the weighted mean
    over the disc of radius r minus that over the ring
    faint_ring_in..faint_ring_out x r, and the weighted share of each that
    was usable (normalised convolution; Knutsson & Westin, CVPR 1993).
    """
    kd = disc_kernel(r)
    kr = disc_kernel(settings.faint_ring_out * r, settings.faint_ring_in * r)
    w = weight.astype(np.float32)
    nc = diff.shape[2]
    stack = np.concatenate([diff.astype(np.float32) * w[..., None], w[..., None]], axis=2)
    fi, fo = _convolve_same(stack, (kd, kr))
    ci, co = fi[..., nc], fo[..., nc]
    v = fi[..., :nc] / np.maximum(ci, 1e-3)[..., None] - fo[..., :nc] / np.maximum(co, 1e-3)[..., None]
    return v.astype(np.float32), ci, co


def robust_cov(v: np.ndarray, p_cut: float = 0.975, iters: int = 3, max_n: int = 6000) -> tuple[np.ndarray, np.ndarray]:
    """Robust mean (k,) and covariance (k,k) of samples v (N,k).

    Start: median and MAD (diagonal); then mean and covariance of the points
    inside the chi-square ``p_cut`` quantile, scaled by p_cut / P(chi2_{k+2} <
    c) so Gaussian data give the plain covariance (reweighted estimator with
    its consistency factor; Croux & Haesbroeck 1999).

    >>> rng = np.random.default_rng(1); x = rng.normal(0, 2.0, (20000, 3))
    >>> x[:200] += 50.0  # 1% outliers
    >>> m, c = robust_cov(x); bool(np.allclose(np.sqrt(np.diag(c)), 2.0, rtol=0.05))
    True
    """
    v = np.asarray(v, np.float64)
    if len(v) > max_n:  # an even subsample is plenty for a 3x3 covariance
        v = v[:: int(np.ceil(len(v) / max_n))]
    k = v.shape[1]
    mu = np.median(v, axis=0)
    mad = 1.4826 * np.median(np.abs(v - mu), axis=0)
    cov = np.diag(np.maximum(mad, 1e-9) ** 2)
    c = stats.chi2.ppf(p_cut, k)
    corr = p_cut / stats.chi2.cdf(c, k + 2)
    for _ in range(iters):
        d = v - mu
        q = ((d @ np.linalg.inv(cov)) * d).sum(axis=1)
        sel = q < c
        if sel.sum() < 10 * k:
            break
        mu = v[sel].mean(axis=0)
        cov = np.cov(v[sel].T) * corr + 1e-12 * np.eye(k)
    return mu, cov


def mahalanobis2(v: np.ndarray, mu: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Squared Mahalanobis norm of vectors v (...,k) about mu with covariance cov."""
    d = v - mu.astype(np.float32)
    ci = np.linalg.inv(cov).astype(np.float32)
    return ((d @ ci) * d).sum(axis=-1)


def detection_level(n_positions: float, false_alarm: float, dof: int = 3) -> float:
    """Chi-square level whose exceedance by any of ``n_positions`` independent tests has probability false_alarm.

    Per test p = false_alarm / n (Bonferroni). For example 2000 positions at
    1e-3 per frame: p = 5e-7, level chi2_3 = 32.1 (scipy.stats).

    >>> round(detection_level(2000, 1e-3), 1)
    32.1
    """
    return float(stats.chi2.isf(false_alarm / max(n_positions, 1.0), dof))


def tail_level(qs: np.ndarray, n_positions: float, false_alarm: float, p_tail: float = 0.99) -> float:
    """Level of the statistic q exceeded by chance with probability false_alarm over n_positions, from q's own tail.

    Peaks over threshold (Pickands, Ann. Stat. 3:119, 1975): above its
    p_tail quantile u the exceedances of q are taken as exponential (the
    generalised Pareto law with shape 0, which a chi-square tail has), of
    scale beta = median(q - u | q > u) / ln 2 (the median keeps one real
    ball from setting it); then P(q > x) = (1 - p_tail) exp(-(x - u) / beta)
    and x solves P = false_alarm / n_positions. Clutter heavier-tailed than
    Gaussian noise (compression blocks, cloth texture) raises beta.

    >>> rng = np.random.default_rng(0); q = rng.chisquare(3, 200000)
    >>> lv = tail_level(q, 2000, 1e-3); bool(abs(lv - detection_level(2000, 1e-3)) < 4)
    True
    """
    qs = np.asarray(qs, float)
    u = float(np.percentile(qs, 100 * p_tail))
    ex = qs[qs > u] - u
    if len(ex) < 5:
        return np.inf
    beta = float(np.median(ex)) / np.log(2.0)
    return u + beta * float(np.log((1.0 - p_tail) * max(n_positions, 1.0) / false_alarm))


def template_sigma_px(contrast: float, noise_px: float, r: float, blur_px: float, kappa: float) -> float:
    """Cramer-Rao centre sigma (px, per axis) of a disc of radius r with a blurred edge.

    Image ``a disc(x - c)`` (edge a Gaussian-blurred step, sigma blur_px)
    in white noise of sigma noise_px per pixel: the Fisher information for
    c_x is a^2 / noise^2 x (pi r) x 1 / (2 sqrt(pi) blur) (the rim's length
    weighted by cos^2, times the integral of the squared edge profile), so
    sigma = (noise / a) sqrt(2 sqrt(pi) blur / (pi r)); noise correlated over
    kappa pixels multiplies the variance by kappa.

    >>> round(template_sigma_px(10.0, 1.0, 10.0, 1.0, 1.0), 4)
    0.0336
    """
    a = max(abs(contrast), 1e-9)
    return float(noise_px / a * np.sqrt(2.0 * np.sqrt(np.pi) * max(blur_px, 0.3) / (np.pi * r)) * np.sqrt(kappa))


# --------------------------------------------------------------------------- search
def _peaks(q: np.ndarray, level: float, nms_px: float, valid: np.ndarray, max_n: int,
           where: np.ndarray | None = None) -> list[tuple[int, int, float]]:
    """Local maxima (x, y, q) of q above level, greatest first, >= nms_px apart.

    Maxima are taken over the ``valid`` pixels and then kept only where
    ``where`` (default: everywhere) holds, so a rise that continues into
    excluded ground (a shadow growing towards its ball) gives no peak at the
    edge of the exclusion.
    """
    nr = max(1, int(round(nms_px)))
    se = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * nr + 1, 2 * nr + 1))
    qq = np.where(valid, q, 0).astype(np.float32)
    hit = (qq >= cv2.dilate(qq, se) - 1e-6) & (qq > level)
    if where is not None:
        hit &= where
    ys, xs = np.nonzero(hit)
    order = np.argsort(-qq[ys, xs])
    kept: list[tuple[int, int, float]] = []
    for i in order:
        x, y = int(xs[i]), int(ys[i])
        if all((x - a) ** 2 + (y - b) ** 2 > nms_px ** 2 for a, b, _ in kept):
            kept.append((x, y, float(qq[y, x])))
        if len(kept) >= max_n:
            break
    return kept


def _on_cloth(cal: Calibration, px: np.ndarray, margin_mm: float) -> np.ndarray:
    """(N,) bool: image points taken as ball centres lie on the playing surface, margin_mm inside the nose."""
    xy = cal.px_to_table(np.asarray(px, float).reshape(-1, 2))
    L, W = cal.table.length_mm, cal.table.width_mm
    m = margin_mm
    return (xy[:, 0] >= m) & (xy[:, 0] <= L - m) & (xy[:, 1] >= m) & (xy[:, 1] <= W - m)


def surface_masks(background: Background, calibration: Calibration,
                  settings: DetectionSettings = DetectionSettings()) -> tuple[np.ndarray, np.ndarray, int]:
    """(cloth, centre_ok, scale) over the background's ROI at the search resolution (cached on the Background).

    cloth: bool, the visible cloth (playing surface in the cloth plane, 2 mm
    inside the nose line, where the cushion face begins); centre_ok: bool,
    ball centres at least faint_margin radii inside the nose line (ball-
    centre plane). scale: 2 when the search runs at half resolution, else 1.
    """
    cache = getattr(background, "_faint_masks", None)
    if cache is not None:
        return cache
    x0, y0, x1, y1 = background.roi
    h, w = background.mask.shape
    sc = 2 if background.radius_px >= 6.0 else 1
    size = ((x1 - x0) // sc, (y1 - y0) // sc)
    out = []
    for margin, z in ((-2.0, 0.0), (-settings.faint_margin * calibration.ball_radius_mm, None)):
        poly = surface_polygon_px(calibration, margin_mm=margin, z_mm=z)
        m = np.zeros((h, w), np.uint8)
        cv2.fillPoly(m, [np.round(poly * 16).astype(np.int32)], 1, lineType=cv2.LINE_8, shift=4)
        m = m[y0:y1, x0:x1].astype(np.float32)
        out.append(cv2.resize(m, size, interpolation=cv2.INTER_AREA) > 0.5 if sc > 1 else m > 0.5)
    cache = (out[0], out[1], sc)
    background._faint_masks = cache
    return cache


def faint_search(image_lab: np.ndarray, ref_lab: np.ndarray, valid: np.ndarray, r: float,
                 known: np.ndarray, settings: DetectionSettings = DetectionSettings(),
                 strong: np.ndarray | None = None, centre_ok: np.ndarray | None = None,
                 cloth_lab: np.ndarray | None = None) -> tuple[list[dict], dict]:
    """Seeds of faint balls in one (half-resolution) CIELAB image against a reference.

    image_lab, ref_lab: float32 (H,W,3); valid: bool (H,W) pixels that may
    belong to the cloth; r: ball radius px at this resolution; known: (N,2)
    centres of balls already found (same px frame); strong: optional bool
    (H,W) per-pixel foreground of the detector (d > threshold); centre_ok:
    optional bool (H,W) where a ball centre may lie; cloth_lab: the cloth's
    CIELAB colour (H,W,3) for the shadow test (default ref_lab).
    Returns (seeds [dict(x, y, q, v (3,), level)], info dict(level, cov,
    kappa, n_positions)).
    """
    h, w = valid.shape
    diff = image_lab - ref_lab
    wgt = valid.astype(np.float32)
    yy, xx = np.mgrid[0:h, 0:w]
    excl = np.zeros((h, w), np.uint8)
    for x, y in np.asarray(known, float).reshape(-1, 2):
        cv2.circle(excl, (int(round(x * 16)), int(round(y * 16))), int(round(settings.faint_known_pad * r * 16)),
                   1, -1, lineType=cv2.LINE_8, shift=4)
    wgt[excl > 0] = 0.0
    v, ci, co = centre_surround(diff, wgt, r, settings)
    far = np.ones((h, w), bool)
    for x, y in np.asarray(known, float).reshape(-1, 2):
        far &= (xx - x) ** 2 + (yy - y) ** 2 >= (settings.faint_min_sep * r) ** 2
    usable = valid & (ci >= settings.faint_min_cover) & (co >= settings.faint_min_cover)
    # Where part of the disc or ring is excluded the mean is over fewer
    # pixels: its noise variance grows as sum(k^2) / cover for each kernel
    # (uniform weights), so v is scaled to the fully covered case.
    skd = float((disc_kernel(r) ** 2).sum())
    skr = float((disc_kernel(settings.faint_ring_out * r, settings.faint_ring_in * r) ** 2).sum())
    g = (skd / np.maximum(ci, 1e-3) + skr / np.maximum(co, 1e-3)) / (skd + skr)
    v = v / np.sqrt(g)[..., None]
    # noise of v from the frame itself: positions on a grid ~r/2 apart
    st = max(1, int(r // 2))
    samp = v[::st, ::st][usable[::st, ::st]]
    info = {"level": np.inf, "cov": None, "kappa": np.nan, "n_positions": 0.0}
    if len(samp) < 50:
        return [], info
    mu, cov = robust_cov(samp)
    # per-pixel noise of diff (robust) -> correlation area kappa of the noise
    pix = diff[::st, ::st][(valid & (wgt > 0))[::st, ::st]]
    _, cov_pix = robust_cov(pix) if len(pix) >= 50 else (None, cov)
    n_in = np.pi * r * r
    n_eff_var = 1.0 / n_in + 1.0 / (np.pi * r * r * (settings.faint_ring_out ** 2 - settings.faint_ring_in ** 2))
    kappa = float(np.clip(np.trace(cov) / max(np.trace(cov_pix) * n_eff_var, 1e-12), 1.0, n_in))
    n_pos = float(usable.sum()) / n_in
    q = mahalanobis2(v, mu, cov)
    # Tail calibration: clutter (compression blocks, cloth texture, lighting
    # the background missed) is heavier-tailed than Gaussian, so the
    # covariance is scaled until the frame's own tail quantile of q matches
    # chi-square's (never scaled down); a ball covers well under 1% of the
    # positions, so it cannot set the quantile.
    qs = q[::st, ::st][usable[::st, ::st]]
    level = max(detection_level(n_pos, settings.faint_false_alarm),
                tail_level(qs, n_pos, settings.faint_false_alarm, settings.faint_tail_p))
    inflate = max(1.0, float(np.percentile(qs, 100 * settings.faint_tail_p))
                  / float(stats.chi2.ppf(settings.faint_tail_p, 3)))
    info = {"level": level, "cov": cov, "mu": mu, "kappa": kappa * inflate, "n_positions": n_pos,
            "cov_pix": cov_pix, "inflate": inflate, "q": q}
    # the whole disc in the picture: a ball cut by the image edge is left
    # to the detector (half a disc matches a ball and a dark border alike)
    ri = int(np.ceil(r))
    inside = np.zeros((h, w), bool)
    inside[ri:h - ri, ri:w - ri] = True
    ok = far & inside if centre_ok is None else far & inside & centre_ok
    cand = _peaks(q, level, settings.nms_radius * r, usable, settings.faint_max_seeds, ok)
    seeds = []
    for x, y, qv in cand:
        # colour direction of the seed (whitened), then the shape test along it
        u = np.linalg.solve(cov, v[y, x] - mu)
        u = u / max(np.linalg.norm(u), 1e-12)
        s = (diff @ u.astype(np.float32))
        n = int(np.ceil(settings.faint_ring_out * r)) + 1
        xa, ya, xb, yb = max(0, x - n), max(0, y - n), min(w, x + n + 1), min(h, y + n + 1)
        dx, dy = xx[ya:yb, xa:xb] - x, yy[ya:yb, xa:xb] - y
        rho = np.hypot(dx, dy)
        ww = wgt[ya:yb, xa:xb] > 0
        ring = ww & (rho >= settings.faint_ring_in * r) & (rho <= settings.faint_ring_out * r)
        disc = ww & (rho <= 0.8 * r)
        if disc.sum() < 0.3 * np.pi * r * r or ring.sum() < 8:
            continue
        if strong is not None:
            sr = strong[ya:yb, xa:xb][ring]
            if sr.mean() > settings.faint_max_strong_ring:
                continue  # a cue, hand or streak runs through the surround
        sp = s[ya:yb, xa:xb]
        inner = float(np.median(sp[disc]))
        ring_med = float(np.median(sp[ring]))
        # the change must cover most of the disc: a small mark (a table
        # spot, chalk) moves the disc's mean, not its median
        if inner - ring_med < settings.faint_min_extent * (float(np.mean(sp[disc])) - ring_med):
            continue
        # per sector (8 of 45 deg) the ring's median must lie below the disc's
        ang = (np.arctan2(dy, dx) % (2 * np.pi)) * (8 / (2 * np.pi))
        sec = np.floor(ang).astype(int) % 8
        full = (rho >= settings.faint_ring_in * r) & (rho <= settings.faint_ring_out * r)
        n_obs = n_open = 0
        half_step = 0.5 * (inner - ring_med)
        for k in range(8):
            m = ring & (sec == k)
            if m.sum() < max(2, 0.3 * (full & (sec == k)).sum()):
                continue  # off the cloth or under a detected ball: says nothing
            n_obs += 1
            n_open += bool(np.median(sp[m]) >= inner - half_step)
        if n_obs < settings.faint_min_sectors or n_open > settings.faint_max_open:
            continue
        # a shadow scales the cloth's linear colour by k < 1: in CIELAB that
        # moves (L* + 16, a*, b*) towards 0 (cube-root law, CIE 15:2004), so a
        # darkening points along -(L* + 16, a*, b*) of the cloth
        bl = (ref_lab if cloth_lab is None else cloth_lab)[y, x].astype(np.float64) + [16.0, 0.0, 0.0]
        vv = (v[y, x] - mu).astype(np.float64)
        cos_sh = float(-(vv @ bl) / max(np.linalg.norm(vv) * np.linalg.norm(bl), 1e-12))
        d_known = float(np.min(np.hypot(*(np.asarray(known, float).reshape(-1, 2) - [x, y]).T)) / r) \
            if len(known) else np.inf
        if cos_sh > settings.faint_shadow_cos and d_known < settings.faint_shadow_reach:
            continue  # a darkening of the cloth next to a ball: its shadow
        if d_known < settings.faint_isolation:
            continue  # neighbours cover the ring: the centre would follow them
        seeds.append({"x": float(x), "y": float(y), "q": qv, "v": v[y, x] - mu, "u": u, "level": level,
                      "cos_shadow": cos_sh, "d_known": d_known,
                      "contrast": inner - float(np.median(sp[ring]))})
    return seeds, info


def _template_peak(s: np.ndarray, x0: float, y0: float, r: float, settings: DetectionSettings,
                   weight: np.ndarray | None = None) -> tuple[float, float]:
    """Sub-pixel peak (x, y) near (x0, y0) of the disc-minus-ring correlation of scalar image s (full resolution).

    weight (same shape, 0..1): pixels that may vote (0 under other balls and
    off the cloth; normalised convolution as in :func:`centre_surround`).
    """
    w = np.ones(s.shape, np.float32) if weight is None else weight.astype(np.float32)
    kd = disc_kernel(r)
    kr = disc_kernel(settings.faint_ring_out * r, settings.faint_ring_in * r)
    fi, fo = _convolve_same(np.dstack([s * w, w]).astype(np.float32), (kd, kr))
    c = fi[..., 0] / np.maximum(fi[..., 1], 1e-3) - fo[..., 0] / np.maximum(fo[..., 1], 1e-3)
    return subpixel_peak(c, x0, y0, max(2, int(round(0.5 * r))))


def subpixel_peak(T: np.ndarray, x0: float, y0: float, rad: int) -> tuple[float, float]:
    """Sub-pixel maximum (x, y) of T within rad px of (x0, y0) (parabola through the maximum, per axis)."""
    h, w = T.shape
    xa, ya = max(1, int(round(x0)) - rad), max(1, int(round(y0)) - rad)
    xb, yb = min(w - 1, int(round(x0)) + rad + 1), min(h - 1, int(round(y0)) + rad + 1)
    if xb <= xa or yb <= ya:
        return x0, y0
    sub = T[ya:yb, xa:xb]
    j, i = np.unravel_index(int(np.argmax(sub)), sub.shape)
    yi, xi = ya + j, xa + i

    def par(a, b, c):
        den = a - 2 * b + c
        return float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if abs(den) > 1e-12 else 0.0
    return xi + par(T[yi, xi - 1], T[yi, xi], T[yi, xi + 1]), yi + par(T[yi - 1, xi], T[yi, xi], T[yi + 1, xi])


def find_faint(image: np.ndarray, calibration: Calibration, background: Background, known_px: np.ndarray,
               settings: DetectionSettings = DetectionSettings()) -> pd.DataFrame:
    """Faint balls in one BGR uint8 frame, away from the balls already found (known_px (N,2) image px).

    Returns a DataFrame with :data:`tracking.detect.DETECTION_COLUMNS` plus
    ``faint_q`` (the seed's chi-square statistic) and ``faint_level`` (its
    detection level); empty when nothing passes.
    """
    cal = calibration
    x0, y0, x1, y1 = background.roi
    r0 = background.radius_px
    half = r0 >= 6.0
    sc = 2.0 if half else 1.0
    if half:
        sb, sw = _half_res_background(background)
        img_s = cv2.resize(image[y0:y1, x0:x1], (sb.shape[1], sb.shape[0]), interpolation=cv2.INTER_AREA)
        valid = sw > 0
        wmap = sw
    else:
        sb = background.lab_image()[y0:y1, x0:x1]
        img_s = image[y0:y1, x0:x1]
        wmap = background.weight_map()[y0:y1, x0:x1]
        valid = wmap > 0
    lab_s = to_lab(img_s)
    strong = delta_e76(lab_s, sb) * wmap > background.threshold_dn
    cloth, centre_ok, _ = surface_masks(background, cal, settings)
    kp = (np.asarray(known_px, float).reshape(-1, 2) - [x0, y0] - (0.5 * (sc - 1))) / sc
    seeds, info = faint_search(lab_s, sb, valid & cloth, r0 / sc, kp, settings, strong, centre_ok)
    rows = []
    accepted = [tuple(p) for p in np.asarray(known_px, float).reshape(-1, 2)]
    for sd in seeds:
        gx, gy = sd["x"] * sc + 0.5 * (sc - 1) + x0, sd["y"] * sc + 0.5 * (sc - 1) + y0
        if not _on_cloth(cal, np.array([[gx, gy]]), settings.faint_margin * cal.ball_radius_mm)[0]:
            continue
        r_exp, ox, oy = background.lookup(gx, gy)
        # full-resolution patch: signed difference along the seed's colour direction
        pad = int(np.ceil(settings.faint_ring_out * r_exp + settings.ray_max * r_exp)) + 4
        H, W = image.shape[:2]
        xa, ya = max(0, int(gx) - pad), max(0, int(gy) - pad)
        xb, yb = min(W, int(gx) + pad + 2), min(H, int(gy) + pad + 2)
        lab_p = to_lab(image[ya:yb, xa:xb])
        bl = background.lab_image()[ya:yb, xa:xb]
        d = np.zeros(image.shape[:2], np.float32)
        d[ya:yb, xa:xb] = delta_e76(lab_p, bl) * background.weight_map()[ya:yb, xa:xb]
        s = ((lab_p - bl) @ sd["u"].astype(np.float32)).astype(np.float32)
        wp = (background.weight_map()[ya:yb, xa:xb] > 0).astype(np.uint8)
        for kx, ky in accepted:
            cv2.circle(wp, (int(round((kx - xa) * 16)), int(round((ky - ya) * 16))),
                       int(round(settings.faint_known_pad * r_exp * 16)), 0, -1, lineType=cv2.LINE_8, shift=4)
        tx, ty = _template_peak(s, gx - xa, gy - ya, r_exp, settings, wp)
        tx, ty = tx + xa, ty + ya
        ref = refine_centre(d, tx, ty, r_exp, settings, image, background.threshold_dn * settings.faint_edge_frac)
        # Cramer-Rao sigma of the template centre along the colour direction
        info_pix = info["cov_pix"]
        noise_s = float(np.sqrt(max(sd["u"] @ info_pix @ sd["u"], 1e-12)))
        sig_t = template_sigma_px(sd["contrast"], noise_s, r_exp, settings.faint_blur_px, info["kappa"])
        # Model error: the shading of a ball close to the cloth's colour moves
        # both centres (the lit side differs more); two estimators of one
        # centre that use different parts of the image (rim edges, the
        # whole disc) differ by about sqrt(2) x that error, so their
        # disagreement sets it, never below faint_model_frac x r.
        method_sig = float(np.hypot(sig_t, settings.faint_model_frac * r_exp))
        sep = np.hypot(ref["x"] - tx, ref["y"] - ty) if ref is not None else np.inf
        if sep <= settings.faint_agree * r_exp:
            cx, cy = ref["x"], ref["y"]
            sig = float(np.hypot(ref["sigma_px"], max(sep / np.sqrt(2.0), settings.faint_model_frac * r_exp)))
            support, rad, fixed = ref["support"], ref["radius"], ref["fixed_radius"]
        else:
            cx, cy, sig = tx, ty, method_sig
            support, rad, fixed = 0.0, r_exp, True
        if any(np.hypot(cx - a, cy - b) < settings.faint_min_sep * r_exp for a, b in accepted):
            continue
        if not _on_cloth(cal, np.array([[cx, cy]]), settings.faint_margin * cal.ball_radius_mm)[0]:
            continue
        r_exp, ox, oy = background.lookup(cx, cy)
        p = np.array([[cx - ox, cy - oy], [tx - ox, ty - oy]])
        xy, txy = cal.px_to_table(p)
        mmpp = cal.ball_radius_mm / r_exp
        col = colour_summary(image, cx, cy, r_exp, settings)
        # confidence: how far the statistic clears its level, at most 0.5
        # (below any clear detection, so a merge keeps the clear one)
        conf = float(0.5 * np.clip(1.0 - sd["level"] / sd["q"], 0.0, 1.0))
        rows.append({"x_px": p[0, 0], "y_px": p[0, 1], "x_mm": xy[0], "y_mm": xy[1],
                     "sx_mm": sig * mmpp, "sy_mm": sig * mmpp, "sigma_px": sig, "confidence": conf,
                     "radius_px": rad, "radius_expected_px": r_exp, "support": support,
                     "contrast_dn": float(np.mean(d[ya:yb, xa:xb][np.hypot(*np.meshgrid(
                         np.arange(xa, xb) - cx, np.arange(ya, yb) - cy)) <= 0.6 * r_exp])),
                     **col, "faint_q": sd["q"], "faint_level": sd["level"],
                     "faint_cos_shadow": sd["cos_shadow"], "faint_d_known": sd["d_known"],
                     "faint_tx_mm": txy[0], "faint_ty_mm": txy[1], "faint_tsig_px": method_sig})
        accepted.append((cx, cy))
    return pd.DataFrame(rows, columns=DETECTION_COLUMNS + FAINT_COLUMNS)


def add_faint(det: pd.DataFrame, image: np.ndarray, calibration: Calibration, background: Background,
              settings: DetectionSettings = DetectionSettings(), ring_gate=None) -> pd.DataFrame:
    """``det`` (one frame's detections) plus the balls of the cloth's own colour that
    :func:`tracking.dark_ring.find_dark_ring` finds away from them, then the faint balls :func:`find_faint`
    finds away from all of those. ring_gate: a :class:`tracking.dark_ring.RingGate` carried over
    a clip's frames (where the dark-ring search runs; None: everywhere, every frame)."""
    if settings.ring_recentre:
        # detections close to the cloth's colour: their dark ring is the better centre
        from tracking.dark_ring import recentre_by_ring

        det = recentre_by_ring(det, image, calibration, background, settings)
    if settings.stripe_refit:
        # a stripe whose band is the cloth's colour: the colour fit may have traced its white cap
        from tracking.stripe_outline import recentre_stripes

        det = recentre_stripes(det, image, calibration, background, settings)
    if settings.ring_search:
        # first: its centre comes from the ball's own outline, where the
        # colour filter's is pulled by the ball's shadow
        from tracking.dark_ring import find_dark_ring

        det = _append(det, find_dark_ring(image, calibration, background, _known(det), settings, ring_gate), calibration,
                      settings)
    if settings.faint_search:
        det = _append(det, find_faint(image, calibration, background, _known(det), settings), calibration, settings)
    if settings.tint_refit:
        # a solid ball of nearly the cloth's colour (found by colour, ring or faint search): its own
        # tint outlines it, its shadows' does not
        from tracking.tint_disc import recentre_by_tint

        det = recentre_by_tint(det, image, calibration, background, settings)
    return det


def _known(det: pd.DataFrame) -> np.ndarray:
    """(N,2) image centres of the detections so far."""
    return det[["x_px", "y_px"]].to_numpy(float) if len(det) else np.zeros((0, 2))


def _append(det: pd.DataFrame, extra: pd.DataFrame, calibration: Calibration,
            settings: DetectionSettings) -> pd.DataFrame:
    """det plus the extra finds that clear the corner pockets' mouths."""
    if not extra.empty:
        # A faint disc overlapping a corner pocket's mouth is the pocket's
        # shaded rim far more often than a ball (a faint find has no clear
        # silhouette to tell them apart): its disc must clear the mouth line.
        R = calibration.ball_radius_mm
        extra = extra[~inside_corner_mouth(extra[["x_mm", "y_mm"]].to_numpy(float), calibration.table,
                                           settings.corner_mouth_min_mm + 2.0 * R)]
    if extra.empty:
        return det
    extra = extra[DETECTION_COLUMNS]
    return extra if det.empty else pd.concat([det, extra], ignore_index=True)


# --------------------------------------------------------------------------- resting balls
def faint_background(background: Background, calibration: Calibration,
                     settings: DetectionSettings = DetectionSettings()) -> Background:
    """The background with faint resting balls painted out (a new Background; the input is unchanged).

    The empty-cloth image of :func:`tracking.detect.build_background` still
    holds any resting ball too close to the cloth colour for its
    provisional detector. Here the faint search runs on that image with no
    reference subtracted (the ring of cloth pixels round each disc is the
    local reference, so cushions and pockets cannot bias it; a median over
    ~7 ball radii gives the cloth colour for the shadow test); each ball
    found with its centre on the cloth is painted over with the surrounding
    cloth as build_background does for bright ones.
    """
    if not settings.faint_search:
        return background
    img = np.clip(background.image, 0, 255).astype(np.uint8)
    r0 = background.radius_px
    k = int(2 * round(3.5 * r0) + 1)
    cloth = cv2.medianBlur(img, max(k, 5))
    x0, y0, x1, y1 = background.roi
    h, w = img.shape[:2]
    half = r0 >= 6.0
    sc = 2 if half else 1
    size = ((x1 - x0) // sc, (y1 - y0) // sc)
    a = to_lab(cv2.resize(img[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA))
    b = to_lab(cv2.resize(cloth[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA))
    cloth_m, centre_ok, _ = surface_masks(background, calibration, settings)
    st = np.asarray(background.static_px, float).reshape(-1, 2)
    kp = (st - [x0, y0] - 0.5 * (sc - 1)) / sc
    # no cloth model is subtracted: the ring (cloth pixels only) is the local
    # reference, so a cushion or pocket next to the disc cannot bias it
    seeds, _ = faint_search(a, np.zeros_like(a), cloth_m, r0 / sc, kp, settings, None, centre_ok, b)
    paint = np.zeros((h, w), np.uint8)
    new = []
    for sd in seeds:
        gx, gy = sd["x"] * sc + 0.5 * (sc - 1) + x0, sd["y"] * sc + 0.5 * (sc - 1) + y0
        if not _on_cloth(calibration, np.array([[gx, gy]]), settings.faint_margin * calibration.ball_radius_mm)[0]:
            continue
        # a corner pocket's shaded rim, not a ball (see add_faint)
        if inside_corner_mouth(calibration.px_to_table(np.array([[gx, gy]])), calibration.table,
                               settings.corner_mouth_min_mm + 2.0 * calibration.ball_radius_mm)[0]:
            continue
        r_exp, _, _ = background.lookup(gx, gy)
        # 1.8 radii as build_background: the ball, its blur and its shadow
        cv2.circle(paint, (int(round(gx * 16)), int(round(gy * 16))), int(round(1.8 * r_exp * 16)), 1, -1,
                   lineType=cv2.LINE_8, shift=4)
        new.append((gx, gy))
    if not new:
        return background
    out = cv2.inpaint(img, paint, int(round(r0)), cv2.INPAINT_TELEA).astype(np.float32)
    # keep the original's sub-DN values away from the painted discs
    out = np.where(paint[..., None] > 0, out, background.image).astype(np.float32)
    static = np.vstack([st, np.array(new)])
    nb = replace(background, image=out, static_px=static, lab=None)
    if hasattr(nb, "_half"):
        del nb._half
    return nb
