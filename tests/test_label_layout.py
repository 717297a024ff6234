"""Diagram labels do not cover each other (feltlab/outputs/label_layout.py).

The check uses matplotlib's own rendered text extents (an independent measure
of where each label ended up), not the placer's arithmetic boxes.
"""
from __future__ import annotations

import itertools

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.text import Text  # noqa: E402

from feltlab.outputs.label_layout import LabelSpec, place_labels  # noqa: E402


def _boxes(fig, anns):
    fig.canvas.draw()  # positions are final only once drawn
    r = fig.canvas.get_renderer()
    out = []
    for a in anns:
        bb = a.get_bbox_patch().get_window_extent(r) if a.get_bbox_patch() else Text.get_window_extent(a, r)
        out.append(bb)
    return out


def test_crowded_labels_do_not_overlap_and_stay_inside():
    # A cluster break: ten contact labels anchored within 60 mm of each other
    # on a 2540 x 1270 mm drawing, plus the paths leaving the cluster.
    fig, ax = plt.subplots(figsize=(10, 5.5))
    ax.set_xlim(-135, 2675)
    ax.set_ylim(-135, 1405)
    ax.set_aspect("equal")
    fig.tight_layout()
    rng = np.random.default_rng(5)
    anchors = np.array([1900.0, 650.0]) + rng.uniform(-30, 30, size=(10, 2))
    specs = [LabelSpec(tuple(a), f"C{i}  red leaves 13.{i} deg,\ncue 17.{i} deg off cue's path",
                       prefer=(-1.0, 0.2), style=dict(fontsize=8, bbox=dict(boxstyle="round,pad=0.25")))
             for i, a in enumerate(anchors)]
    paths = np.vstack([np.linspace(anchors[0], anchors[0] + d, 100)
                       for d in ([600, 500], [-700, 0], [300, -600])])
    anns = place_labels(ax, specs, paths)
    boxes = _boxes(fig, anns)
    axbox = ax.get_window_extent(fig.canvas.get_renderer())
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b)
    for b in boxes:
        assert axbox.x0 - 1 <= b.x0 and b.x1 <= axbox.x1 + 1 and axbox.y0 - 1 <= b.y0 and b.y1 <= axbox.y1 + 1
    plt.close(fig)


def test_lone_label_goes_the_preferred_way():
    fig, ax = plt.subplots()
    ax.set_xlim(0, 100)
    ax.set_ylim(0, 100)
    (ann,) = place_labels(ax, [LabelSpec((20.0, 50.0), "C1", prefer=(1.0, 0.0))])
    fig.canvas.draw()
    bb = Text.get_window_extent(ann, fig.canvas.get_renderer())
    a = ax.transData.transform((20.0, 50.0))
    assert bb.x0 > a[0]  # to the right of its anchor, as asked
    plt.close(fig)


def test_ball_names_in_a_tight_rack_touch_no_other_ball_or_name():
    # A 15-ball triangle of touching balls (r = 11 px) as seen in a 1280x720
    # frame: every name box must clear every other ball's disc and every other
    # name box (plain rectangle/disc geometry).
    from feltlab.outputs.frames import layout_ball_names

    r, fs = 11.0, 18
    names = []
    for row in range(5):
        for k in range(row + 1):
            c = (700.0 + row * r * np.sqrt(3), 360.0 + (k - row / 2) * 2 * r)
            names.append((f"ball-{len(names) + 1}", c, (255, 255, 255)))
    boxes, leads = layout_ball_names(names, r, fs, [], (0.0, 0.0, 1280.0, 720.0))
    for i, (x0, y0, x1, y1) in enumerate(boxes):
        for j, (_, c, _) in enumerate(names):
            dx = max(x0 - c[0], 0.0, c[0] - x1)
            dy = max(y0 - c[1], 0.0, c[1] - y1)
            assert dx * dx + dy * dy >= r * r, (i, j)
    for (a, b) in itertools.combinations(boxes, 2):
        assert min(a[2], b[2]) <= max(a[0], b[0]) or min(a[3], b[3]) <= max(a[1], b[1])
    assert sum(lead is not None for lead in leads) >= 1  # a packed rack needs some names moved out
