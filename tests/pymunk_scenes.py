"""Shared pymunk scenes for the tests that check the physics stage against an outside engine.

pymunk (PyPI) is an independent general-purpose 2-D physics engine: its own iterative impulse
solver decides which circles touch, conserves momentum and applies the elasticity we set. Table
plane only; units: mm, mm/s, kg, s; the optional cushion is the line y = 0 (our ``y0``).

Without ``cloth`` the balls glide at constant velocity between contacts (mu = 0). That plane is
NOT a special case of our cloth model once a ball slides: the cloth-slip continuity prior
(physics.segments.slip_residuals) says a ball struck without spin slides, and on cloth a slide
ends within ``PhysicsSettings.t_roll_max_s``; a slide that never decelerates contradicts it (see
tests/test_physics_pymunk_reference.py). ``cloth=(mu_s, mu_r, g)`` adds the textbook cloth
motion of a uniform solid sphere between pymunk's steps: while the cloth contact point slips
(slip u = v + omega x (-R z)) the ball decelerates by mu_s g along -u and u changes at
(7/2) times that rate (I = 2/5 m R^2, Coulomb friction); once u = 0 it rolls, decelerating by
mu_r g (rolling resistance as force / weight). pymunk's frictionless circles change velocities
but not the spin about horizontal axes, so a contact adds its velocity change to the slip.
"""
from __future__ import annotations

import numpy as np
import pymunk


def build_space(balls: dict, e_each: float, radius_mm: float, mass_kg: float,
                cushion_y0: bool = False, iterations: int | None = None):
    """pymunk space with one frictionless circle per ball (name -> ((x, y) mm, (vx, vy) mm/s)),
    each with elasticity ``e_each``; returns (space, bodies name -> Body, shapes Circle -> name)."""
    space = pymunk.Space()
    space.gravity = (0.0, 0.0)
    space.damping = 1.0
    if iterations is not None:
        space.iterations = iterations
    bodies, shape_ball = {}, {}
    for name, (p, v) in balls.items():
        b = pymunk.Body(mass_kg, pymunk.moment_for_circle(mass_kg, 0, radius_mm))
        b.position = tuple(p)
        b.velocity = tuple(v)
        c = pymunk.Circle(b, radius_mm)
        c.elasticity = e_each
        c.friction = 0.0
        space.add(b, c)
        bodies[name] = b
        shape_ball[c] = name
    if cushion_y0:
        seg = pymunk.Segment(space.static_body, (-1000.0, 0.0), (4000.0, 0.0), 0.0)
        seg.elasticity = e_each
        seg.friction = 0.0
        space.add(seg)
    return space, bodies, shape_ball


def _cloth_step(v: np.ndarray, u: np.ndarray, dt: float, mu_s: float, mu_r: float, g: float):
    """One step dt of the textbook slide / roll motion: (new velocity, new slip), mm/s."""
    su = float(np.hypot(*u))
    if su > 1e-9:
        uh = u / su
        t_end = su / (3.5 * mu_s * g)  # slip reaches 0 (du/dt = -(7/2) mu_s g u_hat)
        ts = min(dt, t_end)
        v = v - mu_s * g * ts * uh
        return v, (np.zeros(2) if ts >= t_end else u - 3.5 * mu_s * g * ts * uh)
    sv = float(np.hypot(*v))
    if sv <= mu_r * g * dt:
        return np.zeros(2), np.zeros(2)
    return v - mu_r * g * dt * v / sv, np.zeros(2)


def run_frames(space, bodies: dict, fps: float, duration: float, sub: int, history: bool = False,
               cloth: tuple[float, float, float] | None = None, slip: dict | None = None):
    """Step the space ``sub`` times per video frame for ``duration`` s. Returns times (T,) s,
    positions name -> (T,2) mm sampled at each frame, and (with ``history``) one
    (before {name: (position, velocity)}, after {name: velocity}) pair per step, else None.

    ``cloth``: (mu_s, mu_r, g mm/s^2) for the cloth motion of the module docstring, applied
    before each step (so ``before`` -> ``after`` is pymunk's step alone); ``slip``: initial slip
    per ball (mm/s; default 0: rolling or at rest)."""
    dt = 1.0 / fps / sub
    times, pos, hist = [], {k: [] for k in bodies}, [] if history else None
    u = {k: np.array((slip or {}).get(k, (0.0, 0.0)), dtype=float) for k in bodies}
    for f in range(int(duration * fps)):
        times.append(f / fps)
        for k, b in bodies.items():
            pos[k].append(tuple(b.position))
        for _ in range(sub):
            if cloth is not None:
                for k, b in bodies.items():
                    v, u[k] = _cloth_step(np.array(b.velocity), u[k], dt, *cloth)
                    b.velocity = tuple(v)
            v_set = {k: np.array(b.velocity) for k, b in bodies.items()}
            if history:
                before = {k: (np.array(b.position), v_set[k]) for k, b in bodies.items()}
            space.step(dt)
            if cloth is not None:
                for k, b in bodies.items():
                    u[k] = u[k] + (np.array(b.velocity) - v_set[k])
            if history:
                hist.append((before, {k: np.array(b.velocity) for k, b in bodies.items()}))
    return np.array(times), {k: np.array(v) for k, v in pos.items()}, hist


def first_contact(hist, a: str, b: str, fps: float, sub: int, radius_mm: float) -> tuple[float, float]:
    """(time s, realised e) of pymunk's first a-b contact, from its own body states per step.

    hist: run_frames(..., history=True)'s per-step (before, after) {name: (pos, vel)};
    the touch time is placed inside the step where the centre distance reaches 2R.

    e is measured along the direction of pymunk's impulse, the velocity change b minus a's
    (frictionless circles: the impulse is along the contact normal, and equal masses change
    equally and oppositely), not along the line of centres at the step's start: pymunk finds
    the contact after moving the bodies through the step, so that line is one step's travel
    off the contact normal, and at a cut angle phi a normal turned by delta reads e low by
    (1 + e) tan(phi) delta (0.0035 at 25 degrees and 20 steps a frame at 240 fps; see
    tests/test_physics_pymunk_reference.py). That impulse is along the line of centres after
    the step's position update, where the circles overlap by up to a step's closing travel: it
    is turned from the touch normal positions show, so e checks at a cut use many steps a frame.
    """
    dt = 1.0 / fps / sub
    for i, (before, after) in enumerate(hist):
        (pa, va), (pb, vb) = before[a], before[b]
        if np.hypot(*(after[b] - vb)) > 1.0:
            n0 = (pb - pa) / np.hypot(*(pb - pa))
            jn = (after[b] - vb) - (after[a] - va)
            n = jn / np.hypot(*jn)
            e = float(-((after[b] - after[a]) @ n) / ((vb - va) @ n))
            gap0 = np.hypot(*(pb - pa)) - 2 * radius_mm
            closing = -((vb - va) @ n0)
            return i * dt + min(max(gap0 / closing, 0.0), dt), e
    raise AssertionError("pymunk produced no collision")
