"""No phantom balls: a background that follows a compressed clip's still cloth, and where a ball centre can be.

1. Still cloth (:class:`StillCloth`). An inter-frame codec (H.264, MPEG-4
   part 2) copies unchanged blocks of the picture from the previous frame bit
   for bit and re-codes the whole picture at each keyframe (ITU-T H.264 /
   ISO 14496-10, skipped macroblocks and IDR pictures; ISO 14496-2, not-coded
   macroblocks). The empty cloth of a compressed clip is therefore not one
   image: each keyframe, and each block the encoder refreshes, renders it anew,
   off the temporal-median background by the quantisation error. Against a
   fixed background those differences are ball-sized patches of a few
   Delta-E*ab, and the foreground threshold, set from the background's own
   noise (which the codec removed), does not hold them back: on an H.264
   crf 28 render 15 % of the cloth pixels cleared it right after a keyframe.
   Rule: a pixel whose value did not change from the previous frame (every
   channel within ``still_dn``), inside a still patch of at least 3x3 px (a
   codec copies blocks; sensor noise leaves single pixels unchanged by
   chance), shows what the codec holds there; where it departs from the
   median background by at least ``still_min_frac`` of the foreground
   threshold and no ball we know of can be, it becomes the background (a selective background
   update: only pixels classed as background are replaced; Koller et al.,
   "Towards robust automatic traffic scene analysis", ICPR 1994, and
   Wren et al., "Pfinder", IEEE PAMI 19:780, 1997). Balls we know of: discs
   of ``still_protect_radius`` expected radii round (a) every resting ball
   painted out of the median background (``Background.static_px``) for the
   first ``confirm_hits`` frames and afterwards while a confirmed track sits
   on it, (b) every confirmed track that has rolled at least one ball
   diameter from where it was first seen (a ball that came to rest). A
   codec patch never moves, so it never protects itself; a ball's own
   pixels change while it rolls, so it is never absorbed. Footage whose
   pixels all change from frame to frame (sensor noise kept by the codec)
   has no still pixels and keeps the median background unchanged.

2. Where a centre can be (:func:`off_surface`). A ball on the slate touches
   a cushion at the nose, which sits at ``nose_height_frac`` of the ball
   diameter above the cloth, so its centre stays
   R cos(asin(2 h - 1)) (~0.96 R) inside the nose line, less the cushion's
   compression in a hard hit. Allowing for a calibration error, a centre
   nearer the nose line than ``centre_inset_mm`` is not a ball on the slate,
   except in a pocket's mouth, where a pocketed ball drops through. A track
   with most of its fixes there is not a ball (compression blocks along the
   rails and pockets).

3. Where a ball stood (:func:`clean_median`). The temporal median of the
   sampled frames is the cloth only where a ball covers a pixel in well
   under half of them: with a share p of ball frames the median moves to the
   cloth's 0.5 / (1 - p) quantile (about one noise sigma at p = 0.4, per
   channel, the same over the whole disc). A ball that stood for a good part
   of the clip before it was struck leaves that offset as a cloth-coloured,
   ball-sized patch of a few Delta-E*ab: the detector finds a ghost where the
   ball stood. A ball that never moved is painted over (tracking/detect.py,
   ``cv2.inpaint``), a guess that the real cloth shows up once it is struck.
   Rule: per pixel, the median over only the sampled frames in which it is
   not foreground against the first background (its Delta-E*ab, averaged
   over ``clean_smooth`` expected radii so that single noisy pixels do not
   count, more than ``clean_fg_frac`` foreground thresholds off it, grown by
   ``clean_grow`` expected radii for a ball's soft rim and shadow), where at least ``clean_min_frames`` such
   frames exist (a selective background update again, as in 1). Off by
   default (``PhantomSettings.clean_median``: see the setting); the ghost's
   track is dropped by 4 instead.

4. Ball or codec (:func:`ring_shading`, :func:`codec_tracks`). A lit sphere
   has a dark limb (Lambert's law: brightness falls with the cosine of the
   angle between surface normal and lamp, and the normal turns horizontal at
   the silhouette) and a contact shadow at its foot; a codec's error on the
   cloth is a flat patch with neither. The ring contrast of tracking/
   dark_ring.py, T = mean L* (inner annulus) + mean L* (outer annulus) -
   2 mean L* (rim annulus), measured on the frame itself at each detection,
   is that shading: 0 for a flat disc of any brightness, tens of L* for a
   mid-tone ball, a few L* for a black one. Evidence of a ball: a fix with T
   of at least ``shade_min_l``, or a colour difference from the cloth larger
   than a codec ever makes (``codec_max_de``). A track none of whose fixes
   shows either (in ``shade_share`` of them) and that is mostly predicted
   (fixes in under ``codec_visible_max`` of its frames) or sits beyond the
   cushion nose, or that shows it almost never (under ``shade_none_share``
   of its fixes) wherever it is, is a codec track, not a ball; a ball of the cloth's own
   colour is found by its dark ring (T), so it keeps its evidence. With
   ``protect_by_evidence`` (off by default: see the setting) the same
   evidence decides which resting tracks the still-cloth update of 1 leaves
   alone, so that a codec patch linked into a track cannot protect itself.

Lengths: px in the image, mm on the table (table frame: DEVELOPERS.md).
"""
from __future__ import annotations

from dataclasses import replace

import cv2
import numpy as np

from feltlab.standards import TablePreset
from tracking.calibration import Calibration
from tracking.detect import Background, _half_res_background, delta_e76, to_lab
from tracking.pockets import inside_corner_mouth
from tracking.settings import DetectionSettings, PhantomSettings


# --------------------------------------------------------------------------- where a ball centre can be
def centre_inset_mm(radius_mm: float, s: PhantomSettings) -> float:
    """Least distance (mm) of a ball centre inside the nose line we accept (see module docstring, 2).

    >>> round(centre_inset_mm(28.575, PhantomSettings()), 1)
    12.3
    """
    h = float(np.clip(s.nose_height_frac, 0.5, 1.0))
    touch = radius_mm * np.sqrt(max(1.0 - (2.0 * h - 1.0) ** 2, 0.0))
    return float(touch - s.cushion_compression_mm - s.calibration_slack_mm)


def in_pocket_mouth(xy_mm: np.ndarray, table: TablePreset, radius_mm: float, s: PhantomSettings) -> np.ndarray:
    """(N,) True where a centre lies where a ball falls into a pocket (no pockets: all False).

    Corner: within (mouth / sqrt 2 + one diameter) of the corner point in the
    sum of the distances to the two nose lines; side: within half a mouth plus
    one radius of the middle of a long side.

    >>> from feltlab.standards import table_preset
    >>> in_pocket_mouth(np.array([[10.0, 10.0], [1270.0, -5.0], [600.0, -5.0]]), table_preset("pool-9ft"),
    ...                 28.575, PhantomSettings()).tolist()
    [True, True, False]
    """
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    if not table.pockets or len(xy) == 0:
        return np.zeros(len(xy), bool)
    # corner: the mouth chord moved out by one diameter along u + v (pockets.inside_corner_mouth)
    corner = inside_corner_mouth(xy, table, s.corner_mouth_max_mm + 2.0 * np.sqrt(2.0) * radius_mm)
    side = np.abs(xy[:, 0] - 0.5 * table.length_mm) < 0.5 * s.side_mouth_max_mm + radius_mm
    return corner | side


def off_surface(xy_mm: np.ndarray, table: TablePreset, radius_mm: float, s: PhantomSettings) -> np.ndarray:
    """(N,) True where a centre is nearer the nose line than a ball on the slate can be (pockets aside).

    >>> from feltlab.standards import table_preset
    >>> off_surface(np.array([[600.0, 5.0], [600.0, 28.0], [600.0, 1290.0], [5.0, 5.0]]),
    ...             table_preset("pool-9ft"), 28.575, PhantomSettings()).tolist()
    [True, False, True, False]
    """
    xy = np.asarray(xy_mm, float).reshape(-1, 2)
    if len(xy) == 0:
        return np.zeros(0, bool)
    L, W = table.length_mm, table.width_mm
    inset = np.minimum.reduce([xy[:, 0], L - xy[:, 0], xy[:, 1], W - xy[:, 1]])
    return (inset < centre_inset_mm(radius_mm, s)) & ~in_pocket_mouth(xy, table, radius_mm, s)


def off_surface_tracks(det, table: TablePreset, radius_mm: float, s: PhantomSettings) -> list[int]:
    """Track ids (column ``track``) with more than ``off_surface_share`` of their fixes off the surface."""
    if det.empty:
        return []
    off = off_surface(det[["x_mm", "y_mm"]].to_numpy(float), table, radius_mm, s)
    share = off.astype(float)
    frac = det.assign(_off=share).groupby("track")["_off"].mean()
    return [int(k) for k, v in frac.items() if v > s.off_surface_share]


# --------------------------------------------------------------------------- shading of a ball
def ring_shading(image: np.ndarray, xy_px: np.ndarray, r_px: np.ndarray,
                 ds: DetectionSettings = DetectionSettings()) -> np.ndarray:
    """(N,) ring contrast T (L* units) of the frame at each point (module docstring, 4).

    image: BGR uint8 frame; xy_px: (N,2) centres; r_px: (N,) expected
    radii. Annuli ``ring_inner``, ``ring_rim``, ``ring_outer`` (x r) as
    tracking/dark_ring.py; pixels outside the image do not count. NaN where
    an annulus has no pixel in the image.

    >>> img = np.full((60, 60, 3), 120, np.uint8)
    >>> yy, xx = np.mgrid[0:60, 0:60]
    >>> rho = np.hypot(xx - 30, yy - 30) / 10.0
    >>> flat = img.copy(); flat[rho <= 1] = 200
    >>> ball = img.copy(); ball[rho <= 1] = (40 + 160 * np.sqrt(1 - np.minimum(rho, 1) ** 2))[rho <= 1, None]
    >>> t = ring_shading(np.stack([flat, ball]).reshape(120, 60, 3), np.array([[30, 30], [30, 90]]), np.array([10, 10]))
    >>> bool(abs(t[0]) < 3 and t[1] > 10)
    True
    """
    xy = np.asarray(xy_px, float).reshape(-1, 2)
    rr = np.asarray(r_px, float).reshape(-1)
    out = np.full(len(xy), np.nan)
    h, w = image.shape[:2]
    bands = (ds.ring_inner, ds.ring_rim, ds.ring_outer)
    for k, ((x, y), r) in enumerate(zip(xy, rr)):
        if not (np.isfinite(x) and np.isfinite(y) and np.isfinite(r) and r > 0):
            continue
        n = int(np.ceil(ds.ring_outer[1] * r)) + 1
        xi, yi = int(round(x)), int(round(y))
        xa, ya, xb, yb = max(0, xi - n), max(0, yi - n), min(w, xi + n + 1), min(h, yi + n + 1)
        if xb <= xa or yb <= ya:
            continue
        L = to_lab(image[ya:yb, xa:xb])[..., 0]
        yy, xx = np.mgrid[ya:yb, xa:xb]
        rho = np.hypot(xx - x, yy - y) / r
        means = []
        for lo, hi in bands:
            m = (rho >= lo) & (rho <= hi)
            means.append(float(L[m].mean()) if m.any() else np.nan)
        out[k] = means[0] + means[2] - 2.0 * means[1]
    return out


def ball_evidence(shade_l: np.ndarray, contrast: np.ndarray, s: PhantomSettings) -> np.ndarray:
    """(N,) True where a fix shows a ball: ring shading >= ``shade_min_l`` or colour difference >= ``codec_max_de``."""
    t = np.nan_to_num(np.asarray(shade_l, float), nan=0.0)
    c = np.nan_to_num(np.asarray(contrast, float), nan=0.0)
    return (t >= s.shade_min_l) | (c >= s.codec_max_de)


def codec_tracks(det, frame_t: np.ndarray, table: TablePreset, radius_mm: float, s: PhantomSettings) -> list[int]:
    """Track ids (column ``track``) that are codec artefacts, not balls (module docstring, 4).

    det: detections with ``track``, ``frame``, ``x_mm``, ``y_mm``,
    ``shade_l`` and ``contrast_dn``; frame_t: time (s) of each frame index
    (NaN where not read). A track is one when under ``shade_share`` of its
    fixes show ball evidence (:func:`ball_evidence`) and it is mostly
    predicted (fixes in under ``codec_visible_max`` of the frames it spans)
    or most of its fixes lie beyond the cushion nose (pocket mouths
    included: a ball there is falling or hanging in the jaws, and shows
    its shading); or when under ``shade_none_share`` of them do, wherever
    it is and however often it was seen (a codec block that persists).
    """
    if det.empty or "shade_l" not in det or not s.drop_codec_tracks:
        return []
    ev = ball_evidence(det["shade_l"].to_numpy(float), det["contrast_dn"].to_numpy(float)
                       if "contrast_dn" in det else np.zeros(len(det)), s)
    xy = det[["x_mm", "y_mm"]].to_numpy(float)
    L, W = table.length_mm, table.width_mm
    inset = np.minimum.reduce([xy[:, 0], L - xy[:, 0], xy[:, 1], W - xy[:, 1]])
    beyond = inset < centre_inset_mm(radius_mm, s)
    d = det.assign(_ev=ev.astype(float), _beyond=beyond.astype(float))
    read = np.isfinite(frame_t)
    out = []
    for tid, g in d.groupby("track"):
        share = g["_ev"].mean()
        if share >= s.shade_share:
            continue
        f0, f1 = int(g.frame.min()), int(g.frame.max())
        span = int(read[f0:f1 + 1].sum()) if f1 < len(read) else f1 - f0 + 1
        visible = g.frame.nunique() / max(span, 1)
        if (share < s.shade_none_share or visible < s.codec_visible_max
                or g["_beyond"].mean() > s.off_surface_share):
            out.append(int(tid))
    return out


# --------------------------------------------------------------------------- where a ball stood
def clean_median(bg: Background, frames: list[np.ndarray], s: PhantomSettings) -> tuple[Background, int]:
    """The background re-taken as the per-pixel median over the frames where each pixel is cloth (docstring, 3).

    frames: the sampled BGR uint8 frames the background was built from.
    Returns (new Background, number of pixels changed); the input is
    unchanged. A pixel keeps its value where fewer than ``clean_min_frames``
    frames show it as cloth (a ball that never moved: the paint stays) or
    where no frame shows a ball on it (the median already is the cloth).
    """
    n = len(frames)
    if not s.clean_median or n < s.clean_min_frames:
        return bg, 0
    x0, y0, x1, y1 = bg.roi
    ref = bg.lab_image()[y0:y1, x0:x1]
    inside = bg.mask[y0:y1, x0:x1] > 0
    kg = max(1, int(round(s.clean_grow * bg.radius_px)))
    grow = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * kg + 1, 2 * kg + 1))
    fg = np.zeros((n, y1 - y0, x1 - x0), bool)
    kb = max(1, int(round(s.clean_smooth * bg.radius_px))) | 1
    for i, f in enumerate(frames):
        de = cv2.blur(delta_e76(to_lab(f[y0:y1, x0:x1]), ref), (kb, kb))
        fg[i] = cv2.dilate((de > s.clean_fg_frac * bg.threshold_dn).astype(np.uint8), grow) > 0
    n_fg = fg.sum(axis=0)
    todo = inside & (n_fg > 0) & (n - n_fg >= s.clean_min_frames)
    if not todo.any():
        return bg, 0
    img = bg.image.copy()
    rows = np.nonzero(todo.any(axis=1))[0]
    block = 32
    for ra in range(int(rows.min()), int(rows.max()) + 1, block):
        rb = min(ra + block, y1 - y0)
        t = todo[ra:rb]
        if not t.any():
            continue
        ys, xs = np.nonzero(t)
        stack = np.stack([f[y0 + ra + ys, x0 + xs].astype(np.float32) for f in frames], axis=0)  # (n, k, 3)
        stack[fg[:, ra + ys, xs]] = np.nan
        img[y0 + ra + ys, x0 + xs] = np.nanmedian(stack, axis=0)
    iy, ix = np.nonzero(todo)
    iy, ix = iy + y0, ix + x0
    lab = bg.lab_image().copy()
    lab[iy, ix] = to_lab(img[iy, ix][:, None, :])[:, 0, :]
    nb = replace(bg, image=img, lab=lab)
    for attr in ("_half", "_faint_masks"):
        if hasattr(nb, attr):
            delattr(nb, attr)
    return nb, int(len(iy))


# --------------------------------------------------------------------------- still cloth
class StillCloth:
    """Follows the codec's rendering of the still cloth in the background (module docstring, 1).

    Call :meth:`update` with each raw frame (as decoded) and its
    exposure-corrected copy before detecting in it; call :meth:`note_tracks`
    with the linker's live tracks after linking it.
    """

    def __init__(self, background: Background, calibration: Calibration, settings: PhantomSettings,
                 confirm_hits: int = 3):
        self.bg = background
        self.cal = calibration
        self.s = settings
        self.confirm_hits = confirm_hits
        self.prev: np.ndarray | None = None
        self.t_prev = float("nan")
        self.n_frames = 0
        self.births: dict[int, np.ndarray] = {}
        self.moved: dict[int, float] = {}
        self.evidence: dict[int, bool] = {}
        self.live: list = []
        self.ball_like_mm = np.zeros((0, 2))
        st = np.asarray(background.static_px, float).reshape(-1, 2)
        self.static_px = st
        self.static_mm = calibration.px_to_table(st) if len(st) else np.zeros((0, 2))
        self.pixels_updated = 0
        self.frames_updated = 0

    def note_tracks(self, live: list, det=None, track_ids: np.ndarray | None = None) -> None:
        """Remember the linker's live tracks (assign.LiveTrack) after a frame.

        det, track_ids: the frame's detections (with ``shade_l``,
        ``contrast_dn``) and the track id the linker gave each: which tracks
        have shown a ball (module docstring, 4), and where ball-like fixes
        are whatever their track.
        """
        self.live = list(live)
        if det is not None and len(det) and "shade_l" in det:
            ev = ball_evidence(det["shade_l"].to_numpy(float), det["contrast_dn"].to_numpy(float)
                               if "contrast_dn" in det else np.zeros(len(det)), self.s)
            self.ball_like_mm = det[["x_mm", "y_mm"]].to_numpy(float)[ev]
            if track_ids is not None:
                for tid, e in zip(np.asarray(track_ids, int), ev):
                    if tid >= 0 and e:
                        self.evidence[int(tid)] = True
        else:
            self.ball_like_mm = np.zeros((0, 2))
        for tr in self.live:
            p = np.asarray(tr.x[:2], float)
            b = self.births.setdefault(int(tr.id), p.copy())
            self.moved[int(tr.id)] = max(self.moved.get(int(tr.id), 0.0), float(np.hypot(*(p - b))))

    def protected_px(self, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
        """Image points (N,2) round which the background is kept (known balls) and the guard radii (N,) px.

        A confirmed ball at rest: ``still_protect_radius`` expected radii (its
        shadow too). A rolling one, predicted ``dt_s`` ahead: its disc and blur
        (1.3 radii) plus half its smear over the frame; the cloth it left
        behind is free (its pixels are not still while it crosses them, and
        the codec's wake behind it would otherwise stay as a ghost).
        """
        R = self.cal.ball_radius_mm
        pts, rad = [], []
        for tr in self.live:
            if tr.hits < self.confirm_hits:
                continue
            p = np.asarray(tr.x[:2], float)
            if self.s.protect_by_evidence:
                # a ball shows itself (shading, colour); a codec patch linked
                # into a track, however far that track hopped, does not
                if not self.evidence.get(int(tr.id), False):
                    continue
            else:
                near_static = len(self.static_mm) and np.min(np.hypot(*(self.static_mm - p).T)) < R
                if not (self.moved.get(int(tr.id), 0.0) >= 2.0 * R or near_static):
                    continue
            v = np.nan_to_num(np.asarray(tr.x[2:4], float))
            step = float(np.hypot(*v)) * dt_s
            if step < 0.25 * R:
                pts.append(p)
                rad.append(self.s.still_protect_radius)
            else:
                pts.append(p + v * dt_s)
                rad.append(1.3 + 0.5 * step / R)
        if self.s.protect_by_evidence and len(self.ball_like_mm):
            # anything ball-shaped in the last frame, confirmed or not
            pts += list(self.ball_like_mm)
            rad += [self.s.still_protect_radius] * len(self.ball_like_mm)
        px = [self.cal.table_to_px(np.array(pts))] if pts else []
        if self.n_frames <= self.confirm_hits and len(self.static_px):
            px.append(self.static_px)
            rad += [self.s.still_protect_radius] * len(self.static_px)
        if not px:
            return np.zeros((0, 2)), np.zeros(0)
        pts_px = np.vstack(px)
        r_px = np.array([self.bg.lookup(float(x), float(y))[0] for x, y in pts_px]) * np.array(rad)
        return pts_px, r_px

    def update(self, raw: np.ndarray, frame: np.ndarray, t: float = float("nan")) -> Background:
        """The background to detect ``frame`` (time t, s) against (BGR uint8; raw: the same frame as decoded)."""
        self.n_frames += 1
        prev, self.prev = self.prev, raw
        dt = t - self.t_prev if np.isfinite(t) and np.isfinite(self.t_prev) else 0.0
        self.t_prev = t
        if prev is None or prev.shape != raw.shape or not self.s.follow_still_cloth:
            return self.bg
        bg = self.bg
        x0, y0, x1, y1 = bg.roi
        ch = cv2.split(cv2.absdiff(raw[y0:y1, x0:x1], prev[y0:y1, x0:x1]))
        still = (cv2.max(cv2.max(ch[0], ch[1]), ch[2]) <= self.s.still_dn).astype(np.uint8)
        # a codec copies whole blocks (4x4 px and up in H.264, 8x8 in MPEG-4
        # part 2); a pixel that sensor noise happened to leave unchanged is
        # alone: a 3x3 opening keeps the first and drops the second
        still = cv2.morphologyEx(still, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8)).astype(bool)
        still &= bg.mask[y0:y1, x0:x1] > 0
        if not still.any():
            return bg
        # colour tests at half resolution (codec blocks are >= 4x4 px): the
        # search background of tracking/detect.py is that image's CIELAB
        size = ((x1 - x0) // 2, (y1 - y0) // 2)
        half_bg, half_w = _half_res_background(bg)
        new_h = cv2.resize(frame[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA).astype(np.float32)
        de = delta_e76(to_lab(new_h), half_bg)
        still_h = cv2.resize(still.astype(np.float32), size, interpolation=cv2.INTER_AREA) > 0.999
        # only where the codec's copy departs from the median background by
        # enough to matter for detection (elsewhere the median, which averages
        # the noise down, is the better estimate of the cloth), over a patch at
        # least ``still_min_patch`` radii across (a smaller one cannot make a ball)
        # (the detector's strength: Delta-E x the local noise weight)
        upd = (still_h & (de * half_w >= self.s.still_min_frac * bg.threshold_dn)).astype(np.uint8)
        kp = max(1, int(round(self.s.still_min_patch * 0.5 * bg.radius_px)))
        upd = cv2.morphologyEx(upd, cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (kp, kp))) > 0
        if not upd.any():
            return bg
        # a ball (or its shadow) differs from the cloth by more than the codec's
        # error ever does: keep the background round any such patch
        big = de > self.s.codec_max_de
        if big.any():
            far = cv2.distanceTransform((~big).astype(np.uint8), cv2.DIST_L2, 3)
            upd &= far > self.s.codec_guard_radius * 0.5 * bg.radius_px
        pts, radii = self.protected_px(max(dt, 0.0))
        if len(pts):
            guard = np.zeros(upd.shape, np.uint8)
            for (x, y), r in zip(pts, radii):
                cv2.circle(guard, (int(round((x - x0 - 0.5) * 8)), int(round((y - y0 - 0.5) * 8))),
                           int(round(r * 8)), 1, -1, lineType=cv2.LINE_8, shift=4)
            upd &= guard == 0
        if not upd.any():
            return bg
        full = cv2.resize(upd.astype(np.uint8), (x1 - x0, y1 - y0), interpolation=cv2.INTER_NEAREST) > 0
        full &= still
        n = int(full.sum())
        if n == 0:
            return bg
        ys, xs = np.nonzero(full)
        ya, yb, xa, xb = int(ys.min()), int(ys.max()) + 1, int(xs.min()), int(xs.max()) + 1
        m = full[ya:yb, xa:xb, None]
        img = bg.image.copy()
        np.copyto(img[y0 + ya:y0 + yb, x0 + xa:x0 + xb], frame[y0 + ya:y0 + yb, x0 + xa:x0 + xb], where=m,
                  casting="unsafe")
        lab = bg.lab_image().copy()
        iy, ix = ys + y0, xs + x0
        lab[iy, ix] = to_lab(img[iy, ix][:, None, :])[:, 0, :]
        nb = replace(bg, image=img, lab=lab)
        # carry the caches that do not depend on the image; the half-resolution
        # search background (tracking/detect.py) is redone with the same weights
        if hasattr(bg, "_faint_masks"):
            nb._faint_masks = bg._faint_masks
        half = getattr(bg, "_half", None)
        if half is not None:
            size = ((x1 - x0) // 2, (y1 - y0) // 2)
            sb = to_lab(cv2.resize(img[y0:y1, x0:x1], size, interpolation=cv2.INTER_AREA)).astype(np.float32)
            nb._half = (sb, half[1])
        self.bg = nb
        self.pixels_updated += n
        self.frames_updated += 1
        return nb
