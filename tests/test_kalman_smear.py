"""Honest measurement noise for smeared (motion-blurred) balls and for resting balls.

Checks against closed forms and the generating distributions of simulated data:
the uniform-distribution variance L^2/12 (scipy.stats.uniform), covariance
matching of second differences (the simulation's own noise parameter), and the
normalised estimation error squared of a consistent estimator (mean 1 per axis;
Bar-Shalom, Li & Kirubarajan, Estimation with Applications to Tracking and
Navigation, Wiley 2001, sec. 5.4).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from tracking.kalman import as_cov, smear_cov, smear_scale
from tracking.pipeline import detection_velocity, measurement_cov, smooth_ball
from tracking.settings import TrackingSettings


def test_smear_cov_is_uniform_variance_along_motion():
    """A uniform smear of length L = |v| T has variance L^2/12 along v and none across."""
    v = np.array([[1200.0, -500.0], [0.0, 0.0]])
    T = 0.02
    C = smear_cov(v, T)
    L = np.hypot(*v[0]) * T
    ev, evec = np.linalg.eigh(C[0])
    # variance of the uniform distribution on an interval of length L (scipy.stats.uniform)
    assert ev[1] == pytest.approx(stats.uniform(loc=-L / 2, scale=L).var(), rel=1e-9)
    assert ev[0] == pytest.approx(0.0, abs=1e-9)
    assert abs(evec[:, 1] @ (v[0] / np.hypot(*v[0]))) == pytest.approx(1.0, abs=1e-9)  # along the motion
    assert np.all(C[1] == 0.0)  # a ball at rest does not smear


def _blurred_tracks(rng, n_tracks, c_s2, base_mm, fps=30.0, n=40, jump=False):
    """Constant-velocity balls with along-motion noise variance base^2 + c |v|^2 (our simulation)."""
    out = []
    for _ in range(n_tracks):
        sp = rng.uniform(500, 3000)
        a = rng.uniform(0, 2 * np.pi)
        v = sp * np.array([np.cos(a), np.sin(a)])
        t = np.arange(n) / fps
        truth = np.array([400.0, 300.0]) + t[:, None] * v
        if jump:  # a contact halfway: the velocity turns by 60 degrees
            k = n // 2
            rot = np.array([[0.5, -np.sqrt(3) / 2], [np.sqrt(3) / 2, 0.5]])
            truth[k:] = truth[k - 1] + (t[k:, None] - t[k - 1]) * (rot @ v)
        vel = np.gradient(truth, t, axis=0)
        u = vel / np.linalg.norm(vel, axis=1, keepdims=True)
        along = rng.normal(0, 1, n) * np.sqrt(base_mm ** 2 + c_s2 * np.sum(vel ** 2, axis=1))
        across = rng.normal(0, base_mm, n)
        z = truth + along[:, None] * u + across[:, None] * np.column_stack([-u[:, 1], u[:, 0]])
        out.append((t, z, truth, np.full((n, 2), base_mm)))
    return out


def test_smear_scale_recovers_the_simulated_blur():
    """Covariance matching returns the c the data were made with (within the estimate's own scatter),
    leaves out contacts, returns ~0 for unblurred data and never exceeds the cap."""
    rng = np.random.default_rng(11)
    c_true = 0.3 / 12.0 / 30.0 ** 2  # 30% of a full-frame shutter's smear length at 30 fps
    cap = 1.0 / 12.0 / 30.0 ** 2
    tracks = _blurred_tracks(rng, 40, c_true, 0.5, jump=True)
    c = smear_scale([(t, z, as_cov(s)) for t, z, _, s in tracks], cap)
    # 40 x 38 triples: relative standard error of a mean of chi-square(1) terms ~ sqrt(2/1500) ~ 4%,
    # plus correlated neighbours; 15% is ~3 standard errors
    assert c == pytest.approx(c_true, rel=0.15)
    sharp = _blurred_tracks(rng, 40, 0.0, 0.5)
    assert smear_scale([(t, z, as_cov(s)) for t, z, _, s in sharp], cap) < 0.02 * cap
    assert smear_scale([(t, z, as_cov(s)) for t, z, _, s in tracks], 0.5 * c_true) == 0.5 * c_true


def test_smoothed_blurred_track_sigmas_are_honest():
    """With the smear in the measurement noise the RTS-smoothed positions' sx, sy match their errors
    (mean normalised squared error per axis ~1, Bar-Shalom et al. 2001 sec. 5.4); with the
    detector's sigma alone they are overconfident by far."""
    rng = np.random.default_rng(5)
    s = TrackingSettings()
    c_true = 0.5 / 12.0 / 30.0 ** 2
    tracks = _blurred_tracks(rng, 60, c_true, 0.6)
    c_est = smear_scale([(t, z, as_cov(sg)) for t, z, _, sg in tracks], 1.0 / 12.0 / 30.0 ** 2)
    z2_honest, z2_plain = [], []
    for t, z, truth, sg in tracks:
        frames = np.arange(len(t))
        # the plain case without the per-ball scatter scale (test_track_scatter_scale.py), which would
        # make up part of the missing smear isotropically
        for cov, acc, ss in ((measurement_cov(t, z, sg, c_est), z2_honest, s),
                             (None, z2_plain, replace(s, scatter_scale=False))):
            rows, _, _ = smooth_ball(frames, t, z, sg, t, set(), ss, cov=cov)
            e = np.column_stack([rows["x_mm"], rows["y_mm"]]) - truth
            acc.extend(((e[:, 0] / rows["sx_mm"]) ** 2 + (e[:, 1] / rows["sy_mm"]) ** 2) / 2)
    # 60 tracks of strongly correlated smoothed errors: ~100 effective samples, 0.7-1.4 is a wide band
    assert 0.7 < np.mean(z2_honest) < 1.4
    assert np.mean(z2_plain) > 3.0


def test_detection_velocity_central_differences():
    """Central differences are exact on a straight line at constant speed (finite-difference formula)."""
    t = np.array([0.0, 0.01, 0.03, 0.04])
    z = np.column_stack([5 + 300 * t, 2 - 100 * t])
    assert np.allclose(detection_velocity(t, z), [[300.0, -100.0]] * 4)


def test_resting_ball_sigma_keeps_the_detector_model_error():
    """A still ball's position error has a part fixed for the whole rest (shading, shadow) that
    averaging does not remove: over many balls the rest average's error must match its sigma
    (mean normalised squared error ~1; Bar-Shalom et al. 2001 sec. 5.4), not be n times larger."""
    rng = np.random.default_rng(3)
    s = TrackingSettings()
    n, fixed_sd, random_sd = 60, 0.5, 0.2
    z2 = []
    for _ in range(300):
        truth = rng.uniform(100, 900, 2)
        z = truth + rng.normal(0, fixed_sd, 2) + rng.normal(0, random_sd, (n, 2))
        t = np.arange(n) / 60.0
        sig = np.full((n, 2), np.hypot(fixed_sd, random_sd))  # the detector's total sigma
        rows, segs, _ = smooth_ball(np.arange(n), t, z, sig, t, set(), s)
        assert [k for *_, k in segs] == ["rest"]
        e = np.array([rows["x_mm"][0], rows["y_mm"][0]]) - truth
        z2.append(np.mean((e / [rows["sx_mm"][0], rows["sy_mm"][0]]) ** 2))
    # 600 chi-square(1) terms: mean 1 +/- 0.06 (1 sigma); 0.8-1.25 is > 3 sigma
    assert 0.8 < np.mean(z2) < 1.25


def test_point_after_a_contact_flagged_as_outlier_is_given_back_to_the_new_motion():
    """Straight-line motion before and after a contact between frames 10 and 11 (closed form).
    If the frame-11 point was flagged an outlier with the cut at frame 12, it is the new motion's
    first point (it lies on the new line, within the chi-square(2) 99% point 9.21); a point off
    both lines stays an outlier."""
    from tracking.kalman import _reclaim_outliers

    t = np.arange(30) / 30.0
    tc = 10.5 / 30
    v1, v2 = np.array([1200.0, 660.0]), np.array([210.0, 730.0])
    pos = np.where(t[:, None] < tc, v1 * t[:, None], v1 * tc + v2 * (t[:, None] - tc))
    R = as_cov(np.full((30, 2), 0.6))
    s = TrackingSettings()
    segs, out = [(0, 12), (12, 30)], np.zeros(30, bool)
    out[11] = True
    _reclaim_outliers(t, pos, R, segs, out, s.accel_sigma_mm_s2)
    assert segs == [(0, 11), (11, 30)] and not out.any()
    bad = pos.copy()
    bad[11] += [0.0, 25.0]  # a wrong detection: 25 mm off the new line
    segs, out = [(0, 12), (12, 30)], np.zeros(30, bool)
    out[11] = True
    _reclaim_outliers(t, bad, R, segs, out, s.accel_sigma_mm_s2)
    assert segs == [(0, 12), (12, 30)] and out[11]
