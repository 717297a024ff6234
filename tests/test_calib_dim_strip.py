"""Nose edges on dim, noisy cloth: profiles averaged along the edge (tracking/_table_edges.noise_strip_px).

Sensor noise is fixed in DN, so at a dim cushion the per-profile step sinks
into it; averaging n independent pixels along the edge divides the noise by
sqrt(n) (the standard error of a mean). Reference: a straight edge drawn as
the closed form of a Gaussian-blurred step, 0.5 * (1 + erf(x / (s sqrt 2)))
(scipy.special.ndtr), at a known sub-pixel position, with seeded Gaussian
noise (numpy). Scenario and numbers are our own; seeds chosen before running.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.special import ndtr

from tracking._table_edges import edge_points_along, noise_strip_px
from tracking.settings import CalibrationSettings

EDGE_X = 150.3  # px, where the cloth (left) meets the cushion top (right)


def _dim_edge(seed: int, noise_dn: float) -> np.ndarray:
    """A 300 x 400 px grey image: cloth 30 DN, cushion top 45 DN beyond x = EDGE_X, blur 1 px, noise."""
    x = np.arange(300, dtype=float)[None, :]
    img = 30.0 + 15.0 * ndtr((x - EDGE_X) / 1.0)
    img = np.repeat(img, 400, axis=0)
    img += np.random.default_rng(seed).normal(0.0, noise_dn, img.shape)
    return img.astype(np.float32)


def _points(img: np.ndarray, settings: CalibrationSettings):
    p0, p1 = np.array([EDGE_X - 20.0, 20.0]), np.array([EDGE_X - 20.0, 380.0])  # a provisional line 20 px inward
    found, _, _ = edge_points_along(img, p0, p1, np.array([1.0, 0.0]), [(0.0, 1.0)], 60.0, 80.0, 20.0, settings,
                                    rough_line=True)
    return found, int(np.linalg.norm(p1 - p0) / settings.profile_spacing_px)


@pytest.mark.parametrize("seed", [31, 32])
def test_dim_noisy_edge_found_with_grown_strip(seed):
    s = CalibrationSettings()
    img = _dim_edge(seed, noise_dn=5.0)
    fixed = dataclasses.replace(s, profile_strip_max_px=s.profile_strip_px)
    f_fixed, n = _points(img, fixed)
    f_grown, _ = _points(img, s)
    # the fixed 1.5 px strip misses most profiles at this noise; the grown one finds most
    assert len(f_grown) >= 0.6 * n, (len(f_grown), n)
    assert len(f_grown) >= 1.5 * len(f_fixed), (len(f_grown), len(f_fixed))
    # and they lie on the true edge (sub-pixel): median within 0.25 px, 90 % within 1 px
    d = f_grown[:, 0] - EDGE_X
    assert abs(np.median(d)) < 0.25, np.median(d)
    assert np.mean(np.abs(d) < 1.0) > 0.9, np.percentile(np.abs(d), [50, 90])


def test_strip_stays_short_on_clean_cloth_and_grows_as_noise_squared():
    """Low noise: the base strip. Noise x2 -> strip x4 (n ~ noise^2), until the cap."""
    s = dataclasses.replace(CalibrationSettings(), profile_strip_max_px=100.0)
    rng = np.random.default_rng(33)
    step = s.profile_step_px
    base = 30.0 + np.zeros((200, 160))
    cols = slice(0, 160)
    assert noise_strip_px(base + rng.normal(0, 0.05, base.shape), cols, step, s) == s.profile_strip_px
    # white noise per sample; the derivative noise then scales with it exactly
    a = noise_strip_px(base + rng.normal(0, 2.0, base.shape), cols, step, s)
    b = noise_strip_px(base + rng.normal(0, 4.0, base.shape), cols, step, s)
    assert a > s.profile_strip_px
    assert b / a == pytest.approx(4.0, rel=0.1)
