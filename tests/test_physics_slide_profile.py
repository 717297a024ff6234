"""physics.slide_profile: e's sigma after a slide that ends between two samples.

Checks against closed forms only: the covariance of a Gaussian given some of its variables (the
Schur complement, equal to the inverse of the precision matrix's block; K. B. Petersen and
M. S. Pedersen, The Matrix Cookbook, sections 8.1.3 and 9.1.3, from memory), the moments of a
uniform and of a normal distribution, and the closed-form head-on stun shot of
tests/test_physics_sigma_calibration.py (momentum and Newton's restitution for equal spheres).
"""
from __future__ import annotations

import numpy as np

from physics.slide_profile import _profile_mse, conditional_cov


def test_conditional_cov_is_the_inverse_of_the_precision_block():
    """C given x_h = inverse of (C^-1) restricted to the other variables (Schur complement)."""
    rng = np.random.default_rng(15)
    A = rng.normal(size=(6, 6))
    C = A @ A.T + 0.1 * np.eye(6)
    hold = [1, 4]
    rest = [0, 2, 3, 5]
    got = conditional_cov(C, hold)
    want = np.linalg.inv(np.linalg.inv(C)[np.ix_(rest, rest)])
    np.testing.assert_allclose(got[np.ix_(rest, rest)], want, rtol=1e-9, atol=1e-12)
    # a held variable has no variance left and no covariance with the rest
    np.testing.assert_allclose(got[hold, :], 0.0, atol=1e-12)


def test_profile_mse_flat_and_gaussian():
    """Flat profile of e = t over [-1, 1]: E[e^2] = 1/3 (uniform). dchi2 = (t / s)^2 with e = t:
    E[e^2] = s^2 (normal, the grid wide enough). About a shifted e0: variance + shift^2."""
    t = np.linspace(-1.0, 1.0, 401)
    assert abs(_profile_mse(t, np.zeros_like(t), list(t), 0.0) - 1.0 / 3.0) < 1e-4
    s = 0.2
    assert abs(_profile_mse(t, (t / s) ** 2, list(t), 0.0) - s**2) < 1e-4
    assert abs(_profile_mse(t, (t / s) ** 2, list(t), 0.1) - (s**2 + 0.1**2)) < 1e-4


def test_stun_shot_with_a_slide_between_two_samples_is_measured():
    """Draw 13 of the stun shot at 120 fps (cue ball leaves at 35 mm/s and slides 5 ms, between
    two samples): e was left empty (linearised sigma 0.87 > 0.5). Now e is reported, its sigma
    below 0.1 and the truth within 2 sigma (standard normal table: 95 %)."""
    from test_physics_sigma_calibration import M, NOISE_MM, R, TABLE, head_on  # tests/ is on sys.path
    from physics.pipeline import analyze_tracks, tables_from_positions

    fps = 120.0
    rng = np.random.default_rng([13, int(fps)])
    v_c, e = rng.uniform(500.0, 1500.0), rng.uniform(0.90, 0.97)
    t, pos = head_on("stun", v_c, e, fps, rng.uniform())
    tracks, det = tables_from_positions(t, pos, NOISE_MM, rng, fps)
    c = analyze_tracks(tracks, det, TABLE, R, M, fps).contacts
    c = c[c.kind == "ball-ball"]
    assert len(c) == 1
    row = c.iloc[0]
    assert np.isfinite(row.e), f"e left empty: {row.note}"
    assert float(row.e_sigma) < 0.1, f"e_sigma {float(row.e_sigma):.3f}"
    # truth: closed-form head-on impact (tests/test_physics_sigma_calibration.py docstring)
    assert abs(float(row.e) - e) < 2.0 * float(row.e_sigma), (float(row.e), e, float(row.e_sigma))
