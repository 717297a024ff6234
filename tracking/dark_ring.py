"""Balls of the cloth's own colour, found by their shading: the dark limb of a lit sphere.

A ball whose colour equals the cloth's (maroon on red, green on green)
differs from the cloth in colour by nearly nothing, so neither the
per-pixel test of :mod:`tracking.detect` nor the centre-surround colour
filter of :mod:`tracking.faint` sees it, least of all among other balls
(a rack), where no surround of empty cloth exists. What stays is geometry
and shading:

* Lambert's law: the ball's brightness goes as ambient + (1 - ambient)
  n.l, and the surface normal n turns horizontal at the silhouette, so a
  lamp above the table leaves the limb darker than the top of the ball
  (whose normal is the cloth's own); averaged over the annulus 0.85-1.12
  radii it is the darkest part of the ball's image.
* The cloth right at the ball's foot sees less of the room (the ball
  hides half the sky there): a dark contact ring just outside the
  silhouette, fading within a few tenths of a radius (ambient occlusion,
  view-factor of a sphere on a plane).

Both put a thin dark ring at the silhouette, brighter inside (the top)
and outside (open cloth). The image radius of a ball is known at every
point from the calibration, so the ring is matched with fixed radii:

``T(x) = mean_L(inner annulus) + mean_L(outer annulus) - 2 mean_L(rim annulus)``

on CIELAB L* of the frame itself (no background model: a ball that never
moved is found like a moving one), with normalised convolution (Knutsson &
Westin, CVPR 1993) so that pixels of balls already found and pixels off
the playing surface carry no weight. Annuli (x radius):
``ring_inner``, ``ring_rim``, ``ring_outer`` in DetectionSettings.

Detection: T is standardised by its robust mean and sigma over the frame's
own positions on open cloth (``ring_clutter_sep`` radii from balls already found) (Croux & Haesbroeck reweighting, :func:`tracking.faint.robust_cov`);
``q = max(z, 0)^2`` is chi-square with one degree of freedom for Gaussian
noise, and a seed must exceed the larger of the Bonferroni level for the
frame's independent disc positions and the level read off the frame's
own tail (:func:`tracking.faint.tail_level`). Guards: the ring must be
closed (:func:`_closed_ring`: darker than its inside, or than the mean of
its inside and outside, in all but a quarter of the 8 sectors that can be
seen; a line, a shadow crescent or a pocket's shade is open), the centre
on the playing surface and ``ring_min_sep`` radii from every ball already
found (rigid balls).

Centre: the sub-pixel peak of T at full resolution (parabola through the
maximum), then :func:`ring_refine`: the circle through the darkest point of
each free ray (Tukey weights down-weight the rays that run into the ball's
cast shadow, which widens the ring away from the lamp), kept when it
agrees. Sigma: the Cramer-Rao bound of the template (noise / contrast,
:func:`tracking.faint.template_sigma_px`) plus a model error
``ring_model_frac`` x r (see the setting for the closed-form figures).
"""
from __future__ import annotations

import cv2
import numpy as np
import pandas as pd

from tracking.calibration import Calibration
from tracking.detect import DETECTION_COLUMNS, Background, colour_summary, to_lab
from tracking.faint import (_convolve_same, _on_cloth, _peaks, detection_level, disc_kernel, robust_cov,
                            subpixel_peak, surface_masks, tail_level, template_sigma_px)
from tracking.settings import DetectionSettings

#: Extra columns of :func:`find_dark_ring`: the seed's statistic q and its level,
#: and the ring's contrast (L* units) at the peak.
RING_COLUMNS = ["ring_q", "ring_level", "ring_contrast"]


def ring_kernels(r: float, settings: DetectionSettings = DetectionSettings()) -> tuple[np.ndarray, ...]:
    """(inner, rim, outer) annulus kernels for a ball of image radius r px, each summing to 1."""
    a, b = settings.ring_inner
    c, d = settings.ring_rim
    e, f = settings.ring_outer
    return disc_kernel(b * r, a * r), disc_kernel(d * r, c * r), disc_kernel(f * r, e * r)


def ring_statistic(lum: np.ndarray, weight: np.ndarray, r: float,
                   settings: DetectionSettings = DetectionSettings()) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Dark-ring contrast T (H,W; L* units) of a luminance image, its noise scale and the annuli's usable shares.

    T = inner + outer - 2 rim (weighted means; ``weight`` 0..1 per pixel).
    Returns (T, g, cover (H,W,3)): g is the variance of T relative to fully
    covered annuli (each weighted mean of independent pixels has variance
    sum(k^2) / cover), so T / sqrt(g) has the same noise everywhere.
    """
    w = weight.astype(np.float32)
    ks = ring_kernels(r, settings)
    out = _convolve_same(np.dstack([lum.astype(np.float32) * w, w]), ks)
    m = [o[..., 0] / np.maximum(o[..., 1], 1e-3) for o in out]
    cover = np.dstack([o[..., 1] for o in out])
    s2 = [float((k ** 2).sum()) * f for k, f in zip(ks, (1.0, 4.0, 1.0))]
    g = sum(v / np.maximum(cover[..., i], 1e-3) for i, v in enumerate(s2)) / sum(s2)
    return (m[0] + m[2] - 2.0 * m[1]).astype(np.float32), g.astype(np.float32), cover


def _closed_ring(lum: np.ndarray, wgt: np.ndarray, x: float, y: float, r: float, contrast: float,
                 noise_px: float, settings: DetectionSettings) -> tuple[int, int]:
    """(sectors seen, sectors open) of the dark ring about (x, y) px.

    Per 45 deg sector the rim annulus (median) must lie below the inner one
    (the limb darkening, inside the ball) or below the mean of the inner and
    the outer one (on the lamp's side the limb is lit and the contact shadow
    outside makes the ring) by a step of ``ring_sector_frac`` of the whole
    ring's contrast and of ``ring_sector_z`` sigmas of the difference of two
    medians (a median of n pixels of noise s has sigma 1.2533 s / sqrt(n));
    the outer annulus, where seen, must not lie below the rim by as much (in
    a rack the neighbours' shadows darken it, so it need not be brighter). A
    sector is seen when its inner and rim parts are (>= 30 % usable pixels).
    """
    n = int(np.ceil(settings.ring_outer[1] * r)) + 1
    h, w = lum.shape
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
    yy, xx = np.mgrid[ya:yb, xa:xb]
    dx, dy = xx - x, yy - y
    rho = np.hypot(dx, dy) / r
    ok = wgt[ya:yb, xa:xb] > 0
    L = lum[ya:yb, xa:xb]
    sec = np.floor((np.arctan2(dy, dx) % (2 * np.pi)) * (8 / (2 * np.pi))).astype(int) % 8
    bands = [(rho >= lo) & (rho <= hi) for lo, hi in (settings.ring_inner, settings.ring_rim, settings.ring_outer)]
    seen = n_open = 0
    for k in range(8):
        s = sec == k
        vals, cnt = [], []
        for band in bands:
            m = band & s & ok
            good = m.sum() >= max(2, 0.3 * (band & s).sum())
            vals.append(float(np.median(L[m])) if good else None)
            cnt.append(int(m.sum()))
        if vals[0] is None or vals[1] is None:
            continue  # off the cloth or under a ball already found: says nothing
        seen += 1
        need = [max(settings.ring_sector_frac * contrast,
                    settings.ring_sector_z * 1.2533 * noise_px * np.sqrt(1.0 / max(cnt[i], 1) + 1.0 / cnt[1]))
                for i in (0, 2)]
        step = vals[0] - vals[1]
        if vals[2] is not None:
            # on the lamp's side the limb is lit and the ring is mostly the
            # contact shadow outside: the mean of both sides counts there; a
            # neighbour's shadow may darken the outside, but not below the rim
            step = max(step, 0.5 * (vals[0] + vals[2]) - vals[1])
            if vals[2] - vals[1] < -need[1]:
                step = -np.inf
        n_open += bool(step < need[0])
    return seen, n_open


def ring_is_closed(lum: np.ndarray, wgt: np.ndarray, x: float, y: float, r: float, contrast: float,
                   noise_px: float, settings: DetectionSettings) -> bool:
    """The closed-ring test of :func:`_closed_ring`: >= ring_min_sectors seen, at most ring_max_open
    (or ring_max_open_frac of those seen) open."""
    seen, n_open = _closed_ring(lum, wgt, x, y, r, contrast, noise_px, settings)
    return seen >= settings.ring_min_sectors and n_open <= max(settings.ring_max_open,
                                                                int(settings.ring_max_open_frac * seen))


def _outside_discs(shape: tuple[int, int], centres: np.ndarray, rad: float) -> np.ndarray:
    """bool (H,W): pixels at least ``rad`` px from every centre (N,2), exactly (d^2 >= rad^2), box by box."""
    h, w = shape
    out = np.ones((h, w), bool)
    n = int(np.ceil(rad)) + 1
    for x, y in np.asarray(centres, float).reshape(-1, 2):
        xa, ya = max(0, int(np.floor(x)) - n), max(0, int(np.floor(y)) - n)
        xb, yb = min(w, int(np.floor(x)) + n + 2), min(h, int(np.floor(y)) + n + 2)
        if xb <= xa or yb <= ya:
            continue
        dx = np.arange(xa, xb) - x
        dy = np.arange(ya, yb) - y
        out[ya:yb, xa:xb] &= dy[:, None] ** 2 + dx[None, :] ** 2 >= rad * rad
    return out


def ring_search(lum: np.ndarray, valid: np.ndarray, r: float, known: np.ndarray, known_r: np.ndarray,
                settings: DetectionSettings = DetectionSettings(),
                centre_ok: np.ndarray | None = None, closure: bool = True,
                stats: dict | None = None) -> tuple[list[dict], dict]:
    """Seeds of balls by their dark limb ring in one luminance image (L*, H,W).

    valid: bool (H,W) pixels of the playing surface; r: ball radius px at
    this resolution; known: (N,2) centres of balls already found and
    known_r (N,) their radii (same px frame); centre_ok: optional bool
    (H,W) where a centre may lie; closure: apply the closed-ring test here
    (False: the caller applies it at full resolution); stats: the level,
    mu, sd and noise_px of an earlier search of the whole surface (the
    image is then a window of it and its own open cloth is not measured).
    Returns (seeds [dict(x, y, q, level, contrast)], info dict(level, mu,
    sd, n_positions, noise_px)).
    """
    h, w = lum.shape
    wgt = valid.astype(np.float32)
    known = np.asarray(known, float).reshape(-1, 2)
    for (x, y), rk in zip(known, np.asarray(known_r, float).reshape(-1)):
        cv2.circle(wgt, (int(round(x * 16)), int(round(y * 16))), int(round(settings.ring_known_pad * rk * 16)),
                   0, -1, lineType=cv2.LINE_8, shift=4)
    T, g, cover = ring_statistic(lum, wgt, r, settings)
    T = T / np.sqrt(g)  # same noise at every position
    far = _outside_discs((h, w), known, settings.ring_min_sep * r)
    ri = int(np.ceil(settings.ring_outer[1] * r))
    inside = np.zeros((h, w), bool)
    inside[ri:h - ri, ri:w - ri] = True
    usable = valid & np.all(cover >= np.float32(settings.ring_min_cover), axis=2) & inside
    info = {"level": np.inf, "mu": np.nan, "sd": np.nan, "n_positions": 0.0, "T": T}
    if stats is None:
        st = max(1, int(r // 2))
        # noise and clutter level from open cloth: round a ball already found
        # its own shadows make rings that are open (the closed-ring test's
        # work), and in a rack they would set the level for everyone
        quiet = usable & _outside_discs((h, w), known, settings.ring_clutter_sep * r)
        if quiet.sum() < 0.2 * usable.sum():
            quiet = usable
        samp = T[::st, ::st][quiet[::st, ::st]]
        if len(samp) < 50:
            return [], info
        mu, cov = robust_cov(samp[:, None])
        sd = float(np.sqrt(cov[0, 0]))
        z = (T - float(mu[0])) / max(sd, 1e-6)
        q = np.where(z > 0, z * z, 0.0).astype(np.float32)
        n_pos = float(usable.sum()) / (np.pi * r * r)
        qs = q[quiet]  # every position: the tail needs the most samples
        level = max(detection_level(n_pos, settings.ring_false_alarm, dof=1),
                    tail_level(qs, n_pos, settings.ring_false_alarm, settings.faint_tail_p))
        ki, km, ko = ring_kernels(r, settings)
        noise_px = sd / float(np.sqrt((ki ** 2).sum() + (ko ** 2).sum() + 4.0 * (km ** 2).sum()))
        mu = float(mu[0])
    else:
        mu, sd, level, noise_px, n_pos = (stats["mu"], stats["sd"], stats["level"], stats["noise_px"],
                                          stats["n_positions"])
        z = (T - mu) / max(sd, 1e-6)
        q = np.where(z > 0, z * z, 0.0).astype(np.float32)
    info.update(level=level, mu=mu, sd=sd, n_positions=n_pos, noise_px=noise_px)
    ok = usable & far if centre_ok is None else usable & far & centre_ok
    seeds = []
    # the pockets' shade and the cushions' foot give open rings that can outrank a ball: test
    # several peaks, keep at most ring_max_seeds
    for x, y, qv in _peaks(q, level, settings.nms_radius * r, usable, settings.ring_max_tested, ok):
        if len(seeds) >= settings.ring_max_seeds:
            break
        contrast = float(T[y, x] * np.sqrt(g[y, x]))  # L* units
        if closure and not ring_is_closed(lum, wgt, x, y, r, contrast, noise_px, settings):
            continue
        seeds.append({"x": float(x), "y": float(y), "q": qv, "level": level, "contrast": contrast})
    return seeds, info


def ring_centre(lum: np.ndarray, wgt: np.ndarray, x0: float, y0: float, r: float,
                settings: DetectionSettings = DetectionSettings()) -> tuple[float, float, float]:
    """Sub-pixel centre (x, y px) and contrast (L*) of the dark ring within r/2 of (x0, y0) in a luminance patch."""
    T = ring_statistic(lum, wgt, r, settings)[0]
    x, y = subpixel_peak(T, x0, y0, max(2, int(round(0.5 * r))))
    return x, y, float(T[int(round(y)), int(round(x))])


#: Sample spacing along a ray (px) for :func:`ray_profiles`.
RAY_STEP_PX = 0.25


def ray_profiles(img: np.ndarray, wgt: np.ndarray, x0: float, y0: float, n: int, r_from: float, r_to: float
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Profiles of ``img`` along n rays from (x0, y0) (patch px), every RAY_STEP_PX from r_from to r_to px.

    Returns (ang (n,) rad, rad (m,) px, prof (n, m) bilinear samples smoothed
    along each ray only (sigma 0.5 px: pixel noise, not an edge), wv (n, m)
    the weight patch's nearest samples, 0 off the patch).
    """
    ang = np.arange(n) * (2 * np.pi / n)
    rad = np.arange(r_from, r_to, RAY_STEP_PX)
    X = (x0 + np.cos(ang)[:, None] * rad[None, :]).astype(np.float32)
    Y = (y0 + np.sin(ang)[:, None] * rad[None, :]).astype(np.float32)
    prof = cv2.remap(np.asarray(img, np.float32), X, Y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    wv = cv2.remap(wgt.astype(np.float32), X, Y, cv2.INTER_NEAREST, borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    prof = cv2.GaussianBlur(prof, (0, 0), sigmaX=0.5 / RAY_STEP_PX, sigmaY=1e-3)
    return ang, rad, prof, wv


def ring_refine(lum: np.ndarray, wgt: np.ndarray, x0: float, y0: float, r: float,
                settings: DetectionSettings = DetectionSettings()) -> tuple[float, float] | None:
    """Centre (x, y px) of the circle through the darkest point of each ray from (x0, y0), or None.

    Rays (``ring_rays`` of them) run from ring_ray_span[0] to [1] radii and
    are smoothed along their length; a ray crossing pixels of weight 0 (a
    ball already found, off the cloth) is left out. The darkest point is
    the limb / contact-shadow ring, except where the ball's cast shadow
    lies beyond it; a Tukey-weighted circle fit with free radius
    (:func:`tracking.detect.fit_circle_robust`) takes the majority and
    down-weights the shadow's rays. None when fewer than ring_min_rays rays
    are left, or the fit moves more than ring_refine_max_shift radii or
    finds a radius outside ring_refine_radius.
    """
    from tracking.detect import fit_circle_robust

    n = settings.ring_rays
    ang, rad, prof, wv = ray_profiles(lum, wgt, x0, y0, n, settings.ring_ray_span[0] * r, settings.ring_ray_span[1] * r)
    step = RAY_STEP_PX
    pts = []
    for k in range(n):
        if wv[k].min() <= 0:
            continue
        j = int(np.argmin(prof[k]))
        if not 0 < j < len(rad) - 1:
            continue
        a, b, c = prof[k, j - 1:j + 2]
        den = a - 2 * b + c
        rr = rad[j] + (step * float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if den > 1e-9 else 0.0)
        pts.append((x0 + np.cos(ang[k]) * rr, y0 + np.sin(ang[k]) * rr))
    if len(pts) < settings.ring_min_rays:
        return None
    pts = np.array(pts)
    fit = fit_circle_robust(pts, np.ones(len(pts)), np.array([x0, y0]), None, settings.tukey_c)
    cx, cy = float(fit["centre"][0]), float(fit["centre"][1])
    lo, hi = settings.ring_refine_radius
    if not (np.isfinite(cx) and np.isfinite(cy) and lo * r <= fit["radius"] <= hi * r
            and np.hypot(cx - x0, cy - y0) <= settings.ring_refine_max_shift * r):
        return None
    return cx, cy


def patch_noise(lum: np.ndarray, wgt: np.ndarray, x: float, y: float, r_out: float) -> float:
    """Per-pixel noise sigma of a luminance patch: robust (MAD) spread of horizontal neighbour
    differences / sqrt(2) over usable pixels (wgt > 0) beyond r_out px of (x, y); NaN when < 30 pairs.

    Differences of neighbours cancel the smooth shading of the cloth; the
    MAD ignores edges and marks (Hampel 1974: 1.4826 MAD = sigma for
    Gaussian noise).
    """
    yy, xx = np.mgrid[0:lum.shape[0], 0:lum.shape[1] - 1]
    ok = (wgt[:, 1:] > 0) & (wgt[:, :-1] > 0) & ((xx + 0.5 - x) ** 2 + (yy - y) ** 2 > r_out * r_out)
    if ok.sum() < 30:
        return float("nan")
    dl = (lum[:, 1:] - lum[:, :-1])[ok]
    return float(1.4826 * np.median(np.abs(dl - np.median(dl))) / np.sqrt(2.0))


def _ring_fix(cal: Calibration, background: Background, cx: float, cy: float, contrast: float, noise_px: float,
              settings: DetectionSettings) -> tuple[float, np.ndarray, np.ndarray, float, float]:
    """A ring centre (cx, cy: silhouette, image px) as a fix: (expected radius px, (1, 2) ball-centre px,
    table position mm, sigma px = template bound (capped at r) with ring_model_frac x r, mm per px)."""
    r, ox, oy = background.lookup(cx, cy)
    sig_t = template_sigma_px(contrast, noise_px, r, settings.faint_blur_px, 1.0)
    sig = float(np.hypot(min(sig_t, r), settings.ring_model_frac * r))
    p = np.array([[cx - ox, cy - oy]])
    return r, p, cal.px_to_table(p)[0], sig, cal.ball_radius_mm / r


def _outline_holds(patch: np.ndarray, background: Background, xa: int, ya: int, wp: np.ndarray,
                   old: tuple[float, float], new: tuple[float, float], r: float,
                   settings: DetectionSettings) -> bool:
    """Whether a disc of radius r about ``new`` (image px) holds the ball's clearly-not-cloth pixels as well as
    the one about ``old`` does.

    A ball's silhouette is a disc of known radius and every part of the ball
    (a stripe's white caps, a number circle, the coloured band) lies inside
    it. Clearly-not-cloth: the shade-free colour difference
    (:func:`tracking.detect.shade_free_de`, blind to the ball's own cast
    shadow) above ``ring_outline_level`` foreground thresholds, within
    1.6 r of ``old`` where ``wp`` > 0 (other balls' discs and off-cloth
    pixels out). Holds unless the new disc (r + ``ring_outline_pad_px``)
    leaves more than ``ring_outline_max_out`` of those pixels outside beyond
    what the old disc left. patch: BGR pixels of the box whose top-left
    pixel is image (xa, ya), the same box as ``wp``.
    """
    from tracking.detect import shade_free_de

    bl = background.lab_image()[ya:ya + patch.shape[0], xa:xa + patch.shape[1]]
    bw = background.weight_map()[ya:ya + patch.shape[0], xa:xa + patch.shape[1]]
    if bl.shape[:2] != patch.shape[:2]:
        return True
    sf = shade_free_de(to_lab(patch), bl, settings.shade_min_light) * bw
    yy, xx = np.mgrid[ya:ya + patch.shape[0], xa:xa + patch.shape[1]]
    d_old = np.hypot(xx - old[0], yy - old[1])
    d_new = np.hypot(xx - new[0], yy - new[1])
    ball = (d_old <= 1.6 * r) & (wp > 0) & (sf > settings.ring_outline_level * background.threshold_dn)
    n = int(ball.sum())
    if n == 0:
        return True
    lim = r + settings.ring_outline_pad_px
    return int(np.sum(ball & (d_new > lim))) - int(np.sum(ball & (d_old > lim))) <= settings.ring_outline_max_out * n


def _patch(image: np.ndarray, background: Background, full_cloth: np.ndarray, cen: list, rad: list, i: int,
           settings: DetectionSettings):
    """(xa, ya, xb, yb, L* patch, weight patch) round detection i's image centre ``cen[i]``, or None.

    The box reaches 2 ``ring_outer[1]`` radii; the weight is the cloth mask
    with the other detections' discs (``ring_known_pad`` x their radius) at 0.
    """
    H, W = image.shape[:2]
    x0, y0, x1, y1 = background.roi
    gx, gy = cen[i]
    pad = int(np.ceil(2.0 * settings.ring_outer[1] * rad[i])) + 4
    xa, ya, xb, yb = max(0, int(gx) - pad), max(0, int(gy) - pad), min(W, int(gx) + pad + 2), min(H, int(gy) + pad + 2)
    lp = to_lab(image[ya:yb, xa:xb])[..., 0]
    wp = np.zeros(lp.shape, np.float32)
    cy0, cx0, cy1, cx1 = max(ya, y0), max(xa, x0), min(yb, y1), min(xb, x1)
    if cy1 <= cy0 or cx1 <= cx0:
        return None
    wp[cy0 - ya:cy1 - ya, cx0 - xa:cx1 - xa] = full_cloth[cy0 - y0:cy1 - y0, cx0 - x0:cx1 - x0]
    for k, ((kx, ky), rk) in enumerate(zip(cen, rad)):
        if k != i:
            cv2.circle(wp, (int(round((kx - xa) * 16)), int(round((ky - ya) * 16))),
                       int(round(settings.ring_known_pad * rk * 16)), 0, -1, lineType=cv2.LINE_8, shift=4)
    return xa, ya, xb, yb, lp, wp


def ring_patch(image: np.ndarray, background: Background, calibration: Calibration, cen: list, rad: list, i: int,
               settings: DetectionSettings = DetectionSettings()):
    """:func:`_patch` with the search's cloth mask at full resolution (as :func:`recentre_by_ring` uses)."""
    return _patch(image, background, _full_res_cloth_for(background, calibration, settings), cen, rad, i, settings)


def _full_res_cloth_for(background: Background, calibration: Calibration, settings: DetectionSettings) -> np.ndarray:
    """The cloth mask of the ring search at full resolution over the ROI (cached on the Background)."""
    x0, y0, x1, y1 = background.roi
    sc = 2 if background.radius_px >= settings.ring_half_res_px else 1
    cloth, _, msc = surface_masks(background, calibration, settings)
    if msc != sc:
        cloth = cv2.resize(cloth.astype(np.uint8), ((x1 - x0) // sc, (y1 - y0) // sc),
                           interpolation=cv2.INTER_NEAREST) > 0
    return _full_res_cloth(background, cloth, sc)


def ball_centres_px(det: pd.DataFrame, background: Background) -> tuple[list, list]:
    """Image centres (silhouette, px) and expected radii (px) of every detection, in ``det``'s order."""
    cen, rad = [], []
    for x, y in det[["x_px", "y_px"]].to_numpy(float):
        r_e, ox, oy = background.lookup(x, y)
        cen.append((x + ox, y + oy))
        rad.append(r_e)
    return cen, rad


def ring_crowded(cen: list, rad: list, i: int, settings: DetectionSettings = DetectionSettings()) -> bool:
    """True where another ball's disc reaches into ball ``i``'s ring annulus (out to ``ring_outer[1]`` radii).

    A ball in a rack: its neighbour hides part of the ring and adds its own
    contact shadow, so a ring centre is not trusted there.
    """
    cen_a = np.asarray(cen, float).reshape(-1, 2)
    d_nb = np.hypot(cen_a[:, 0] - cen_a[i, 0], cen_a[:, 1] - cen_a[i, 1])
    d_nb[i] = np.inf
    return bool(np.any(d_nb < settings.ring_outer[1] * rad[i] + np.asarray(rad, float)))


def recentre_by_ring(det: pd.DataFrame, image: np.ndarray, calibration: Calibration, background: Background,
                     settings: DetectionSettings = DetectionSettings()) -> pd.DataFrame:
    """Detections whose colour evidence is weak, re-centred on their dark ring (a new DataFrame; det unchanged).

    A ball close to the cloth's colour (red on red, green on green) keeps
    a colour difference only where it is lit: its dim limb matches the
    cloth, the colour silhouette is lost inwards on the side away from the
    lamp, and the circle fit moves towards the lamp or locks onto the
    highlight. Its shading still draws the limb: for a circle-fit
    detection (not a streak: a smeared ball has no ring) whose mean colour
    difference inside 0.6 radius is below ``ring_recentre_contrast``
    thresholds, the ring statistic's sub-pixel peak near the colour centre
    and then :func:`ring_refine` (as :func:`find_dark_ring` does) give the
    centre when the ring there is closed (:func:`ring_is_closed`) and lies
    within ``ring_recentre_max_shift`` radii; the sigma is the ring's
    (template bound plus ``ring_model_frac`` x r) or the colour fit's if larger. Other detections'
    discs carry no weight. Per-pixel L* noise: measured in the patch on
    the cloth beyond ``ring_outer`` radii (:func:`patch_noise`). A detection
    with another ball's disc reaching into its outer annulus (centres closer
    than ``ring_outer[1]`` r + the other's r: a rack) keeps its colour centre,
    and so does one whose ring disc would leave the ball's clearly-not-cloth
    pixels outside (:func:`_outline_holds`: a stripe ball's dark band read as
    a limb, its white cap left on the cloth).
    """
    if det.empty or not settings.ring_recentre:
        return det
    thr = background.threshold_dn
    weak = (det["contrast_dn"].to_numpy(float) < settings.ring_recentre_contrast * thr) \
        & (np.nan_to_num(det["streak_px"].to_numpy(float)) <= 0)
    if not weak.any():
        return det
    cal = calibration
    full_cloth = _full_res_cloth_for(background, cal, settings)
    cen, rad = ball_centres_px(det, background)
    out = det.copy()
    for i in np.nonzero(weak)[0]:
        gx, gy = cen[i]
        r_exp = rad[i]
        if ring_crowded(cen, rad, i, settings):
            continue
        got = _patch(image, background, full_cloth, cen, rad, i, settings)
        if got is None:
            continue
        xa, ya, xb, yb, lp, wp = got
        tx, ty, contrast = ring_centre(lp, wp, gx - xa, gy - ya, r_exp, settings)
        noise_px = patch_noise(lp, wp, gx - xa, gy - ya, settings.ring_outer[1] * r_exp)
        if not contrast > 0 or not np.isfinite(noise_px) \
                or not ring_is_closed(lp, wp, tx, ty, r_exp, contrast, noise_px, settings):
            continue
        ref = ring_refine(lp, wp, tx, ty, r_exp, settings) if settings.ring_refine else None
        cx, cy = (ref[0] + xa, ref[1] + ya) if ref is not None else (tx + xa, ty + ya)
        if np.hypot(cx - gx, cy - gy) > settings.ring_recentre_max_shift * r_exp:
            continue
        if not _outline_holds(image[ya:yb, xa:xb], background, xa, ya, wp, (gx, gy), (cx, cy), r_exp, settings):
            continue  # the ring's disc would leave clear ball pixels (a stripe's white cap) on the cloth
        r_new, p, xy, sig, mmpp = _ring_fix(cal, background, cx, cy, contrast, noise_px, settings)
        j = out.index[i]
        out.loc[j, ["x_px", "y_px", "x_mm", "y_mm"]] = [p[0, 0], p[0, 1], xy[0], xy[1]]
        out.loc[j, ["sx_mm", "sy_mm", "sigma_px"]] = [max(sig * mmpp, out.at[j, "sx_mm"]),
                                                      max(sig * mmpp, out.at[j, "sy_mm"]),
                                                      max(sig, out.at[j, "sigma_px"])]
    return out


class RingGate:
    """Where the dark-ring search of a clip runs, frame by frame (state carried between frames).

    The search of the whole playing surface costs tens of ms per 720p frame
    (three annulus convolutions plus the noise and tail levels); a ball of
    the cloth's colour is rare and, once found, stays near where it was.
    The whole surface is searched on the first ``ring_gate_warmup`` frames
    (until the set of balls is known), every ``ring_gate_period`` frames
    after that, and on any frame where fewer balls are found by colour than
    on the frame before (a ball seen earlier is missing: it may have turned
    into one the colour test cannot see). Between those frames only windows
    ``ring_gate_reach`` radii round the ring finds of the last
    ``ring_gate_period`` frames are searched, at the level measured on the
    last whole-surface search (the window's T values are those of the whole
    image there: the convolutions reach ring_outer radii, inside the
    window's margin). No finds to follow: nothing is searched.
    """

    def __init__(self, settings: DetectionSettings = DetectionSettings()):
        self.s = settings
        self.n = 0
        self.last_full = -10 ** 9
        self.stats: dict | None = None
        self.finds: list[tuple[int, float, float]] = []  # (frame number, x px, y px)
        self.n_known_prev = 0
        self.n_full = 0

    def plan(self, known_px: np.ndarray) -> list[tuple[float, float]] | None:
        """None: search the whole surface this frame; else the window centres (image px, possibly none)."""
        n_known = len(np.asarray(known_px).reshape(-1, 2))
        full = (self.stats is None or self.n < self.s.ring_gate_warmup
                or self.n - self.last_full >= self.s.ring_gate_period or n_known < self.n_known_prev)
        self.n_known_prev = n_known
        if full:
            return None
        recent = {(round(x), round(y)): (x, y) for k, x, y in self.finds if self.n - k <= self.s.ring_gate_period}
        return list(recent.values())

    def record(self, found_px: np.ndarray, info: dict | None) -> None:
        """After the search of this frame: its finds (N,2) px; info: the whole-surface search's levels, or None."""
        if info is not None:
            self.last_full = self.n
            self.n_full += 1
            if np.isfinite(info.get("level", np.inf)) and "noise_px" in info:
                self.stats = {k: info[k] for k in ("mu", "sd", "level", "noise_px", "n_positions")}
        self.finds = [f for f in self.finds if self.n - f[0] <= self.s.ring_gate_period]
        self.finds += [(self.n, float(x), float(y)) for x, y in np.asarray(found_px, float).reshape(-1, 2)]
        self.n += 1


def _full_res_cloth(background: Background, cloth: np.ndarray, sc: int) -> np.ndarray:
    """The search's cloth mask (ROI) at full resolution (uint8), cached on the Background."""
    key = ("_ring_full_cloth", sc)
    cache = getattr(background, "_ring_full_cloth", None)
    if cache is not None and cache[0] == key:
        return cache[1]
    x0, y0, x1, y1 = background.roi
    full = cv2.resize(cloth.astype(np.uint8), (x1 - x0, y1 - y0), interpolation=cv2.INTER_NEAREST) \
        if sc > 1 else cloth.astype(np.uint8)
    background._ring_full_cloth = (key, full)
    return full


def find_dark_ring(image: np.ndarray, calibration: Calibration, background: Background, known_px: np.ndarray,
                   settings: DetectionSettings = DetectionSettings(), gate: RingGate | None = None) -> pd.DataFrame:
    """Balls of the cloth's colour in one BGR uint8 frame, away from the balls already found (known_px (N,2)).

    gate: a :class:`RingGate` carried over the clip's frames (None: the
    whole surface on every frame). Returns a DataFrame with
    :data:`tracking.detect.DETECTION_COLUMNS` plus :data:`RING_COLUMNS`;
    empty when nothing passes.
    """
    cal = calibration
    x0, y0, x1, y1 = background.roi
    r0 = background.radius_px
    sc = 2 if r0 >= settings.ring_half_res_px else 1
    known = np.asarray(known_px, float).reshape(-1, 2)
    windows = gate.plan(known) if gate is not None else None
    if windows is not None and not windows:
        gate.record(np.zeros((0, 2)), None)
        return pd.DataFrame(columns=DETECTION_COLUMNS + RING_COLUMNS)
    cloth, centre_ok, msc = surface_masks(background, cal, settings)
    size = ((x1 - x0) // sc, (y1 - y0) // sc)
    if msc != sc:
        cloth = cv2.resize(cloth.astype(np.uint8), size, interpolation=cv2.INTER_NEAREST) > 0
        centre_ok = cv2.resize(centre_ok.astype(np.uint8), size, interpolation=cv2.INTER_NEAREST) > 0
    kr = np.array([background.lookup(x, y)[0] for x, y in known]).reshape(-1)
    kp = (known - [x0, y0] - 0.5 * (sc - 1)) / sc
    # the searched box (search resolution, ROI frame): all of it, or the windows
    # grown by the template's reach (the statistic there is the whole image's)
    bx0, by0, bx1, by1 = 0, 0, size[0], size[1]
    win_ok = None
    if windows is not None:
        wp = (np.array(windows, float) - [x0, y0] - 0.5 * (sc - 1)) / sc
        reach = settings.ring_gate_reach * r0 / sc
        m = reach + 2.0 * settings.ring_outer[1] * r0 / sc + 2
        bx0, by0 = max(0, int(wp[:, 0].min() - m)), max(0, int(wp[:, 1].min() - m))
        bx1, by1 = min(size[0], int(np.ceil(wp[:, 0].max() + m)) + 1), min(size[1], int(np.ceil(wp[:, 1].max() + m)) + 1)
        win_ok = ~_outside_discs((by1 - by0, bx1 - bx0), wp - [bx0, by0], reach)
    if bx1 - bx0 < 4 or by1 - by0 < 4:
        gate.record(np.zeros((0, 2)), None)
        return pd.DataFrame(columns=DETECTION_COLUMNS + RING_COLUMNS)
    if windows is None:
        roi = image[y0:y1, x0:x1]
        small = cv2.resize(roi, size, interpolation=cv2.INTER_AREA) if sc > 1 else roi
    else:
        # the box in full-resolution pixels (INTER_AREA at scale sc averages sc x sc blocks)
        roi = image[y0 + by0 * sc:y0 + by1 * sc, x0 + bx0 * sc:x0 + bx1 * sc]
        small = cv2.resize(roi, (bx1 - bx0, by1 - by0), interpolation=cv2.INTER_AREA) if sc > 1 else roi
    lum = to_lab(small)[..., 0]
    c_ok = centre_ok[by0:by1, bx0:bx1] if win_ok is None else centre_ok[by0:by1, bx0:bx1] & win_ok
    seeds, info = ring_search(lum, cloth[by0:by1, bx0:bx1], r0 / sc, kp - [bx0, by0], kr / sc, settings, c_ok,
                              closure=sc == 1, stats=None if windows is None else gate.stats)
    for sd in seeds:
        sd["x"] += bx0
        sd["y"] += by0
    rows = []
    accepted = [tuple(p) for p in known]
    acc_r = list(kr)
    H, W = image.shape[:2]
    for sd in seeds:
        gx, gy = sd["x"] * sc + 0.5 * (sc - 1) + x0, sd["y"] * sc + 0.5 * (sc - 1) + y0
        r_exp, _, _ = background.lookup(gx, gy)
        # full resolution: the ring statistic in a patch, its sub-pixel peak
        pad = int(np.ceil(2.0 * settings.ring_outer[1] * r_exp)) + 4
        xa, ya, xb, yb = max(0, int(gx) - pad), max(0, int(gy) - pad), min(W, int(gx) + pad + 2), min(H, int(gy) + pad + 2)
        lp = to_lab(image[ya:yb, xa:xb])[..., 0]
        wp = np.zeros(lp.shape, np.float32)
        cy0, cx0 = max(ya, y0), max(xa, x0)
        cy1, cx1 = min(yb, y1), min(xb, x1)
        full_cloth = _full_res_cloth(background, cloth, sc)
        wp[cy0 - ya:cy1 - ya, cx0 - xa:cx1 - xa] = full_cloth[cy0 - y0:cy1 - y0, cx0 - x0:cx1 - x0]
        for (kx, ky), rk in zip(accepted, acc_r):
            cv2.circle(wp, (int(round((kx - xa) * 16)), int(round((ky - ya) * 16))),
                       int(round(settings.ring_known_pad * rk * 16)), 0, -1, lineType=cv2.LINE_8, shift=4)
        tx, ty, contrast = ring_centre(lp, wp, gx - xa, gy - ya, r_exp, settings)
        # the refined centre first, the ring's peak if that comes too close to a ball already found
        options = [(tx, ty)]
        if settings.ring_refine:
            ref = ring_refine(lp, wp, tx, ty, r_exp, settings)
            if ref is not None:
                options.insert(0, ref)
        options = [(ox_ + xa, oy_ + ya) for ox_, oy_ in options
                   if all(np.hypot(ox_ + xa - a, oy_ + ya - b) >= settings.ring_min_sep * rb
                          for (a, b), rb in zip(accepted, acc_r))]
        if not options:
            continue
        cx, cy = options[0]
        # per-pixel L* noise at full resolution: area averaging over sc x sc pixels divided it by sc
        noise_px = info["noise_px"] * sc
        if sc > 1 and not ring_is_closed(lp, wp, tx, ty, r_exp, contrast, noise_px, settings):
            continue
        if not _on_cloth(cal, np.array([[cx, cy]]), settings.faint_margin * cal.ball_radius_mm)[0]:
            continue
        r_exp, p, xy, sig, mmpp = _ring_fix(cal, background, cx, cy, contrast, noise_px, settings)
        col = colour_summary(image, cx, cy, r_exp, settings)
        conf = float(settings.ring_max_conf * np.clip(1.0 - sd["level"] / sd["q"], 0.0, 1.0))
        rows.append({"x_px": p[0, 0], "y_px": p[0, 1], "x_mm": xy[0], "y_mm": xy[1],
                     "sx_mm": sig * mmpp, "sy_mm": sig * mmpp, "sigma_px": sig, "confidence": conf,
                     "radius_px": r_exp, "radius_expected_px": r_exp, "support": 0.0, "contrast_dn": 0.0,
                     **col, "streak_px": 0.0, "streak_deg": np.nan,
                     "ring_q": sd["q"], "ring_level": sd["level"], "ring_contrast": contrast})
        accepted.append((cx, cy))
        acc_r.append(r_exp)
    out = pd.DataFrame(rows, columns=DETECTION_COLUMNS + RING_COLUMNS)
    if gate is not None:
        # the windows follow the ring centres (image px, before the silhouette offset)
        gate.record(np.array(accepted[len(known):], float).reshape(-1, 2), info if windows is None else None)
    return out
