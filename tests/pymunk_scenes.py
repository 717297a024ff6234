"""Shared pymunk scenes for the tests that check the physics stage against an outside engine.

pymunk (PyPI) is an independent general-purpose 2-D physics engine: its own iterative impulse
solver decides which circles touch, conserves momentum and applies the elasticity we set. Table
plane only: no cloth, so balls glide at constant velocity between contacts (the mu = 0 case of
our motion model). Units: mm, mm/s, kg, s; the optional cushion is the line y = 0 (our ``y0``).
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


def run_frames(space, bodies: dict, fps: float, duration: float, sub: int, history: bool = False):
    """Step the space ``sub`` times per video frame for ``duration`` s. Returns times (T,) s,
    positions name -> (T,2) mm sampled at each frame, and (with ``history``) one
    (before {name: (position, velocity)}, after {name: velocity}) pair per step, else None."""
    dt = 1.0 / fps / sub
    times, pos, hist = [], {k: [] for k in bodies}, [] if history else None
    for f in range(int(duration * fps)):
        times.append(f / fps)
        for k, b in bodies.items():
            pos[k].append(tuple(b.position))
        for _ in range(sub):
            if history:
                before = {k: (np.array(b.position), np.array(b.velocity)) for k, b in bodies.items()}
            space.step(dt)
            if history:
                hist.append((before, {k: np.array(b.velocity) for k, b in bodies.items()}))
    return np.array(times), {k: np.array(v) for k, v in pos.items()}, hist


def first_contact(hist, a: str, b: str, fps: float, sub: int, radius_mm: float) -> tuple[float, float]:
    """(time s, realised e) of pymunk's first a-b contact, from its own body states per step.

    hist: run_frames(..., history=True)'s per-step (before, after) {name: (pos, vel)};
    the touch time is placed inside the step where the centre distance reaches 2R.
    """
    dt = 1.0 / fps / sub
    for i, (before, after) in enumerate(hist):
        (pa, va), (pb, vb) = before[a], before[b]
        if np.hypot(*(after[b] - vb)) > 1.0:
            n = (pb - pa) / np.hypot(*(pb - pa))
            e = float(-((after[b] - after[a]) @ n) / ((vb - va) @ n))
            gap0 = np.hypot(*(pb - pa)) - 2 * radius_mm
            closing = -((vb - va) @ n)
            return i * dt + min(max(gap0 / closing, 0.0), dt), e
    raise AssertionError("pymunk produced no collision")
