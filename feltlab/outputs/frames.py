"""Annotated frames: PNGs at every contact and ``annotated.mp4`` of the whole clip.

Everything drawn is measured data mapped back into the image through the
calibration (table mm -> px at the ball-centre plane, lens distortion
included), so the overlay is also a visual check of calibration and tracking:

* each ball's trail (its smoothed track so far) and its label;
* a velocity arrow per moving ball: the arrow reaches where the ball would be
  ``arrow_s`` seconds later at its current velocity, so arrow length is
  proportional to speed (mm/s); a legend shows the length of a round speed;
* at a contact: the contact point, the contact normal and ``e = x ± s``.

Style: plain lines with a thin black outline so they read on any cloth colour,
the Okabe-Ito colour-blind-safe palette (see :mod:`.style`), text on a dark
panel. The video is re-read frame by frame (streaming): memory does not grow
with clip length.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import cv2
import numpy as np
import pandas as pd
from PIL import Image, ImageDraw, ImageFont

from feltlab.errors import FeltlabError
from feltlab.outputs.label_layout import choose_box
from feltlab.outputs.style import CONTACT_RGB, ball_colours, ball_order, bgr, decimals_for

#: Below this speed (mm/s) a ball gets no velocity arrow (it is at rest within
#: tracking noise; ~1 mm/frame at 30 fps).
MIN_ARROW_SPEED_MM_S = 30.0
#: The fastest ball's arrow spans this fraction of the image width.
ARROW_FRACTION_OF_WIDTH = 0.12
#: How long after a contact its normal and e stay drawn in the video (s).
CONTACT_HOLD_S = 0.4
#: Contact frames "just before" / "just after" are this far from the contact (s),
#: at least one frame.
CONTACT_FRAME_OFFSET_S = 0.01
#: annotated.mp4 plays at the clip's rate up to this (frames/s); faster clips
#: play back in slow motion (every frame kept).
MAX_PLAYBACK_FPS = 60.0



def _font_path() -> str:
    """DejaVu Sans, shipped with matplotlib (has ±, ° and arrows that OpenCV's Hershey fonts lack)."""
    import matplotlib

    return str(Path(matplotlib.get_data_path()) / "fonts" / "ttf" / "DejaVuSans.ttf")


_FONTS: dict[int, ImageFont.FreeTypeFont] = {}


def _font(px: int) -> ImageFont.FreeTypeFont:
    if px not in _FONTS:
        _FONTS[px] = ImageFont.truetype(_font_path(), px)
    return _FONTS[px]


def nice_speed(v: float) -> float:
    """A round speed (1, 2 or 5 x 10^n mm/s) not above ``v``.

    >>> nice_speed(1730.0), nice_speed(480.0)
    (1000.0, 200.0)
    """
    if not v > 0:
        return 1000.0
    p = 10 ** math.floor(math.log10(v))
    for m in (5, 2, 1):
        if m * p <= v:
            return float(m * p)
    return float(p)


def legend_text(v_mm_s: float) -> str:
    """Speed-arrow legend label.

    >>> legend_text(500.0)
    '= 500 mm/s (0.5 m/s)'
    """
    return f"= {v_mm_s:.0f} mm/s ({speed_text(v_mm_s)})"


def speed_text(v_mm_s: float) -> str:
    """Speed label in m/s (the unit coaches and ball makers quote)."""
    return f"{v_mm_s / 1000.0:.2g} m/s" if v_mm_s < 1000 else f"{v_mm_s / 1000.0:.1f} m/s"


@dataclass
class Overlay:
    """Everything needed to annotate any frame, precomputed in pixels.

    px[ball]: (n_frames, 2) ball-centre pixel positions (NaN where no track);
    tip[ball]: (n_frames, 2) arrow tips; speed[ball]: (n_frames,) mm/s;
    seen[ball]: (n_frames,) False where the track is predicted (ball not detected).
    arrow_s: seconds of travel an arrow represents; legend_mm_s / legend_px:
    the legend arrow's speed and pixel length. radius_px: ball radius in px.
    """

    n_frames: int
    fps: float
    image_size: tuple[int, int]
    px: dict[str, np.ndarray]
    tip: dict[str, np.ndarray]
    speed: dict[str, np.ndarray]
    colours: dict[str, tuple[int, int, int]]
    radius_px: float
    arrow_s: float
    legend_mm_s: float
    legend_px: float
    contacts: list[dict] = field(default_factory=list)
    seen: dict[str, np.ndarray] = field(default_factory=dict)
    panel_corner: str = "tl"
    font_px: int = 18


def _contact_label(c: dict) -> str:
    if c["kind"] == "ball-ball":
        return f"C{c['contact']}: {c['ball_a']} → {c['ball_b']}"
    return f"C{c['contact']}: {c['ball_a']} → cushion {c.get('cushion', '')}".rstrip()


def e_text(e: float, s: float) -> str:
    """``e = 0.936 ± 0.012`` (digits from the sigma; '?' where unknown)."""
    if e is None or not np.isfinite(e):
        return "e = n/a"
    if s is None or not np.isfinite(s) or s <= 0:
        return f"e = {e:.3f}"
    d = decimals_for(s)
    return f"e = {e:.{d}f} ± {s:.{d}f}"


def reference_speed(tracks: pd.DataFrame, contacts: pd.DataFrame | None) -> float:
    """Speed (mm/s) that sets the arrow scale: a high percentile (99th) of the speeds of the balls
    that take part in contacts (all balls if there are none), robust to a stray track's spikes."""
    if not len(tracks):
        return 1000.0
    g = tracks
    if contacts is not None and len(contacts):
        names = {str(b) for b in contacts["ball_a"]} | {str(b) for b in contacts["ball_b"] if str(b) not in ("", "nan")}
        sel = tracks["ball"].astype(str).isin(names)
        if sel.any():
            g = tracks[sel]
    sp = np.hypot(g["vx_mm_s"].to_numpy(float), g["vy_mm_s"].to_numpy(float))
    sp = sp[np.isfinite(sp)]
    return max(float(np.percentile(sp, 99)) if sp.size else 1000.0, 100.0)


def build_overlay(tracks: pd.DataFrame, contacts: pd.DataFrame, calibration, fps: float,
                  n_frames: int | None = None, velocity=None) -> Overlay:
    """Precompute pixel positions, arrows and contact markers (pure).

    velocity: optional ``velocity(ball, t_s array) -> (T, 2)`` mm/s, the physics stage's
    fitted motion; where it is finite it sets the arrows. The smoothed track's velocity is
    the fallback: it is not smoothed across a contact, so on the first frames after one it
    rests on few samples and can be far off (a frame just after a hit drew a quarter-length
    arrow)."""
    w, h = calibration.camera.image_size
    if n_frames is None:
        n_frames = int(tracks["frame"].max()) + 1 if len(tracks) else 0
    balls = ball_order(tracks["ball"].unique()) if len(tracks) else []
    colours = ball_colours(balls)
    vmax = reference_speed(tracks, contacts)
    px_per_mm = float(calibration.px_per_mm)
    arrow_s = ARROW_FRACTION_OF_WIDTH * w / (vmax * px_per_mm)
    legend = nice_speed(vmax * 0.6)
    px, tip, speed, seen = {}, {}, {}, {}
    for b in balls:
        g = tracks[tracks["ball"] == b]
        fr = g["frame"].to_numpy(int)
        ok = (fr >= 0) & (fr < n_frames)
        g, fr = g[ok], fr[ok]
        xy = g[["x_mm", "y_mm"]].to_numpy(float)
        v = g[["vx_mm_s", "vy_mm_s"]].to_numpy(float)
        if velocity is not None and len(g):
            try:
                vm = np.asarray(velocity(b, g["t_s"].to_numpy(float)), float).reshape(-1, 2)
            except Exception:  # noqa: BLE001 - a ball without a fitted model keeps its track's velocity
                vm = None
            if vm is not None and len(vm) == len(v):
                fin = np.isfinite(vm).all(axis=1)
                v = np.where(fin[:, None], vm, v)
        p = np.full((n_frames, 2), np.nan)
        q = np.full((n_frames, 2), np.nan)
        s = np.full(n_frames, np.nan)
        vis = np.ones(n_frames, bool)
        if "visible" in g and len(g):
            vis[fr] = g["visible"].to_numpy(float) > 0.5
        seen[b] = vis
        if len(g):
            good = np.isfinite(xy).all(axis=1)
            if good.any():
                p[fr[good]] = calibration.table_to_px(xy[good])
                vv = np.nan_to_num(v[good])
                q[fr[good]] = calibration.table_to_px(xy[good] + vv * arrow_s)
                s[fr[good]] = np.hypot(vv[:, 0], vv[:, 1])
        px[b], tip[b], speed[b] = p, q, s
    cons = []
    R = calibration.ball_radius_mm
    for c in (contacts.to_dict(orient="records") if contacts is not None and len(contacts) else []):
        c = dict(c)
        k = c["t_s"] * fps
        c["frame_float"] = k
        # Contact point: the table gives it (x_mm, y_mm); else mid-way along the normal.
        cp = None
        if np.isfinite(c.get("x_mm", np.nan)) and np.isfinite(c.get("y_mm", np.nan)):
            cp = np.array([c["x_mm"], c["y_mm"]], float)
        n = np.array([c.get("nx", np.nan), c.get("ny", np.nan)], float)
        if cp is None:
            a = str(c["ball_a"])
            kk = int(np.clip(round(k), 0, n_frames - 1))
            ga = tracks[(tracks["ball"] == a) & (tracks["frame"] == kk)]
            if len(ga) and np.isfinite(n).all():
                cp = ga[["x_mm", "y_mm"]].to_numpy(float)[0] + n * R * (1 if c["kind"] == "ball-ball" else -1)
        c["cp_px"] = calibration.table_to_px(cp[None])[0] if cp is not None else None
        if cp is not None and np.isfinite(n).all():
            c["n_px"] = calibration.table_to_px(np.array([cp - 5.0 * R * n, cp + 5.0 * R * n]))
        else:
            c["n_px"] = None
        c["label"] = _contact_label(c)
        c["e_text"] = e_text(c.get("e", np.nan), c.get("e_sigma", np.nan))
        if c["e_text"] == "e = n/a" and "e not measured" in str(c.get("note", "") or ""):
            c["e_text"] = "e not measured (too uncertain: see the report)"
        cons.append(c)
    _merge_groups(cons)
    corner = _quiet_corner(calibration, (w, h))
    return Overlay(n_frames=n_frames, fps=fps, image_size=(w, h), px=px, tip=tip, speed=speed, colours=colours,
                   radius_px=R * px_per_mm, arrow_s=arrow_s, legend_mm_s=legend,
                   legend_px=legend * arrow_s * px_per_mm, contacts=cons, seen=seen, panel_corner=corner,
                   font_px=max(13, int(round(h / 40.0))))


def _merge_groups(cons: list[dict]) -> None:
    """A compound event (several touches within one frame, e NaN) is shown once: its first touch
    leads (label naming all its contacts, a close-up taking in every touch point) and the others
    are marked ``follower`` (no frames of their own). Edits the contact dicts in place."""
    from feltlab.outputs.plots import compound_groups, contact_ranges

    for members in compound_groups(cons).values():
        lead = members[0]
        lead["label"] = f"{contact_ranges([m['contact'] for m in members])}: {len(members)} touches within one frame"
        lead["e_text"] = "e not measurable (touches too close together)"
        pts = [m["cp_px"] for m in members if m.get("cp_px") is not None and np.isfinite(m["cp_px"]).all()]
        if pts:
            lead["closeup_pts_px"] = np.array(pts, float)
        lead["group_ids"] = [m["contact"] for m in members]
        for m in members[1:]:
            m["follower"] = True


def framed_contacts(ov: "Overlay") -> list[dict]:
    """The contacts that get their own frames and close-up (a compound event's followers do not)."""
    return [c for c in ov.contacts if not c.get("follower")]


def _quiet_corner(calibration, size: tuple[int, int]) -> str:
    """The image corner whose legend box covers least of the playing surface."""
    w, h = size
    t = calibration.table
    poly = calibration.table_to_px(np.array([[0, 0], [t.length_mm, 0], [t.length_mm, t.width_mm], [0, t.width_mm]]),
                                   z_mm=0.0)
    mask = np.zeros((h, w), np.uint8)
    if np.isfinite(poly).all():
        cv2.fillPoly(mask, [np.round(poly).astype(np.int32)], 1)
    bw, bh = int(0.26 * w), int(0.16 * h)
    boxes = {"tl": (0, 0), "tr": (w - bw, 0), "bl": (0, h - bh), "br": (w - bw, h - bh)}
    return min(boxes, key=lambda k: int(mask[boxes[k][1]:boxes[k][1] + bh, boxes[k][0]:boxes[k][0] + bw].sum()))


def _pt(p) -> tuple[int, int]:
    return int(round(float(p[0]))), int(round(float(p[1])))


def _line(img, pts, rgb, thick: int) -> None:
    pts = np.asarray(pts, float)
    pts = pts[np.isfinite(pts).all(axis=1)]
    if len(pts) < 2:
        return
    arr = np.round(pts).astype(np.int32).reshape(-1, 1, 2)
    cv2.polylines(img, [arr], False, (0, 0, 0), thick + 2, cv2.LINE_AA)
    cv2.polylines(img, [arr], False, bgr(rgb), thick, cv2.LINE_AA)


def _dashed(img, pts, rgb, thick: int, dash: float = 8.0) -> None:
    """A dashed two-point line with a black outline (the contact normal: dashed so that it never
    reads as a ball's trail or arrow, whatever the ball colours)."""
    pts = np.asarray(pts, float)
    if len(pts) < 2 or not np.isfinite(pts).all():
        return
    a, b = pts[0], pts[-1]
    n = int(max(1, np.hypot(*(b - a)) // dash))
    for i in range(0, n, 2):
        p, q = a + (b - a) * i / n, a + (b - a) * min(i + 1, n) / n
        cv2.line(img, _pt(p), _pt(q), (0, 0, 0), thick + 2, cv2.LINE_AA)
    for i in range(0, n, 2):
        p, q = a + (b - a) * i / n, a + (b - a) * min(i + 1, n) / n
        cv2.line(img, _pt(p), _pt(q), bgr(rgb), thick, cv2.LINE_AA)


def _arrow(img, a, b, rgb, thick: int) -> None:
    if not (np.isfinite(a).all() and np.isfinite(b).all()):
        return
    length = float(np.hypot(*(np.asarray(b) - np.asarray(a))))
    if length < 3:
        return
    tip = min(0.35, 12.0 / length)
    cv2.arrowedLine(img, _pt(a), _pt(b), (0, 0, 0), thick + 2, cv2.LINE_AA, tipLength=tip)
    cv2.arrowedLine(img, _pt(a), _pt(b), bgr(rgb), thick, cv2.LINE_AA, tipLength=tip)


def _draw_texts(img: np.ndarray, texts: list[tuple[str, tuple[float, float], tuple[int, int, int], int]]) -> None:
    """Draw (text, left-baseline px, rgb, size px) items in place, each with a black halo.

    Only a small patch around each text goes through PIL (whole-frame
    conversions would dominate the video's run time).
    """
    h, w = img.shape[:2]
    for s, org, rgb, size in texts:
        font = _font(size)
        stroke = max(2, size // 8)
        x0, y0, x1, y1 = font.getbbox(s, anchor="ls", stroke_width=stroke)
        ox, oy = float(org[0]), float(org[1])
        left, top = int(math.floor(ox + x0)) - 1, int(math.floor(oy + y0)) - 1
        right, bottom = int(math.ceil(ox + x1)) + 1, int(math.ceil(oy + y1)) + 1
        cl, ct, cr, cb = max(0, left), max(0, top), min(w, right), min(h, bottom)
        if cr <= cl or cb <= ct:
            continue
        patch = Image.fromarray(np.ascontiguousarray(img[ct:cb, cl:cr, ::-1]))
        d = ImageDraw.Draw(patch)
        d.text((ox - cl, oy - ct), s, font=font, fill=tuple(int(c) for c in rgb), anchor="ls",
               stroke_width=stroke, stroke_fill=(0, 0, 0))
        img[ct:cb, cl:cr] = np.asarray(patch)[:, :, ::-1]


def _text_width(s: str, size: int) -> float:
    return float(_font(size).getlength(s))


def draw_overlay(image: np.ndarray, ov: Overlay, frame: int, t_s: float | None = None,
                 focus_contact: dict | None = None, caption: str | None = None,
                 view: tuple[float, ...] | None = None) -> np.ndarray:
    """A copy of ``image`` (BGR) with the overlay for ``frame``; pure apart from the copy.

    ``view = (x0, y0, scale[, arrow_factor])``: ``image`` is a crop of the
    frame starting at pixel (x0, y0), enlarged by ``scale`` (close-ups);
    geometry is mapped accordingly, velocity arrows are shortened by
    ``arrow_factor`` (default 1; a close-up's arrows must fit its crop) and
    the legend panel and contact text are left out (the close-up's caption
    bar carries them).
    """
    img = image.copy()
    k = int(frame)
    t = k / ov.fps if t_s is None else t_s
    fs = ov.font_px
    texts: list = []
    if view is None:
        off, sc, af = np.zeros(2), 1.0, 1.0
    else:
        off, sc = np.array(view[:2], float), float(view[2])
        af = float(view[3]) if len(view) > 3 else 1.0

    def T(p):
        return (np.asarray(p, float) - off) * sc

    th = 2 if img.shape[0] >= 600 or view is not None else 1
    r = max(4, int(round(ov.radius_px * sc)))
    # Contacts: normal line, contact point and e, held for a while after the contact.
    shown = []
    focus_ids = set(focus_contact.get("group_ids", [focus_contact["contact"]])) if focus_contact is not None else set()
    for c in ov.contacts:
        dt = t - c["t_s"]
        if (focus_contact is not None and c["contact"] in focus_ids) or (
                focus_contact is None and 0 <= dt <= CONTACT_HOLD_S):
            shown.append(c)
    for c in shown:
        if c["n_px"] is not None:
            _dashed(img, T(c["n_px"]), CONTACT_RGB, 1 if view is None else 2, dash=max(6.0, 0.6 * r))
        if c["cp_px"] is not None and np.isfinite(c["cp_px"]).all():
            p = T(c["cp_px"])
            cv2.drawMarker(img, _pt(p), (0, 0, 0), cv2.MARKER_TILTED_CROSS, r + 4, 4, cv2.LINE_AA)
            cv2.drawMarker(img, _pt(p), bgr(CONTACT_RGB), cv2.MARKER_TILTED_CROSS, r + 4, 2, cv2.LINE_AA)
    # Trails, balls, labels, arrows.
    names: list[tuple[str, np.ndarray, tuple[int, int, int]]] = []
    for b, p in ov.px.items():
        col = ov.colours[b]
        # the trail is thinner than the velocity arrow, so an arrow running along
        # the ball's own path still reads as an arrow, not as more path
        _line(img, T(p[: k + 1]), col, 1)
        if k >= ov.n_frames or not np.isfinite(p[k]).all():
            continue
        q = T(p[k])
        if b in ov.seen and not ov.seen[b][k]:  # predicted, not detected: a grey ring
            cv2.circle(img, _pt(q), r + 1, (128, 128, 128), 1, cv2.LINE_AA)
            names.append((f"{b} (predicted)", q, (170, 170, 170)))
            continue
        cv2.circle(img, _pt(q), r + 1, (0, 0, 0), 3, cv2.LINE_AA)
        cv2.circle(img, _pt(q), r + 1, bgr(col), 1 if view is None else 2, cv2.LINE_AA)
        if ov.speed[b][k] >= MIN_ARROW_SPEED_MM_S:
            _arrow(img, q, q + af * (T(ov.tip[b][k]) - q), col, th + 1)
        names.append((b, q, col))
    # Every drawn ball is a keep-out disc, so labels sit beside balls, not on them.
    keep_out = np.array([[q[0], q[1], r + 2.0] for _, q, _ in names], float).reshape(-1, 3)
    no_pts = np.empty((0, 2))
    h_img, w_img = img.shape[:2]
    bounds = (0.0, 0.0, float(w_img), float(h_img))
    placed: list = []
    if view is None:
        for c in shown:
            if c["cp_px"] is None or not np.isfinite(c["cp_px"]).all():
                continue
            p = c["cp_px"]
            lines = [c["label"], c["e_text"]]
            # contact text on a dark box, so it never reads as a ball label;
            # placed below-right of the contact unless that covers a ball or a label
            bw = max(_text_width(s, fs) for s in lines) + 10
            bh = 1.3 * fs * (len(lines) - 1) + 1.55 * fs
            ox, oy, box = choose_box(np.asarray(p, float), bw, bh, math.pi / 4, [2.8 * r, 4.5 * r, 7.0 * r],
                                     placed, no_pts, bounds, keep_out)
            placed.append(box)
            x0, y0 = box[0] + 5, box[1] + 1.1 * fs
            h_, w_ = img.shape[:2]
            bx0, by0, bx1, by1 = max(0, int(box[0])), max(0, int(box[1])), min(w_, int(box[2])), min(h_, int(box[3]))
            if bx1 > bx0 and by1 > by0:
                img[by0:by1, bx0:bx1] = (img[by0:by1, bx0:bx1] * 0.3).astype(img.dtype)
            for i, s in enumerate(lines):
                texts.append((s, (x0, y0 + i * 1.3 * fs), (255, 255, 255), fs))
    # Ball names beside their balls, none covering a ball or another label.
    for (name, q, col), box, lead in zip(names, *layout_ball_names(names, r, fs, placed, bounds)):
        if lead is not None:
            cv2.line(img, _pt(lead[0]), _pt(lead[1]), bgr(col), 1, cv2.LINE_AA)
        texts.append((name, (box[0], box[1] + 0.95 * fs), col, fs))
    if view is None:
        _panel(img, ov, k, t, caption, texts)
    _draw_texts(img, texts)
    return img


def layout_ball_names(names: list, r: float, fs: int, placed: list, bounds: tuple[float, float, float, float]
                      ) -> tuple[list[tuple[float, float, float, float]], list]:
    """Boxes (x0, y0, x1, y1 image px) for ball-name labels and their leader lines (or None).

    ``names``: (text, centre px, colour) per drawn ball, ball image radius
    ``r`` px, font size ``fs`` px; ``placed`` (extended in place): boxes
    already taken. Each name goes up-right of its ball unless that covers
    another ball or label; one pushed further out gets a leader line
    (start, end px) from its ball's rim.
    """
    keep_out = np.array([[q[0], q[1], r + 2.0] for _, q, _ in names], float).reshape(-1, 3)
    rings = [1.05 * r + 3, 1.6 * r + 6, 2.4 * r + 8, 3.4 * r + 10, 5.0 * r + 12, 7.0 * r + 14, 9.5 * r + 16]
    boxes, leads = [], []
    for name, q, _ in names:
        q = np.asarray(q, float)
        ox, oy, box = choose_box(q, _text_width(name, fs), 1.25 * fs, -math.pi / 4, rings, placed,
                                 np.empty((0, 2)), bounds, keep_out)
        placed.append(box)
        boxes.append(box)
        lead = None
        if math.hypot(ox, oy) > rings[1] + 1e-6:
            near = np.clip(q, [box[0], box[1]], [box[2], box[3]])
            d = near - q
            lead = (q + d / (np.linalg.norm(d) + 1e-9) * (r + 2), near)
        leads.append(lead)
    return boxes, leads


def _panel(img, ov: Overlay, k: int, t: float, caption: str | None, texts: list) -> None:
    """Legend panel: time, frame, the speed-scale arrow, an optional caption (texts appended)."""
    h, w = img.shape[:2]
    fs = ov.font_px
    lh = int(round(1.4 * fs))
    lines = [f"t = {t:.3f} s    frame {k}"]
    if caption:
        lines.append(caption)
    legend_label = legend_text(ov.legend_mm_s)
    bw = int(max(ov.legend_px + _text_width(legend_label, fs) + 30, max(_text_width(s, fs) for s in lines) + 20))
    bh = lh * (len(lines) + 1) + int(0.6 * fs)
    x0 = 6 if ov.panel_corner in ("tl", "bl") else w - bw - 6
    y0 = 6 if ov.panel_corner in ("tl", "tr") else h - bh - 6
    sub = img[y0:y0 + bh, x0:x0 + bw]
    if sub.size:
        img[y0:y0 + bh, x0:x0 + bw] = (sub * 0.3).astype(img.dtype)
    y = y0 + lh
    for s in lines:
        texts.append((s, (x0 + 10, y), (255, 255, 255), fs))
        y += lh
    ax = x0 + 10
    ay = y - 0.35 * fs
    _arrow(img, (ax, ay), (ax + ov.legend_px, ay), (255, 255, 255), 2)
    texts.append((legend_label, (ax + ov.legend_px + 8, y), (255, 255, 255), fs))


def contact_frame_plan(contacts: pd.DataFrame, fps: float, n_frames: int) -> list[tuple[int, str, int]]:
    """(contact id, 'before'|'at'|'after', frame index) for every contact.

    'at' is the frame nearest the contact time; 'before'/'after' are
    ``CONTACT_FRAME_OFFSET_S`` (at least one frame) either side, clipped to the clip.

    >>> contact_frame_plan(pd.DataFrame({"contact": [1], "t_s": [0.3736]}), 120.0, 240)
    [(1, 'before', 44), (1, 'at', 45), (1, 'after', 46)]
    """
    plan = []
    if contacts is None or len(contacts) == 0 or n_frames <= 0:
        return plan
    off = max(1, int(round(CONTACT_FRAME_OFFSET_S * fps)))
    for c, t in zip(contacts["contact"], contacts["t_s"]):
        at = int(np.clip(round(t * fps), 0, n_frames - 1))
        for tag, k in (("before", at - off), ("at", at), ("after", at + off)):
            plan.append((int(c), tag, int(np.clip(k, 0, n_frames - 1))))
    return plan


def frame_file_name(contact: int, tag: str, frame: int) -> str:
    return f"contact{contact:02d}_{tag}_f{frame:06d}.png"


def render_annotations(video_path: Path, ov: Overlay, out_dir: Path, write_video: bool = True,
                       write_frames: bool = True, frame_times: np.ndarray | None = None,
                       progress: Callable[[int, int], None] | None = None, start_frame: int = 0) -> dict:
    """Stream the clip once: write annotated.mp4 and the contact PNGs into ``out_dir``.

    Returns {"video": path or None, "frames": [(contact, tag, frame, path), ...],
    "closeups": [(contact, path), ...]} (close-ups: frames/contactNN_closeup.png).
    ``frame_times`` (s, per frame index) overrides k/fps in the captions.
    Frames before ``start_frame`` (outside an analysed frame range) are skipped.
    """
    out_dir = Path(out_dir)
    plan = contact_frame_plan(pd.DataFrame(framed_contacts(ov)), ov.fps, ov.n_frames) if write_frames else []
    want: dict[int, list[tuple[int, str]]] = {}
    for c, tag, k in plan:
        want.setdefault(k, []).append((c, tag))
    cons = {c["contact"]: c for c in ov.contacts}
    boxes = {c["contact"]: closeup_box(ov, c) for c in ov.contacts}
    crops: dict[int, list] = {}
    from tracking.video import open_capture

    try:
        cap = open_capture(video_path)
    except FeltlabError:
        cap = None
    if cap is None or not cap.isOpened():
        raise FeltlabError(f"cannot re-open {video_path} to draw the annotated frames; check the file is readable",
                           stage="outputs")
    writer = None
    video_path_out = out_dir / "annotated.mp4"
    frames_dir = out_dir / "frames"
    written = []
    k = 0
    last_needed = max(want) if want else -1
    try:
        while True:
            if not write_video and k > last_needed:
                break
            if k < start_frame:
                if not cap.grab():
                    break
                k += 1
                continue
            ok, img = cap.read()
            if not ok:
                break
            if k >= ov.n_frames:
                break
            t = float(frame_times[k]) if frame_times is not None and k < len(frame_times) else k / ov.fps
            if write_video:
                if writer is None:
                    hh, ww = img.shape[:2]
                    writer = cv2.VideoWriter(str(video_path_out), cv2.VideoWriter_fourcc(*"mp4v"),
                                             float(min(ov.fps, MAX_PLAYBACK_FPS)), (ww, hh))
                    if not writer.isOpened():
                        raise FeltlabError("OpenCV cannot write annotated.mp4 (mp4v codec missing); "
                                           "rerun without the annotated video", stage="outputs")
                writer.write(draw_overlay(img, ov, k, t))
            for c, tag in want.get(k, []):
                con = cons[c]
                dt_ms = (t - con["t_s"]) * 1000.0
                caption = f"{con['label']}: {tag} ({dt_ms:+.1f} ms)"
                frames_dir.mkdir(exist_ok=True)
                p = frames_dir / frame_file_name(c, tag, k)
                if not cv2.imwrite(str(p), draw_overlay(img, ov, k, t, focus_contact=con, caption=caption)):
                    raise FeltlabError(f"could not write {p}; check free disk space", stage="outputs")
                written.append((c, tag, k, p))
                bx0, by0, bx1, by1 = boxes[c]
                crops.setdefault(c, []).append((tag, k, t, img[by0:by1, bx0:bx1].copy()))
            k += 1
            if progress is not None:
                progress(k, ov.n_frames)
    finally:
        cap.release()
        if writer is not None:
            writer.release()
    closeups = []
    for c, items in crops.items():
        p = frames_dir / f"contact{c:02d}_closeup.png"
        closeups.append((c, contact_closeup(ov, cons[c], items, p)))
    return {"video": video_path_out if writer is not None else None, "frames": written, "closeups": closeups}


def closeup_box(ov: Overlay, contact: dict) -> tuple[int, int, int, int]:
    """Crop (x0, y0, x1, y1) px around a contact: 16 x 10 ball radii, at least 240 x 150 px, inside the image;
    for a compound event, around all its touch points (``closeup_pts_px``) with 3 ball radii to spare."""
    w, h = ov.image_size
    hw = int(min(w // 2, max(120, 8 * ov.radius_px)))
    hh = int(min(h // 2, max(75, 5 * ov.radius_px)))
    cp = contact.get("cp_px")
    cx, cy = (w // 2, h // 2) if cp is None or not np.isfinite(cp).all() else _pt(cp)
    pts = contact.get("closeup_pts_px")
    if pts is not None and len(pts):
        lo, hi = np.min(pts, axis=0), np.max(pts, axis=0)
        cx, cy = _pt((lo + hi) / 2)
        half = (hi - lo) / 2 + 3 * ov.radius_px
        # keep the 16:10 shape: grow both sides together
        f = max(1.0, half[0] / hw, half[1] / hh)
        hw, hh = int(min(w // 2, hw * f)), int(min(h // 2, hh * f))
    x0 = int(np.clip(cx - hw, 0, w - 2 * hw))
    y0 = int(np.clip(cy - hh, 0, h - 2 * hh))
    return x0, y0, x0 + 2 * hw, y0 + 2 * hh


#: In a contact close-up every velocity arrow's head stays this fraction of
#: the crop's shorter side inside the crop; arrows are shortened (all by one
#: factor) to make it so, but never below CLOSEUP_ARROW_MIN_FACTOR of their
#: full-frame length (a ball at the crop's edge moving out of it).
CLOSEUP_ARROW_MARGIN = 0.06
CLOSEUP_ARROW_MIN_FACTOR = 0.15


def closeup_arrow_factor(ov: Overlay, contact: dict, frames: list[int]) -> float:
    """Factor (<= 1) shortening a close-up's velocity arrows so every head lies inside the crop.

    Considers every ball drawn with an arrow in ``frames`` whose centre lies in
    the crop (inset by the margin); returns 1 where the full-frame arrows
    already fit. The close-up's legend arrow is scaled by the same factor, so
    lengths stay comparable.
    """
    x0, y0, x1, y1 = closeup_box(ov, contact)
    m = CLOSEUP_ARROW_MARGIN * min(x1 - x0, y1 - y0)
    lo, hi = np.array([x0 + m, y0 + m]), np.array([x1 - m, y1 - m])
    f = 1.0
    for b, p in ov.px.items():
        for k in frames:
            if k >= ov.n_frames or not np.isfinite(p[k]).all() or ov.speed[b][k] < MIN_ARROW_SPEED_MM_S:
                continue
            q, d = p[k], ov.tip[b][k] - p[k]
            if not ((lo <= q) & (q <= hi)).all() or not np.isfinite(d).all():
                continue
            for i in range(2):  # largest f with q + f d inside [lo, hi] on this axis
                if d[i] > 0:
                    f = min(f, (hi[i] - q[i]) / d[i])
                elif d[i] < 0:
                    f = min(f, (lo[i] - q[i]) / d[i])
    return float(max(f, CLOSEUP_ARROW_MIN_FACTOR))


def contact_closeup(ov: Overlay, contact: dict, crops: list[tuple[str, int, float, np.ndarray]], out_path: Path,
                    height_px: int = 300) -> Path:
    """Close-up of one contact: (tag, frame, t_s, raw BGR crop) panels side by side, overlay redrawn at the zoom.

    Each panel is captioned with its frame and time from the contact; a bar
    below gives the contact, e ± sigma and the speed-arrow scale at this zoom.
    """
    if not crops:
        raise ValueError("no frames for the contact close-up")
    x0, y0, _, _ = closeup_box(ov, contact)
    af = closeup_arrow_factor(ov, contact, [k for _, k, _, _ in crops])
    panels = []
    fs = max(14, int(height_px * 0.06))
    scale = 1.0
    for tag, k, t, crop in crops:
        scale = height_px / crop.shape[0]
        big = cv2.resize(crop, (int(round(crop.shape[1] * scale)), height_px), interpolation=cv2.INTER_CUBIC)
        big = draw_overlay(big, ov, k, t, focus_contact=contact, view=(x0, y0, scale, af))
        bar = np.full((int(1.8 * fs), big.shape[1], 3), 255, np.uint8)
        panel = np.vstack([big, bar])
        dt_ms = (t - contact["t_s"]) * 1000.0
        _draw_texts_plain(panel, [(f"{tag}: frame {k}, {dt_ms:+.1f} ms", (8, panel.shape[0] - 0.55 * fs),
                                   (0, 0, 0), fs)])
        panels.append(panel)
        panels.append(np.full((panel.shape[0], 6, 3), 255, np.uint8))
    strip = np.hstack(panels[:-1])
    foot = np.full((int(2.0 * fs), strip.shape[1], 3), 255, np.uint8)
    label = f"{contact['label']}   {contact['e_text']}   arrow"
    wl = _text_width(label, fs)
    L = ov.legend_px * scale * af
    ay = int(foot.shape[0] * 0.5)
    ax0 = int(8 + wl + 10)
    cv2.arrowedLine(foot, (ax0, ay), (int(ax0 + L), ay), (0, 0, 0), 2, cv2.LINE_AA, tipLength=min(0.35, 12.0 / max(L, 1)))
    _draw_texts_plain(foot, [(label, (8, foot.shape[0] * 0.5 + 0.35 * fs), (0, 0, 0), fs),
                             (legend_text(ov.legend_mm_s), (ax0 + L + 8, foot.shape[0] * 0.5 + 0.35 * fs),
                              (0, 0, 0), fs)])
    strip = np.vstack([strip, foot])
    if not cv2.imwrite(str(out_path), strip):
        raise FeltlabError(f"could not write {out_path}; check free disk space", stage="outputs")
    return Path(out_path)


def _draw_texts_plain(img: np.ndarray, texts) -> None:
    """Dark text without halo (for white caption bars)."""
    pil = Image.fromarray(np.ascontiguousarray(img[:, :, ::-1]))
    d = ImageDraw.Draw(pil)
    for s, org, rgb, size in texts:
        d.text((float(org[0]), float(org[1])), s, font=_font(int(size)), fill=tuple(int(c) for c in rgb), anchor="ls")
    img[:] = np.asarray(pil)[:, :, ::-1]
