"""Centre of a motion-smeared ball image (a streak): mid-exposure position from a point-symmetric fit.

Image frame as in :mod:`tracking.detect` (px; x right, y down). A disc of
radius r swept uniformly over a length L during the exposure has a coverage
image (fraction of the exposure each pixel is covered) that is symmetric
under a half turn about the mid-exposure centre: reversing time maps the
sweep onto itself. Along the motion the coverage falls as a linear ramp from
1 to 0 over [r - L/2, r + L/2] from the centre (L <= 2r), across it the edge
stays sharp near r; the half-coverage contour lies at +-r along the motion
and +-sqrt(r^2 - L^2/16) across it (L <= 4r). Any edge locator applied the
same way all round the streak therefore gives a point-symmetric contour
about the mid-exposure centre, and a point-symmetric shape fitted to it
returns that centre; a circle fitted to part of it (one end) does not.

Steps (:func:`refine_streak`):

1. :func:`streak_axis`: the foreground blob (``d`` above threshold) round a
   seed; its second moments give the smear direction and, through the
   closed-form moments of a stadium (the support of a swept disc: a
   rectangle L x 2r capped by two half discs), the smear length L.
2. Rays from the current centre; along each, the outermost clear drop of
   the smoothed foreground strength, searched out to the stadium's outer
   boundary in that direction (so both ends of the streak are reached).
3. A point-symmetric closed curve rho(phi) = a0 + sum over even k of
   (a_k cos k phi + b_k sin k phi) about a free centre is fitted to the edge
   points (Gauss-Newton with Tukey-biweight weights, Holland & Welsch,
   Commun. Stat. 6:813, 1977): only even harmonics, so the curve is
   symmetric under a half turn about its centre; a one-sided shadow cannot
   be absorbed by the shape and is down-weighted as outlying rays.
   Rays are re-cast from the new centre until it settles.
4. Checks that it is one ball's sweep: ramped ends (short smears), and
   :func:`point_asymmetry` of the foreground strength within the blob's
   stadium about the fitted centre (a streak that ran into a resting ball
   at a contact frame carries that ball's disc at one end only). A blob
   that fails falls back to circle fits; the detection's sigma adds
   ``streak_sigma_frac`` x L for the ends' different shading, an error the
   tracker treats as shared by neighbouring frames (tracking/pipeline.py).
"""
from __future__ import annotations

import cv2
import numpy as np

from tracking.settings import DetectionSettings


# --------------------------------------------------------------------------- stadium geometry
def stadium_moments(half_len: float, radius: float) -> tuple[float, float, float]:
    """Area (px^2) and the variances along / across (px^2) of a stadium.

    Stadium: the rectangle [-a, a] x [-r, r] plus a half disc of radius r on
    each end (a = ``half_len``, r = ``radius``). Exact, by adding the
    rectangle's and the two half discs' second moments (parallel axis
    theorem; a half disc's centroid lies 4r/(3 pi) from its flat side).

    >>> A, vx, vy = stadium_moments(0.0, 2.0)
    >>> round(A, 4), round(vx, 4), round(vy, 4)  # a disc: pi r^2 and r^2/4
    (12.5664, 1.0, 1.0)
    """
    a, r = float(half_len), float(radius)
    area = 4 * a * r + np.pi * r * r
    ixx = 4 * a ** 3 * r / 3 + np.pi * r ** 4 / 4 + 8 * a * r ** 3 / 3 + np.pi * a * a * r * r
    iyy = 4 * a * r ** 3 / 3 + np.pi * r ** 4 / 4
    return float(area), float(ixx / area), float(iyy / area)


_A_TABLE = np.linspace(0.0, 4.0, 401)  # half length / radius
_RATIO_TABLE = np.array([stadium_moments(a, 1.0)[1] / stadium_moments(a, 1.0)[2] for a in _A_TABLE])


def stadium_from_moments(var_along: float, var_across: float) -> tuple[float, float]:
    """(smear length L, radius r) px of the stadium with these second moments (px^2).

    The variance ratio along/across grows monotonically with a/r
    (:func:`stadium_moments`), so it gives a/r; the across variance then
    gives r. Ratios beyond the table (a > 4 r) are clipped.

    >>> L, r = stadium_from_moments(*stadium_moments(15.0, 12.0)[1:])
    >>> round(L, 2), round(r, 2)
    (30.0, 12.0)
    """
    ratio = max(float(var_along) / max(float(var_across), 1e-12), 1.0)
    q = float(np.interp(ratio, _RATIO_TABLE, _A_TABLE))
    _, _, vy1 = stadium_moments(q, 1.0)
    r = float(np.sqrt(max(var_across, 0.0) / vy1))
    return 2.0 * q * r, r


def stadium_reach(theta: np.ndarray, axis_angle: float, half_len: float, radius: float) -> np.ndarray:
    """Distance (px) from a stadium's centre to its boundary in directions ``theta`` (rad).

    >>> np.round(stadium_reach(np.array([0.0, np.pi / 2]), 0.0, 10.0, 5.0), 6).tolist()
    [15.0, 5.0]
    """
    phi = np.asarray(theta, float) - axis_angle
    c, s = np.abs(np.cos(phi)), np.abs(np.sin(phi))
    a, r = float(half_len), float(radius)
    with np.errstate(divide="ignore"):
        side = np.where(s > 1e-12, r / np.maximum(s, 1e-12), np.inf)  # hits a straight side
    cap = a * c + np.sqrt(np.maximum(r * r - (a * s) ** 2, 0.0))      # hits an end cap
    return np.where(side * c <= a, side, cap)


# --------------------------------------------------------------------------- smear from the blob
def streak_axis(d: np.ndarray, x: float, y: float, r_exp: float, threshold: float,
                settings: DetectionSettings = DetectionSettings(), fill=None) -> dict | None:
    """Smear of the blob of ``d`` > ``threshold`` that holds image point (x, y) px.

    Looks within (1 + streak_max_len / 2) radii of the seed, then, if the
    blob reaches past that, within (1 + streak_max_len) radii
    (``fill(xa, ya, xb, yb)``, if given, is called first to complete ``d``
    over the wider box). Returns dict(x, y: blob centroid px, angle: smear
    direction (rad, image frame), length: smear length L px, radius:
    stadium radius px, area_ratio: blob area over the stadium's, ok), or
    None when there is no blob there or it reaches past both windows. ``ok``
    is False when it is not one ball's smear: its stadium radius is off the
    expected one by more than ``radius_tol``, it is much bigger than the
    stadium its moments describe (touching balls, a ball in its own shadow),
    its stadium radius is outside ``streak_blob_radius`` x the expected one,
    or its waist (width across the axis through the centroid, over the
    widest) is under ``streak_min_waist`` (two touching balls).
    """
    out = _streak_axis(d, x, y, r_exp, threshold, settings, 1.0 + 0.5 * settings.streak_max_len)
    if out == "edge":  # the seed sat near one end: look twice as far
        if fill is not None:
            hw = int(np.ceil(r_exp * (1.0 + settings.streak_max_len))) + 3
            fill(int(x) - hw, int(y) - hw, int(x) + hw + 2, int(y) + hw + 2)
        out = _streak_axis(d, x, y, r_exp, threshold, settings, 1.0 + settings.streak_max_len)
    return out if isinstance(out, dict) else None


def _streak_axis(d: np.ndarray, x: float, y: float, r_exp: float, threshold: float,
                 settings: DetectionSettings, window: float):
    """:func:`streak_axis` within ``window`` radii of the seed; "edge" when the blob reaches past it."""
    h, w = d.shape
    half = int(np.ceil(r_exp * window + 2))
    xi, yi = int(round(x)), int(round(y))
    xa, ya, xb, yb = max(0, xi - half), max(0, yi - half), min(w, xi + half + 1), min(h, yi + half + 1)
    if xb - xa < 3 or yb - ya < 3:
        return None
    m = (d[ya:yb, xa:xb] > threshold).astype(np.uint8)
    n_cc, lab, stats, _ = cv2.connectedComponentsWithStats(m, connectivity=8)
    if n_cc < 2:
        return None
    # the component with most pixels within half a radius of the seed
    rr = int(np.ceil(0.5 * r_exp))
    sub = lab[max(0, yi - ya - rr):yi - ya + rr + 1, max(0, xi - xa - rr):xi - xa + rr + 1]
    counts = np.bincount(sub.ravel(), minlength=n_cc)
    counts[0] = 0
    k = int(np.argmax(counts))
    if counts[k] == 0:
        return None
    ys, xs = np.nonzero(lab == k)
    # the blob must not run into the window's edge (longer than we search)
    if xs.min() == 0 and xa > 0 or ys.min() == 0 and ya > 0 or xs.max() == xb - xa - 1 and xb < w \
            or ys.max() == yb - ya - 1 and yb < h:
        return "edge"
    cx, cy = xs.mean(), ys.mean()
    cov = np.cov(np.vstack([xs - cx, ys - cy]), bias=True) + np.eye(2) / 12.0  # + pixel's own variance
    ev, evec = np.linalg.eigh(cov)
    L, r = stadium_from_moments(ev[1], ev[0])
    area = stadium_moments(L / 2, r)[0]
    # waist: a swept disc's support is 2r wide all along its middle; two
    # touching balls seen as one blob pinch to a few px between them
    along = (xs - cx) * evec[0, 1] + (ys - cy) * evec[1, 1]
    bins = np.round(along).astype(int)
    counts = np.bincount(bins - bins.min())
    mid = counts[max(0, -bins.min() - 1):-bins.min() + 2]
    waist = float(mid.mean()) / max(float(counts.max()), 1.0) if len(mid) else 0.0
    # the same along the axis, but of the strength summed across it (a
    # shadow filling the gap between two balls is faint, so it adds little):
    # a uniformly swept disc's profile is its chord 2 sqrt(r^2 - u^2)
    # convolved with a box L long, largest in the middle; two discs'
    # is the sum of two chords, near 0 at their tangent point.
    # (3-px running mean: 1-px bins of a line at 45 deg to the grid take
    # one or two pixel rows in turn)
    prof = np.convolve(np.bincount(bins - bins.min(), weights=d[ya:yb, xa:xb][ys, xs].astype(float)),
                       np.ones(3) / 3.0, mode="same")
    q = max(1, int(round(settings.streak_waist_span * r_exp)))
    c0 = -bins.min()
    mid_s = prof[max(0, c0 - q):c0 + q + 1]
    waist_s = float(mid_s.min()) / max(float(prof.max()), 1e-12) if len(mid_s) else 0.0
    return {"x": float(cx + xa), "y": float(cy + ya), "angle": float(np.arctan2(evec[1, 1], evec[0, 1])),
            "length": L, "radius": r, "area_ratio": float(len(xs) / area),
            "waist": waist, "waist_strength": waist_s,
            "ok": bool(settings.streak_blob_radius[0] * r_exp - 1.0 <= r <= settings.streak_blob_radius[1] * r_exp + 1.0
                       and len(xs) <= 1.3 * area and waist >= settings.streak_min_waist
                       and waist_s >= settings.streak_min_waist_strength)}


# --------------------------------------------------------------------------- edge points
def edge_patch(d: np.ndarray, x0: float, y0: float, half: int, smooth_px: float):
    """(Gaussian-smoothed patch of ``d`` round (x0, y0) px, its x offset, its y offset), or None if empty.

    The patch reaches ``half`` px left/up of the centre and ``half + 1`` right/down, clipped to the image.
    """
    h, w = d.shape
    xa, ya = max(0, int(x0) - half), max(0, int(y0) - half)
    xb, yb = min(w, int(x0) + half + 2), min(h, int(y0) + half + 2)
    patch = d[ya:yb, xa:xb]
    if patch.size == 0:
        return None
    return cv2.GaussianBlur(patch, (0, 0), smooth_px), xa, ya


def _streak_edge_points(dsm: np.ndarray, centre: np.ndarray, reach: np.ndarray, theta: np.ndarray,
                        settings: DetectionSettings, edge_floor: float | None):
    """Outermost clear drop of ``dsm`` along rays ``theta`` from ``centre``, searched out to ~``reach``.

    As :func:`tracking.detect._edge_points` but with a search window per
    ray scaled by that ray's stadium reach (px): samples from
    ``streak_ray_min`` to ``streak_ray_max`` x reach, outermost strong drop
    within ``streak_outer`` x reach, position = first moment of the drop over
    its run above 0.8 of the peak (the middle of a smeared ramp).
    Returns (pts (n,2), strength (n,), valid (n,)).
    """
    n = len(theta)
    tmax = settings.streak_ray_max
    tmin = settings.streak_ray_min
    m = int(np.ceil((tmax - tmin) * float(np.max(reach)) / settings.ray_step_px)) + 1
    t = np.linspace(tmin, tmax, m)
    s = (reach[:, None] * t[None, :]).astype(np.float32)  # (n, m)
    step = (reach * (t[1] - t[0])).astype(np.float32)     # px per sample on each ray
    mx = (centre[0] + np.cos(theta)[:, None] * s).astype(np.float32)
    my = (centre[1] + np.sin(theta)[:, None] * s).astype(np.float32)
    h, w = dsm.shape
    inside = (mx >= 0) & (mx <= w - 1) & (my >= 0) & (my <= h - 1)
    prof = cv2.remap(dsm, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    drop = -(prof[:, 2:] - prof[:, :-2]) / (2 * step[:, None])
    sm = s[:, 1:-1]
    rowmax = drop.max(axis=1, keepdims=True)
    floor = 0.2 * (edge_floor if edge_floor is not None else 0.0)
    strong = drop >= np.maximum(settings.streak_strong_frac * rowmax, floor)
    kk = np.arange(sm.shape[1])[None, :]
    outer = np.where(strong & (sm <= settings.streak_outer * reach[:, None]), kk, -1).max(axis=1)
    gap_before = np.where(~strong & (kk < outer[:, None]), kk, -1).max(axis=1)
    in_run = (kk > gap_before[:, None]) & (kk <= outer[:, None])
    j = np.argmax(np.where(in_run, drop, -np.inf), axis=1)
    j = np.clip(j, 1, sm.shape[1] - 2)
    idx = np.arange(n)
    strength = drop[idx, j]
    half = settings.streak_run_frac * strength[:, None]
    below = drop < half
    left_gap = np.where(below & (kk < j[:, None]), kk, -1).max(axis=1)
    right_gap = np.where(below & (kk > j[:, None]), kk, sm.shape[1]).min(axis=1)
    run = (kk > left_gap[:, None]) & (kk < right_gap[:, None])
    wgt = np.where(run, drop - half, 0.0)
    rad = (wgt * sm).sum(axis=1) / np.maximum(wgt.sum(axis=1), 1e-12)
    valid = inside.all(axis=1) & (strength > 0) & (outer >= 0)
    pts = np.column_stack([centre[0] + np.cos(theta) * rad, centre[1] + np.sin(theta) * rad])
    return pts, np.clip(strength, 0, None), valid


# --------------------------------------------------------------------------- point-symmetric fit
def fit_point_symmetric(pts: np.ndarray, w0: np.ndarray, centre0: np.ndarray, harmonics: int = 4,
                        tukey_c: float = 4.685, iters: int = 8) -> dict:
    """Tukey-IRLS fit of a closed curve symmetric under a half turn to points (N,2) px.

    Curve: rho(phi) = a0 + sum_{k = 2, 4, .. <= harmonics} a_k cos k phi + b_k sin k phi
    in polar coordinates about a free centre; residual = |p - c| - rho(phi_p).
    With only even harmonics rho(phi + pi) = rho(phi): the centre is the
    curve's centre of symmetry. ``harmonics`` 0 is a circle fit.
    Returns dict(centre (2,), coef, residuals, weights, scale (px), cov (2x2 px^2)).
    """
    ks = np.arange(2, int(harmonics) + 1, 2)
    c = np.asarray(centre0, float).copy()
    p = np.asarray(pts, float)
    coef = np.zeros(1 + 2 * len(ks))
    coef[0] = float(np.median(np.linalg.norm(p - c, axis=1)))
    w = np.asarray(w0, float).copy()
    res = np.zeros(len(p))
    scale = 1.0
    J = np.zeros((len(p), 2 + len(coef)))

    def model(c_, coef_):
        dv = p - c_
        dist = np.hypot(dv[:, 0], dv[:, 1]) + 1e-12
        phi = np.arctan2(dv[:, 1], dv[:, 0])
        B = np.column_stack([np.ones_like(phi)] + [f(k * phi) for k in ks for f in (np.cos, np.sin)])
        dB = np.column_stack([np.zeros_like(phi)] + [g for k in ks for g in (-k * np.sin(k * phi), k * np.cos(k * phi))])
        return dv, dist, B, dB

    for it in range(iters):
        dv, dist, B, dB = model(c, coef)
        res = dist - B @ coef
        if it == 0:
            scale = max(1.4826 * float(np.median(np.abs(res - np.median(res)))), 0.15)
        else:
            scale = max(1.4826 * float(np.median(np.abs(res[w > 0]))) if np.any(w > 0) else 1.0, 0.1)
        z = res / (tukey_c * scale)
        w = w0 * np.where(np.abs(z) < 1, (1 - z * z) ** 2, 0.0)
        if np.sum(w > 0) < len(coef) + 3:
            break
        rho_p = dB @ coef  # d rho / d phi
        # d|p - c|/dc = -e_r ; d phi/dc = (dy, -dx)/dist^2
        dphi_dc = np.column_stack([dv[:, 1], -dv[:, 0]]) / (dist * dist)[:, None]
        J = np.column_stack([-dv / dist[:, None] - rho_p[:, None] * dphi_dc, -B])
        Jw = J * w[:, None]
        try:
            step = np.linalg.solve(Jw.T @ J + 1e-9 * np.eye(J.shape[1]), -(Jw.T @ res))
        except np.linalg.LinAlgError:
            break
        step[:2] = np.clip(step[:2], -2.0, 2.0)
        c = c + step[:2]
        coef = coef + step[2:]
        if np.max(np.abs(step[:2])) < 1e-4:
            break
    dv, dist, B, dB = model(c, coef)
    res = dist - B @ coef
    npar = 2 + len(coef)
    sig = float(np.sqrt(np.sum(w * res * res) / max(np.sum(w) - npar, 1.0))) if np.sum(w > 0) > npar else np.inf
    rho_p = dB @ coef
    dphi_dc = np.column_stack([dv[:, 1], -dv[:, 0]]) / (dist * dist)[:, None]
    J = np.column_stack([-dv / dist[:, None] - rho_p[:, None] * dphi_dc, -B])
    try:
        cov = np.linalg.inv((J * w[:, None]).T @ J / max(w.max(), 1e-12))[:2, :2] * sig ** 2
    except np.linalg.LinAlgError:
        cov = np.full((2, 2), np.inf)
    return {"centre": c, "coef": coef, "residuals": res, "weights": w, "scale": sig, "cov": cov}


def point_asymmetry(dsm: np.ndarray, c: np.ndarray, threshold: float, region: np.ndarray | None = None) -> float:
    """Share of the foreground strength that a half turn about c (px) does not map onto itself.

    sum |d(p) - d(2c - p)| / sum (d(p) + d(2c - p)) over the pixels where
    either is above ``threshold`` (and, if given, inside ``region``, a bool
    mask of the patch that should itself be point-symmetric about c, so
    that another ball beside the streak does not count). A uniformly swept disc is symmetric under
    that half turn (module docstring): 0 up to shading, shadow and noise. A
    streak that has run into a resting ball (a contact frame) carries that
    ball's full-coverage disc at one end only: its share is about the rest
    ball's over the blob's whole strength.
    """
    M = np.array([[-1.0, 0.0, 2.0 * c[0]], [0.0, -1.0, 2.0 * c[1]]])
    h, w = dsm.shape
    rot = cv2.warpAffine(dsm, M, (w, h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=np.nan)
    a = np.maximum(dsm, 0.0)
    b = np.maximum(rot, 0.0)
    m = np.isfinite(rot) & ((dsm > threshold) | (rot > threshold))
    if region is not None:
        m &= region
    den = float(np.sum(a[m] + b[m]))
    return float(np.sum(np.abs(a[m] - b[m]))) / den if den > 0 else 1.0


def refine_streak(d: np.ndarray, axis: dict, r_exp: float, settings: DetectionSettings = DetectionSettings(),
                  threshold_dn: float | None = None) -> dict | None:
    """Mid-exposure centre (px) of a smeared ball from its streak in foreground strength ``d``.

    axis: :func:`streak_axis` output (blob centroid, smear angle and length
    px). Returns dict(x, y, radius (mean contour radius a0, px), sigma_px,
    reach_px (the fitted contour's radius along the smear), support,
    fixed_radius False, smear_px, smear_angle) or None when the
    edge points do not support a streak.
    """
    a = 0.5 * axis["length"]
    reach_max = (r_exp + a) * settings.streak_ray_max
    half = int(np.ceil(reach_max + 3 * settings.edge_smooth_px + 3))
    x0, y0 = axis["x"], axis["y"]
    got = edge_patch(d, x0, y0, half, settings.edge_smooth_px)
    if got is None:
        return None
    dsm, xa, ya = got
    n = settings.streak_rays
    theta = np.linspace(0, 2 * np.pi, n, endpoint=False)
    reach = stadium_reach(theta, axis["angle"], a, r_exp)
    c = np.array([x0 - xa, y0 - ya], float)
    fit = None
    for _ in range(settings.streak_iters):
        pts, stren, valid = _streak_edge_points(dsm, c, reach, theta, settings, threshold_dn)
        if valid.sum() < max(8, settings.min_support * n):
            return None
        w0 = np.where(valid, np.sqrt(stren / (stren[valid].max() + 1e-9)), 0.0)
        fit = fit_point_symmetric(pts, w0, c, settings.streak_harmonics, settings.tukey_c)
        if not np.all(np.isfinite(fit["centre"])):
            return None
        step = float(np.linalg.norm(fit["centre"] - c))
        c = fit["centre"]
        if step < 0.02:
            break
    support = float(np.mean(fit["weights"] > 0.05))
    # A smeared end is a ramp as long as the smear: its steepest drop is a
    # fraction ~ (edge blur) / L of the sharp sides'. A ball at rest whose
    # blob is stretched by its shadow keeps sharp edges all round.
    rel = np.angle(np.exp(1j * (theta - axis["angle"])))
    side = valid & (np.abs(np.abs(rel) - np.pi / 2) < np.pi / 8)
    ends = [valid & (np.abs(rel) < np.pi / 8), valid & (np.abs(rel) > 7 * np.pi / 8)]
    if side.sum() < 3 or any(e.sum() < 2 for e in ends):
        return None
    ratio = max(float(np.median(stren[e])) for e in ends) / max(float(np.median(stren[side])), 1e-12)
    if ratio > settings.streak_max_end_ratio and axis["length"] < settings.streak_ratio_max_len * r_exp:
        return None
    if support < settings.min_support or np.hypot(c[0] + xa - x0, c[1] + ya - y0) > 0.5 * r_exp + a:
        return None
    # only within the blob's stadium about the fitted centre (its moments'
    # radius, which already reaches past the limb, + 1 px): a ball beside
    # the streak is not part of it, one it ran into is (the blob held both)
    yy, xx = np.mgrid[0:dsm.shape[0], 0:dsm.shape[1]]
    rel_x, rel_y = xx - c[0], yy - c[1]
    inside = np.hypot(rel_x, rel_y) <= stadium_reach(np.arctan2(rel_y, rel_x), axis["angle"], a,
                                                     max(axis["radius"], r_exp) + 1.0)
    asym = point_asymmetry(dsm, c, threshold_dn if threshold_dn is not None else 0.0, inside)
    if asym > settings.streak_max_asym:
        return None
    n_in = float(np.sum(fit["weights"] > 0.05))
    perim = 2 * np.pi * r_exp + 2 * axis["length"]
    n_eff = max(3.0, min(n_in, perim * support / 1.5))
    sig = fit["scale"] * np.sqrt(2.0 / n_eff)
    sig = float(np.sqrt(max(sig, settings.sigma_floor_px) ** 2 + settings.model_sigma_px ** 2
                        + (settings.streak_sigma_frac * axis["length"]) ** 2))
    ks = np.arange(2, int(settings.streak_harmonics) + 1, 2)
    phi = axis["angle"]
    reach_along = float(fit["coef"][0] + sum(fit["coef"][1 + 2 * i] * np.cos(k * phi) + fit["coef"][2 + 2 * i]
                                             * np.sin(k * phi) for i, k in enumerate(ks)))
    return {"x": c[0] + xa, "y": c[1] + ya, "radius": float(fit["coef"][0]), "sigma_px": sig, "reach_px": reach_along,
            "support": support, "fixed_radius": False, "smear_px": float(axis["length"]),
            "smear_angle": float(axis["angle"]), "end_ratio": ratio, "asym": asym}
