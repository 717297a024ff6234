"""Find the playing surface in an image: cloth region, rough outline, nose-edge points.

Pure array functions used by :mod:`tracking.calibrate`. Pixels follow OpenCV
(origin at the centre of the top-left pixel, x right, y down).

Which edge we measure
---------------------
The playing surface is bounded by the cushion *noses*: the horizontal line
along which each cushion's rubber reaches furthest into the table, at nose
height h above the cloth (WPA: ~63.5% of the ball diameter). Seen from above,
the nose is the inner edge of the cushion's top surface. Inward of it there is
either cloth seen directly, or a narrow dark band (the shadow the overhanging
nose casts on the cloth, or - where the face is vertical or slopes outward -
the face itself, lit at grazing incidence). So, walking a profile outward from
the cloth, the nose is the *last* strong edge before the first flat stretch
of the cushion top; where there is no band it is the single cloth/cushion
edge. All these points lie at height h, which is what the camera fit assumes.
An undercut face (leaning back below the nose) is hidden from a camera whose
sight line to the nose is steeper than the lean; just past that angle it
shows as a dark line narrower than the blur, which no profile resolves but
which pulls the single edge inward (:func:`face_line_shift`).
The cushion top may be of the cloth's own shade (cushions are covered with the
same cloth); then the band between is what marks the nose, and it must be no
wider than a face can look (``CalibrationSettings.band_max_mm``).

Edges are first found as gradient peaks; where a band lies between cloth and
cushion top both its edges are refined together with a blurred two-step
(+ shading ramp) model (:func:`refine_band_edges`), since the peaks of two
edges a few pixels apart pull on each other.

Sub-pixel positions in linear light (optional)
----------------------------------------------
Lens and sensor blur act on light, before the camera's tone curve; video is
stored tone-encoded (sRGB / Rec. 709, roughly a 1/2.2 power). A step blurred
by the lens alone, seen through that curve, is lopsided: its gradient peak
moves towards the dark side, by 0.2-0.8 px for a dark face band against a lit
cushion top at 0.6-1.5 px blur (closed form: the peak of
d/dx enc(a + (b - a) Phi(x / s)); see tests/test_calib_linear_light.py).
Blur added after encoding (resizing, remapping, filters on 8-bit frames) is
symmetric in the stored values instead. With ``CalibrationSettings.tone_curve``
set, edges are still *detected* on the stored image (its noise thresholds are
in DN) but *located* on the profile decoded to linear light
(:func:`linear_gray`); by default they are located on the stored values
(see the setting for the figures behind that choice).
"""
from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter1d

from tracking.settings import CalibrationSettings


@dataclass
class EdgePoints:
    """Sub-pixel nose-edge points found along one side of the table.

    side: 'y0', 'xL', 'yW' or 'x0' (the cushion's table-frame name).
    px: (N, 2) pixel positions; strength: (N,) edge contrast (DN).
    """

    side: str
    px: np.ndarray
    strength: np.ndarray


def median_image(frames: list[np.ndarray], max_frames: int) -> np.ndarray:
    """Per-pixel median of up to ``max_frames`` evenly chosen frames (float32, 0..255)."""
    if len(frames) > max_frames:
        idx = np.linspace(0, len(frames) - 1, max_frames).round().astype(int)
        frames = [frames[i] for i in idx]
    frames = [np.asarray(f) for f in frames]
    h, w = frames[0].shape[:2]
    out = np.empty((h, w, 3), np.float32)
    rows = max(1, int(4e6 // max(w * 3 * len(frames), 1)))  # a few MB per block: 4K frames stay cheap
    for r0 in range(0, h, rows):
        block = np.stack([f[r0: r0 + rows] for f in frames], axis=0)
        if block.ndim == 3:  # grey frames
            block = block[..., None]
        out[r0: r0 + rows] = np.median(block, axis=0)
    return out


def cloth_projection(image: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """The image projected on the cloth's colour direction (float32, DN): the nose-step detector.

    A cushion covered with the table's cloth differs from the cloth beside
    it by how it is lit: in linear light every channel scales by the same
    factor, and through a power-law tone curve still by one common factor,
    so the step lies along the cloth's colour vector c. Projecting on c/|c|
    is the matched linear detector for it; by Cauchy-Schwarz its contrast
    over sensor noise is never below the grey mean's and up to sqrt(3) (3 for
    noise common to the channels) above it for a saturated cloth. Grey
    frames, or a black cloth, give the grey axis.
    """
    a = np.asarray(image, np.float32)
    if a.ndim == 2:
        return a * np.float32(np.sqrt(3.0))
    c = np.median(a[mask], axis=0) if mask.any() else np.ones(3, np.float32)
    nrm = float(np.linalg.norm(c))
    u = c / nrm if nrm >= 1.0 else np.full(3, 1 / np.sqrt(3.0), np.float32)
    return (a @ u.astype(np.float32)).astype(np.float32)


def linear_gray(image: np.ndarray, tone_curve: str = "srgb") -> np.ndarray:
    """Grey image in linear light, 0..255 (float32), from an 8-bit tone-encoded BGR or grey image.

    tone_curve "srgb": the IEC 61966-2-1 decoding (Rec. 709 video differs from
    it by well under the blur effects it corrects); "none": the image is
    already linear (raw or linear-light footage). Channels are decoded before
    they are averaged.

    >>> [round(float(v), 2) for v in linear_gray(np.array([[0, 128, 255]], np.uint8))[0]]
    [0.0, 55.04, 255.0]
    """
    a = np.asarray(image, np.float32)
    if tone_curve == "none":
        lin = a
    elif tone_curve == "srgb":
        c = np.clip(a / 255.0, 0.0, 1.0)
        lin = 255.0 * np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    else:
        raise ValueError(f"unknown tone curve {tone_curve!r}; use 'srgb' or 'none'")
    return (lin.mean(axis=2) if lin.ndim == 3 else lin).astype(np.float32)


def cloth_mask(image: np.ndarray, settings: CalibrationSettings) -> np.ndarray:
    """Boolean mask of the cloth region grown from the image centre.

    Edges (colour gradient above a noise-scaled barrier) split the image into
    regions; the cloth is the region holding the seed, the pixel of the
    central box closest to that box's median colour (any cloth colour). Smooth
    lighting changes (vignetting, gradients) are no barrier; cushion, pocket and
    rail edges are. Holes (balls, marks) are filled.

    The gradient is taken relative to the local brightness (DN/px over DN, the
    gradient of log intensity): light falls on cloth and cushion alike, so a
    cushion edge in a dim corner is as strong as one under the lamp, and a
    lamp's fall-off is as weak in the dark as in the bright.
    """
    h, w = image.shape[:2]
    sm = cv2.GaussianBlur(image, (0, 0), settings.region_smooth_px)
    gx = cv2.Sobel(sm, cv2.CV_32F, 1, 0, ksize=3) / 8.0
    gy = cv2.Sobel(sm, cv2.CV_32F, 0, 1, ksize=3) / 8.0
    grad = np.sqrt(gx * gx + gy * gy).max(axis=2)  # DN per px, strongest channel
    rel = grad / (sm.astype(np.float32).max(axis=2) + settings.region_level_floor_dn)  # per px
    bx, by = int(w * settings.seed_box_frac / 2), int(h * settings.seed_box_frac / 2)
    sl = (slice(h // 2 - by, h // 2 + by), slice(w // 2 - bx, w // 2 + bx))
    box = sm[sl].reshape(-1, 3)
    med = np.median(box, axis=0)
    k = int(np.argmin(np.abs(box - med).sum(axis=1) + 10 * grad[sl].reshape(-1)))
    seed = (w // 2 - bx + k % (2 * bx), h // 2 - by + k // (2 * bx))
    gb = rel[sl]
    gmed = np.median(gb)
    barrier = max(gmed + settings.region_grad_sigmas * 1.4826 * np.median(np.abs(gb - gmed)),
                  settings.region_step_rel)
    free = (rel < barrier).astype(np.uint8)
    n, lab = cv2.connectedComponents(free, connectivity=4)
    region = lab == lab[seed[1], seed[0]]
    # keep one solid region: fill holes via the outer contour
    cnts, _ = cv2.findContours(region.astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    if not cnts:
        return region
    big = max(cnts, key=cv2.contourArea)
    out = np.zeros((h, w), np.uint8)
    cv2.drawContours(out, [big], -1, 1, thickness=-1)
    return out > 0


def rough_quad(mask: np.ndarray) -> np.ndarray | None:
    """Four corners (4, 2) px of the mask's convex hull, or None if it is no quadrilateral."""
    cnts, _ = cv2.findContours(mask.astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    if not cnts:
        return None
    hull = cv2.convexHull(max(cnts, key=cv2.contourArea))
    peri = cv2.arcLength(hull, True)
    for frac in np.linspace(0.005, 0.1, 40):
        approx = cv2.approxPolyDP(hull, frac * peri, True)
        if len(approx) == 4:
            return _corner_refine(hull.reshape(-1, 2).astype(float), approx.reshape(4, 2).astype(float))
        if len(approx) < 4:
            break
    return None


def region_reach_px(mask: np.ndarray, corners: np.ndarray) -> np.ndarray:
    """How far (px) the region's rim reaches outward of each side of its rough outline, (4,).

    corners: (4, 2) px in cyclic order; side i runs from corner i to i + 1.
    The outline comes from the region's hull, and where the region's rim is
    ragged or rounded (dim cloth: noise crosses the barrier, so the rim stops
    short and frays) the four-cornered outline cuts inside it; the cloth's
    true edge lies outward of every rim point (the region does not cross
    edges). Per side: the outermost decile of the rim points nearest that side
    (middle 80 % of it; pocket mouths bulge in less than a tenth), as a
    distance outward of the side (0 when none lies outward).
    """
    cnts, _ = cv2.findContours(mask.astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    out = np.zeros(4)
    if not cnts:
        return out
    rim = max(cnts, key=cv2.contourArea).reshape(-1, 2).astype(float)
    c = corners.mean(axis=0)
    sides = []
    for i in range(4):
        p0, p1 = corners[i], corners[(i + 1) % 4]
        L = float(np.linalg.norm(p1 - p0))
        u = (p1 - p0) / max(L, 1e-9)
        n = np.array([-u[1], u[0]])
        if np.dot(n, (p0 + p1) / 2 - c) < 0:
            n = -n
        sides.append((p0, u, n, L))
    d_out = np.column_stack([(rim - p0) @ n for p0, _, n, _ in sides])  # outward distance from each side
    near = np.abs(d_out).argmin(axis=1)
    for i, (p0, u, n, L) in enumerate(sides):
        sf = (rim[near == i] - p0) @ u / max(L, 1e-9)
        d = d_out[near == i][(sf > 0.1) & (sf < 0.9)]
        if d.size >= 10:
            out[i] = max(float(np.percentile(d, 90)), 0.0)
    return out


def _corner_refine(hull: np.ndarray, quad: np.ndarray) -> np.ndarray:
    """Intersect lines fitted to the hull points nearest each quad side (cuts corner bevels)."""
    lines = []
    for i in range(4):
        a, b = quad[i], quad[(i + 1) % 4]
        d = b - a
        L = np.linalg.norm(d)
        u = d / L
        n = np.array([-u[1], u[0]])
        s = (hull - a) @ u
        dist = np.abs((hull - a) @ n)
        sel = (s > 0.15 * L) & (s < 0.85 * L) & (dist < 0.02 * L + 3)
        if sel.sum() < 2:
            lines.append((a, u))
            continue
        p = hull[sel]
        c = p.mean(axis=0)
        _, _, vt = np.linalg.svd(p - c)
        lines.append((c, vt[0]))
    out = np.empty((4, 2))
    for i in range(4):
        (p1, u1), (p2, u2) = lines[i - 1], lines[i]
        A = np.column_stack([u1, -u2])
        try:
            s = np.linalg.solve(A, p2 - p1)
            out[i] = p1 + s[0] * u1
        except np.linalg.LinAlgError:
            out[i] = quad[i]
    return out


def _sample(gray: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Bilinear samples of ``gray`` at float pixel positions (..., 2)."""
    shp = pts.shape[:-1]
    p = pts.reshape(-1, 2).astype(np.float32)
    n = len(p)
    cols = 4096
    rows = -(-n // cols)
    pad = np.zeros((rows * cols, 2), np.float32)
    pad[:n] = p
    mx = np.ascontiguousarray(pad[:, 0].reshape(rows, cols))
    my = np.ascontiguousarray(pad[:, 1].reshape(rows, cols))
    v = cv2.remap(gray, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE).reshape(-1)[:n]
    return v.reshape(shp)


#: Least gradient (fraction of the faintest cushion nose's gradient peak,
#: CalibrationSettings.nose_contrast_min of the cloth level at ~1 px blur) of
#: a profile's first edge off the cloth. Without it the floor was the noise
#: (edge_min_snr) or 1 DN/px: a 3840x2160 upscaled, MPEG-4 part 2 re-encoded
#: copy of the outside clip D2, reduced 3x (tracking.calibrate_scale), has
#: a cloth so smooth that 4-DN block steps on it cleared both, and on 40 % of
#: the x0 profiles the face band's foot was taken 8 px inward of the face.
#: 0.5 lost faint noses (codec-blurred cushion tops of the cloth's colour:
#: MuJoCo renders mj11202, mj13102, mj13103 refused); 0.25 kept them.
FIRST_EDGE_FLOOR = 0.25


def nose_offset(profile: np.ndarray, step: float, plateau_n: int, settings: CalibrationSettings,
                inner_n: int, band_max_n: int | None = None) -> tuple[float, float, float | None, int] | None:
    """Offsets (samples) of the nose edge along an outward profile, its contrast, and the band's inner edge.

    ``inner_n`` leading samples are known cloth. The third value is the offset
    of the first (cloth-side) edge when a band lies between cloth and cushion
    top, else None. Returns None when the profile shows no clean cloth ->
    cushion transition (pocket, ball, clutter).
    """
    g = profile.astype(float)
    cloth = g[:inner_n]
    c0 = np.median(cloth)
    noise = 1.4826 * np.median(np.abs(cloth - c0)) + 0.5
    sig = settings.edge_sigma_px / step
    dg = gaussian_filter1d(g, sig, order=1) / step  # DN per px
    dc = dg[:inner_n]
    dnoise = 1.4826 * np.median(np.abs(dc - np.median(dc))) + 0.2
    # ... and at least FIRST_EDGE_FLOOR of the faintest nose sought on this
    # cloth (as in noise_strip_px): on cloth smoothed flat by a codec its
    # blocks' DC steps (a few DN) would otherwise count as the first edge
    floor = FIRST_EDGE_FLOOR * settings.nose_contrast_min * abs(c0) / (
        np.sqrt(2 * np.pi) * np.hypot(1.0, settings.edge_sigma_px))
    thr = max(settings.edge_min_snr * dnoise, 1.0, floor)
    absd = np.abs(dg)
    # the first edge: the first run of strong gradient beyond the known cloth
    # (slow shading of the cloth, e.g. darkening near the cushions, is no edge)
    over = np.nonzero(absd[inner_n:] >= thr)[0]
    if over.size == 0:
        return None
    i0 = inner_n + int(over[0])
    i_end = i0
    while i_end + 1 < len(g) and absd[i_end + 1] >= thr:
        i_end += 1
    i1 = i0 + int(np.argmax(absd[i0: i_end + 1]))
    e1 = absd[i1]
    strong = max(thr, settings.edge_rel_min * e1)
    flat = max(0.5 * thr, 0.15 * e1)
    # walk outward to the first flat stretch (the cushion top)
    run = 0
    plateau = None
    for i in range(i1, len(g)):
        if absd[i] < flat:
            run += 1
            if run >= plateau_n:
                plateau = i - run + 1
                break
        else:
            run = 0
    if plateau is None:
        return None
    # last strong local maximum of |dg| before the plateau
    cand = [i for i in range(max(i1, 1), plateau) if absd[i] >= strong
            and absd[i] >= absd[i - 1] and absd[i] >= absd[i + 1]]
    if not cand:
        return None
    k = cand[-1]
    k0 = np.median(g[plateau: plateau + plateau_n])
    # A cushion top at the cloth's own level (cushions covered with the same
    # cloth) is told from a ball or mark on the cloth by the band between:
    # it must be no wider than a cushion face can look (band_max_n).
    same_level = abs(k0 - c0) < max(6 * noise, 4.0)
    if same_level and (band_max_n is None or (k != i1 and k - i1 > band_max_n)):
        return None
    if k == i1:
        # A band narrower than the blur shows as an overshoot beyond the
        # cushion level without a resolved second edge: mark the far side
        # of the overshoot as the band's outer edge for the model fit.
        seg = g[i1: plateau]
        lo_l, hi_l = min(c0, k0), max(c0, k0)
        outside = np.maximum(lo_l - seg, seg - hi_l)
        j = int(np.argmax(outside))
        if outside[j] > max(4 * noise, 3.0):
            ext = i1 + j
            # first sample past the extremum back within the cushion half-way level
            lvl = 0.5 * (g[ext] + k0)
            after = np.nonzero((g[ext:plateau + 1] - lvl) * (g[ext] - lvl) <= 0)[0]
            kk = ext + (int(after[0]) if after.size else 0)
            if kk > i1 and not (same_level and kk - i1 > band_max_n):
                return float(kk), float(absd[kk]), float(i1), plateau + plateau_n
        if same_level:
            return None
    a, b, c = absd[k - 1], absd[k], absd[k + 1]
    den = a - 2 * b + c
    frac = 0.5 * (a - c) / den if den < 0 else 0.0
    inner = None
    if k != i1 and i1 >= 1:
        a1, b1, c1 = absd[i1 - 1], absd[i1], absd[i1 + 1]
        den1 = a1 - 2 * b1 + c1
        inner = i1 + (float(np.clip(0.5 * (a1 - c1) / den1, -0.5, 0.5)) if den1 < 0 else 0.0)
    return k + float(np.clip(frac, -0.5, 0.5)), float(b), inner, plateau + plateau_n


def refine_band_edges(x: np.ndarray, prof: np.ndarray, e1: np.ndarray, e2: np.ndarray, lo: np.ndarray,
                      hi: np.ndarray, sigma0: float, iters: int = 12,
                      ramp: bool = True, slopes: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Fit two blurred steps (cloth -> band -> cushion top) to many profiles at once.

    Model per profile: g(x) = a0 + a1 Phi((x - e1)/s) + a2 Phi((x - e2)/s)
    [+ a3 B(x)], Phi the normal CDF (a step blurred by a Gaussian PSF of width
    s px) and B the same blur of a ramp rising across the band from e1 to e2
    (a face whose shading changes with height; B = s (psi(z1) - psi(z2)),
    psi(z) = z Phi(z) + phi(z), the integral of Phi) [+ a4 s psi(-z1) +
    a5 s psi(z2)]: with ``slopes``, the same blur of a linear shading on the
    cloth side of e1 and on the cushion-top side of e2 (light falling off
    towards the cushion, a rounded nose catching the lamps). Unmodelled, such
    a slope next to an edge pulls the fitted edge towards it by a few tenths
    of a px; it is not an edge, and the fitting window (a few px either side of
    the band) keeps the first-order term enough. The
    levels enter linearly and are solved exactly for each trial (e1, e2, s)
    (variable projection, Golub & Pereyra, SIAM J. Numer. Anal. 10, 1973);
    (e1, e2, log s) follow Levenberg-Marquardt steps. Unlike gradient peaks,
    the fitted positions are not pulled together/apart when the band is only
    a few PSF widths wide. x: (N,) or (P, N) sample positions (px); prof: (P, N); e1, e2:
    (P,) start positions (px); lo, hi: (P,) fitting window (px).
    Returns (e1, e2, rms residual) (P,).
    """
    from scipy.special import ndtr

    P = prof.shape[0]
    X = np.broadcast_to(np.asarray(x, float), prof.shape)
    w = ((X >= lo[:, None]) & (X <= hi[:, None])).astype(float)
    th = np.column_stack([e1, e2, np.full(P, np.log(sigma0))]).astype(float)

    def resid(t):
        s = np.exp(t[:, 2])[:, None]
        z1 = (X - t[:, 0:1]) / s
        z2 = (X - t[:, 1:2]) / s
        p1, p2 = ndtr(z1), ndtr(z2)
        cols = [np.ones_like(prof), p1, p2]
        if ramp:
            psi1 = z1 * p1 + np.exp(-0.5 * z1 * z1) / np.sqrt(2 * np.pi)
            psi2 = z2 * p2 + np.exp(-0.5 * z2 * z2) / np.sqrt(2 * np.pi)
            cols.append(s * (psi1 - psi2))
        if slopes:
            m1 = -z1
            cols.append(s * (m1 * ndtr(m1) + np.exp(-0.5 * m1 * m1) / np.sqrt(2 * np.pi)))
            psi2o = z2 * p2 + np.exp(-0.5 * z2 * z2) / np.sqrt(2 * np.pi)
            cols.append(s * psi2o)
        A = np.stack(cols, axis=2)
        Aw = A * w[..., None]
        At = Aw.transpose(0, 2, 1)
        M = At @ A + 1e-9 * np.eye(A.shape[2])
        v = At @ prof[..., None]
        a = np.linalg.solve(M, v)
        return w * (prof - (A @ a)[..., 0])

    lam = np.full(P, 1e-2)
    r = resid(th)
    cost = (r * r).sum(axis=1)
    h = np.array([1e-3, 1e-3, 1e-3])
    for _ in range(iters):
        J = np.stack([(resid(th + np.eye(3)[j] * h[j]) - r) / h[j] for j in range(3)], axis=2)  # P,N,3
        Jt = J.transpose(0, 2, 1)
        JTJ = Jt @ J
        g = (Jt @ r[..., None])[..., 0]
        D = JTJ + lam[:, None, None] * (np.eye(3)[None] * (np.diagonal(JTJ, axis1=1, axis2=2)[:, :, None] + 1e-9))
        step = -np.linalg.solve(D, g[..., None])[..., 0]
        step[:, :2] = np.clip(step[:, :2], -1.0, 1.0)
        step[:, 2] = np.clip(step[:, 2], -0.5, 0.5)
        trial = th + step
        trial[:, 2] = np.clip(trial[:, 2], np.log(0.2), np.log(5.0))
        r2 = resid(trial)
        c2 = (r2 * r2).sum(axis=1)
        better = c2 < cost
        th[better] = trial[better]
        r[better] = r2[better]
        cost[better] = c2[better]
        lam = np.where(better, lam * 0.3, lam * 10.0)
    n = np.maximum(w.sum(axis=1) - 7, 1)
    return th[:, 0], th[:, 1], np.sqrt(cost / n)


def _relocate_peaks(prof: np.ndarray, offs: np.ndarray, pos: np.ndarray, settings: CalibrationSettings,
                    reach_px: float = 1.5) -> np.ndarray:
    """Gradient-peak positions (px) of single edges in profiles ``prof`` (P, N), near ``pos`` (P,).

    The strongest |gradient| (Gaussian derivative, ``edge_sigma_px``) within
    ``reach_px`` of each start position, refined by a parabola through the
    peak and its neighbours. A peak on the window's rim (the edge lies
    further away, or there is none) leaves the start position.
    """
    step = float(offs[1] - offs[0])
    dg = np.abs(gaussian_filter1d(prof.astype(float), settings.edge_sigma_px / step, order=1, axis=1))
    c = np.round((pos - offs[0]) / step).astype(int)
    m = max(int(round(reach_px / step)), 1)
    out = pos.astype(float).copy()
    n = prof.shape[1]
    for i in range(len(pos)):
        lo, hi = max(c[i] - m, 1), min(c[i] + m, n - 2)
        if hi <= lo:
            continue
        k = lo + int(np.argmax(dg[i, lo: hi + 1]))
        if k in (lo, hi):
            continue
        a, b, cc = dg[i, k - 1], dg[i, k], dg[i, k + 1]
        den = a - 2 * b + cc
        frac = float(np.clip(0.5 * (a - cc) / den, -0.5, 0.5)) if den < 0 else 0.0
        out[i] = offs[0] + (k + frac) * step
    return out


#: Half-width (px) of the window over which a single edge is fitted as a
#: blurred step (:func:`fit_single_edges`). Block transform codecs (JPEG,
#: MPEG-2/4 part 2: 8x8; H.264/HEVC: 4-32) quantise each block on its own:
#: within a block holding a faint edge they spread or pile its contrast, and a
#: step appears on the block's boundary, so the steepest gradient is drawn to
#: the block grid. A least-squares step over a window that holds the edge's
#: block(s) and flat cloth / cushion top beyond them uses the whole transition,
#: whose block means the codec keeps to within its DC quantisation step.
#: 10 px covers an 8-px block either side of an edge anywhere in its block
#: plus 2 px of blur (mj11001's short sides: 5, 7, 10, 14 px gave mean/sd
#: -0.25/0.53, -0.20/0.42, -0.15/0.37, -0.13/0.38 px on x0 vs the truth
#: camera's nose line, gradient peak -0.44/1.05); the outer end stays on the
#: cushion top's plateau (edge_points_along).
SINGLE_FIT_HALF_PX = 10.0
#: Locate single edges by that fit (False: the gradient peak, as before).
SINGLE_FIT = True
#: Search range (px) of the fitted step around the detected gradient peak.
SINGLE_FIT_REACH_PX = 3.0
#: Blur widths (px, Gaussian sigma) tried for the fitted step (the blur of the
#: nose edge varies with focus, the codec's smoothing and a rounded nose).
SINGLE_FIT_SIGMAS = (0.6, 0.8, 1.0, 1.3, 1.7, 2.2, 2.8)


#: Largest scatter (px, robust sd about a straight trend along the side) of
#: a side's band widths for the bands to be taken as a cushion face or
#: shadow (:func:`band_width_scatter_px`). Measured: 0.2-0.3 px on the outside
#: footage D1's face bands (2.9-6.1 px wide, all profiles); 1.4-1.5 px on the
#: codec ramps of MuJoCo render mj11202's x0 side (mp4v; 5.4-6.1 px wide, 52-56 %
#: of profiles). A ramp spread across a block takes a width set by the edge's
#: phase in it, uniform over a block of b px: its MAD is b / 4, so this robust
#: sd 1.4826 b / 4 (3.0 px for 8-px blocks, 1.5 px for 4-px ones).
BAND_WIDTH_SCATTER_PX = 1.0


def band_width_scatter_px(s: np.ndarray, width: np.ndarray) -> float:
    """Robust sd (px, 1.4826 MAD) of band widths about a Theil-Sen line in the along-side position s.

    0 with fewer than 8 bands (too few to judge; the share test applies).

    >>> band_width_scatter_px(np.linspace(0, 1, 20), np.linspace(3.0, 4.0, 20))
    0.0
    """
    if len(width) < 8:
        return 0.0
    from scipy.stats import theilslopes

    s = np.asarray(s, float)
    width = np.asarray(width, float)
    if np.ptp(s) <= 0:
        r = width
    else:
        slope, icpt, _, _ = theilslopes(width, s)  # robust line (Theil-Sen): clutter does not tilt it
        r = width - (icpt + slope * s)
    return float(np.round(1.4826 * np.median(np.abs(r - np.median(r))), 12))


def fit_single_edges(prof: np.ndarray, offs: np.ndarray, pos: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                     reach_px: float | np.ndarray = SINGLE_FIT_REACH_PX, sigmas=SINGLE_FIT_SIGMAS,
                     spacing_px: float = 0.5) -> np.ndarray:
    """Single edges located by least-squares blurred steps, one per profile (px along ``offs``).

    Model per profile: c + A Phi((x - e)/s) over lo <= x <= hi (px), Phi the
    normal CDF (a step blurred by a Gaussian PSF of width s); c and A enter
    linearly and are solved exactly for each trial (e, s) (variable
    projection, Golub & Pereyra 1973); e runs over pos +- reach_px (0.2 px,
    then 0.025 px around the best), s over ``sigmas``; the best e is refined
    by a parabola through the residual sum of squares at its neighbours.
    Unlike a gradient peak the fit weighs every sample of the transition and
    both levels, so a codec's block-boundary step (a few DN between flat
    blocks, see ``SINGLE_FIT_HALF_PX``) moves it by a fraction of its share of
    the step's area, not onto the boundary. The profiles are fitted on a
    ``spacing_px`` grid (the blur is >= 0.6 px). prof: (P, N) on offs (N,);
    pos, lo, hi (P,); reach_px scalar or (P,). A fit whose best e lies on the
    search range's rim, or with fewer than 6 samples, keeps ``pos``.
    """
    from scipy.special import ndtr

    prof = np.asarray(prof, float)
    P = len(prof)
    out = np.asarray(pos, float).copy()
    if P == 0:
        return out
    step = float(offs[1] - offs[0])
    sub = max(int(round(spacing_px / step)), 1)
    m = int(np.ceil(float(np.max(hi - lo)) / (step * sub))) + 2
    i_lo = np.clip(np.floor((lo - offs[0]) / step).astype(int), 0, len(offs) - 1)
    idx = np.clip(i_lo[:, None] + sub * np.arange(m)[None, :], 0, len(offs) - 1)  # P,M
    xs = offs[idx]
    ys = np.take_along_axis(prof, idx, axis=1)
    ws = ((xs >= lo[:, None]) & (xs <= hi[:, None])).astype(float)
    ws[:, 1:] *= (idx[:, 1:] != idx[:, :-1])  # clipped repeats count once
    sg = np.asarray(sigmas, float)
    n = ws.sum(axis=1)
    sy = (ws * ys).sum(axis=1)
    syy = (ws * ys * ys).sum(axis=1)
    rel = xs - out[:, None]

    def rss_of(es, sl):  # es (B, E) trial offsets from pos, rows sl -> rss (B, E, S)
        z = ndtr((rel[sl, None, None, :] - es[:, :, None, None]) / sg[None, None, :, None])  # B,E,S,M
        zw = z * ws[sl, None, None, :]
        sz = zw.sum(axis=3)
        szz = (zw * z).sum(axis=3)
        szy = (zw * ys[sl, None, None, :]).sum(axis=3)
        nn, syb, syyb = n[sl, None, None], sy[sl, None, None], syy[sl, None, None]
        det = nn * szz - sz * sz
        ok = det > 1e-9 * np.maximum(nn * szz, 1e-12)
        A = np.where(ok, (nn * szy - sz * syb) / np.where(ok, det, 1.0), 0.0)
        c = (syb - A * sz) / np.maximum(nn, 1.0)
        # residual sum of squares at the least-squares levels: |y|^2 - c sy - A szy
        return np.where(ok, syyb - c * syb - A * szy, np.inf)

    reach = np.broadcast_to(np.asarray(reach_px, float), (P,))
    coarse = np.arange(-float(reach.max()), float(reach.max()) + 1e-9, 0.2)
    chunk = max(1, int(1.5e6 // max(len(coarse) * len(sg) * m, 1)))
    fine_d = 0.025
    fine = np.arange(-0.25, 0.25 + 1e-9, fine_d)
    for i0 in range(0, P, chunk):
        sl = slice(i0, min(i0 + chunk, P))
        B = sl.stop - sl.start
        r0 = rss_of(np.broadcast_to(coarse, (B, len(coarse))), sl)
        r0[np.abs(coarse)[None, :] > reach[sl, None] + 1e-9] = np.inf  # each row's own range
        j0 = np.argmin(r0.min(axis=2), axis=1)
        centre = coarse[j0]
        es = centre[:, None] + fine[None, :]
        r1 = rss_of(es, sl)
        r_e = r1.min(axis=2)
        j = np.argmin(r_e, axis=1)
        for b in range(B):
            jj = int(j[b])
            e_b = es[b, jj]
            if abs(coarse[j0[b]]) >= reach[i0 + b] - 0.2 + 1e-9 or n[i0 + b] < 6 or not np.isfinite(r_e[b, jj]):
                continue
            frac = 0.0
            if 0 < jj < len(fine) - 1:
                a_, b_, c_ = r_e[b, jj - 1], r_e[b, jj], r_e[b, jj + 1]
                den = a_ - 2 * b_ + c_
                frac = float(np.clip(0.5 * (a_ - c_) / den, -0.5, 0.5)) if den > 0 else 0.0
            out[i0 + b] = out[i0 + b] + e_b + frac * fine_d
    return out


#: Model a dark line at the nose also where the camera says the cushion face
#: is hidden (``edge_points_along(face_px=0)``): a shadow or groove on the
#: cloth side of the nose (:func:`face_line_shift`).
SHADOW_LINE = True
#: Width (px) modelled for such a line, which nothing predicts. Under a blur
#: of ~1 px the profiles tell the width only roughly (a pooled fit over
#: 0.25-1.5 px picked 1.25 for a 0.5-px line), and the modelled width sets
#: the shift: on blurred (0.8-1.2 px) steps with lines 0.5 / 1.0 / 1.5 px wide,
#: 1.0 leaves +0.14..+0.31 / -0.03..-0.08 / -0.41..-0.45 px (closed-form
#: profiles built as in tests/test_calib_face_line.py: cloth 63, top 55, line
#: 46-51 DN, 0.7 DN noise, 160 profiles; fixed 0.3 px: -0.15..-0.85). Wider lines
#: show as a resolved band (:func:`nose_offset`).
SHADOW_LINE_PX = 1.0


def _step_line_fits(ms: np.ndarray, w: float) -> tuple[tuple, tuple]:
    """Least-squares fits of profiles ms (B, N) on the grid u = -5..5 px (0.125 px), plain step and step + line.

    Model c + A Phi((u - e)/s) [+ D (Phi((u - e + w)/s) - Phi((u - e)/s))]: c,
    A, D linear, e (-1..3 px) and s (0.4..3 px) on a grid. Returns per model
    (e (B,), s (B,), coefficients (B, k), cost (B,)).
    """
    from scipy.special import ndtr

    u = np.arange(-5.0, 5.0 + 1e-9, 0.125)
    es = np.arange(-1.0, 3.0 + 1e-9, 0.02)
    ss = np.arange(0.4, 3.0 + 1e-9, 0.05)
    E, S = np.meshgrid(es, ss, indexing="ij")
    z = (u[None, None, :] - E[..., None]) / S[..., None]
    step = ndtr(z)
    out = []
    for with_line in (False, True):
        cols = [np.ones_like(step), step]
        if with_line:
            cols.append(ndtr(z + w / S[..., None]) - step)
        A = np.stack(cols, axis=-1)  # E, S, N, k
        atm = np.einsum("esnk,bn->eskb", A, ms)  # A^T m
        coef = np.linalg.solve(np.swapaxes(A, -1, -2) @ A + 1e-9 * np.eye(len(cols)), atm)  # E, S, k, B
        # least-squares residual sum of squares: |m|^2 - coef . A^T m
        cost = np.moveaxis((ms * ms).sum(axis=1) - (coef * atm).sum(axis=2), -1, 0)  # B, E, S
        coef = np.moveaxis(coef, -1, 0)  # B, E, S, k
        b = np.arange(len(ms))
        i, j = np.unravel_index(cost.reshape(len(ms), -1).argmin(axis=1), cost.shape[1:])
        out.append((es[i], ss[j], coef[b, i, j], cost[b, i, j]))
    return out[0], out[1]


def face_line_shift(prof: np.ndarray, offs: np.ndarray, edge: np.ndarray, face_px: float,
                    settings: CalibrationSettings, info: dict | None = None) -> float:
    """Outward shift (px) of a side's single edges to the nose, given a dark face line face_px wide inward of it.

    Where the camera just sees an undercut face (view angle a little past its
    lean-back, predicted from the fitted camera by the caller), the face shows
    as a line narrower than the blur between cloth and nose, darker than both
    (grazing light). Blurred, a line of area a = w (k - b) next to a step of
    height A = c - k moves the step's gradient peak inward by ~a / A (first
    order in the line: d/dx of A Phi(x/s) + a phi(x/s) / s peaks at x ~ -a/A).
    The side's median profile (profiles aligned on their gradient peaks
    ``edge``, px, at ``offs``) is fitted with c + A Phi((u - e)/s) + D B(u)
    (B the blurred box of width face_px ending at e) and without the box; the
    shift is the difference of the two e.

    To first order a thin line *is* an edge shift, and to second order a blur
    change, so the fit alone cannot tell a line from a step whose shape is
    not exactly a Gaussian-blurred one (a tone curve, sharpening, codec
    ringing): there it finds false lines. The shift is therefore taken only
    where the data show the line itself, tested on ``face_line_blocks``
    stretches along the side (noise, and its correlation along the profile,
    from the side's own image): (1) the shift is consistently positive: its
    mean over the stretches' own fits, over its standard error, exceeds the
    one-sided Student-t quantile for ``face_line_alpha``; (2) the profile dips
    below both plateaus (cloth and cushion top: no monotone step does) by as
    many standard errors; (3) it does not overshoot the brighter plateau by
    half that much (sharpening rings on both sides; a dark line only dips).
    Otherwise 0. prof: (P, N) profiles on the locating image (DN).

    face_px <= 0: the camera says the face is hidden, so a dark line there
    lies on the cloth (a shadow of the nose, a groove), of unknown width
    (modelled ``SHADOW_LINE_PX`` wide); the same tests decide.
    """
    from scipy.ndimage import gaussian_filter1d as _g1
    from scipy.special import ndtr
    from scipy.stats import t as _student_t

    u = np.arange(-5.0, 5.0 + 1e-9, 0.125)
    al = np.array([np.interp(u + e, offs, row) for e, row in zip(edge, prof)])
    k = int(min(settings.face_line_blocks, len(al) // 4))
    if k < 4:
        return 0.0
    blocks = [np.median(al[b], axis=0) for b in np.array_split(np.arange(len(al)), k)]
    ms = np.vstack([np.median(al, axis=0)] + blocks)
    # a face of predicted width, or (face hidden) a shadow or groove on the cloth
    w = float(min(max(face_px, 0.05), settings.face_line_max_px)) if face_px > 0 else SHADOW_LINE_PX
    (e0, s0, c0, cost0), (e1, s1, c1, cost1) = _step_line_fits(ms, w)
    sh = e1 - e0
    shift = float(sh[0])
    se_shift = float(np.std(sh[1:], ddof=1) / np.sqrt(k))
    # plateaus: the outer 1.5 px at either end; the dip read where the pooled
    # line fit is lowest (a fixed place: the minimum of noisy samples would be
    # below the plateau even on a plain step), on the profiles smoothed over
    # 0.25 px; the overshoot where the pooled median is highest
    q = np.array(blocks)
    qs = _g1(q, 0.25 / 0.125, axis=1)
    zz = (u - e1[0]) / s1[0]
    curve = c1[0][1] * ndtr(zz) + c1[0][2] * (ndtr(zz + w / s1[0]) - ndtr(zz))
    pooled = _g1(ms[0], 0.25 / 0.125)
    near, far = np.median(q[:, :12], axis=1), np.median(q[:, -12:], axis=1)
    dip = np.minimum(near, far) - qs[:, int(np.argmin(curve))]
    over = qs[:, int(np.argmax(pooled[12:-12])) + 12] - np.maximum(near, far)
    se_dip = float(np.std(dip, ddof=1) / np.sqrt(k))
    z_min = float(_student_t.ppf(1.0 - settings.face_line_alpha, k - 1))
    z_shift = shift / max(se_shift, 1e-9)
    z_dip = float(dip.mean()) / max(se_dip, 1e-9)
    dark = bool(c1[0][2] < min(c1[0][1], 0.0))
    ok = dark and shift > 0 and z_shift >= z_min and z_dip >= z_min and float(over.mean()) < 0.5 * float(dip.mean())
    if info is not None:
        info.update(e0=float(e0[0]), e1=float(e1[0]), s0=float(s0[0]), s1=float(s1[0]), step=float(c1[0][1]),
                    line=float(c1[0][2]), shift=shift, z_shift=float(z_shift), dip=float(dip.mean()),
                    z_dip=z_dip, over=float(over.mean()), z_min=z_min, blocks=k, width=w, taken=ok)
    return shift if ok else 0.0


def noise_strip_px(det: np.ndarray, cols: slice, step: float, settings: CalibrationSettings) -> float:
    """Half-length (px) of the strip along the edge over which profiles are averaged, from their noise.

    det: (P, N) profiles (DN) whose samples ``cols`` are cloth (the cloth
    nearest the edge: it is the dimmest where light falls off towards the
    cushions); step: their sample spacing (px). Sensor noise is fixed in DN, so on dim
    cloth a cushion step of a given *relative* contrast sinks into it. A
    blurred step of height A has a Gaussian-derivative peak of
    A / (sqrt(2 pi) sqrt(blur^2 + edge_sigma^2)) (blur ~1 px); to pass the
    detector's edge_min_snr for the faintest nose it is meant to find
    (``CalibrationSettings.nose_contrast_min`` of the cloth level) the
    derivative noise must stay below that peak / edge_min_snr. Averaging n
    independent pixels along the edge divides the noise by sqrt(n), so the
    strip grows by (noise / allowed)^2 (median over the side's profiles),
    from ``profile_strip_px`` up to ``profile_strip_max_px`` (the edge must
    stay straight and in line with the profile over the strip).
    """
    base = settings.profile_strip_px
    cloth = det[:, cols].astype(float)
    if cloth.shape[0] < 4 or cloth.shape[1] < 8:
        return base
    level = np.median(cloth, axis=1)
    dc = gaussian_filter1d(cloth, settings.edge_sigma_px / step, axis=1, order=1) / step
    dnoise = 1.4826 * np.median(np.abs(dc - np.median(dc, axis=1, keepdims=True)), axis=1)
    ok = level > 1.0
    if ok.sum() < 4:
        return base
    peak = settings.nose_contrast_min * level[ok] / (np.sqrt(2 * np.pi) * np.hypot(1.0, settings.edge_sigma_px))
    ratio = float(np.median(dnoise[ok] * settings.edge_min_snr / peak))
    if ratio <= 1.0:
        return base
    return float(min(base * ratio ** 2, settings.profile_strip_max_px))


def edge_points_along(gray: np.ndarray, p0: np.ndarray, p1: np.ndarray, outward: np.ndarray,
                      s_ranges: list[tuple[float, float]], inner_px: float, outer_px: float,
                      plateau_px: float, settings: CalibrationSettings,
                      curve=None, n_profiles: int | None = None, gray_lin: np.ndarray | None = None,
                      detect: np.ndarray | None = None, rough_line: bool = False,
                      stats: dict | None = None, face_px: float | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Nose points along the segment p0->p1 (px), profiles taken along ``outward``.

    ``gray`` (tone-encoded DN) is used to detect the edges; ``gray_lin`` (the
    same image in linear light, :func:`linear_gray`), when given, to locate
    them to sub-pixel (module docstring). ``detect`` (e.g.
    :func:`cloth_projection`), when given, replaces ``gray`` for detecting;
    single edges are then located on ``gray_lin`` or ``gray`` within 1.5 px.
    Profiles are averaged over a strip along the edge that grows on noisy
    (dim) cloth (:func:`noise_strip_px`); ``rough_line``: p0->p1 is a rough
    outline, whose noise is judged on the cloth just inward of it.
    ``stats``, when given, receives "off_frame": how many profiles showed a
    nose but ran off the picture before the cushion top's plateau ended, and
    "strip_px": the strip half-length used (px).

    Returns (nose points (N,2), edge contrast (N,), band inner-edge points
    (N,2), NaN where the profile shows no band).

    face_px: predicted image width (px) of an undercut cushion face in view
    just inward of the nose (0: hidden; the caller decides from the fitted
    camera, ``calibrate.face_width_px``; None: not judged, no camera yet).
    Where > 0, the side's single edges are moved by :func:`face_line_shift`
    (``stats["face_shift_px"]``); where 0 (face hidden) likewise for a dark
    line of unknown width, which can then only lie on the cloth (a shadow
    of the nose, a groove): the nose is its cushion-side edge (``SHADOW_LINE``).

    s_ranges: fractions of the segment to use (pockets excluded). ``curve``
    optionally maps fractions s (M,) -> (points (M,2), outward normals (M,2)) to
    follow a predicted curved line instead of the straight segment.
    """
    if n_profiles is None:
        n_profiles = max(int(np.linalg.norm(p1 - p0) / settings.profile_spacing_px), 2)
    n_prof = n_profiles
    s_all = np.linspace(0, 1, n_prof)
    keep = np.zeros_like(s_all, bool)
    for a, b in s_ranges:
        keep |= (s_all >= a) & (s_all <= b)
    s = s_all[keep]
    if s.size == 0:
        return np.empty((0, 2)), np.empty(0), np.empty((0, 2))
    if curve is None:
        base = p0[None, :] + s[:, None] * (p1 - p0)[None, :]
        nrm = np.repeat((outward / np.linalg.norm(outward))[None, :], len(s), axis=0)
    else:
        base, nrm = curve(s)
    tang = np.column_stack([-nrm[:, 1], nrm[:, 0]])
    step = settings.profile_step_px
    offs = np.arange(-inner_px, outer_px + step / 2, step)
    inner_n = max(int(0.35 * inner_px / step), 4)

    def profiles(half: float):
        strip = np.arange(-half, half + 1e-9, max(0.5, half / 8))
        pts = (base[:, None, None, :] + offs[None, :, None, None] * nrm[:, None, None, :]
               + strip[None, None, :, None] * tang[:, None, None, :])
        prof = _sample(gray, pts).mean(axis=2)
        prof_l = prof if gray_lin is None else _sample(gray_lin, pts).mean(axis=2)
        det = prof if detect is None else _sample(detect, pts).mean(axis=2)
        return prof, prof_l, det

    prof, prof_l, det = profiles(settings.profile_strip_px)
    # noise and level of the cloth nearest the line: the leading samples once
    # the line is a fitted nose (a face band lies just inward of it), else
    # those just inward of a rough outline (a region cut short on dim cloth)
    near = max(int(np.searchsorted(offs, 0.0)), inner_n)
    cols = slice(near - inner_n, near) if rough_line else slice(0, inner_n)
    half = noise_strip_px(det, cols, step, settings)
    if half > settings.profile_strip_px:
        prof, prof_l, det = profiles(half)
    plateau_n = max(int(plateau_px / step), 4)
    band_max_n = max(int(plateau_px * settings.band_max_mm / settings.plateau_mm / step), 4)
    rows, nose, strength, inner, wend = [], [], [], [], []
    # past the picture's edge a profile repeats the border row: an edge or a
    # flat "cushion top" there is the frame's, so a nose counts only when the
    # profile up to the end of its cushion-top plateau lies inside the picture
    hgt, wid = gray.shape[:2]
    mg = settings.border_margin_px

    def in_frame(q):
        return mg <= q[0] <= wid - 1 - mg and mg <= q[1] <= hgt - 1 - mg

    off_frame = 0
    for i in range(len(s)):
        r = nose_offset(det[i], step, plateau_n, settings, inner_n, band_max_n)
        if r is None:
            continue
        if not (in_frame(base[i] + offs[0] * nrm[i])
                and in_frame(base[i] + offs[min(r[3], len(offs) - 1)] * nrm[i])):
            off_frame += 1
            continue
        rows.append(i)
        nose.append(offs[0] + r[0] * step)
        strength.append(r[1])
        inner.append(offs[0] + r[2] * step if r[2] is not None else np.nan)
        wend.append(offs[0] + min(r[3], len(offs) - 1) * step)
    if stats is not None:
        stats["off_frame"] = off_frame
        stats["strip_px"] = max(half, settings.profile_strip_px)
    if rows:
        rows_a, nose_a, inner_a = np.array(rows), np.array(nose), np.array(inner)
        band = np.isfinite(inner_a)
        reach_row = np.full(len(nose_a), SINGLE_FIT_REACH_PX)
        if SINGLE_FIT and band.any() and (band.mean() < settings.band_min_frac
                                          or band_width_scatter_px(s[rows_a[band]], nose_a[band] - inner_a[band])
                                          > BAND_WIDTH_SCATTER_PX):
            # A face or shadow band runs the whole side, its width changing
            # slowly along it (perspective: about linearly). "Bands" on a
            # minority of profiles, or whose widths scatter about that trend,
            # are a codec's work: a ringing dip closed by a block-boundary
            # step, or a faint step spread into a ramp across its block (its
            # ends on the block grid, its width set by the edge's phase in the
            # block); or clutter. The cushion's edge lies between their two
            # edges and is located as a single edge like the rest.
            # searched for between its two edges (SINGLE_FIT_REACH_PX either side)
            mid_b = 0.5 * (nose_a[band] + inner_a[band])
            half_b = 0.5 * (nose_a[band] - inner_a[band])
            reach_row[band] = np.maximum(half_b + 1.0, SINGLE_FIT_REACH_PX)
            nose_a[band] = mid_b
            inner_a[band] = np.nan
            band[:] = False
            if stats is not None:
                stats["bands_dropped"] = True
        if (gray_lin is not None or detect is not None) and (~band).any():
            nose_a[~band] = _relocate_peaks(prof_l[rows_a[~band]], offs, nose_a[~band], settings)
        if SINGLE_FIT and (~band).any():
            # the whole transition, not its steepest sample (codec blocks:
            # SINGLE_FIT_HALF_PX); the window ends on the cushion top's plateau
            sb = ~band
            p_s = nose_a[sb]
            lo_s = np.maximum(p_s - SINGLE_FIT_HALF_PX, offs[0])
            hi_s = np.minimum(p_s + SINGLE_FIT_HALF_PX, np.array(wend)[sb])
            lo_s = np.maximum(p_s - reach_row[sb] - SINGLE_FIT_HALF_PX + SINGLE_FIT_REACH_PX, offs[0])
            nose_a[sb] = fit_single_edges(prof_l[rows_a[sb]], offs, p_s, lo_s, hi_s, reach_px=reach_row[sb])
        if face_px is not None and (face_px > 0 or SHADOW_LINE) and (~band).sum() >= 8:
            info: dict = {}
            shift = face_line_shift(prof_l[rows_a[~band]], offs, nose_a[~band], face_px, settings, info)
            if stats is not None:
                stats["face_shift_px"] = shift
                stats["face_fit"] = info
            nose_a[~band] += shift
        if band.any():
            # the fit sees the band and a margin either side of it: shading
            # further out (light falling off towards a cushion, a highlight
            # on a rounded nose) is not part of the edges and would pull them
            margin = 3.0 * settings.edge_sigma_px + 2.0
            lo_w = inner_a[band] - margin
            hi_w = np.minimum(np.array(wend)[band], nose_a[band] + margin)
            i_lo = np.clip(((lo_w - offs[0]) / step).astype(int), 0, len(offs) - 1)
            span = int(np.ceil(np.max(hi_w - lo_w) / step)) + 2
            sub = max(int(round(0.5 / step)), 1)  # fit on a ~0.5 px grid
            idx = np.clip(i_lo[:, None] + np.arange(0, span, sub)[None, :], 0, len(offs) - 1)
            xs = offs[idx]
            sel = prof_l[rows_a[band]][np.arange(len(idx))[:, None], idx]
            e1, e2, _ = refine_band_edges(xs, sel, inner_a[band], nose_a[band], lo_w, hi_w,
                                          settings.edge_sigma_px, slopes=settings.band_shading_slopes)
            sane = (np.abs(e2 - nose_a[band]) < 1.5) & (np.abs(e1 - inner_a[band]) < 1.5) & (e2 > e1)
            nose_a[np.nonzero(band)[0][sane]] = e2[sane]
            inner_a[np.nonzero(band)[0][sane]] = e1[sane]
        out = [base[i] + o * nrm[i] for i, o in zip(rows_a, nose_a)]
        inner = [base[i] + o * nrm[i] if np.isfinite(o) else (np.nan, np.nan) for i, o in zip(rows_a, inner_a)]
    else:
        out = []
    if not out:
        return np.empty((0, 2)), np.empty(0), np.empty((0, 2))
    return np.array(out), np.array(strength), np.array(inner, float)
