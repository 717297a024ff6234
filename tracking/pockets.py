"""Pockets: where a resting ball cannot be (inside a corner pocket's mouth), and whether the table has any.

A carom table has no pockets; pool and snooker tables have one in the middle
of each long side, which shows as a near-black hole in the cushion strip
(:func:`side_pocket_contrast`). All of them are 2:1, so this is what tells a
carom clip from a pool clip when the user names no preset.

The visible part of a corner pocket inside the nose-line rectangle is a dark,
roughly ball-sized region between the corner point (where the two nose lines
meet) and the pocket mouth (the line between the two jaw points). In the
temporal median of a clip it looks like a resting black ball. No ball can
rest there: with its centre beyond the mouth line there is no slate under it.

Table frame: mm on the playing surface, origin at a corner, x along the long
side (0..L), y along the short side (0..W).

>>> from feltlab.standards import table_preset
>>> t = table_preset("snooker")
>>> inside_corner_mouth(np.array([[28.0, 26.0], [60.0, 60.0], [1784.0, 20.0]]), t, 86.0).tolist()
[True, False, False]
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import minimize_scalar

from feltlab.standards import TablePreset


def inside_corner_mouth(xy_mm: np.ndarray, table: TablePreset, mouth_mm: float) -> np.ndarray:
    """True where a centre (table mm, (N, 2)) lies between a corner point and its pocket mouth.

    The mouth is taken as the chord between points mouth_mm / sqrt(2) from the
    corner along each nose line (a 90-degree corner cut symmetrically), so a
    centre at distances u, v from the two nose lines is inside when
    u + v < mouth_mm / sqrt(2). Tables without pockets: all False.
    """
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    if not table.pockets or len(xy) == 0:
        return np.zeros(len(xy), bool)
    u = np.minimum(xy[:, 0], table.length_mm - xy[:, 0])
    v = np.minimum(xy[:, 1], table.width_mm - xy[:, 1])
    return (u + v) < mouth_mm / np.sqrt(2.0)


#: Side-pocket test (:func:`side_pocket_contrast`): the cushion strip sampled
#: at mid-length of each long side, over +/- SIDE_HALF_MM along the side
#: (side-pocket mouths are ~130-145 mm wide on pool tables, WPA, and wider on
#: snooker tables, WPBSA; from memory) and from STRIP_MM[0] to STRIP_MM[1]
#: outside the nose line, at the nose height. Reference: the same strip at a
#: quarter and three quarters of the length (solid cushion on every table).
SIDE_HALF_MM = 40.0
STRIP_MM = (10.0, 55.0)
#: A long side "has a pocket" when its mid strip is darker than this share of
#: its reference strips (a pocket is a hole: near black), "has none" when
#: brighter than NO_POCKET_RATIO; in between the evidence is unclear.
POCKET_RATIO = 0.6
NO_POCKET_RATIO = 0.85


def side_pocket_contrast(image: np.ndarray, camera, table: TablePreset, z_mm: float) -> list[float]:
    """Brightness of each long side's mid cushion strip over its quarter-point strips (NaN if out of view).

    image: BGR uint8 frame (best a temporal median: no ball in the way);
    camera: tracking.camera.CameraModel; z_mm: cushion-nose height (mm).
    Returns [side y = 0, side y = W]; ~0.1-0.3 where a side pocket is, ~1
    where the cushion runs on (a carom table).
    """
    h, w = image.shape[:2]
    grey = image.astype(np.float32).mean(axis=2)
    L, W = table.length_mm, table.width_mm
    out = []
    for side in (0, 1):
        med = []
        for xc in (0.5 * L, 0.25 * L, 0.75 * L):
            xs = np.linspace(xc - SIDE_HALF_MM, xc + SIDE_HALF_MM, 17)
            ds = np.linspace(STRIP_MM[0], STRIP_MM[1], 10)
            X, D = np.meshgrid(xs, ds)
            Y = -D if side == 0 else W + D
            P = np.column_stack([X.ravel(), Y.ravel(), np.full(X.size, z_mm)])
            uv = np.asarray(camera.project(P), float)
            ok = (uv[:, 0] >= 0) & (uv[:, 0] <= w - 1) & (uv[:, 1] >= 0) & (uv[:, 1] <= h - 1)
            if ok.mean() < 0.9:
                med.append(np.nan)
                continue
            ui, vi = np.round(uv[ok]).astype(int).T
            med.append(float(np.median(grey[vi, ui])))
        ref = np.nanmean(med[1:]) if np.isfinite(med[1:]).any() else np.nan
        out.append(float(med[0] / ref) if np.isfinite(med[0]) and np.isfinite(ref) and ref > 1.0 else float("nan"))
    return out


def has_side_pockets(contrast: list[float]) -> bool | None:
    """True (both long sides show a pocket), False (neither does), None (unclear or out of view).

    >>> has_side_pockets([0.2, 0.25]), has_side_pockets([0.97, 1.02]), has_side_pockets([0.2, 1.0])
    (True, False, None)
    """
    c = np.asarray(contrast, float)
    if len(c) != 2 or not np.all(np.isfinite(c)):
        return None
    if np.all(c < POCKET_RATIO):
        return True
    if np.all(c > NO_POCKET_RATIO):
        return False
    return None


#: Side-pocket centre (:func:`side_pocket_centre`): the cushion strip beside a
#: long side's nose line (STRIP_MM outward, at nose height) is sampled along the
#: side over +/- CENTRE_HALF_MM about mid-length; the mirror-symmetry centre of
#: its log brightness is searched within +/- CENTRE_SEARCH_MM of mid-length.
CENTRE_HALF_MM = 210.0
CENTRE_SEARCH_MM = 12.0
#: sample spacing along the side, as a share of one image px
CENTRE_STEP_PX = 0.25
#: image px over which neighbouring samples of a blurred, demosaiced frame are
#: correlated (used to count independent samples for the centre's sigma)
CENTRE_CORR_PX = 2.0


def mirror_centre(profile: np.ndarray, step: float, search: float, half: float,
                  corr: float = 1.0) -> tuple[float, float, float, float]:
    """Mirror-symmetry centre of a sampled brightness profile, with its sigma and the left-over asymmetry.

    profile: brightness (> 0, linear) at positions 0, step, 2 step, ...; the
    centre c is sought within +/- ``search`` of the middle, comparing
    q(c + t) with q(c - t) for 0 < t <= ``half``, q = log brightness: a
    lamp's smooth shading multiplies the brightness, so it adds to q, and a
    shading a + b s + e s^2 in q adds a term odd in t that is linear in t
    about any c ((c + t)^2 - (c - t)^2 = 4 c t). The difference is fitted
    with a slope g: J(c) = sum_t w (q(c + t) - q(c - t) - 2 g t)^2, g by
    weighted least squares at each c; w = 1 / (1 / p+^2 + 1 / p-^2), the
    inverse variance of a log difference under brightness noise of one
    level (log is noisy in the dark hole). J is scanned at each sample and
    its minimum refined between the neighbours of the lowest (scipy's
    bounded scalar minimiser; q linearly interpolated between samples). Sigma: the sandwich form of weighted least squares, var(c) =
    sum(w^2 r'^2 r^2) / (sum w r'^2)^2 (r: residuals, r' their derivative in
    c), times corr / step, the samples within ``corr`` (units of ``step``)
    counting as one. That holds for noise; a scene that is not quite a mirror
    (shading that is no quadratic, a ball or a shadow at one side) leaves a
    residual that does not average down, so ``sigma_sys`` takes all of it as
    one error: sqrt(sum w r^2 / sum w r'^2), a bound. Returns (centre, sigma,
    sigma_sys, asym), lengths in the units of ``step``; asym = weighted RMS
    residual over the range of q, 0 for a perfect mirror.
    """
    lin = np.maximum(np.asarray(profile, float), 1e-3)
    p = np.log(lin)
    s = np.arange(len(p)) * step
    mid = s[-1] / 2.0
    ts = np.arange(1, int(half / step) + 1) * step
    cs = mid + np.arange(-int(search / step), int(search / step) + 1) * step
    if len(ts) < 4 or cs[0] - ts[-1] < -1e-9 or cs[-1] + ts[-1] > s[-1] + 1e-9:
        raise ValueError("profile too short for the search range and half-width")

    def parts(c: float) -> tuple[np.ndarray, np.ndarray]:
        qp, qm = np.interp(c + ts, s, p), np.interp(c - ts, s, p)
        w = 1.0 / (np.exp(-2 * qp) + np.exp(-2 * qm))
        d = qp - qm
        g = float(np.sum(w * d * 2.0 * ts)) / float(np.sum(w * 4.0 * ts * ts))
        return d - 2.0 * g * ts, w

    def cost(c: float) -> float:
        r, w = parts(c)
        return float(np.sum(w * r * r))

    J = np.array([cost(c) for c in cs])
    k = int(np.argmin(J))
    if k == 0 or k == len(J) - 1:
        return float(cs[k]) - mid, float("inf"), float("inf"), float("nan")
    c0 = float(minimize_scalar(cost, bounds=(cs[k - 1], cs[k + 1]), method="bounded",
                               options={"xatol": 1e-4 * step}).x)
    r, w = parts(c0)
    dr = (parts(c0 + 0.5 * step)[0] - parts(c0 - 0.5 * step)[0]) / step
    srr = float(np.sum(w * dr * dr))
    if srr <= 0:
        return c0 - mid, float("inf"), float("inf"), float("nan")
    sigma = float(np.sqrt(np.sum((w * dr * r) ** 2) * max(corr / step, 1.0)) / srr)
    sigma_sys = float(np.sqrt(np.sum(w * r * r) / srr))
    rms = float(np.sqrt(np.sum(w * r * r) / np.sum(w)))
    rng = float(np.ptp(p)) or 1.0
    return c0 - mid, sigma, sigma_sys, rms / rng


def side_pocket_centre(gray: np.ndarray, camera, table: TablePreset, z_mm: float,
                       side: int) -> dict | None:
    """Where the side pocket of one long side is centred, as an image point on that side's nose line.

    gray: float grey image (best a temporal median: no ball in the way);
    camera: the fitted tracking.camera.CameraModel (its lines are precise
    across the sides, perhaps not along them); side: 0 (y = 0) or 1 (y = W).
    A pool or snooker table is mirror-symmetric about x = L / 2 and its side
    pockets are centred there (common practice), so the mirror centre of the
    cushion strip's brightness along the side (:func:`mirror_centre`) is the
    image of x = L / 2. The strip is sampled in
    table mm through the camera (perspective and lens undone) at nose height.
    Returns None when the strip is not wholly in view, else a dict: ``x_mm``
    (the centre by the current camera), ``sigma_mm`` (noise and the
    left-over asymmetry's bound, see mirror_centre), ``asym`` (see
    mirror_centre), ``px`` (the image point (2,) on the nose line at x_mm)
    and ``sigma_px``.
    """
    import cv2

    h, w = gray.shape[:2]
    L, W = table.length_mm, table.width_mm
    y_line = 0.0 if side == 0 else W
    out = -1.0 if side == 0 else 1.0
    mm_px = float(camera.mm_per_px([0.5 * L, y_line, z_mm]))
    step = CENTRE_STEP_PX * mm_px
    reach = CENTRE_HALF_MM + CENTRE_SEARCH_MM + 2 * step
    xs = 0.5 * L + np.arange(-int(reach / step), int(reach / step) + 1) * step
    ds = np.linspace(STRIP_MM[0], STRIP_MM[1], 10)
    X, D = np.meshgrid(xs, ds)
    P = np.column_stack([X.ravel(), y_line + out * D.ravel(), np.full(X.size, z_mm)])
    uv = np.asarray(camera.project(P), np.float32)
    if not ((uv[:, 0] >= 1).all() and (uv[:, 0] <= w - 2).all() and (uv[:, 1] >= 1).all()
            and (uv[:, 1] <= h - 2).all()):
        return None
    g = np.ascontiguousarray(gray, dtype=np.float32)
    val = cv2.remap(g, uv[:, 0].reshape(X.shape), uv[:, 1].reshape(X.shape), cv2.INTER_LINEAR)
    prof = np.maximum(val.mean(axis=0), 0.5)
    try:
        off, sig, sig_sys, asym = mirror_centre(prof, step, CENTRE_SEARCH_MM, CENTRE_HALF_MM,
                                                corr=CENTRE_CORR_PX * mm_px)
    except ValueError:
        return None
    x_c = 0.5 * L + off
    px = np.asarray(camera.project(np.array([[x_c, y_line, z_mm]])), float).reshape(2)
    sig = float(np.hypot(sig, sig_sys))
    return {"x_mm": float(x_c), "sigma_mm": sig, "asym": float(asym), "px": px, "sigma_px": sig / mm_px}


#: The dark hole's rim lies between the cushion top (about the nose height) and
#: the rail's top, up to POCKET_RIM_RISE_MM above the nose (from memory): the
#: centre is taken at half that rise, and the rise's half as a height
#: uncertainty (a camera off the table's middle sees the rim shifted along x by
#: that height times its offset over its height: parallax).
POCKET_RIM_RISE_MM = 30.0
#: a side's centre is used when its sigma (noise, asymmetry bound and
#: parallax) is below this (px; the camera fit counts a side's systematic
#: error as CalibrationSettings.loss_scale_px, 0.5 px, and a centre no better
#: than one side adds little), its left-over asymmetry
#: (:func:`mirror_centre`) below CENTRE_ASYM_MAX of the strip's range (a ball
#: at the pocket, a hard shadow from a lamp to one side), and it lies within
#: CENTRE_OFFSET_MAX_PX of the fitted table's mid-length
CENTRE_SIGMA_MAX_PX = 0.5
CENTRE_ASYM_MAX = 0.05
CENTRE_OFFSET_MAX_PX = 3.0


def side_pocket_points(image: np.ndarray, camera, table: TablePreset, z_mm: float) -> tuple[list, dict]:
    """The side pockets' centres as image points on the plane x = L / 2, for the camera fit.

    Returns (points, info): points as tracking._camera_fit.PointOnX (pixel,
    rim height, 0.5, sigma px), info per side (offset px along the side from
    the camera's mid-length, sigma px, asym, used or why not). No points on a
    table without pockets, where the mid strip is not clearly a hole
    (:func:`side_pocket_contrast`), off the picture, or when the two sides'
    centres disagree with each other beyond 3 sigma (one of them is not the
    hole's mirror centre).
    """
    info: dict = {}
    if not table.pockets:
        return [], info
    gray = image.astype(np.float32).mean(axis=2) if image.ndim == 3 else image.astype(np.float32)
    contrast = side_pocket_contrast(image if image.ndim == 3 else image[..., None], camera, table, z_mm)
    L, W = table.length_mm, table.width_mm
    z_rim = z_mm + 0.5 * POCKET_RIM_RISE_MM
    cen = np.asarray(camera.centre_mm, float)
    cand = []
    for side in (0, 1):
        key = "y0" if side == 0 else "yW"
        if not (np.isfinite(contrast[side]) and contrast[side] < POCKET_RATIO):
            info[key] = "no clear hole"
            continue
        r = side_pocket_centre(gray, camera, table, z_mm, side)
        if r is None:
            info[key] = "off the picture"
            continue
        mm_px = r["sigma_mm"] / r["sigma_px"] if r["sigma_px"] > 0 and np.isfinite(r["sigma_px"]) else float(
            camera.mm_per_px([0.5 * L, 0.0, z_mm]))
        par_mm = abs(0.5 * L - cen[0]) * 0.5 * POCKET_RIM_RISE_MM / max(cen[2] - z_rim, 1.0)
        sig = float(np.hypot(r["sigma_px"], par_mm / mm_px))
        off = (r["x_mm"] - 0.5 * L) / mm_px
        rec = {"offset_px": round(off, 3), "sigma_px": round(sig, 3), "asym": round(r["asym"], 4)}
        if not (sig < CENTRE_SIGMA_MAX_PX and r["asym"] < CENTRE_ASYM_MAX and abs(off) < CENTRE_OFFSET_MAX_PX):
            rec["used"] = False
            info[key] = rec
            continue
        rec["used"] = True
        info[key] = rec
        cand.append((key, r["px"], sig, off))
    if len(cand) == 2 and abs(cand[0][3] - cand[1][3]) > 3 * np.hypot(cand[0][2], cand[1][2]):
        for key, *_ in cand:
            info[key]["used"] = False
            info[key]["why"] = "the two sides disagree"
        return [], info
    return [(px, z_rim, 0.5, sig) for _, px, sig, _ in cand], info
