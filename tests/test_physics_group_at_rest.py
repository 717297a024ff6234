"""Group totals of a compound contact whose balls were all at rest before it.

Momentum conservation (closed form: p = sum m v, table frame) gives a residual |p_out - p_in| as a
fraction of p_in; a group moved only by a neighbouring group's touches brings in no momentum, so
that fraction does not exist and must be NaN, never a huge number (a rack break had printed
2.3e15 %). A group that brings momentum in keeps its measured residual.
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from physics.compound import annotate_groups
from physics.events import ContactCandidate

M = 0.163  # kg, pool ball (WPA, 5.5-6 oz; common practice value)


class _Fit:
    """A fitted chain with one break: parameters are (v_before, v_after) in mm/s, known covariance."""

    def __init__(self, v0, v1, sd=2.0):
        self.x = np.array([*v0, *v1], float)
        self.cov = np.eye(4) * sd**2
        self.layout = SimpleNamespace(n_seg=2)

    def at_break(self, i, z):
        return None, None, np.asarray(z[:2]), np.asarray(z[2:])


def _annotate(v_before: dict, v_after: dict):
    cand = ContactCandidate(kind="ball-ball", ball_a="a", ball_b="b", cushion="", t_init_s=0.5,
                            normal=np.array([1.0, 0.0]), gap_mm=0.0, z=10.0, group=1)
    fits = {b: _Fit(v_before[b], v_after[b]) for b in ("a", "b")}
    maps = {b: ({0: 0},) for b in ("a", "b")}
    contacts = pd.DataFrame([dict(contact=0, ball_a="a", ball_b="b", nx=1.0, ny=0.0, _cand=0)])
    return annotate_groups(contacts, [cand], fits, maps, M).iloc[0]


def test_group_at_rest_before_has_no_momentum_fraction():
    r = _annotate({"a": (0.0, 0.0), "b": (0.0, 0.0)}, {"a": (-40.0, 5.0), "b": (120.0, -70.0)})
    assert np.isnan(r.group_momentum_residual_pct) and np.isnan(r.group_momentum_residual_sigma_pct)
    assert r.group_px_in_Ns == 0.0 and r.group_px_out_Ns == pytest.approx(M * 80.0e-3)
    assert np.isnan(r.group_ke_loss_frac) and np.isnan(r.group_ke_loss_sigma_frac)


def test_group_with_momentum_in_keeps_its_residual():
    # head-on, equal masses, e = 0.9: closed form v_a' = 0.05 v, v_b' = 0.95 v; b's measured speed
    # after is 20 mm/s short (a 1 % momentum residual)
    r = _annotate({"a": (2000.0, 0.0), "b": (0.0, 0.0)}, {"a": (100.0, 0.0), "b": (1880.0, 0.0)})
    assert r.group_momentum_residual_pct == pytest.approx(1.0)
    # sigma: sqrt(4 variances of 2 mm/s) / 2000 mm/s (closed-form propagation)
    assert r.group_momentum_residual_sigma_pct == pytest.approx(100 * 4.0 / 2000.0)
    ke0, ke1 = 0.5 * M * 2.0**2, 0.5 * M * (0.1**2 + 1.88**2)
    assert r.group_ke_loss_frac == pytest.approx(1 - ke1 / ke0)
