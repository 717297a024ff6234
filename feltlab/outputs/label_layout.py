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
        best = None
        for ri, r in enumerate(sp.radii_pt):
            for k in range(16):
                turn = (k + 1) // 2 * (1 if k % 2 else -1)  # 0, +1, -1, +2, -2, ...
                ang = base + turn * math.pi / 8
                ox, oy = r * px_per_pt * math.cos(ang), r * px_per_pt * math.sin(ang)
                tx, ty = a[0] + ox, a[1] + oy
                x0 = tx if ox >= 0 else tx - w
                y0 = ty if oy >= 0 else ty - h
                x1, y1 = x0 + w, y0 + h
                cost = RING_COST * ri + TURN_COST * abs(turn)
                if x0 < axbox.x0 or y0 < axbox.y0 or x1 > axbox.x1 or y1 > axbox.y1:
                    cost += OUTSIDE_COST
                for (u0, v0, u1, v1) in placed:
                    ow = min(x1, u1) - max(x0, u0)
                    oh = min(y1, v1) - max(y0, v0)
                    if ow > 0 and oh > 0:
                        cost += OVERLAP_COST_PER_PX2 * ow * oh + 1e4
                if len(pts):
                    inside = (pts[:, 0] > x0) & (pts[:, 0] < x1) & (pts[:, 1] > y0) & (pts[:, 1] < y1)
                    cost += POINT_COST * float(inside.sum())
                if best is None or cost < best[0]:
                    best = (cost, ox, oy, (x0, y0, x1, y1))
        _, ox, oy, box = best
        placed.append(box)
        kw = dict(style)
        kw.update(ha="left" if ox >= 0 else "right", va="bottom" if oy >= 0 else "top")
        if math.hypot(ox, oy) >= sp.leader_from_pt * px_per_pt - 1e-9 and "arrowprops" not in kw:
            kw["arrowprops"] = dict(arrowstyle="-", color="0.4", lw=0.7)
        out.append(ax.annotate(sp.text, sp.anchor, xytext=(ox / px_per_pt, oy / px_per_pt),
                               textcoords="offset points", **kw))
    return out
