"""Covariance of a chain fit where the samples leave directions undetermined
(physics.segments.bounded_cov), the cushion touch prior (touch_residuals) and ordered breaks
(_bounds).

References: a least-squares fit's covariance is k (J^T J)^-1 (Gauss-Markov; checked against
numpy.linalg.inv on a full-rank Jacobian); a uniform distribution over a width w has variance
w^2 / 12 (standard result, any statistics handbook).
"""
from __future__ import annotations

import numpy as np

from physics.segments import ChainLayout, _bounds, bounded_cov, touch_residuals
from physics.settings import PhysicsSettings

S = PhysicsSettings()


def test_full_rank_keeps_least_squares_covariance():
    """Well-measured parameters keep k (J^T J)^-1 exactly (numpy.linalg.inv as the reference)."""
    rng = np.random.default_rng(5)
    J = rng.normal(size=(40, 4)) * np.array([1.0, 30.0, 0.2, 5.0])
    d = np.linalg.norm(J, axis=0)
    C = bounded_cov(J / d, d, 2.5, np.full(4, 1e6))
    np.testing.assert_allclose(C, 2.5 * np.linalg.inv(J.T @ J), rtol=1e-9, atol=1e-15)


def test_unmeasured_parameter_gets_its_range_not_zero():
    """x1 does not enter the residuals at all: numpy's pseudo-inverse gives it variance 0; here it
    is spread uniformly over its range (w^2 / 12), and x0 keeps k / (J^T J)_00."""
    J = np.array([[2.0, 0.0], [1.0, 0.0], [0.0, 0.0]])
    assert np.linalg.pinv(J.T @ J)[1, 1] == 0.0  # the failure being fixed
    d = np.array([np.sqrt(5.0), 1.0])
    C = bounded_cov(J / d, d, 1.0, np.array([100.0, 3.0]))
    np.testing.assert_allclose(np.diag(C), [1.0 / 5.0, 3.0**2 / 12.0], rtol=1e-12)


def test_weak_direction_capped_by_range():
    """A direction measured far worse than its range allows gets the range's variance."""
    J = np.array([[1.0, 0.0], [0.0, 1e-4]])
    C = bounded_cov(J, np.ones(2), 1.0, np.array([1e3, 6.0]))
    np.testing.assert_allclose(np.diag(C), [1.0, 36.0 / 12.0], rtol=1e-12)


def _layout(touch):
    return ChainLayout("cue", 0.0, False, ["ball-cushion"], np.array([0.5]), np.array([0.01]),
                       np.array([0.004]), touch_lines=touch)


def test_touch_residual_one_sided():
    """Rolling in along -y at 700 mm/s towards the y0 nose line (touch at y = 27.45 mm): a break at
    the sample where the centre is still 2 mm away costs 2 / touch_sigma; one 1 mm past the touch
    (cushion compressed) costs nothing."""
    D = 27.45
    lay = _layout([((0.0, 1.0, D),)])
    x = np.zeros(lay.n_par)
    x[0:2] = [500.0, D + 2.0 + 700.0 * 0.5]  # at t = 0.5 s the centre is 2 mm short of the touch
    x[2:4] = [0.0, -700.0]
    x[8:10] = [0.0, 500.0]
    x[lay.break_offset] = 0.5
    r = touch_residuals(x, lay, S)
    np.testing.assert_allclose(r, [2.0 / S.touch_sigma_mm], rtol=1e-9)
    x[lay.break_offset] = 0.5 + 3.0 / 700.0  # 3 mm further on: 1 mm past the touch
    assert touch_residuals(x, lay, S)[0] == 0.0


def test_overlapping_break_ranges_split_halfway():
    """Two breaks 5 ms apart, each free by +-4 ms: their ranges meet halfway (2.5 ms), so the fit
    cannot put them in reverse order; a lone break keeps its range."""
    lay = ChainLayout("cue", 0.0, False, ["ball-cushion", "ball-cushion"], np.array([0.5, 0.505]),
                      np.array([0.004, 0.004]), np.array([0.004, 0.004]))
    lo, hi = _bounds(lay, 1.0, S)
    b = lay.break_offset
    np.testing.assert_allclose([lo[b], hi[b], lo[b + 1], hi[b + 1]], [0.496, 0.5025, 0.5025, 0.509])
    lay1 = _layout(None)
    lo1, hi1 = _bounds(lay1, 1.0, S)
    np.testing.assert_allclose([lo1[lay1.break_offset], hi1[lay1.break_offset]], [0.49, 0.51])
