"""Rigid balls cannot overlap: push apart detections that interpenetrate.

In a tight cluster (a rack, balls frozen together) each ball's silhouette is
partly bounded by its neighbours, where the edge is weak, so single-ball fits
lean into a neighbour. Two balls' centres are never closer than one diameter
2R, so a frame's detections are adjusted to the nearest configuration (in
the Mahalanobis sense of their covariances) that satisfies every pairwise
constraint |p_i - p_j| >= 2R.

For one pair with overlap delta along the unit line of centres n, the
minimum of Di' S_i^-1 Di + Dj' S_j^-1 Dj subject to n.(Dj - Di) = delta is
(Lagrange multipliers; e.g. Boyd & Vandenberghe, Convex Optimization, 2004,
sec. 5.5.3 for equality-constrained least squares)::

    Di = -lam S_i n,  Dj = lam S_j n,  lam = delta / (n' S_i n + n' S_j n)

so equal covariances split the overlap half and half, and a well-measured
ball moves less than a poorly measured one. Several constraints are met by
cyclic projection (sweeps over the overlapping pairs until none is left),
which converges to a point that satisfies them all.

Coordinates: table frame, mm, ball centres in the plane z = R.

>>> import numpy as np
>>> p = np.array([[0.0, 0.0], [56.0, 0.0]])
>>> S = np.array([np.eye(2), np.eye(2)]) * 0.04
>>> separate_overlaps(p, S, 28.575).round(3)
array([[-0.575,  0.   ],
       [56.575,  0.   ]])
"""
from __future__ import annotations

import numpy as np


def separate_overlaps(xy_mm: np.ndarray, cov_mm2: np.ndarray, radius_mm: float, *,
                      movable: np.ndarray | None = None, min_distance_frac: float = 0.5,
                      max_sweeps: int = 50, tol_mm: float = 1e-4) -> np.ndarray:
    """Centres (n, 2) adjusted so no two are closer than 2 ``radius_mm``.

    ``cov_mm2``: (n, 2, 2) position covariances. ``movable``: (n,) bool, False
    for detections that must stay (a smeared, moving ball whose
    mid-exposure centre may legitimately sit closer than 2R to another's).
    Pairs closer than ``min_distance_frac`` x 2R are left alone: that is a
    duplicate or a merge, not two touching balls, and pushing them apart
    would invent a ball.
    """
    p = np.array(xy_mm, float, copy=True)
    n = len(p)
    if n < 2:
        return p
    mov = np.ones(n, bool) if movable is None else np.asarray(movable, bool)
    S = np.array(cov_mm2, float, copy=True).reshape(n, 2, 2)
    bad = ~np.isfinite(S).all(axis=(1, 2)) | (np.linalg.det(S) <= 0)
    S[bad] = np.eye(2) * 0.01  # no usable covariance: isotropic 0.1 mm
    S[~mov] = 0.0  # a fixed detection does not move
    d2 = 2.0 * float(radius_mm)
    for _ in range(max_sweeps):
        diff = p[None, :, :] - p[:, None, :]
        dist = np.hypot(diff[..., 0], diff[..., 1])
        ii, jj = np.nonzero(np.triu((dist < d2 - tol_mm) & (dist > min_distance_frac * d2), 1))
        pairs = [(i, j) for i, j in zip(ii, jj) if mov[i] or mov[j]]
        if not pairs:
            break
        for i, j in pairs:
            v = p[j] - p[i]
            d = float(np.hypot(*v))
            if d >= d2 - tol_mm or d <= min_distance_frac * d2:
                continue
            u = v / d
            si, sj = S[i] @ u, S[j] @ u
            w = float(u @ si + u @ sj)
            if w <= 0.0:
                continue
            lam = (d2 - d) / w
            p[i] -= lam * si
            p[j] += lam * sj
    return p
