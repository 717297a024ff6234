"""Vertical ball-ball friction at a contact: the slip shift's sign (physics.pipeline._vertical_slip).

Closed forms (classical rigid-body results for a uniform solid sphere, I = 2/5 m R^2, as in
tests/test_slip_continuity.py):

* cloth slip u = v + omega x (-R z_hat); while sliding u = -(7/2) a (t_roll - tau), 0 once rolling;
* a frictionless contact of equal balls at centre height changes v by dv and leaves the slip
  u' = u + dv;
* the contact points of two equal balls meeting at centre height move vertically at
  (u_a - v_a).n + (u_b - v_b).n relative to each other (a drawing cue ball's contact point moves
  up: s_z > 0). Coulomb friction mu_bb there gives a vertical impulse p_z = -sign(s_z) min(mu_bb
  J_n, m |s_z| / 5) (the second term: sticking, both balls' contact points then move alike), which
  turns both balls about the horizontal axis z x n and shifts both slips by X n with
  X = (5/2) p_z / m. So u_a' = u_a + dv_a + X n and u_b' = dv_b + X n.

"""
from __future__ import annotations

import numpy as np

from physics.pipeline import _vertical_slip
from physics.segments import ChainFit, ChainLayout, slip_velocity

N_HAT = np.array([-0.76, 0.65]) / np.hypot(-0.76, 0.65)


def _chain(v0, a0, t_roll0, v1, a1, t_roll1, t_break=0.24):
    """A two-segment chain (ball-ball break at ``t_break`` s) with a small diagonal covariance."""
    lay = ChainLayout("cue", 0.0, False, ["ball-ball"], np.array([t_break]), np.array([1 / 120]),
                      np.array([0.0006]))
    x = np.concatenate([[1000.0, 600.0], v0, a0, [t_roll0, 80.0], v1, a1, [t_roll1, 80.0], [t_break]])
    cov = np.diag(np.full(len(x), 1e-4))
    t = np.linspace(0, 0.6, 10)
    return ChainFit(lay, x, cov, 0.3, 10, 1.0, t, np.zeros((10, 2)), np.ones(10, bool))


def test_rolled_in_fit_that_its_after_slide_contradicts_takes_the_after_estimate():
    """Segment before rolls over 0.03 s before the break (slip 0 there), but the slide after
    (u_start = -(7/2) a1 t_roll1) says the ball brought slip u_start - dv in (frictionless
    continuity, module docstring). The vertical slip must be that after estimate, with its sign:
    (u_start - dv - v_end) . n, not (0 - v_end) . n of the roll."""
    v0, a0, tr0 = np.array([-3000.0, -1250.0]), np.array([2300.0, 950.0]), 0.21  # rolls at 0.21 s
    v1, a1, tr1 = np.array([-1510.0, -1750.0]), np.array([1900.0, 1530.0]), 0.45
    f = _chain(v0, a0, tr0, v1, a1, tr1)
    v_end = v0 + a0 * tr0 - 80.0 * 0.03 * (v0 + a0 * tr0) / np.hypot(*(v0 + a0 * tr0))
    u_start = slip_velocity(v1, a1, tr1, 0.0)
    after = float((u_start - (v1 - v_end) - v_end) @ N_HAT)
    rolled = float(-v_end @ N_HAT)
    assert np.sign(after) != np.sign(rolled)  # the case this guards: the roll turns the sign round
    got = _vertical_slip(f, 0, N_HAT, 100.0, 3.0, 3)
    assert abs(got - after) < 1e-6 * abs(after), (got, after, rolled)


def test_rolled_in_fit_that_its_after_slide_confirms_is_kept():
    """A ball truly rolling into the contact leaves with slip dv (frictionless continuity). Its
    fitted roll-over falls between the last samples before the break (no sample in the roll
    phase, so the after estimate is consulted): it agrees with the roll's, and the roll's exact
    value is kept."""
    v0, a0, tr0 = np.array([-2000.0, -500.0]), np.zeros(2), 0.21  # a slide without deceleration
    v_end = v0 - 80.0 * 0.03 * v0 / np.hypot(*v0)
    v1 = np.array([-900.0, -1300.0])
    dv = v1 - v_end
    us = float(np.hypot(*dv))
    tr1 = 0.3
    a1 = -dv / (3.5 * tr1)  # u_start = -(7/2) a1 t_roll1 = dv
    f = _chain(v0, a0, tr0, v1, a1, tr1)
    got = _vertical_slip(f, 0, N_HAT, 100.0, 3.0, 3)
    assert us > 100.0
    assert abs(got - float(-v_end @ N_HAT)) < 1e-9, got


