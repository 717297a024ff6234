"""Where a resting ball cannot be: inside a corner pocket's mouth.

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
