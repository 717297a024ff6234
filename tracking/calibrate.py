"""Camera calibration against the table: automatic, from a file, saving and drawing.

Automatic (:func:`calibrate_auto`)
----------------------------------
1. Per-pixel median of a few frames (moving balls vanish).
2. The cloth region: grown from the image centre's dominant colour, stopped by
   colour edges (any cloth colour; no hue is assumed). Its convex hull gives a
   rough outline with four corners.
3. Nose-edge points: profiles across each side find the cushion nose, the inner
   edge of the cushion top (see :mod:`tracking._table_edges` for why this edge
   lies at nose height h above the cloth). Stretches at pockets are skipped.
   Where a face or shadow band lies between cloth and nose, both its edges
   are located by a model fit over the band and a few px either side only
   (shading further out is no edge and would pull them). Edges are
   detected on the image projected on the cloth's colour
   (``CalibrationSettings.edge_signal``: a cushion top of the cloth's own
   colour differs from it along that direction, a faint step in grey) and
   located on grey. In the first pass only each side's innermost
   well-supported line is kept (:func:`main_line`). Once a camera is fitted,
   a side whose undercut face may be in view (:func:`face_in_view`, called
   again with each refitted camera) has its single edges corrected for the
   face's unresolved dark line where the side's own profiles show that line
   (:func:`tracking._table_edges.face_line_shift`).
   ``CalibrationSettings.tone_curve`` optionally locates edges in linear light.
4. Camera fit (scipy ``least_squares``, soft-L1 loss): focal, pose, radial k1
   (k2 optional) so that the four nose lines x = 0, x = L, y = 0, y = W at
   z = h project through the points; the curvature of the lines fixes k1 and
   the preset's playing-surface size (WPA etc., :mod:`feltlab.standards`) the
   metric scale. Profiles are then re-taken along the fitted curves and the
   fit repeated, dropping outliers.
5. Camera height: a plane seen nearly square-on fixes only focal / height.
   Where the cushion faces show as a band between cloth and nose (a vertical
   face, or the shadow under an overhanging nose lit from above), the band's
   inner edge is the foot of the face at z = 0 and the fit uses both lines;
   the band widths must pass a geometric test first (``_band_check``).
   On a table with side pockets the mirror centre of each long side's
   cushion strip about its pocket (:func:`tracking.pockets.side_pocket_points`)
   is the image of x = L / 2 there; the fit takes the two as point
   constraints with their own sigma, so the short-side lines (which lamp
   shading can shift the same way) no longer alone place the table along
   its length (``meta['side_pockets']``; none on carom tables or when a
   pocket is off the picture, unclear or not mirror-like).
   Otherwise a weak prior on the field of view sets the focal length, or
   the lens's field of view where the user gives it (``meta['height_from']``
   and ``meta['hfov_source']`` say which; a note says so); the nose and
   ball-centre planes are then still right to a fraction of a pixel, the
   cloth plane less so. (The balls' own outlines were tried as a measure:
   a sphere off the optical axis images as an ellipse stretched radially by
   ~1/cos of its angle off the axis, but over 80 resting balls in 31 renders
   the measured stretch was off by 0.034 (median; shadows, shaded rims)
   against a median stretch of 0.011, up to 0.12 near the corners.)
6. Checks, each a one-line refusal: residual, camera height, a clear edge
   on the cloth inward of a fitted line (:func:`inner_step_ratio`), and the
   colour just outside the four fitted lines (:func:`cushion_colour_spread`:
   all cushion tops look alike, a rail does not). A fit that fails them is
   tried once more with weaker-supported inner lines accepted
   (``CalibrationSettings.line_share_retry``).
7. Notes (no refusal) where the corners may be over ~1 px off: a view that
   magnifies a small error on one line (:func:`corner_gain`), or lines that
   do not meet one camera (face-foot RMS, :func:`line_offsets_px`).

Table frame (see DEVELOPERS.md): origin at the playing-surface corner nearest
the image's bottom-left, x along the long side, y along the short side, z up.
If the long side runs up-down in the image, x runs *up* the right-hand long
side from the bottom-right corner and y to the left (the only right-handed
choice with z up and the origin at the bottom of the image).

Manual calibration file (TOML, our schema; see clips/example_calibration.toml)
-------------------------------------------------------------------------------
::

    table = "pool-9ft"            # preset name (feltlab.standards.TABLES)
    image_size = [1280, 720]      # width, height (px)
    # four corners in pixels, in table order (0,0), (L,0), (L,W), (0,W)
    corners_px = [[151.4, 611.8], [1141.2, 601.5], [1125.5, 108.3], [153.9, 125.2]]
    corners_plane = "cloth"       # "cloth" (z = 0) or "nose" (cushion-nose height)
    # optional:
    # rect_mm = [x0, y0, x1, y1]  # corners of a marked rectangle instead of the
    #                             # playing surface (a test bench filming part of a table)
    # ball_diameter_mm = 57.15
    # k1 = -0.02                  # radial distortion, if known
    # focal_px = 1163.6           # if known; otherwise fitted from the corners
    # hfov_deg = 58.0             # or the lens's horizontal field of view (deg) instead
    # nose_height_mm = 36.5       # overrides the preset for corners_plane = "nose"

Four corners fix a homography (8 numbers); the camera has focal + pose = 7, so
the focal is fitted from the corners unless given. It is poorly determined
for a camera looking straight down (then only focal/height is); give it if
you know it.

A file written by :func:`save_calibration` holds the fitted camera as well
(``[camera]`` table: K, dist, R, t_mm) and is read back exactly.
"""
from __future__ import annotations

import math
import os
import tempfile
import tomllib
from pathlib import Path

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter1d
from threadpoolctl import threadpool_limits

from feltlab.errors import FeltlabError
from feltlab.standards import TablePreset, table_preset
from tracking._camera_fit import SIDE_ORDER, fit_edges, fit_points, initial_camera
from tracking._table_edges import (
    _sample,
    cloth_mask,
    cloth_projection,
    edge_points_along,
    linear_gray,
    median_image,
    region_reach_px,
    rough_quad,
)
from tracking.calibrate_scale import (
    REFINE_AGREE_PX,
    corner_shift_px,
    full_calibration,
    reduce_frame,
    work_factor,
)
from tracking.calibration import Calibration
from tracking.camera import CameraModel
from tracking.pockets import side_pocket_points
from tracking.settings import CalibrationSettings

#: Nose height as a fraction of ball diameter when the preset has none: pool
#: practice, 62.5-64.5% (from memory; see feltlab.standards).
NOSE_FRAC_DEFAULT = 0.635


def nose_height_mm(table: TablePreset, ball_diameter_mm: float) -> float:
    """Cushion-nose height above the cloth (mm): the preset's, else 63.5% of the ball."""
    if table.cushion_nose_height_mm is not None:
        return float(table.cushion_nose_height_mm)
    return NOSE_FRAC_DEFAULT * ball_diameter_mm


# --------------------------------------------------------------------------- auto
def _check_frames(frames) -> list[np.ndarray]:
    if frames is None or len(frames) == 0:
        raise FeltlabError("calibration needs at least one frame; the clip gave none")
    out = []
    shape = None
    for f in frames:
        a = np.asarray(f)
        if a.ndim not in (2, 3) or a.size == 0 or (a.ndim == 3 and a.shape[2] not in (1, 3)):
            raise FeltlabError(f"calibration frames must be HxW or HxWx3 images, got shape {a.shape}")
        if a.ndim == 3 and a.shape[2] == 1:
            a = a[..., 0]
        if shape is not None and a.shape[:2] != shape:
            raise FeltlabError("calibration frames differ in size; use frames of one clip")
        shape = a.shape[:2]
        out.append(a)
    if min(shape) < 32:
        raise FeltlabError(f"frames of {shape[1]}x{shape[0]} px are too small to find a table")
    return out


def order_corners(quad: np.ndarray) -> tuple[np.ndarray, str]:
    """Quad corners (4,2) px -> table order (0,0), (L,0), (L,W), (0,W) and the layout.

    Layout 'horizontal' (long side left-right): origin bottom-left, x right.
    'vertical': origin bottom-right, x up, y left (see module docstring).
    """
    c = quad.mean(axis=0)
    ang = np.arctan2(quad[:, 1] - c[1], quad[:, 0] - c[0])
    q = quad[np.argsort(ang)]  # cyclic order (clockwise on screen, y down)
    sides = [np.linalg.norm(q[(i + 1) % 4] - q[i]) for i in range(4)]
    long_first = sides[0] + sides[2] >= sides[1] + sides[3]
    # the two long sides as index pairs
    pairs = [(0, 1), (2, 3)] if long_first else [(1, 2), (3, 0)]
    d = q[pairs[0][1]] - q[pairs[0][0]]
    horizontal = abs(d[0]) >= abs(d[1])
    if horizontal:
        side = max(pairs, key=lambda pr: q[list(pr), 1].mean())  # bottom long side
        a, b = q[side[0]], q[side[1]]
        o, xl = (a, b) if a[0] < b[0] else (b, a)
    else:
        side = max(pairs, key=lambda pr: q[list(pr), 0].mean())  # right long side
        a, b = q[side[0]], q[side[1]]
        o, xl = (a, b) if a[1] > b[1] else (b, a)
    rest = [p for p in q if not (np.allclose(p, o) or np.allclose(p, xl))]
    # (L,W) is the remaining corner nearer (L,0)
    r0, r1 = rest
    lw, ow = (r0, r1) if np.linalg.norm(r0 - xl) < np.linalg.norm(r1 - xl) else (r1, r0)
    return np.array([o, xl, lw, ow]), "horizontal" if horizontal else "vertical"


def _side_ranges(table: TablePreset, side: str, s: CalibrationSettings) -> list[tuple[float, float]]:
    """Fractions of a side's length to search (pocket stretches removed)."""
    length = table.length_mm if side in ("y0", "yW") else table.width_mm
    if not table.pockets:
        e = s.corner_plain_mm / length
        return [(e, 1 - e)]
    e = s.corner_pocket_mm / length
    if side in ("y0", "yW"):
        m = s.side_pocket_mm / length
        return [(e, 0.5 - m), (0.5 + m, 1 - e)]
    return [(e, 1 - e)]


def _side_world(side: str, L: float, W: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Start, end and outward unit vector of a nose line in the table plane."""
    return {
        "y0": (np.array([0.0, 0.0]), np.array([L, 0.0]), np.array([0.0, -1.0])),
        "xL": (np.array([L, 0.0]), np.array([L, W]), np.array([1.0, 0.0])),
        "yW": (np.array([L, W]), np.array([0.0, W]), np.array([0.0, 1.0])),
        "x0": (np.array([0.0, W]), np.array([0.0, 0.0]), np.array([-1.0, 0.0])),
    }[side]


def _curve(cam: CameraModel, side: str, L: float, W: float, z: float):
    a, b, out = _side_world(side, L, W)

    def f(sfrac: np.ndarray):
        xy = a[None, :] + sfrac[:, None] * (b - a)[None, :]
        p = cam.project(np.column_stack([xy, np.full(len(xy), z)]))
        q = cam.project(np.column_stack([xy + out * 5.0, np.full(len(xy), z)]))
        n = q - p
        n /= np.linalg.norm(n, axis=1, keepdims=True)
        return p, n

    return f


def hfov_deg_of(cam: CameraModel) -> float:
    """Horizontal field of view (deg) of the pinhole model: 2 atan(w / 2f), w the image width (px)."""
    return float(np.degrees(2 * np.arctan(cam.image_size[0] / 2.0 / cam.K[0, 0])))


def check_hfov_deg(value, settings: CalibrationSettings = CalibrationSettings()) -> float:
    """A user-given horizontal field of view (deg), checked; raises a one-line FeltlabError if implausible."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = float("nan")
    lo, hi = settings.hfov_given_min_deg, settings.hfov_given_max_deg
    if not (math.isfinite(v) and lo <= v <= hi):
        raise FeltlabError(
            f"field of view {value!r} is not a lens's horizontal angle in degrees between {lo:g} and {hi:g}; "
            "give the horizontal field of view from the lens data sheet, in degrees (e.g. 62)")
    return v


def calibrate_auto(frames: list[np.ndarray], table: TablePreset, ball_diameter_mm: float | None = None,
                   settings: CalibrationSettings = CalibrationSettings(),
                   hfov_deg: float | None = None) -> Calibration:
    """Calibrate the camera from a few frames showing the whole playing surface.

    frames: BGR (or grey) images of one clip. table: the preset whose playing
    surface (between cushion noses) is in view. Returns a Calibration
    (method 'auto') with the fitted camera in the table frame (mm), RMS
    edge residuals in px and mm, and notes (warnings) for the user.
    hfov_deg: the lens's horizontal field of view (deg, e.g. from its data
    sheet), used where the picture does not fix the camera height (no
    cushion faces in view) instead of the assumed one
    (``CalibrationSettings.hfov_prior_deg``). ``camera.meta['hfov_deg']`` is
    the fitted value and ``meta['hfov_source']`` where it came from:
    "measured" (cushion faces), "given" or "assumed".

    Where the fit fails its checks, it is tried once more with each side's
    innermost line taken on weaker support (``CalibrationSettings.
    line_share_retry``: a faint nose found on only part of a side); every
    check applies again, and if that fails too the first refusal is raised.
    """
    # The fits' Jacobians are small (~1000 x 8): BLAS threads only add
    # synchronisation there, and on a shared CPU they wait for each other
    # (least_squares' SVDs took 35 ms each on 2 loaded cores; one thread:
    # calibration 1.4-1.6x faster, same numbers on D1 to 1e-6)
    if hfov_deg is not None:
        hfov_deg = check_hfov_deg(hfov_deg, settings)
    # large frames (2560x1440 and up) are calibrated reduced to the size the
    # pixel figures were measured on, and the camera carried back
    # (tracking.calibrate_scale)
    frames = _check_frames(frames)
    h_full, w_full = frames[0].shape[:2]
    k = work_factor(w_full, h_full)
    work = [reduce_frame(f, k) for f in frames] if k > 1 else frames
    with threadpool_limits(limits=1, user_api="blas"):
        try:
            cal = _calibrate_once(work, table, ball_diameter_mm, settings, settings.line_share, hfov_deg)
        except FeltlabError as first:
            if not getattr(first, "retry", False):
                raise
            try:
                cal = _calibrate_once(work, table, ball_diameter_mm, settings, settings.line_share_retry,
                                      hfov_deg)
            except FeltlabError:
                raise first from None
        if k == 1:
            return cal
        cal = full_calibration(cal, k, (w_full, h_full))
        # the refinement passes again on the full frames, from the reduced
        # fit's lines: sharp footage locates its edges better there (fresh
        # 3840x2160 MuJoCo render: nose corners 1.98 px off reduced, 0.23 px
        # at full size); kept only where it stays within the reduced fit's
        # own precision (REFINE_AGREE_PX working px), else a blurred
        # (upscaled) picture's edges were taken at another line
        try:
            fine = _calibrate_once(frames, table, ball_diameter_mm, settings, settings.line_share, hfov_deg,
                                   start=cal.camera)
        except FeltlabError:
            fine = None
        shift = corner_shift_px(cal, fine) if fine is not None else math.inf
        if shift <= REFINE_AGREE_PX * k:
            fine.camera.meta.update(reduced_by=int(k), full_refine_shift_px=shift)
            return fine
        cal.camera.meta.update(reduced_by=int(k), full_refine_shift_px=shift)
        cal.notes.append(
            f"the cushion edges were measured on the picture reduced {k}x (at full size they are too soft to "
            f"follow: an upscaled video?), so the table corners are good to about {k}x the usual precision; check "
            "calibration.png or calibrate from a file")
        return cal


class _StartFit:
    """A fitted camera to start the refinement passes from (``_calibrate_once(start=...)``)."""

    def __init__(self, camera: CameraModel):
        self.camera = camera


def _refusal(msg: str, kind: str = "fit", height_mm: float | None = None) -> FeltlabError:
    """A refusal of the fitted camera (not of the input): calibrate_auto may retry.

    kind "scale": the fit implies an absurd scale (camera height), which a
    preset of another size may mend; "fit": lines missed or mixed, which a
    preset of the same pocket layout (only its size differs) cannot mend.
    ``height_mm`` (kind "scale"): the fitted camera height above the cloth (mm).
    """
    exc = FeltlabError(msg)
    exc.retry = True
    exc.kind = kind
    exc.height_mm = height_mm
    return exc


def _region_error(msg: str) -> FeltlabError:
    """The table itself was not found in the picture: no preset changes that (kind "region")."""
    exc = FeltlabError(msg)
    exc.kind = "region"
    return exc


def _calibrate_once(frames: list[np.ndarray], table: TablePreset, ball_diameter_mm: float | None,
                    settings: CalibrationSettings, line_share: float, hfov_deg: float | None = None,
                    start: CameraModel | None = None) -> Calibration:
    """calibrate_auto with one support share for the first pass's lines (:func:`main_line`).

    start: a camera already fitted (to these frames reduced, :mod:`tracking.calibrate_scale`): the
    first pass (search across the cloth region's outline) is skipped and the refinement passes
    start from its lines.
    """
    imgs = _check_frames(frames)
    ball_d = float(ball_diameter_mm or table.ball.diameter_mm)
    if not (0 < ball_d < 200):
        raise FeltlabError(f"ball diameter {ball_d} mm is not plausible; give it in millimetres")
    z_nose = nose_height_mm(table, ball_d)
    L, W = table.length_mm, table.width_mm
    img = median_image(imgs, settings.max_frames)
    h, w = img.shape[:2]
    gray = img.mean(axis=2).astype(np.float32)
    try:
        gray_lin = None if settings.tone_curve is None else linear_gray(img, settings.tone_curve)
    except ValueError as exc:
        raise FeltlabError(f"CalibrationSettings.tone_curve: {exc}") from None
    mask = cloth_mask(img, settings)
    det = cloth_projection(img, mask) if settings.edge_signal == "cloth" else None
    frac = mask.mean()
    if frac < 0.05 or frac > 0.97:
        raise _region_error(
            "could not find the cloth in the middle of the image; film the whole table from above "
            "or calibrate from a file (feltlab calibrate --help)")
    quad = rough_quad(mask)
    if quad is None:
        raise _region_error("the cloth region is not a quadrilateral; is the whole playing surface in view? "
                            "otherwise calibrate from a file")
    corners, layout = order_corners(quad)
    notes: list[str] = []
    try:
        cam = initial_camera(corners, np.column_stack([[0, L, L, 0], [0, 0, W, W], [z_nose] * 4]), (w, h))
    except ValueError as exc:
        raise FeltlabError(f"could not place a camera over the table outline ({exc}); check the table preset")
    w_px = float(np.mean([np.linalg.norm(corners[3] - corners[0]), np.linalg.norm(corners[2] - corners[1])]))
    # gradient peak (DN/px) of the faintest cushion nose sought on this cloth (as in _table_edges.noise_strip_px)
    nose_peak = settings.nose_contrast_min * float(np.median((gray if det is None else det)[mask])) / (
        np.sqrt(2 * np.pi) * np.hypot(1.0, settings.edge_sigma_px))
    # where the rim of the region frays (dim cloth) the outline cuts inside it:
    # the first pass searches out to the rim plus the usual margin
    reach = region_reach_px(mask, corners)
    px_mm0 = w_px / W
    plateau_px = settings.plateau_mm * px_mm0
    # the refinement passes' profiles start inward of the face band seen in the
    # previous pass, so their leading samples (taken as cloth) do not hold the
    # band's foot edge (a wide lens shows the faces at the ends ~25 mm wide):
    # the leading 35 % (edge_points_along) end >= 4 px inward of the band
    band_seen = {side: 0.0 for side in SIDE_ORDER}
    # face-line widths (px) per side used in the last pass (:func:`_face_px`)
    face_used: dict[str, float] = {}
    cut_off = {side: False for side in SIDE_ORDER}
    # whether the first pass (profiles across the cloth region's own outline,
    # before any fit) lost noses off the picture on a side: only then can a
    # later pass's noses lost there mean that the frame cuts the cushion;
    # otherwise the fit itself has moved the line off the table
    edge_met = {side: False for side in SIDE_ORDER}
    prior = ((settings.hfov_prior_deg, settings.hfov_prior_sigma_deg) if hfov_deg is None
             else (hfov_deg, settings.hfov_given_sigma_deg))
    fit = None if start is None else _StartFit(start)
    inner: dict[str, np.ndarray] = {}
    n_pass = max(settings.passes, 1 if start is None else 2)
    it = -1 if start is None else 0
    while it + 1 < n_pass:
        it += 1
        pts: dict[str, np.ndarray] = {}
        for i, side in enumerate(SIDE_ORDER):
            ranges = _side_ranges(table, side, settings)
            stats: dict = {}
            if it == 0:
                p0, p1 = corners[i], corners[(i + 1) % 4]
                t = (p1 - p0) / np.linalg.norm(p1 - p0)
                nrm = np.array([-t[1], t[0]])
                if np.dot(nrm, (p0 + p1) / 2 - corners.mean(axis=0)) < 0:
                    nrm = -nrm
                # coarse to fine: a side whose nose shows on too few profiles
                # may lie beyond the window (a region cut short on dim cloth):
                # search again further out, but only where the cloth is dim
                # enough for its noise to have stopped the region (the strip
                # grew): on bright cloth a missed nose is smeared or faint,
                # and further out lies the rail (sweep render f04h32, H.264
                # crf 32: a grown window took it, and the pool-8ft fallback
                # then fitted 33-76 px off without a warning)
                n_want = settings.search_min_share * np.linalg.norm(p1 - p0) / settings.profile_spacing_px * sum(
                    b - a for a, b in ranges)
                best = None
                for grow in settings.search_out_grow:
                    found, strength, band = edge_points_along(
                        gray, p0, p1, nrm, ranges, settings.search_in_frac * w_px,
                        grow * (settings.search_out_frac * w_px + reach[i]), plateau_px, settings,
                        gray_lin=gray_lin, detect=det, rough_line=True, stats=stats)
                    keep = main_line(found, p0, p1, nrm, settings.line_tol_px, min_share=line_share,
                                     weight=_edge_weight(strength, nose_peak))
                    if best is None or keep.sum() > best[0].sum():
                        best = (keep, found, band)
                    if keep.sum() >= max(n_want, 8) or stats.get("strip_px", 0.0) <= settings.profile_strip_px:
                        break
                keep, found, band = best
                found, band = found[keep], band[keep]
            else:
                win = settings.refine_window_px
                found, _, band = edge_points_along(
                    gray, None, None, None, ranges, max(1.5 * win + plateau_px / 2, (band_seen[side] + 4.0) / 0.65),
                    win + plateau_px * 1.5,
                    plateau_px, settings, curve=_curve(fit.camera, side, L, W, z_nose),
                    n_profiles=_n_profiles(fit.camera, side, L, W, z_nose, settings), gray_lin=gray_lin, detect=det,
                    stats=stats, face_px=face_used.setdefault(side, _face_px(fit.camera, side, L, W, z_nose, settings)))
                if len(found):
                    r = np.abs(_point_resid_px(fit.camera, side, found, L, W, z_nose))
                    ok = r < max(settings.outlier_px, 4 * settings.loss_scale_px) + (win if it == 1 else 0)
                    found, band = found[ok], band[ok]
            pts[side] = found
            inner[side] = band
            band_seen[side] = min(_band_width_px(found, band), settings.band_max_mm * px_mm0)
            # more noses lost at the picture's edge than kept: the frame cuts the cushion
            cut_off[side] = stats.get("off_frame", 0) >= max(8, len(found))
            if it == 0:
                edge_met[side] = stats.get("off_frame", 0) > 0
        few = [s for s in SIDE_ORDER if len(pts[s]) < 8]
        drift = [s for s in few if cut_off[s] and not edge_met[s]]
        if drift:
            # not retried with weaker lines: on the sweep render f04h (H.264
            # crf 32, carom) that fitted 3.9 px off at the corners, focal -28 %,
            # with no warning
            exc = FeltlabError(
                f"the fitted cushion line of side(s) {', '.join(drift)} moved off the picture although the first "
                "look found that cushion inside it, so the fit followed a wrong line on some side (a rail, or an "
                "edge left by video compression, taken for a faint cushion nose); calibrate from a file")
            exc.kind = "fit"
            raise exc
        if few and any(cut_off[s] for s in few):
            raise _region_error(
                f"the cushion of side(s) {', '.join(s for s in few if cut_off[s])} runs along or off the edge of "
                "the picture, so its nose cannot be measured; film with the whole table and its cushions inside "
                "the frame, or calibrate from a file")
        if few:
            raise _refusal(
                f"found too few cushion-nose points on side(s) {', '.join(few)}; is the whole table in view "
                "and not covered, and are its cushion edges clear (heavy video compression or dim, cloth-coloured "
                "cushions blur them)? otherwise calibrate from a file")
        groups = [(side, z_nose, pts[side]) for side in SIDE_ORDER]
        fit, groups = _fit_robust(fit.camera if fit else cam, groups, L, W, settings, prior)
        # the face-line call (which sides, how wide) is made again with the
        # refitted camera; where the last pass made it differently (in view or
        # not), one more pass with the new call
        if it > 0:
            call = {side: _face_px(fit.camera, side, L, W, z_nose, settings) for side in SIDE_ORDER}
            if it + 1 == n_pass and n_pass == max(settings.passes, 1) and (
                    {s for s, v in call.items() if v > 0} != {s for s, v in face_used.items() if v > 0}):
                n_pass += 1
            face_used = call
    nose_groups = groups
    n_nose = sum(len(g[2]) for g in groups)
    height_from = ("focal-length prior (near-overhead view; see CalibrationSettings.hfov_prior_deg)" if hfov_deg is None
                   else "given field of view (near-overhead view)")
    hfov_source = "assumed" if hfov_deg is None else "given"
    # Vertical cushion faces in view: their foot (z = 0) fixes the camera height.
    band = _band_check(fit.camera, pts, inner, L, W, settings)
    fit_prior = prior  # the prior of the fit kept (none where the faces fix the height)
    if band is not None:
        groups2 = nose_groups + [(side, 0.0, band[side]) for side in SIDE_ORDER]
        fit2, groups2 = _fit_robust(fit.camera, groups2, L, W, settings, None)
        n2 = sum(len(g[2]) for g in groups2[:4])
        r_nose = np.sqrt(np.mean(fit2.resid_px[:n2] ** 2))
        r_foot = np.sqrt(np.mean(fit2.resid_px[n2:] ** 2))
        r_prev = float(np.sqrt(np.mean(fit.resid_px ** 2)))
        # The foot edge is the weaker, blurrier one, and where the band is only
        # a few px wide (low resolution) its two edges interact: judge its fit
        # against the nose line's own scatter, not a fixed pixel figure.
        foot_ok = r_foot < max(settings.band_resid_px, settings.band_resid_rel * r_prev)
        if foot_ok and r_nose < 1.5 * r_prev + 0.05:
            fit, groups = fit2, groups2
            n_nose = n2
            fit_prior = None
            height_from = "cushion faces (nose at z = h, foot at z = 0)"
            hfov_source = "measured"
        else:
            notes.append("cushion-face band seen but inconsistent with vertical faces; camera height from "
                         + ("the focal-length prior" if hfov_deg is None else "the given field of view"))
    # The side pockets' mirror centres fix where x = L / 2 is along the long
    # sides; without them only the short-side lines place the table along its
    # length, and under lamps both can be off the same way (mj16001: +0.77 and
    # -0.41 px inward, ~0.6 px along x). None on carom tables or out of view.
    pocket_pts, pocket_info = side_pocket_points(img, fit.camera, table, z_nose)
    if pocket_pts:
        fit = fit_edges(fit.camera, groups, L, W, settings.fit_k2, settings.loss_scale_px, fit_prior,
                        points=pocket_pts)
    res_px = float(np.sqrt(np.mean(fit.resid_px[:n_nose] ** 2)))
    res_mm = float(np.sqrt(np.mean(fit.resid_mm[:n_nose] ** 2)))
    if not math.isfinite(res_px) or res_px > settings.max_residual_px:
        raise _refusal(
            f"table edges do not fit a camera model (RMS {res_px:.2f} px); check the table preset or "
            "calibrate from a file")
    # aspect check: refit with a free length factor
    chk = fit_edges(fit.camera, groups, L, W, settings.fit_k2, settings.loss_scale_px,
                    prior if band is None else None, free_length=True)
    # An edge taken at the wrong line (a rail or cushion-top edge instead of
    # the nose) cannot be absorbed by the preset's rectangle except through an
    # absurd perspective: a camera tens of metres up (a few degrees of view).
    height = float(fit.camera.centre_mm[2])
    if not (0 < height <= settings.max_camera_height_mm):
        raise _refusal(
            f"the table edges fit only a camera {height / 1000:.0f} m above the cloth (outline "
            f"{chk.length_scale * L / W:.2f}:1 vs {L / W:.2f}:1 for {table.name}); an edge was probably taken at the "
            "wrong line (dim or cloth-coloured cushions): check the table preset or calibrate from a file",
            kind="scale", height_mm=height)
    if abs(chk.length_scale - 1) > settings.aspect_max_frac:
        raise _refusal(
            f"the fitted table outline is {chk.length_scale * L / W:.2f}:1, not {L / W:.2f}:1 as every standard table; "
            "an edge was probably taken at the wrong line: calibrate from a file")
    if abs(chk.length_scale - 1) > settings.aspect_warn_frac:
        notes.append(
            f"the table's length/width looks {chk.length_scale * L / W:.3f}, not {L / W:.3f} as for "
            f"{table.name}: is this the right table preset?")
    det_img = gray if det is None else det
    steps = {side: inner_step_ratio(det_img, fit.camera, side, L, W, z_nose, _side_ranges(table, side, settings),
                                    _band_width_px(pts[side], inner.get(side)), settings) for side in SIDE_ORDER}
    missed = [side for side in SIDE_ORDER if steps[side] > settings.inner_step_max]
    if missed:
        raise _refusal(
            f"side(s) {', '.join(missed)} show a clear edge on the cloth inward of the fitted cushion line, so the "
            "cushion nose was probably missed (faint or cloth-coloured cushion tops): calibrate from a file")
    spread = cushion_colour_spread(img, fit.camera, table, z_nose, settings)
    if spread > settings.cushion_chroma_max:
        raise _refusal(
            f"the colour just outside the fitted cushion lines differs between the sides (chromaticity spread "
            f"{spread:.2f}), so a cushion nose was probably missed on some side and a rail taken (faint or "
            "cloth-coloured cushion tops): calibrate from a file")
    off = {side: off_frame_share(fit.camera, side, L, W, z_nose, (w, h), _side_ranges(table, side, settings),
                                 settings.border_margin_px) for side in SIDE_ORDER}
    cut = [f"{side} ({100 * off[side]:.0f}%)" for side in SIDE_ORDER if off[side] > settings.off_frame_note]
    if cut:
        notes.append(f"the cushion line of side(s) {', '.join(cut)} runs off the picture, so the fit extrapolates "
                     "there and positions near it are less certain; film with the whole table inside the frame")
    levels = side_light_levels(gray, fit.camera, table, z_nose, settings)
    dim = min(levels, key=levels.get)
    bright = max(levels, key=levels.get)
    if levels[bright] > settings.light_ratio_note * max(levels[dim], 1.0):
        notes.append(
            f"the light on the cloth falls off {levels[bright] / max(levels[dim], 1.0):.0f}-fold from side {bright} to "
            f"side {dim} (a low lamp at one end?): cushions lit at a grazing angle can show their edge off the nose "
            "line, a few px here; check calibration.png or calibrate from a file")
    gain = corner_gain(fit.camera, groups, L, W, settings, fit_prior)
    if gain * settings.corner_note_edge_px > settings.corner_note_px:
        notes.append(
            f"this view magnifies edge errors: {settings.corner_note_edge_px:.2f} px on one cushion line moves the "
            f"fitted table corners by {gain * settings.corner_note_edge_px:.1f} px (the camera's height is poorly "
            "fixed by the table's outline), so positions may be off by over 1 px near the cushions; check "
            "calibration.png or calibrate from a file")
    off_line = line_offsets_px(fit.resid_px, groups)
    worst = max(off_line, key=lambda k: abs(off_line[k]))
    r_foot = (float(np.sqrt(np.mean(fit.resid_px[n_nose:] ** 2))) if fit_prior is None and len(fit.resid_px) > n_nose
              else None)
    if (r_foot is not None and r_foot > settings.foot_note_px) or abs(off_line[worst]) > settings.line_offset_note_px:
        detail = (f"face-foot lines RMS {r_foot:.2f} px, " if r_foot is not None else "") + (
            f"line {worst} off by {off_line[worst]:+.2f} px")
        notes.append(
            f"the cushion lines do not agree well with one camera ({detail}; compressed or blurred video, or an "
            "edge taken off the nose?): the table corners may be off by over 1 px; check calibration.png or "
            "calibrate from a file")
    cam_fit = fit.camera
    lens = lens_note(float(cam_fit.dist[0]), settings.k1_warn)
    if lens:
        notes.append(lens)
    hfov = hfov_deg_of(cam_fit)
    fov = fov_note(hfov, hfov_source, hfov_deg, settings)
    if fov:
        notes.append(fov)
    cam_fit.meta = {"layout": layout, "nose_height_mm": z_nose, "n_edge_points": int(n_nose),
                    "height_from": height_from, "corner_gain": gain, "line_offsets_px": off_line,
                    "foot_rms_px": r_foot, "hfov_deg": hfov, "hfov_source": hfov_source,
                    "side_pockets": pocket_info}
    return Calibration(camera=cam_fit, table=table, ball_diameter_mm=ball_d, residual_px=res_px,
                       residual_mm=res_mm, method="auto", notes=notes)


def fov_note(hfov: float, source: str, given: float | None, settings: CalibrationSettings) -> str | None:
    """The calibration note on the horizontal field of view (deg): where it came from, if not measured.

    source: "measured" (cushion faces), "given" or "assumed". A measured
    value gets a note only when a given one is over
    ``hfov_given_conflict_deg`` off it.
    """
    if source == "assumed":
        return (f"field of view {hfov:.1f} deg assumed: nothing in the picture fixes the camera height (no cushion "
                "faces in view), and the cloth-plane corners move ~1-2 px per 10 deg; give the lens's horizontal "
                "field of view (--hfov) if known")
    if source == "given":
        return f"field of view {hfov:.1f} deg from the given {given:g} deg (not measurable in this picture)"
    if given is not None and abs(hfov - given) > settings.hfov_given_conflict_deg:
        return (f"the cushion faces give a field of view of {hfov:.1f} deg, not the given {given:g} deg (kept the "
                "measured one; a video mode that crops the sensor narrows the lens's field of view)")
    return None


def cushion_colour_spread(img: np.ndarray, cam: CameraModel, table: TablePreset, z: float,
                          settings: CalibrationSettings) -> float:
    """How much the colour just outside the fitted nose lines differs between the four sides.

    Outside the nose lies the cushion top, covered alike on all four
    cushions (common practice); a side fitted to the rail or another line
    further out shows the rail's colour there instead. Per side, the median
    BGR of a strip from 3 px to 3 px + ``cushion_strip_mm`` outward of the
    fitted line (pockets excluded; balls are too few to move a median) is
    turned into chromaticity (b, g, r) / (b + g + r), which does not change
    with the amount of light. Returns the largest distance between two
    sides' chromaticities (grey frames: 0).
    """
    L, W = table.length_mm, table.width_mm
    px_mm = 1.0 / cam.mm_per_px([L / 2, W / 2, z])
    offs = np.arange(3.0, 3.0 + settings.cushion_strip_mm * px_mm, 0.5)
    a = np.asarray(img, np.float32)
    if a.ndim == 2:
        return 0.0
    chroma = {}
    for side in SIDE_ORDER:
        sfr = np.linspace(0.0, 1.0, 240)
        sfr = sfr[np.any([(sfr >= lo) & (sfr <= hi) for lo, hi in _side_ranges(table, side, settings)], axis=0)]
        p, n = _curve(cam, side, L, W, z)(sfr)
        pts = p[:, None, :] + offs[None, :, None] * n[:, None, :]
        col = np.median(np.stack([_sample(np.ascontiguousarray(a[..., c]), pts) for c in range(3)], -1)
                        .reshape(-1, 3), axis=0)
        chroma[side] = col / max(float(col.sum()), 1e-6)
    ch = np.array([chroma[s] for s in SIDE_ORDER])
    return max(float(np.linalg.norm(ch[i] - ch[j])) for i in range(4) for j in range(i + 1, 4))


def side_light_levels(gray: np.ndarray, cam: CameraModel, table: TablePreset, z: float,
                      settings: CalibrationSettings) -> dict[str, float]:
    """Median grey level (DN) of the cloth 5-55 mm beyond band_max_mm inward of each fitted nose line.

    Beyond any face or shadow band (at most band_max_mm wide), so it is the
    cloth's own level beside each cushion; pockets are excluded and balls are
    too few to move a median. Compared by ``light_ratio_note``
    (CalibrationSettings).
    """
    L, W = table.length_mm, table.width_mm
    px_mm = 1.0 / cam.mm_per_px([L / 2, W / 2, z])
    offs = (settings.band_max_mm + np.arange(5.0, 55.0, 5.0)) * px_mm
    out = {}
    for side in SIDE_ORDER:
        sfr = np.linspace(0.0, 1.0, 120)
        sfr = sfr[np.any([(sfr >= lo) & (sfr <= hi) for lo, hi in _side_ranges(table, side, settings)], axis=0)]
        p, n = _curve(cam, side, L, W, z)(sfr)
        q = p[:, None, :] - offs[None, :, None] * n[:, None, :]
        out[side] = float(np.median(_sample(np.ascontiguousarray(gray, np.float32), q)))
    return out


def off_frame_share(cam: CameraModel, side: str, L: float, W: float, z: float, size: tuple[int, int],
                    ranges: list[tuple[float, float]], margin_px: float) -> float:
    """Fraction of a side's fitted nose line (pockets excluded) outside the picture or within ``margin_px`` of its edge.

    No nose point can be measured there (tracking._table_edges.edge_points_along
    drops them), so the fit extrapolates. size: (width, height) px.
    """
    sfr = np.linspace(0.0, 1.0, 240)
    sfr = sfr[np.any([(sfr >= lo) & (sfr <= hi) for lo, hi in ranges], axis=0)]
    if sfr.size == 0:
        return 0.0
    p, _ = _curve(cam, side, L, W, z)(sfr)
    w, h = size
    inside = ((p[:, 0] >= margin_px) & (p[:, 0] <= w - 1 - margin_px)
              & (p[:, 1] >= margin_px) & (p[:, 1] <= h - 1 - margin_px))
    return float(1.0 - inside.mean())


def corner_gain(cam: CameraModel, groups: list, L: float, W: float, settings: CalibrationSettings,
                prior: tuple[float, float] | None) -> float:
    """How far (px) the cloth corners move per px of error on one nose line, root-sum-square over the four.

    See :func:`corner_gains` (per line).
    """
    g = list(corner_gains(cam, groups, L, W, settings, prior).values())
    return float(np.sqrt(np.sum(np.square(g)))) if g else 0.0


def corner_gains(cam: CameraModel, groups: list, L: float, W: float, settings: CalibrationSettings,
                 prior: tuple[float, float] | None) -> dict[str, float]:
    """Largest cloth-corner displacement (px) per px of outward error on each nose line, keyed by side.

    Each side's nose points are moved 1 px outward across their fitted line
    and the camera refitted (same loss and prior); the largest cloth-corner
    displacement (z = 0) is that side's gain. A near-overhead view fixes the
    camera's height only through the table outline's perspective, weak when
    the camera is far (weak perspective: depth differences small against the
    distance), so an edge error there moves height and focal together and
    the cloth corners (seen from a wrong height) with them: gains of 4-9
    where an unmodelled short-side bias put corners 1-3 px off (MuJoCo
    renders m02, m03, mj8861), 0.8-2.4 on the others. :func:`corner_gain`
    takes the four lines' errors as independent (root-sum-square).
    """
    corners = np.array([[0, 0, 0], [L, 0, 0], [L, W, 0], [0, W, 0]], float)
    base = fit_edges(cam, groups, L, W, settings.fit_k2, settings.loss_scale_px, prior)
    uv0 = base.camera.project(corners)
    gains = {}
    for k in range(min(4, len(groups))):
        side, z, px = groups[k]
        if len(px) == 0:
            continue
        p, n = _curve(cam, side, L, W, z)(np.linspace(0.0, 1.0, 64))
        near = np.argmin(((px[:, None, :] - p[None]) ** 2).sum(axis=2), axis=1)
        moved = list(groups)
        moved[k] = (side, z, px + n[near])
        f = fit_edges(cam, moved, L, W, settings.fit_k2, settings.loss_scale_px, prior)
        gains[side] = float(np.linalg.norm(f.camera.project(corners) - uv0, axis=1).max())
    return gains


def line_offsets_px(resid_px: np.ndarray, groups: list) -> dict[str, float]:
    """Median residual (px) of each fitted line's points, keyed 'y0', ... (nose) and 'y0@0', ... (face foot).

    Four nose lines alone leave no offset (the camera absorbs one per line);
    with the face-foot lines as well, a line the camera cannot meet shows a
    coherent offset.
    """
    out, i0 = {}, 0
    for k, (side, z, px) in enumerate(groups):
        r = resid_px[i0: i0 + len(px)]
        i0 += len(px)
        out[side if k < 4 else f"{side}@0"] = float(np.median(r)) if len(r) else 0.0
    return out


def face_in_view(cam: CameraModel, side: str, L: float, W: float, z: float, settings: CalibrationSettings,
                 tan_scale: float = 1.0) -> bool:
    """Whether a side's undercut cushion face can be seen from the camera (mid-side).

    In the plane across the side, the face runs from the nose (height z on
    the nose line) down and outward at ``CalibrationSettings.face_lean_deg``
    from vertical. A camera d mm inside the nose line and H mm above the nose
    sees the face's front exactly when its sight line to the nose is further
    off vertical than the lean: d / H > tan(lean) (the sight line then meets
    the face, not the cloth beneath it). tan_scale multiplies d / H (a camera
    that much lower, as a focal length off by that factor would put it).
    The angle barely changes along a side of a camera over the table.
    """
    if settings.face_lean_deg is None:
        return False
    a, b, out = _side_world(side, L, W)
    c = cam.centre_mm
    hc = float(c[2]) - z
    d = float((0.5 * (a + b) - c[:2]) @ out)
    return hc > 0 and d / hc * tan_scale > math.tan(math.radians(settings.face_lean_deg))


def face_width_px(cam: CameraModel, side: str, L: float, W: float, z: float,
                  settings: CalibrationSettings) -> float:
    """Image width (px) of a side's undercut face at mid-side, 0 where it is hidden (:func:`face_in_view`).

    The nose-to-foot distance across the projected nose line; the foot lies
    z tan(lean) outward of the nose on the cloth. In the image it lies inward
    of the nose when the face is in view (the face's front is then seen).
    """
    if not face_in_view(cam, side, L, W, z, settings):
        return 0.0
    a, b, out = _side_world(side, L, W)
    mid = 0.5 * (a + b)
    foot = mid + out * z * math.tan(math.radians(settings.face_lean_deg))
    p = cam.project(np.array([[*mid, z], [*foot, 0.0], [*(mid + out * 5.0), z]]))
    n = p[2] - p[0]
    n /= max(float(np.linalg.norm(n)), 1e-12)
    return max(float((p[0] - p[1]) @ n), 0.0)


def _face_px(cam: CameraModel, side: str, L: float, W: float, z: float, settings: CalibrationSettings) -> float:
    """Width (px) of the face line to model on a side (:func:`tracking._table_edges.face_line_shift`), 0 for none.

    The view angle comes from the fitted camera, whose focal length (so the
    angle's tangent) is known only to ``face_focal_unc`` near-overhead, and
    the face's own pull on the nose edge moves the fit either way. So a face
    is modelled where it is in view for a focal within that band (its width
    then at least ``face_line_min_px``); the shift is taken only where the
    side's profiles show the line (:func:`tracking._table_edges.face_line_shift`).
    The caller makes this call again with each refitted camera.
    """
    if face_in_view(cam, side, L, W, z, settings, 1.0 + settings.face_focal_unc):
        return max(face_width_px(cam, side, L, W, z, settings), settings.face_line_min_px)
    return 0.0


def _band_width_px(pts: np.ndarray, band: np.ndarray | None) -> float:
    """Median width (px) of the face/shadow band seen inward of a side's nose points (0 if none seen)."""
    if band is None or len(band) == 0 or len(band) != len(pts):
        return 0.0
    ok = np.isfinite(band[:, 0])
    if ok.sum() < max(8, 0.1 * len(band)):
        return 0.0
    return float(np.median(np.linalg.norm(pts[ok] - band[ok], axis=1)))


def inner_step_ratio(img: np.ndarray, cam: CameraModel, side: str, L: float, W: float, z: float,
                     ranges: list[tuple[float, float]], band_px: float, settings: CalibrationSettings) -> float:
    """Strongest edge on the cloth inward of a fitted nose line, as a fraction of the nose edge's own.

    Profiles across the side along the fitted line are averaged (noise
    down by the square root of their number; balls and pockets are rare
    enough for a median to ignore). The nose is the cushion's innermost
    edge, so the cloth inward of it has slow shading only; a clear step
    there means the fit took a line further out (cushion top / rail).
    The search starts 4 px inward of the band seen between cloth and
    nose (``band_px`` wide, px; its foot is an edge of the cushion), at most
    ``face_band_max_mm`` wide: a wider "band" is the cushion top between a
    missed nose and the rail. ``ranges``: fractions of the side used (pockets
    excluded), as for the edge points; edges are compared on the
    derivative of Gaussian at 1.5 px, out to 120 mm inward. Only profiles
    wholly inside the picture count: where the nose runs off the frame the
    samples beyond it repeat the border row, the nose step vanishes from the
    median and the cloth's shading inward of it looked like a missed nose
    (sweep render f09, ratio 2.57 on a correct fit; 0 when no profile fits).
    """

    sfr = np.linspace(0.0, 1.0, 240)
    sfr = sfr[np.any([(sfr >= lo) & (sfr <= hi) for lo, hi in ranges], axis=0)]
    if sfr.size < 8:
        return 0.0
    p, n = _curve(cam, side, L, W, z)(sfr)
    px_mm = 1.0 / cam.mm_per_px([L / 2, W / 2, z])
    step = 0.25
    reach = 120.0 * px_mm
    offs = np.arange(-reach, 6.0 * settings.edge_sigma_px + 4.0, step)
    q = p[:, None, :] + offs[None, :, None] * n[:, None, :]
    # profiles running off the picture see its border (replicated samples), not the table
    h, w = img.shape[:2]
    inside = ((q[..., 0] >= 0) & (q[..., 0] <= w - 1) & (q[..., 1] >= 0) & (q[..., 1] <= h - 1)).all(axis=1)
    if inside.sum() < 8:
        return 0.0
    prof = _sample(img, q[inside])
    g = np.median(prof, axis=0)
    dg = np.abs(gaussian_filter1d(g, 1.5 / step, order=1))
    nose = dg[np.abs(offs) <= 2.0].max()
    start = min(band_px, settings.face_band_max_mm * px_mm) + 4.0
    inner = dg[offs <= -start]
    if nose <= 0 or inner.size == 0:
        return 0.0
    return float(inner.max() / nose)


def main_line(px: np.ndarray, p0: np.ndarray, p1: np.ndarray, nrm: np.ndarray, tol_px: float,
              trials: int = 300, min_share: float = 0.5, weight: np.ndarray | None = None) -> np.ndarray:
    """Mask of the edge points (N, 2) px on the side's nose line.

    Along one side the profiles may stop at different edges: the nose on
    most, where it is faint the cushion/rail line ~20 px further out on
    some, balls or marks on a few. Seen through a lens with radial
    distortion a straight cushion line is close to a parabola in the side's
    own frame (offset along the outward normal ``nrm`` against the position
    along p0 -> p1, px), so lines are found one after another as the
    parabola through three points with the most points within ``tol_px``
    (RANSAC: Fischler & Bolles, Comm. ACM 24(6), 1981; seeded, so
    repeatable). Of the lines holding at least ``min_share`` of the
    best-supported one's points, the innermost is the nose: it is the
    cushion's innermost line (a face band inward of it is already folded
    into the nose by the profile search). A camera fitted through two
    parallel lines at once bends its lens and focal to absurd values.

    ``weight`` (N,) in [0, 1] (default 1): how much each point counts
    (:func:`_edge_weight`: edges fainter than the faintest cushion nose
    sought count in proportion).
    """
    n = len(px)
    if n < 8:
        return np.ones(n, bool)
    t = (p1 - p0) / np.linalg.norm(p1 - p0)
    u = (px - p0) @ t / np.linalg.norm(p1 - p0) - 0.5
    d = (px - p0) @ (nrm / np.linalg.norm(nrm))
    V = np.column_stack([np.ones(n), u, u * u])
    wt = np.ones(n) if weight is None else np.asarray(weight, float)
    rng = np.random.default_rng(0)
    lines = []  # (support, median offset px, mask)
    free = np.ones(n, bool)
    for _ in range(3):
        idx_free = np.nonzero(free)[0]
        if len(idx_free) < 8:
            break
        best, best_n = None, 0
        for _ in range(trials):
            idx = rng.choice(idx_free, 3, replace=False)
            try:
                c = np.linalg.solve(V[idx], d[idx])
            except np.linalg.LinAlgError:
                continue
            ok = free & (np.abs(V @ c - d) < tol_px)
            if wt[ok].sum() > best_n:
                best, best_n = ok, float(wt[ok].sum())
        if best is None or best.sum() < 8:
            break
        # refit on the inliers (least squares); the final set from that curve
        c, *_ = np.linalg.lstsq(V[best], d[best], rcond=None)
        ok = free & (np.abs(V @ c - d) < tol_px)
        lines.append((float(wt[ok].sum()), float(np.median(d[ok])), ok))
        free &= ~ok
    if not lines:
        return np.ones(n, bool)
    top = max(ln[0] for ln in lines)
    return min((ln for ln in lines if ln[0] >= min_share * top), key=lambda ln: ln[1])[2]


def _edge_weight(strength: np.ndarray, nose_peak: float) -> np.ndarray:
    """How much each edge point counts towards a line: its contrast over the faintest nose's, at most 1.

    Heavy video compression leaves long straight steps of one or two
    quantisation levels on smooth cloth shading (our sweep render f04h32,
    H.264 crf 32: lines of 53-67 points at ~1.6 DN/px on the short sides,
    27-46 px inward of noses of 40-47 points at 5-6 DN/px); they are no
    cushion edge, and counted alike with the nose they won the line vote.
    Points at least as strong as the faintest nose sought
    (CalibrationSettings.nose_contrast_min of the cloth level, blurred) all
    count one, so between real edges (nose, rail) the count decides as before.
    """
    if not nose_peak > 0:
        return np.ones(len(strength))
    return np.minimum(np.asarray(strength, float) / nose_peak, 1.0)


def lens_note(k1: float, limit: float) -> str | None:
    """Warning for a fitted radial distortion beyond what video lenses show (None when plausible).

    >>> lens_note(-0.05, 0.4) is None
    True
    >>> lens_note(-0.66, 0.4)[:40]
    'fitted lens distortion k1 = -0.66 is lar'
    """
    if abs(k1) <= limit:
        return None
    return (f"fitted lens distortion k1 = {k1:.2f} is larger than video lenses show (|k1| <= {limit}): a cushion "
            "line was probably found on the wrong edge; check calibration.png or calibrate from a file")


def _fit_robust(cam, groups, L, W, settings, prior):
    """Fit, drop points beyond the outlier cut, refit. Returns (fit, kept groups)."""
    fit = fit_edges(cam, groups, L, W, settings.fit_k2, settings.loss_scale_px, prior)
    cut = max(settings.outlier_px, 4 * _robust_sigma(fit.resid_px))
    keep = np.abs(fit.resid_px) < cut
    if keep.all():
        return fit, groups
    out, i0 = [], 0
    for side, z, p in groups:
        out.append((side, z, p[keep[i0: i0 + len(p)]]))
        i0 += len(p)
    return fit_edges(fit.camera, out, L, W, settings.fit_k2, settings.loss_scale_px, prior), out


def _band_check(cam, pts, inner, L, W, settings) -> dict[str, np.ndarray] | None:
    """Inner band edges per side if they behave like the feet of vertical cushion faces.

    A vertical face of height h on a side at horizontal distance d from the
    camera's foot point appears as a band h * d / H wide (H: camera height).
    Opposite sides' distances add up to the table's width (or length), so the
    band widths summed over the two short sides (x0 + xL) and over the two
    long sides (y0 + yW) stand in the ratio L / W. A shadow band lit from
    above has no such ratio. Returns None when the check fails.
    """
    widths = {}
    out = {}
    for side in SIDE_ORDER:
        b = inner.get(side)
        if b is None or len(b) == 0:
            return None
        ok = np.isfinite(b[:, 0])
        if ok.mean() < settings.band_min_frac or ok.sum() < 8:
            return None
        d_px = np.linalg.norm(pts[side][ok] - b[ok], axis=1)
        xyz = cam.backproject(pts[side][ok][:: max(ok.sum() // 6, 1)], 0.0)
        scale = np.mean([1.0 / cam.mm_per_px(q) for q in xyz])
        widths[side] = float(np.median(d_px)) / scale
        out[side] = b[ok]
    long_sum = widths["y0"] + widths["yW"]
    short_sum = widths["x0"] + widths["xL"]
    if long_sum <= 0 or min(widths.values()) * 1.0 < settings.band_min_mm:
        return None
    ratio = short_sum / long_sum
    if abs(ratio / (L / W) - 1) > settings.band_ratio_tol:
        return None
    return out


def _robust_sigma(r: np.ndarray) -> float:
    return float(1.4826 * np.median(np.abs(r - np.median(r)))) if len(r) else 0.0


def _n_profiles(cam, side, L, W, z, settings) -> int:
    a, b, _ = _side_world(side, L, W)
    p = cam.project(np.array([[*a, z], [*b, z]]))
    return max(int(np.linalg.norm(p[1] - p[0]) / settings.profile_spacing_px), 2)


def _point_resid_px(cam: CameraModel, side: str, px: np.ndarray, L: float, W: float, z: float) -> np.ndarray:
    xyz = cam.backproject(px, z)
    ax, fr = {"y0": (1, 0.0), "xL": (0, 1.0), "yW": (1, 1.0), "x0": (0, 0.0)}[side]
    dim = L if ax == 0 else W
    scale = 1.0 / cam.mm_per_px([L / 2, W / 2, z])
    return (xyz[:, ax] - fr * dim) * scale


# --------------------------------------------------------------------------- files
_PLANES = ("cloth", "nose")


def _toml_error(path: Path, msg: str) -> FeltlabError:
    return FeltlabError(f"{path.name}: {msg}")


def _num_list(path: Path, d: dict, key: str, shape: tuple[int, ...]) -> np.ndarray:
    try:
        a = np.asarray(d[key], dtype=float)
    except (TypeError, ValueError):
        raise _toml_error(path, f"'{key}' must be numbers, shaped {list(shape)}") from None
    if a.shape != shape or not np.all(np.isfinite(a)):
        raise _toml_error(path, f"'{key}' must be finite numbers shaped {list(shape)}, got {a.tolist()!r}")
    return a


def calibration_from_file(path: str | os.PathLike, table: TablePreset | None = None,
                          hfov_prior: tuple[float, float] | None = None,
                          hfov_deg: float | None = None) -> Calibration:
    """Read a calibration TOML: a saved calibration, or manual corners (schema in the module docstring).

    ``table`` overrides the file's table preset. Manual corners are fitted
    with :func:`tracking._camera_fit.fit_points` (focal too unless given, with
    the weak field-of-view prior of CalibrationSettings). ``hfov_deg``: the
    lens's horizontal field of view (deg), as the file's ``hfov_deg`` key;
    it fixes the focal of manual corners, and a saved camera must agree
    with it to 0.5 deg.
    """
    if hfov_deg is not None:
        hfov_deg = check_hfov_deg(hfov_deg)
    p = Path(path)
    if not p.is_file():
        raise FeltlabError(f"{p}: no such calibration file; check the path")
    try:
        d = tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise _toml_error(p, f"not valid TOML ({exc})") from None
    if table is None:
        if "table" not in d:
            raise _toml_error(p, "missing 'table' (a preset name such as \"pool-9ft\")")
        try:
            table = table_preset(str(d["table"]))
        except ValueError as exc:
            raise _toml_error(p, str(exc)) from None
    ball_d = float(d.get("ball_diameter_mm", table.ball.diameter_mm))
    if not (0 < ball_d < 200):
        raise _toml_error(p, f"ball_diameter_mm = {ball_d} is not plausible (millimetres)")
    notes = [str(n) for n in d.get("notes", [])]
    if "camera" in d:  # a saved calibration: the camera is exact
        c = d["camera"]
        try:
            cam = CameraModel(K=_num_list(p, c, "K", (3, 3)), dist=_num_list(p, c, "dist", (5,)),
                              R=_num_list(p, c, "R", (3, 3)), t=_num_list(p, c, "t_mm", (3,)),
                              image_size=tuple(int(v) for v in _num_list(p, c, "image_size", (2,))))
        except KeyError as exc:
            raise _toml_error(p, f"[camera] is missing {exc.args[0]!r}") from None
        cam.meta = {k: v for k, v in d.get("camera_meta", {}).items()}
        if hfov_deg is not None and abs(hfov_deg_of(cam) - hfov_deg) > 0.5:
            raise _toml_error(p, f"its camera has a {hfov_deg_of(cam):.1f} deg field of view, not the given "
                                 f"{hfov_deg:g} deg; drop the field of view or calibrate again")
        return Calibration(camera=cam, table=table, ball_diameter_mm=ball_d,
                           residual_px=float(d.get("residual_px", float("nan"))),
                           residual_mm=float(d.get("residual_mm", float("nan"))),
                           method=str(d.get("method", "manual")), notes=notes)
    for key in ("image_size", "corners_px", "corners_plane"):
        if key not in d:
            hint = {"corners_plane": " (\"cloth\" or \"nose\": the plane your corner pixels lie in)",
                    "image_size": " ([width, height] in px)",
                    "corners_px": " (four [x, y] pixels in table order (0,0), (L,0), (L,W), (0,W))"}[key]
            raise _toml_error(p, f"missing '{key}'{hint}")
    size = _num_list(p, d, "image_size", (2,))
    if np.any(size < 16) or np.any(size != np.round(size)):
        raise _toml_error(p, f"image_size must be two whole pixel counts, got {size.tolist()}")
    w, h = int(size[0]), int(size[1])
    px = _num_list(p, d, "corners_px", (4, 2))
    plane = str(d["corners_plane"]).lower()
    if plane not in _PLANES:
        raise _toml_error(p, f"corners_plane must be \"cloth\" or \"nose\", got {d['corners_plane']!r}")
    z = 0.0 if plane == "cloth" else float(d.get("nose_height_mm", nose_height_mm(table, ball_d)))
    if "rect_mm" in d:
        x0, y0, x1, y1 = _num_list(p, d, "rect_mm", (4,))
        if x1 <= x0 or y1 <= y0:
            raise _toml_error(p, "rect_mm must be [x0, y0, x1, y1] with x1 > x0 and y1 > y0 (mm)")
    else:
        x0, y0, x1, y1 = 0.0, 0.0, table.length_mm, table.width_mm
    xyz = np.array([[x0, y0, z], [x1, y0, z], [x1, y1, z], [x0, y1, z]])
    k1 = float(d.get("k1", 0.0))
    if not (-1 < k1 < 1):
        raise _toml_error(p, f"k1 = {k1} is outside (-1, 1); give the OpenCV radial coefficient")
    focal = d.get("focal_px")
    if focal is not None:
        focal = float(focal)
        if not (0 < focal < 100 * w):
            raise _toml_error(p, f"focal_px = {focal} is not plausible for a {w} px wide image")
    if "hfov_deg" in d:
        try:
            key_fov = check_hfov_deg(d["hfov_deg"])
        except FeltlabError as exc:
            raise _toml_error(p, f"hfov_deg: {exc}") from None
        if hfov_deg is not None and abs(key_fov - hfov_deg) > 0.5:
            raise _toml_error(p, f"hfov_deg = {key_fov:g} differs from the given field of view {hfov_deg:g} deg; "
                                 "give one")
        hfov_deg = key_fov
    if hfov_deg is not None:
        f_fov = w / 2.0 / math.tan(math.radians(hfov_deg) / 2)
        if focal is not None and abs(f_fov / focal - 1) > 0.01:
            raise _toml_error(p, f"focal_px = {focal:g} and a {hfov_deg:g} deg field of view (focal {f_fov:.1f} px) "
                                 "disagree; give one of them")
        focal = f_fov
    # the corners must form a convex quadrilateral in the stated order
    def _cross(a, b):
        return a[0] * b[1] - a[1] * b[0]

    cross = [_cross(px[(i + 1) % 4] - px[i], px[(i + 2) % 4] - px[(i + 1) % 4]) for i in range(4)]
    if not (all(c > 0 for c in cross) or all(c < 0 for c in cross)):
        raise _toml_error(p, "corners_px do not form a convex quadrilateral in the order "
                             "(0,0), (L,0), (L,W), (0,W); check their order")
    try:
        cam0 = initial_camera(px, xyz, (w, h), focal_px=focal, k1=k1)
    except ValueError:
        raise _toml_error(p, "no camera fits these corners; check their order and the table preset") from None
    s = CalibrationSettings()
    prior = hfov_prior or (s.hfov_prior_deg, s.hfov_prior_sigma_deg)
    cam, r = fit_points(cam0, px, xyz, fit_focal=focal is None, fit_k1=False,
                        hfov_prior=None if focal is not None else prior)
    res_px = float(np.sqrt(np.mean(r ** 2)))
    res_mm = res_px * cam.mm_per_px(xyz.mean(axis=0))
    cam.meta = {"corners_plane": plane, "hfov_deg": hfov_deg_of(cam),
                "hfov_source": "given" if focal is not None else "corners"}
    if focal is None:
        notes.append("focal length fitted from four corners: poorly determined for a camera looking "
                     "straight down; give focal_px if you know it")
    return Calibration(camera=cam, table=table, ball_diameter_mm=ball_d, residual_px=res_px,
                       residual_mm=res_mm, method="manual", notes=notes)


def _toml_value(v) -> str:
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if math.isnan(f):
            return "nan"
        if math.isinf(f):
            return "inf" if f > 0 else "-inf"
        return repr(f)
    if isinstance(v, (list, tuple, np.ndarray)):
        return "[" + ", ".join(_toml_value(x) for x in list(v)) + "]"
    raise TypeError(f"cannot write {type(v)} to TOML")


def save_calibration(cal: Calibration, path_toml: str | os.PathLike, overwrite: bool = False) -> Path:
    """Write ``cal`` as TOML (read back exactly by :func:`calibration_from_file`).

    Written to a temporary name and renamed, so a half-written file never
    looks like a result. Refuses to replace an existing file unless
    ``overwrite``.
    """
    p = Path(path_toml)
    if p.exists() and not overwrite:
        raise FeltlabError(f"{p} already exists; remove it or choose another output folder")
    cam = cal.camera
    L, W = cal.table.length_mm, cal.table.width_mm
    z = nose_height_mm(cal.table, cal.ball_diameter_mm)
    corners = cam.project([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]])
    lines = [
        "# feltlab camera calibration. Table frame: mm, origin at a playing-surface corner",
        "# (cushion-nose lines), x along the long side, y along the short side, z up from the cloth.",
        "# Camera: OpenCV pinhole + distortion, X_cam = R X_table + t_mm.",
        f"table = {_toml_value(cal.table.name)}",
        f"method = {_toml_value(cal.method)}",
        f"ball_diameter_mm = {_toml_value(float(cal.ball_diameter_mm))}",
        f"residual_px = {_toml_value(float(cal.residual_px))}",
        f"residual_mm = {_toml_value(float(cal.residual_mm))}",
        f"px_per_mm = {_toml_value(float(cal.px_per_mm))}  # at the table centre, ball-centre plane",
        f"hfov_deg = {_toml_value(round(hfov_deg_of(cam), 3))}  # horizontal field of view of the camera below",
        f"hfov_source = {_toml_value(str((cam.meta or {}).get('hfov_source', 'unknown')))}  "
        "# measured (cushion faces), given, assumed, or corners (manual fit)",
        f"image_size = {_toml_value(list(cam.image_size))}",
        "# playing-surface corners (0,0), (L,0), (L,W), (0,W) at cushion-nose height, for reference",
        'corners_plane = "nose"',
        f"nose_height_mm = {_toml_value(float(z))}",
        f"corners_px = {_toml_value([[round(float(a), 3), round(float(b), 3)] for a, b in corners])}",
        f"notes = {_toml_value([str(n) for n in cal.notes])}",
        "",
        "[camera]",
        f"K = {_toml_value(cam.K.tolist())}",
        f"dist = {_toml_value(cam.dist.tolist())}",
        f"R = {_toml_value(cam.R.tolist())}",
        f"t_mm = {_toml_value(cam.t.tolist())}",
        f"image_size = {_toml_value(list(cam.image_size))}",
    ]
    meta = {k: v for k, v in (cam.meta or {}).items() if isinstance(v, (str, int, float, bool))}
    if meta:
        lines += ["", "[camera_meta]"] + [f"{k} = {_toml_value(v)}" for k, v in meta.items()]
    text = "\n".join(lines) + "\n"
    p.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".toml", dir=p.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        if p.exists() and not overwrite:
            raise FeltlabError(f"{p} already exists; remove it or choose another output folder")
        os.replace(tmp, p)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return p


# --------------------------------------------------------------------------- drawing
#: Overlay colours (BGR): outline, grid, x axis, y axis, legend text.
_OUTLINE = (0, 215, 255)
_GRID = (255, 255, 255)
_X_AXIS = (60, 60, 255)
_Y_AXIS = (80, 220, 80)


def _polyline(cam: CameraModel, pts_mm: np.ndarray) -> np.ndarray:
    return np.round(cam.project(pts_mm) * 16).astype(np.int32).reshape(-1, 1, 2)


def draw_calibration(image: np.ndarray, cal: Calibration, grid_mm: float = 100.0) -> np.ndarray:
    """A copy of ``image`` with the fitted playing-surface outline and a grid, and a legend strip
    added under it (the result is taller than ``image``; rows above the strip keep its pixel
    coordinates).

    Outline: the cushion-nose lines (where the edges were measured). Grid:
    every ``grid_mm`` on the cloth (z = 0), drawn through the lens model so
    it bends with the image. Legend: table, residual, scale, focal and k1.
    """
    img = np.asarray(image)
    if img.ndim == 2:
        img = cv2.cvtColor(img, cv2.COLOR_GRAY2BGR)
    out = img.copy()
    cam = cal.camera
    L, W = cal.table.length_mm, cal.table.width_mm
    z = nose_height_mm(cal.table, cal.ball_diameter_mm)
    h, w = out.shape[:2]
    th = max(1, int(round(w / 900)))
    lay = out.copy()
    n = 200
    for x in np.arange(0, L + 1e-6, grid_mm):
        pts = np.column_stack([np.full(n, x), np.linspace(0, W, n), np.zeros(n)])
        cv2.polylines(lay, [_polyline(cam, pts)], False, _GRID, 1, cv2.LINE_AA, shift=4)
    for y in np.arange(0, W + 1e-6, grid_mm):
        pts = np.column_stack([np.linspace(0, L, n), np.full(n, y), np.zeros(n)])
        cv2.polylines(lay, [_polyline(cam, pts)], False, _GRID, 1, cv2.LINE_AA, shift=4)
    out = cv2.addWeighted(lay, 0.35, out, 0.65, 0)
    ring = np.array([[0, 0], [L, 0], [L, W], [0, W], [0, 0]], float)
    pts = np.concatenate([np.column_stack([np.linspace(a[0], b[0], n), np.linspace(a[1], b[1], n)])
                          for a, b in zip(ring[:-1], ring[1:])])
    cv2.polylines(out, [_polyline(cam, np.column_stack([pts, np.full(len(pts), z)]))], True, _OUTLINE, th,
                  cv2.LINE_AA, shift=4)
    # axes from the origin, 300 mm long
    o = cam.project([[0, 0, 0], [300, 0, 0], [0, 300, 0]])
    for tip, col, lab in ((o[1], _X_AXIS, "x"), (o[2], _Y_AXIS, "y")):
        cv2.arrowedLine(out, tuple(np.round(o[0]).astype(int)), tuple(np.round(tip).astype(int)), col, th + 1,
                        cv2.LINE_AA, tipLength=0.15)
        cv2.putText(out, lab, tuple(np.round(tip + 6).astype(int)), cv2.FONT_HERSHEY_SIMPLEX, 0.5 * th + 0.2,
                    col, th, cv2.LINE_AA)
    legend = [
        f"{cal.table.name}: {L:.0f} x {W:.0f} mm  ({cal.method} calibration)",
        f"edge residual RMS {cal.residual_px:.2f} px = {cal.residual_mm:.2f} mm",
        f"scale {cal.px_per_mm:.3f} px/mm  |  ball {2 * cal.ball_radius_px([[L / 2, W / 2]])[0]:.1f} px across",
        f"focal {cam.K[0, 0]:.0f} px  k1 {cam.dist[0]:+.4f}  camera {cam.centre_mm[2] / 1000:.2f} m above cloth"
        + ("" if str((cam.meta or {}).get("height_from", "cushion")).startswith("cushion") or cal.method != "auto"
           else " (height from an assumed lens)"),
        f"outline: cushion noses ({z:.1f} mm up)  grid: {grid_mm:.0f} mm on the cloth",
    ] + [f"note: {t}" for t in cal.notes]
    # The legend goes in a dark strip under the picture, never over it: a box in a corner hid the
    # table's corner and pocket, the very things a person checks. Pixel coordinates above the strip
    # are those of the frame.
    scale = 0.42 * max(w / 1280, 0.6)
    lh = int(22 * scale / 0.42)
    bh = lh * len(legend) + 12
    strip = np.full((bh, w, 3), 24, dtype=out.dtype)
    for i, t in enumerate(legend):
        cv2.putText(strip, t, (10, lh * (i + 1) - 2), cv2.FONT_HERSHEY_SIMPLEX, scale, (255, 255, 255), 1,
                    cv2.LINE_AA)
    return np.vstack([out, strip])
