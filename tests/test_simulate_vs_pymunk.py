"""The simulator's contact laws against pymunk, an independent general 2-D physics engine.

pymunk (PyPI; Chipmunk2D underneath) resolves contacts with an impulse solver:
restitution and Coulomb friction at the contact point, where a contact's
elasticity and friction are the *products* of the two shapes' values (pymunk
docs, Shape.elasticity / Shape.friction), so the second shape is given 1.0.

The comparison is a top view: pymunk's discs turn about the vertical axis, so
they stand in for our balls' side spin (wz) with the solid-sphere moment of
inertia 2/5 m R^2 passed in. Our cloth friction is switched off (pymunk has no
cloth), the cue ball carries no top/back spin (which pymunk cannot represent)
and the cushion contact is put at the ball-centre height (h = R) so its
impulse is horizontal. pymunk integrates in finite steps and iterates its
solver, so velocities are compared within 0.2% of the incoming speed (the
residual of Chipmunk's iterative solver and penetration handling; measured
here at < 0.04%).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

pymunk = pytest.importorskip("pymunk")

from physics.simulate import BallInit, SimParams, simulate  # noqa: E402

R = 57.15 / 2.0
M = 0.163
I_SPHERE = 0.4 * M * R * R  # solid sphere, kg mm^2 (handbook)
TOL = 2e-3  # fraction of the incoming speed


def _pm_ball(space, x, y, vx, vy, wz, e, mu):
    body = pymunk.Body(M, I_SPHERE)
    body.position = (x, y)
    body.velocity = (vx, vy)
    body.angular_velocity = wz
    shape = pymunk.Circle(body, R)
    shape.elasticity = e
    shape.friction = mu
    space.add(body, shape)
    return body


def _space():
    space = pymunk.Space()
    space.gravity = (0.0, 0.0)
    space.iterations = 50
    space.collision_slop = 1e-4
    return space


def _run(space, t_end, dt=2e-5):
    for _ in range(int(round(t_end / dt))):
        space.step(dt)


@pytest.mark.parametrize("cut", [0.0, 20.0, 45.0, 70.0])
@pytest.mark.parametrize("e", [1.0, 0.93])
@pytest.mark.parametrize("mu, wz", [(0.0, 0.0), (0.06, 0.0), (0.06, 60.0), (0.2, -40.0)])
def test_ball_ball_matches_pymunk(cut, e, mu, wz):
    """Post-contact velocities and side spins of both balls agree with pymunk."""
    v = 2000.0
    phi = math.radians(cut)
    xa, ya = 1000.0, 2000.0
    xb, yb = xa + 200.0, ya + 2 * R * math.sin(phi)
    params = SimParams(length_mm=5000.0, width_mm=4000.0, e_ball_ball=e, mu_ball_ball=mu,
                       mu_slide=0.0, mu_spin=0.0)
    res = simulate([BallInit("cue", xa, ya, v, 0.0, wz=wz), BallInit("obj", xb, yb)], params, 0.2)
    c = next(c for c in res.contacts if c.kind == "ball-ball")

    space = _space()
    a = _pm_ball(space, xa, ya, v, 0.0, wz, e, mu)
    b = _pm_ball(space, xb, yb, 0.0, 0.0, 0.0, 1.0, 1.0)
    _run(space, 0.2)
    np.testing.assert_allclose(a.velocity, c.va_post, atol=TOL * v)
    np.testing.assert_allclose(b.velocity, c.vb_post, atol=TOL * v)
    # Side spin after contact (rad/s): compare as a contact-point speed R * wz.
    assert R * a.angular_velocity == pytest.approx(R * c.wa_post[2], abs=TOL * v)
    assert R * b.angular_velocity == pytest.approx(R * c.wb_post[2], abs=TOL * v)


@pytest.mark.parametrize("angle", [0.0, 30.0, 60.0])
@pytest.mark.parametrize("e", [1.0, 0.8])
@pytest.mark.parametrize("mu, wz", [(0.0, 0.0), (0.14, 0.0), (0.14, 50.0), (0.3, -50.0)])
def test_ball_cushion_matches_pymunk(angle, e, mu, wz):
    """A ball hitting the y0 cushion (nose height = R, so the impulse is
    horizontal) leaves with pymunk's velocity and side spin."""
    v = 1500.0
    a = math.radians(angle)
    vx, vy = v * math.sin(a), -v * math.cos(a)
    x0, y0 = 1000.0, 300.0
    params = SimParams(length_mm=5000.0, width_mm=4000.0, e_cushion=e, mu_cushion=mu,
                       cushion_height_mm=R, mu_slide=0.0, mu_spin=0.0)
    res = simulate([BallInit("cue", x0, y0, vx, vy, wz=wz)], params, 0.4)
    c = res.contacts[0]
    assert c.cushion == "y0"

    space = _space()
    ball = _pm_ball(space, x0, y0, vx, vy, wz, e, mu)
    seg = pymunk.Segment(space.static_body, (-1000.0, 0.0), (7000.0, 0.0), 0.0)
    seg.elasticity = 1.0
    seg.friction = 1.0
    space.add(seg)
    _run(space, 0.4)
    np.testing.assert_allclose(ball.velocity, c.va_post, atol=TOL * v)
    assert R * ball.angular_velocity == pytest.approx(R * c.wa_post[2], abs=TOL * v)
