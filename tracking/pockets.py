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
