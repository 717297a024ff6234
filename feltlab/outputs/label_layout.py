"""Greedy placement of text labels on a drawing so they do not cover each other.

Labels are placed one at a time, in order of importance. Each label tries
offsets from its anchor on rings of growing radius (in points), starting in a
preferred direction; a candidate is scored by how much it overlaps labels
already placed (heavily), how many drawn path points it covers, and how far it
sits from its anchor. Boxes are computed arithmetically from the measured text
size, so the search costs one text layout per label.

Coordinates: ``anchor`` in data units; boxes and offsets in display pixels /
typographic points of the figure being drawn.

>>> import matplotlib; matplotlib.use("Agg")
>>> import matplotlib.pyplot as plt
>>> fig, ax = plt.subplots(); _ = ax.set_xlim(0, 10); _ = ax.set_ylim(0, 10)
>>> specs = [LabelSpec((5, 5), "first", leader_from_pt=1e9), LabelSpec((5.1, 5), "second", leader_from_pt=1e9)]
>>> anns = place_labels(ax, specs)
>>> a, b = (x.get_window_extent(fig.canvas.get_renderer()) for x in anns)
>>> bool(a.overlaps(b))
False
>>> plt.close(fig)
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Penalty weights of a candidate position (dimensionless cost units).
OVERLAP_COST_PER_PX2 = 1.0      # per px^2 of overlap with a placed label
POINT_COST = 4.0                # per covered path point
DISC_COST = 3000.0              # per ball disc the label touches
OUTSIDE_COST = 1e9              # any part outside the axes
RING_COST = 30.0                # per ring step further out
TURN_COST = 8.0                 # per 22.5 degree turn from the preferred direction


@dataclass
class LabelSpec:
    """One label: text at ``anchor`` (data units), placed ``radii_pt`` away, preferably along ``prefer``."""

    anchor: tuple[float, float]
    text: str
    prefer: tuple[float, float] = (1.0, 1.0)
    radii_pt: tuple[float, ...] = (40.0, 60.0, 85.0, 115.0, 150.0)
    #: Draw a leader line when the label ends up at least this far out (pt).
    leader_from_pt: float = 0.0
    style: dict = field(default_factory=dict)


def choose_box(anchor: np.ndarray, w: float, h: float, prefer_rad: float, rings: list[float],
               placed: list[tuple[float, float, float, float]], pts: np.ndarray,
               bounds: tuple[float, float, float, float],
               discs: np.ndarray | None = None) -> tuple[float, float, tuple[float, float, float, float]]:
    """Best offset (ox, oy) of a w x h box from ``anchor`` and the box (x0, y0, x1, y1); all in one pixel frame.

    The box hangs off the offset point on the side facing away from the
    anchor (right of it when ox >= 0, above/below likewise). Works in either
    y-up (display) or y-down (image) pixels, since only signs are used.
    ``discs``: (n, 3) rows of centre x, y and radius a label should not touch (balls).
    """
    discs = np.empty((0, 3)) if discs is None else np.asarray(discs, float).reshape(-1, 3)
    best = None
    for ri, r in enumerate(rings):
        for k in range(16):
            turn = (k + 1) // 2 * (1 if k % 2 else -1)  # 0, +1, -1, +2, -2, ...
            ang = prefer_rad + turn * math.pi / 8
            ox, oy = r * math.cos(ang), r * math.sin(ang)
            tx, ty = anchor[0] + ox, anchor[1] + oy
            x0 = tx if ox >= 0 else tx - w
            y0 = ty if oy >= 0 else ty - h
            x1, y1 = x0 + w, y0 + h
            cost = RING_COST * ri + TURN_COST * abs(turn)
            if x0 < bounds[0] or y0 < bounds[1] or x1 > bounds[2] or y1 > bounds[3]:
                cost += OUTSIDE_COST
            for (u0, v0, u1, v1) in placed:
                ow = min(x1, u1) - max(x0, u0)
                oh = min(y1, v1) - max(y0, v0)
                if ow > 0 and oh > 0:
                    cost += OVERLAP_COST_PER_PX2 * ow * oh + 1e4
            if len(discs):
                dx = np.maximum.reduce([x0 - discs[:, 0], np.zeros(len(discs)), discs[:, 0] - x1])
                dy = np.maximum.reduce([y0 - discs[:, 1], np.zeros(len(discs)), discs[:, 1] - y1])
                cost += DISC_COST * float(np.sum(dx * dx + dy * dy < discs[:, 2] ** 2))
            if len(pts):
                inside = (pts[:, 0] > x0) & (pts[:, 0] < x1) & (pts[:, 1] > y0) & (pts[:, 1] < y1)
                cost += POINT_COST * float(inside.sum())
            if best is None or cost < best[0]:
                best = (cost, ox, oy, (x0, y0, x1, y1))
    return best[1], best[2], best[3]


def _text_size_px(ax, text: str, style: dict, renderer) -> tuple[float, float]:
    t = ax.text(0, 0, text, **{k: v for k, v in style.items() if k not in ("bbox", "arrowprops")})
    bb = t.get_window_extent(renderer)
    t.remove()
    return bb.width, bb.height


def place_labels(ax, specs: list[LabelSpec], avoid_xy: np.ndarray | None = None) -> list:
    """Annotate ``ax`` with every spec, avoiding overlaps; returns the annotations in spec order.

    ``avoid_xy``: (n, 2) data points (drawn paths) a label should not cover.
    Call after the axes limits and layout are final.
    """
    fig = ax.figure
    renderer = fig.canvas.get_renderer()
    px_per_pt = fig.dpi / 72.0
    axbox = ax.get_window_extent(renderer)
    pts = np.empty((0, 2)) if avoid_xy is None or not len(avoid_xy) else ax.transData.transform(np.asarray(avoid_xy, float))
    placed: list[tuple[float, float, float, float]] = []
    out = []
    for sp in specs:
        style = dict(fontsize=8, multialignment="left")
        style.update(sp.style)
        w, h = _text_size_px(ax, sp.text, style, renderer)
        bbox = style.get("bbox")
        pad = (bbox is not None) * 0.45 * style["fontsize"] * px_per_pt
        w, h = w + 2 * pad, h + 2 * pad
        a = ax.transData.transform(np.asarray(sp.anchor, float))
        p = np.asarray(sp.prefer, float)
        base = math.atan2(p[1], p[0]) if np.hypot(*p) > 0 else math.pi / 4
        ox, oy, box = choose_box(a, w, h, base, [r * px_per_pt for r in sp.radii_pt], placed, pts,
                                 (axbox.x0, axbox.y0, axbox.x1, axbox.y1))
        placed.append(box)
        kw = dict(style)
        kw.update(ha="left" if ox >= 0 else "right", va="bottom" if oy >= 0 else "top")
        if math.hypot(ox, oy) >= sp.leader_from_pt * px_per_pt - 1e-9 and "arrowprops" not in kw:
            kw["arrowprops"] = dict(arrowstyle="-", color="0.4", lw=0.7)
        out.append(ax.annotate(sp.text, sp.anchor, xytext=(ox / px_per_pt, oy / px_per_pt),
                               textcoords="offset points", **kw))
    return out
