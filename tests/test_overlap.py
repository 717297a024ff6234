"""Touching balls pushed apart to one diameter (tracking/overlap.py).

Checks: the closed-form two-ball solution of equality-constrained weighted
least squares (Lagrange multipliers), scipy.optimize's SLSQP as an
independent solver on a jittered rack, and hypothesis properties (every
constraint met, fixed detections unmoved, duplicates left alone).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize

from tracking.overlap import separate_overlaps

R = 28.575  # pool ball radius, mm (WPA: 2.25 in diameter)


def test_two_balls_move_in_proportion_to_their_variance_along_the_line_of_centres():
    # Closed form: D_i = -lam S_i n, D_j = lam S_j n, lam = delta / (n'S_i n + n'S_j n).
    p = np.array([[0.0, 0.0], [55.0, 0.0]])
    S = np.array([np.diag([0.09, 1.0]), np.diag([0.01, 1.0])])  # along x: 0.3 mm vs 0.1 mm
    q = separate_overlaps(p, S, R)
    delta = 2 * R - 55.0
    lam = delta / (0.09 + 0.01)
    assert q[0] == pytest.approx([-lam * 0.09, 0.0], abs=1e-9)
    assert q[1] == pytest.approx([55.0 + lam * 0.01, 0.0], abs=1e-9)
    assert np.hypot(*(q[1] - q[0])) == pytest.approx(2 * R, abs=1e-9)


def test_jittered_rack_matches_an_independent_constrained_solver():
    # A 10-ball triangle with 0.4 mm of detection noise; compare the adjusted
    # centres' weighted misfit with scipy's SLSQP on the same problem.
    rng = np.random.default_rng(3)
    d = 2 * R
    P = np.array([[r * d * np.sqrt(3) / 2, (j - r / 2) * d] for r in range(4) for j in range(r + 1)])
    m = P + rng.normal(0, 0.4, P.shape)
    S = np.array([np.eye(2) * s ** 2 for s in rng.uniform(0.2, 0.6, len(P))])
    q = separate_overlaps(m, S, R)
    iu = np.triu_indices(len(P), 1)

    def cost(x):
        e = x.reshape(-1, 2) - m
        return float(np.einsum("ni,nij,nj->", e, np.linalg.inv(S), e))

    def gaps(x):
        x = x.reshape(-1, 2)
        diff = x[:, None] - x[None]
        return np.hypot(diff[..., 0], diff[..., 1])[iu] - d

    ref = minimize(cost, m.ravel(), constraints=[{"type": "ineq", "fun": gaps}], method="SLSQP",
                   options={"maxiter": 500, "ftol": 1e-12})
    assert ref.success
    assert gaps(q.ravel()).min() > -0.01  # mm: 10 um, far below any detection error
    assert cost(q.ravel()) <= 1.25 * ref.fun + 1e-6  # cyclic projection: near the optimum, not exact
    assert np.abs(q - ref.x.reshape(-1, 2)).max() < 0.25  # mm


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 300), st.floats(0, 300)), min_size=2, max_size=8),
       st.lists(st.booleans(), min_size=8, max_size=8))
def test_constraints_met_fixed_points_kept_duplicates_left(pts, fixed_flags):
    p = np.array(pts, float)
    n = len(p)
    mov = ~np.array(fixed_flags[:n])
    S = np.array([np.eye(2) * 0.04] * n)
    q = separate_overlaps(p, S, R, movable=mov, max_sweeps=400)
    assert np.allclose(q[~mov], p[~mov])
    diff0 = p[:, None] - p[None]
    d0 = np.hypot(diff0[..., 0], diff0[..., 1])
    diff = q[:, None] - q[None]
    d1 = np.hypot(diff[..., 0], diff[..., 1])
    for i in range(n):
        for j in range(i + 1, n):
            if d0[i, j] <= R:  # a duplicate (closer than half a diameter... of 2R): untouched pair
                continue
            if not (mov[i] or mov[j]):
                continue
            if d1[i, j] <= R:  # pushed into another pair's duplicate zone: not constrained any more
                continue
            assert d1[i, j] >= 2 * R - 1e-2 or d0[i, j] >= 2 * R


def test_frame_of_detections_is_separated_and_left_alone_when_apart():
    import pandas as pd

    from tracking.pipeline import separate_detections

    det = pd.DataFrame({"x_mm": [100.0, 156.0, 400.0], "y_mm": [50.0, 50.0, 50.0],
                        "sx_mm": [0.2, 0.2, 0.2], "sy_mm": [0.2, 0.2, 0.2], "colour": ["a", "b", "c"]})
    out = separate_detections(det, R)
    assert out["x_mm"].tolist() == pytest.approx([100.0 - 0.575, 156.0 + 0.575, 400.0])
    assert out["colour"].tolist() == ["a", "b", "c"] and det["x_mm"].tolist() == [100.0, 156.0, 400.0]
    apart = det.assign(x_mm=[100.0, 160.0, 400.0])
    assert separate_detections(apart, R) is apart
