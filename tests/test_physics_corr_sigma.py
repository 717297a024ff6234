"""Fit sigmas with frame-to-frame correlated detection errors (physics.segments).

Outside references: the integrated autocorrelation time of an AR(1) series with coefficient phi
is (1 + phi) / (1 - phi) (standard time-series result, e.g. Box & Jenkins, Time Series Analysis,
ch. 3; the variance of a mean of n such samples is tau sigma^2 / n for large n), and the initial
positive sequence estimator is Geyer's (Statistical Science 7:473, 1992). The motion is the
closed-form roll of REFERENCES.md (constant deceleration mu_r g along the velocity).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from feltlab.standards import G_MM_S2
from physics.segments import ChainLayout, fit_chain, integrated_autocorr_time
from physics.settings import PhysicsSettings


def _ar1(rng: np.random.Generator, n: int, phi: float, sigma: float) -> np.ndarray:
    """AR(1) series with marginal standard deviation ``sigma``."""
    e = rng.normal(0.0, sigma * np.sqrt(1.0 - phi**2), n)
    x = np.empty(n)
    x[0] = rng.normal(0.0, sigma)
    for i in range(1, n):
        x[i] = phi * x[i - 1] + e[i]
    return x


def test_autocorr_time_matches_the_ar1_closed_form():
    rng = np.random.default_rng(11)
    for phi in (0.0, 0.5, 0.7):
        series = [_ar1(rng, 4000, phi, 1.0) for _ in range(5)]
        tau = integrated_autocorr_time(series, max_lag=200)
        expect = (1 + phi) / (1 - phi)
        assert abs(tau - expect) < 0.12 * expect, (phi, tau, expect)


def test_velocity_sigma_covers_correlated_errors():
    """A ball rolling at 900 mm/s (mu_r = 0.01) seen at 120 fps for 0.6 s with AR(1) position
    errors (phi = 0.6: tau = 4, marginal 0.4 mm, stated sigma 0.4 mm). Over 60 noise draws the
    fitted start velocity's error in units of its reported sigma must have a spread near 1
    (0.7-1.35) with the inflation, and near sqrt(tau) = 2 without it (> 1.45)."""
    fps, v, phi, sig = 120.0, 900.0, 0.6, 0.4
    t = np.arange(0.0, 0.6, 1 / fps)
    a = 0.01 * G_MM_S2
    x = 300.0 + v * t - 0.5 * a * t**2
    lay = ChainLayout("cue", 0.0, False, [], np.array([]), np.array([]), np.array([]))
    s_on = PhysicsSettings()
    s_off = replace(s_on, residual_corr_inflation=False)
    rng = np.random.default_rng(3)
    z_on, z_off = [], []
    for _ in range(60):
        xy = np.column_stack([x + _ar1(rng, len(t), phi, sig), 500.0 + _ar1(rng, len(t), phi, sig)])
        sg = np.full_like(xy, sig)
        for s, out in ((s_on, z_on), (s_off, z_off)):
            f = fit_chain(t, xy, sg, lay, s)
            out.append((f.x[2] - v) / np.sqrt(f.cov[2, 2]))
    assert 0.7 < np.std(z_on) < 1.35, np.std(z_on)
    assert np.std(z_off) > 1.45, np.std(z_off)
