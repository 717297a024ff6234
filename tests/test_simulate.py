"""The shot simulator against closed forms (shared REFERENCES.md) and invariants.

Each check names its source. "REFERENCES.md" means /work/shared/REFERENCES.md,
section "Closed forms usable as oracles"; derivations are in the docstrings.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from feltlab.errors import FeltlabError
from feltlab.standards import G_MM_S2, TABLES
from physics.cushion_geometry import contact_distance_mm
from physics.simulate import BallInit, SimParams, simulate

R = 57.15 / 2.0
#: centre-to-nose distance of a touching ball, default nose height (physics/cushion_geometry.py)
DC = contact_distance_mm(R, None)
M = 0.163
BIG = dict(length_mm=20000.0, width_mm=10000.0)  # no cushion within reach


def _first(res, kind, ball=None, after=0.0):
    for e in res.events:
        if e.kind == kind and e.t_s >= after and (ball is None or ball in e.balls):
            return e
    raise AssertionError(f"no {kind} event for {ball}")


# --------------------------------------------------------------------------
# Sliding -> rolling
# --------------------------------------------------------------------------
@pytest.mark.parametrize("mu_s", [0.15, 0.2, 0.4])
@pytest.mark.parametrize("v0", [500.0, 2000.0, 4500.0])
def test_slide_to_roll_closed_form(mu_s, v0):
    """No initial spin: rolling starts at t = 2 v0 / (7 mu g), speed 5 v0 / 7,
    distance 12 v0^2 / (49 mu g).

    Derivation (REFERENCES.md, slide to roll): friction -mu m g decelerates the
    centre at mu g and spins the ball up at 5 mu g / (2R); the contact point
    slip v - R w closes at 7/2 mu g.
    """
    g = G_MM_S2
    p = SimParams(**BIG, mu_slide=mu_s, mu_roll=0.01)
    res = simulate([BallInit.struck("cue", 1000.0, 5000.0, v0, 20.0)], p, 3.0)
    e = _first(res, "slide-roll", "cue")
    t_roll = 2 * v0 / (7 * mu_s * g)  # REFERENCES.md slide-to-roll closed form
    assert e.t_s == pytest.approx(t_roll, rel=1e-12)
    st_ = res.state_at([e.t_s])
    speed = np.hypot(*st_.vel[0, 0])
    assert speed == pytest.approx(5 * v0 / 7, rel=1e-12)  # REFERENCES.md
    dist = np.hypot(*(st_.pos[0, 0] - [1000.0, 5000.0]))
    assert dist == pytest.approx(12 * v0**2 / (49 * mu_s * g), rel=1e-12)  # REFERENCES.md
    # Just before: sliding; just after: rolling (phase bookkeeping).
    ph = res.phase_at([e.t_s * 0.999, e.t_s * 1.001])[:, 0]
    assert list(ph) == ["slide", "roll"]


@pytest.mark.parametrize(
    "v, w",
    [((1500.0, 0.0), (0.0, -80.0, 0.0)),  # draw
     ((1500.0, 300.0), (20.0, 150.0, 30.0)),  # follow with a sideways component
     ((0.0, 0.0), (40.0, 0.0, 0.0)),  # spinning in place (masse-like)
     ((-800.0, 1200.0), (-60.0, 10.0, -5.0))],
)
def test_final_rolling_velocity_independent_of_mu(v, w):
    """With initial spin the rolling velocity is (5 v0 + 2 R w0 x z) / 7,
    whatever mu_s (REFERENCES.md: angular momentum about the contact point is
    conserved while sliding). The path curves in between when u0 is not along v0."""
    v0 = np.array(v)
    w0 = np.array(w)
    expected = (5 * v0 + 2 * R * np.cross(w0, [0, 0, 1.0])[:2]) / 7  # REFERENCES.md
    finals = []
    for mu_s in (0.15, 0.3):
        p = SimParams(**BIG, mu_slide=mu_s, mu_roll=0.01)
        b = BallInit("cue", 10000.0, 5000.0, *v0, *w0)
        res = simulate([b], p, 2.0)
        e = _first(res, "slide-roll", "cue")
        vf = res.state_at([e.t_s]).vel[0, 0]
        finals.append(vf)
        np.testing.assert_allclose(vf, expected, rtol=0, atol=1e-9 * (1 + np.abs(v0).max() + R * np.abs(w0).max()))
    np.testing.assert_allclose(finals[0], finals[1], atol=1e-9)


def test_rolling_decelerates_at_mu_r_g_and_stops():
    """Rolling resistance, force/weight definition (REFERENCES.md rolling
    resistance row; Cross, Am. J. Phys. 90:648): a rolling ball stops after
    v^2 / (2 mu_r g) at time v / (mu_r g)."""
    mu_r, v = 0.012, 1000.0
    p = SimParams(**BIG, mu_roll=mu_r)
    b = BallInit.struck("cue", 1000.0, 5000.0, v, 0.0, top_rad_s=v / R)  # natural roll
    res = simulate([b], p, 20.0)
    assert res.phase_at([0.0])[0, 0] == "roll"
    e = _first(res, "roll-rest", "cue")
    assert e.t_s == pytest.approx(v / (mu_r * G_MM_S2), rel=1e-12)
    pos = res.state_at([e.t_s, 19.0]).pos[:, 0]
    assert pos[0, 0] - 1000.0 == pytest.approx(v**2 / (2 * mu_r * G_MM_S2), rel=1e-12)
    np.testing.assert_array_equal(pos[0], pos[1])


def test_side_spin_decays_linearly_at_documented_rate():
    """Spinning friction as documented in physics.simulate: |wz| falls at
    5 mu_spin g / (2R) to zero (our model definition, torque mu_spin m g R
    over I = 2/5 m R^2 -- the moment of inertia of a solid sphere, handbook)."""
    p = SimParams(**BIG, mu_spin=0.01)
    res = simulate([BallInit("cue", 1000.0, 5000.0, wz=30.0)], p, 10.0)
    rate = 5 * 0.01 * G_MM_S2 / (2 * R)
    wz = res.state_at([0.0, 1.0, 10.0]).omega[:, 0, 2]
    assert wz[1] == pytest.approx(30.0 - rate, rel=1e-12)
    assert wz[2] == 0.0


def test_state_at_consistent_with_mechanics():
    """Between events: position is the integral of velocity (finite differences),
    sliding conserves angular momentum about the cloth contact point
    (REFERENCES.md slide-to-roll note: L = I w + R z x m v, I = 2/5 m R^2),
    and rolling keeps the contact point still (u = v + w x (-R z) = 0)."""
    p = SimParams.for_table(TABLES["pool-9ft"], mu_ball_ball=0.05)
    balls = [BallInit.struck("cue", 400.0, 300.0, 2500.0, 25.0, top_rad_s=-70.0, side_rad_s=30.0),
             BallInit("red", 1400.0, 760.0)]
    res = simulate(balls, p, 6.0)
    t = np.linspace(0.0, 6.0, 24001)
    s = res.state_at(t)
    ph = res.phase_at(t)
    ev = np.array([e.t_s for e in res.events])
    dt = t[1] - t[0]
    # Finite differences away from events (central difference, exact for quadratics).
    clean = np.array([np.all(np.abs(ev - tt) > 1.5 * dt) for tt in t[1:-1]])
    fd = (s.pos[2:] - s.pos[:-2]) / (2 * dt)
    np.testing.assert_allclose(fd[clean], s.vel[1:-1][clean], atol=1e-6)
    I = 0.4 * M * R**2
    for k in range(2):
        v3 = np.concatenate([s.vel[:, k], np.zeros((t.size, 1))], axis=1)
        L = I * s.omega[:, k] + M * R * np.cross([0.0, 0.0, 1.0], v3)
        slide = ph[:, k] == "slide"
        # Within one sliding segment L_xy is constant.
        seg_id = np.searchsorted(ev, t, side="right")
        for sid in np.unique(seg_id[slide]):
            sel = slide & (seg_id == sid)
            np.testing.assert_allclose(L[sel, :2], np.broadcast_to(L[sel][0, :2], L[sel, :2].shape),
                                       atol=1e-9 * np.abs(L[:, :2]).max())
        roll = ph[:, k] == "roll"
        u = s.vel[roll, k] + R * np.stack([-s.omega[roll, k, 1], s.omega[roll, k, 0]], axis=1)
        np.testing.assert_allclose(u, 0.0, atol=1e-9)


def test_frictionless_elastic_table_conserves_energy():
    """With every friction off and e = 1 (ball-ball and cushion), kinetic
    energy is conserved exactly (elastic collisions, no dissipation), through
    many collisions."""
    p = SimParams(2540.0, 1270.0, e_ball_ball=1.0, e_cushion=1.0, mu_ball_ball=0.0, mu_cushion=0.0,
                  mu_slide=0.0, mu_roll=0.0, mu_spin=0.0)
    balls = [BallInit("a", 600.0, 300.0, 3000.0, 1700.0), BallInit("b", 1600.0, 800.0, -2000.0, 900.0),
             BallInit("c", 1200.0, 600.0, 500.0, -2500.0)]
    res = simulate(balls, p, 10.0)
    assert len(res.contacts) > 20
    ke = res.kinetic_energy_J(np.linspace(0.0, 10.0, 101))
    np.testing.assert_allclose(ke, ke[0], rtol=1e-9)


def _rack(gap_mm, x0=1905.0, y0=635.0):
    balls = []
    for row in range(5):
        for col in range(row + 1):
            x = x0 + row * (2 * R + gap_mm) * math.sqrt(3) / 2
            y = y0 + (col - row / 2) * (2 * R + gap_mm)
            balls.append(BallInit(f"o{len(balls)}", x, y))
    return balls


@pytest.mark.parametrize("gap", [0.0, 0.2])
def test_break_shot_touching_rack(gap):
    """A 15-ball rack with touching (or nearly) balls broken at 11 m/s (the
    break speed in REFERENCES.md): many simultaneous contacts, no overlap,
    nobody leaves the table, energy never rises, momentum conserved per
    contact, and everything comes to rest."""
    p = SimParams.for_table(TABLES["pool-9ft"], mu_ball_ball=0.06)
    balls = [BallInit.struck("cue", 635.0, 636.0, 11000.0, 0.0)] + _rack(gap)
    res = simulate(balls, p, 25.0)
    times = np.unique(np.concatenate([np.linspace(0.0, 25.0, 2501), [e.t_s for e in res.events]]))
    s = res.state_at(times)
    for i in range(16):
        d = np.hypot(*(s.pos[:, i + 1:] - s.pos[:, i:i + 1]).transpose(2, 0, 1))
        assert d.size == 0 or d.min() >= 2 * R - 1e-6
    dc = contact_distance_mm(R, p.cushion_height_mm)  # centre-to-nose distance at touch (< R)
    assert s.pos[..., 0].min() >= dc - 1e-6 and s.pos[..., 0].max() <= p.length_mm - dc + 1e-6
    assert s.pos[..., 1].min() >= dc - 1e-6 and s.pos[..., 1].max() <= p.width_mm - dc + 1e-6
    ke = res.kinetic_energy_J(times)
    n_micro = sum(c.micro for c in res.contacts)
    assert np.all(np.diff(ke) <= n_micro * 0.5 * 0.0815 * (p.min_bounce_mm_s * 1e-3) ** 2 + 1e-12)
    assert np.all(res.phase_at([25.0]) == "rest")
    assert sum(c.kind == "ball-ball" for c in res.contacts) >= 15


def test_follow_shot_pushing_a_ball_terminates():
    """A heavily spun cue ball pressed into an object ball by cloth friction
    (a push) ends in a bounded number of events (documented separation floor)
    and the balls never overlap."""
    p = SimParams(2540.0, 1270.0, mu_ball_ball=0.05)
    balls = [BallInit.struck("cue", 1000.0, 600.0, 300.0, 0.0, top_rad_s=300.0),
             BallInit("b", 1000.0 + 2 * R + 5.0, 600.0)]
    res = simulate(balls, p, 5.0)
    assert len(res.events) < 3000
    t = np.unique(np.concatenate([np.linspace(0.0, 5.0, 5001), [e.t_s for e in res.events]]))
    s = res.state_at(t)
    assert np.hypot(*(s.pos[:, 1] - s.pos[:, 0]).T).min() >= 2 * R - 1e-6
    assert any(c.micro for c in res.contacts)


@pytest.mark.parametrize("balls", [
    [BallInit("cue", 1000.0, 600.0, wy=100.0), BallInit("b", 1000.0 + 2 * R, 600.0)],  # spin drives it into b
    [BallInit("cue", DC, 600.0, wy=-100.0)],  # spin drives it into the x0 cushion
    [BallInit("cue", 900.0, 1270.0 - DC, wx=-80.0, wz=20.0)],  # into yW
])
def test_spinning_ball_at_rest_against_contact_does_not_penetrate(balls):
    """A ball touching a ball or cushion with zero speed but spin that drives it
    in (the cloth friction accelerates it at mu_s g) must not pass through
    (rigid bodies: basic mechanics)."""
    p = SimParams(2540.0, 1270.0)
    res = simulate(balls, p, 3.0)
    t = np.unique(np.concatenate([np.linspace(0.0, 3.0, 3001), [e.t_s for e in res.events]]))
    s = res.state_at(t)
    assert s.pos[..., 0].min() >= DC - 1e-6 and s.pos[..., 1].max() <= 1270.0 - DC + 1e-6
    if len(balls) == 2:
        assert np.hypot(*(s.pos[:, 1] - s.pos[:, 0]).T).min() >= 2 * R - 1e-6
        assert s.pos[-1, 1, 0] > balls[1].x_mm + 10.0  # b was pushed along


# --------------------------------------------------------------------------
# Ball-ball contacts (frictionless unless stated; cloth friction off where the
# contact law is isolated, which the closed forms assume)
# --------------------------------------------------------------------------
def _hit(cut_deg, e=0.95, mu_bb=0.0, v=2000.0, mu_slide=0.0, spin=None, ma=M, mb=M, Ra=R, Rb=R):
    """Cue at (1000, 5000) moving +x hits a resting ball at cut angle cut_deg."""
    phi = math.radians(cut_deg)
    d = Ra + Rb
    xb, yb = 1000.0 + 300.0, 5000.0 + d * math.sin(phi)
    w = spin if spin is not None else (0.0, 0.0, 0.0)
    balls = [BallInit("cue", 1000.0, 5000.0, v, 0.0, *w, radius_mm=Ra, mass_kg=ma),
             BallInit("obj", xb, yb, radius_mm=Rb, mass_kg=mb)]
    p = SimParams(**BIG, e_ball_ball=e, mu_ball_ball=mu_bb, mu_slide=mu_slide)
    res = simulate(balls, p, 3.0)
    c = next(c for c in res.contacts if c.kind == "ball-ball")
    return res, c


@pytest.mark.parametrize("e", [1.0, 0.95, 0.8, 0.0])
def test_head_on_equal_masses(e):
    """Equal masses, head-on: v_a' = (1 - e) v / 2, v_b' = (1 + e) v / 2
    (REFERENCES.md; Newton's restitution law plus momentum)."""
    res, c = _hit(0.0, e=e)
    v = c.va_pre[0]
    floor = res.params.min_bounce_mm_s
    sep = max(e * v, floor)  # our documented numerical floor only matters for e = 0
    assert c.va_post[0] == pytest.approx((v - sep) / 2, abs=1e-9 * v)
    assert c.vb_post[0] == pytest.approx((v + sep) / 2, abs=1e-9 * v)
    if e > 0:
        assert c.va_post[0] == pytest.approx((1 - e) * v / 2, abs=1e-9 * v)  # REFERENCES.md
        assert c.vb_post[0] == pytest.approx((1 + e) * v / 2, abs=1e-9 * v)
        assert c.e_measured == pytest.approx(e, abs=1e-12)
    assert c.t_s == pytest.approx((300.0 - 2 * R) / 2000.0, rel=1e-12)


@pytest.mark.parametrize("cut", [10.0, 30.0, 45.0, 70.0])
def test_elastic_oblique_hit_90_degrees(cut):
    """Equal masses, e = 1, no friction: the balls leave 90 degrees apart and
    the object ball leaves along the line of centres (REFERENCES.md, e = 1
    case of the separation-angle formula)."""
    _, c = _hit(cut, e=1.0)
    a, b = c.va_post, c.vb_post
    ang = math.degrees(math.atan2(abs(a[0] * b[1] - a[1] * b[0]), a @ b))
    assert ang == pytest.approx(90.0, abs=1e-9)
    assert math.degrees(math.atan2(b[1], b[0])) == pytest.approx(cut, abs=1e-9)


def test_full_hit_exchanges_velocities():
    """Equal masses, e = 1, head-on: velocities exchange (REFERENCES.md head-on, e = 1)."""
    _, c = _hit(0.0, e=1.0)
    np.testing.assert_allclose(c.va_post, [0.0, 0.0], atol=1e-9)
    np.testing.assert_allclose(c.vb_post, c.va_pre, rtol=1e-12)


@pytest.mark.parametrize("e, cut", [(0.95, 30.0), (0.9, 15.0), (0.8, 50.0)])
def test_separation_angle_inelastic(e, cut):
    """Separation angle arctan(2 tan(phi) / (1 - e)) (REFERENCES.md; e = 0.95,
    phi = 30 deg -> 87.5 deg)."""
    _, c = _hit(cut, e=e)
    a, b = c.va_post, c.vb_post
    ang = math.degrees(math.atan2(abs(a[0] * b[1] - a[1] * b[0]), a @ b))
    expected = math.degrees(math.atan(2 * math.tan(math.radians(cut)) / (1 - e)))
    assert ang == pytest.approx(expected, abs=1e-9)
    if (e, cut) == (0.95, 30.0):
        assert ang == pytest.approx(87.5, abs=0.05)  # the REFERENCES.md worked value


@pytest.mark.parametrize("e, m1, m2", [(0.95, 0.163, 0.163), (0.9, 0.17, 0.142), (0.6, 0.2125, 0.156)])
def test_ke_loss_central_collision(e, m1, m2):
    """Translational KE lost in a central collision: (1 - e^2) (m1 m2 / (m1 + m2))
    v_rel^2 / 2 (REFERENCES.md)."""
    _, c = _hit(0.0, e=e, ma=m1, mb=m2)
    v = c.va_pre[0] * 1e-3
    ke = lambda m, vv: 0.5 * m * float(vv @ vv) * 1e-6
    lost = ke(m1, c.va_pre) - ke(m1, c.va_post) - ke(m2, c.vb_post)
    assert lost == pytest.approx((1 - e**2) * (m1 * m2 / (m1 + m2)) * v**2 / 2, rel=1e-10)


def test_momentum_conserved_per_axis_with_friction_and_spin():
    """Linear momentum conserved per horizontal axis through every ball-ball
    contact, friction and spin included (Newton's third law: equal and opposite
    impulses), to 1e-9 relative."""
    # A loose triangle of six balls (0.5 mm gaps) struck by a spinning cue ball.
    balls = [BallInit.struck("cue", 600.0, 640.0, 4000.0, 0.0, top_rad_s=-60.0, side_rad_s=25.0,
                             mass_kg=0.17)]
    masses = [0.156, 0.163, 0.16, 0.17, 0.158, 0.165]
    k = 0
    for row in range(3):
        for col in range(row + 1):
            x = 1900.0 + row * (2 * R + 0.5) * math.sqrt(3) / 2
            y = 635.0 + (col - row / 2) * (2 * R + 0.5)
            balls.append(BallInit(f"o{k}", x, y, mass_kg=masses[k]))
            k += 1
    p = SimParams.for_table(TABLES["pool-9ft"], mu_ball_ball=0.06)
    res = simulate(balls, p, 6.0)
    mass = {b.id: b.mass_kg for b in balls}
    bb = [c for c in res.contacts if c.kind == "ball-ball"]
    assert len(bb) >= 5
    for c in bb:
        pre = mass[c.ball_a] * c.va_pre + mass[c.ball_b] * c.vb_pre
        post = mass[c.ball_a] * c.va_post + mass[c.ball_b] * c.vb_post
        scale = mass[c.ball_a] * np.hypot(*c.va_pre) + mass[c.ball_b] * np.hypot(*c.vb_pre)
        np.testing.assert_allclose(post, pre, rtol=0, atol=1e-9 * scale)
        # impulse_a_Ns is m_a (va_post - va_pre) in N s.
        np.testing.assert_allclose(c.impulse_a_Ns, mass[c.ball_a] * (c.va_post - c.va_pre) * 1e-3,
                                   atol=1e-12)


@pytest.mark.parametrize("cut", [10.0, 28.1, 30.0, 45.0, 60.0])
def test_rolling_cue_ball_deflection(cut):
    """A naturally rolling cue ball, after a frictionless hit and re-rolling,
    leaves at tan(theta) = sin(phi) cos(phi) / (sin^2(phi) + 2/5) from its
    original line (REFERENCES.md; half-ball 33.7 deg, max 33.75 deg near 28.1).
    Uses equal masses and e = 1, as the closed form does."""
    v = 1500.0
    res, c = _hit(cut, e=1.0, v=v, mu_slide=0.2, spin=(0.0, v / R, 0.0))
    assert res.phase_at([c.t_s * 0.99])[0, 0] == "roll"
    e = _first(res, "slide-roll", "cue", after=c.t_s)
    vf = res.state_at([e.t_s]).vel[0, 0]
    theta = math.degrees(abs(math.atan2(vf[1], vf[0])))
    phi = math.radians(cut)
    expected = math.degrees(math.atan(math.sin(phi) * math.cos(phi) / (math.sin(phi) ** 2 + 0.4)))
    assert theta == pytest.approx(expected, abs=1e-8)
    if cut == 30.0:
        assert theta == pytest.approx(33.7, abs=0.05)  # REFERENCES.md worked value


@pytest.mark.parametrize("mu", [0.03, 0.06, 0.08])
@pytest.mark.parametrize("cut", [3.0, 10.0, 30.0, 60.0])
def test_throw_stun_shot(mu, cut):
    """Cut-induced throw, no spin at contact: theta_t = arctan(min(mu,
    2 tan(phi) / (7 (1 + e)))) (REFERENCES.md). Assumptions: stun (no spin) at
    contact -- cloth friction off so the cue ball keeps zero spin -- equal
    masses, Coulomb friction with constant mu; the throw is the object ball's
    departure angle from the line of centres."""
    e = 0.95
    _, c = _hit(cut, e=e, mu_bb=mu)
    n = c.normal
    b = c.vb_post
    throw = math.degrees(math.atan2(abs(n[0] * b[1] - n[1] * b[0]), n @ b))
    phi = math.radians(cut)
    expected = math.degrees(math.atan(min(mu, 2 * math.tan(phi) / (7 * (1 + e)))))
    assert throw == pytest.approx(expected, abs=1e-9)
    # Thrown along the cue ball's tangential motion (common practice: cut-induced
    # throw pushes the object ball off the line of centres in the cut direction).
    t = np.array([-n[1], n[0]])
    assert np.sign(b @ t) == np.sign(c.va_pre @ t)


def test_follow_reduces_throw():
    """Topspin adds vertical slip at the contact, so friction acts partly
    vertically and the sideways throw falls below the stun value (common
    practice: follow and draw shots throw less than stun shots)."""
    _, stun = _hit(30.0, mu_bb=0.06)
    _, roll = _hit(30.0, mu_bb=0.06, spin=(0.0, 2000.0 / R, 0.0))
    ang = lambda c: abs(math.atan2(c.normal[0] * c.vb_post[1] - c.normal[1] * c.vb_post[0],
                                   c.normal @ c.vb_post))
    assert ang(roll) < ang(stun)


@pytest.mark.parametrize("spin", [(0.0, 0.0, 0.0), (0.0, 70.0, 30.0), (25.0, -60.0, -45.0)])
def test_ball_ball_angular_momentum_about_contact(spin):
    """Impulse-momentum theorem (basic mechanics): each ball feels the other's
    impulse at the contact point Q and the cloth's vertical push at its bottom
    point, whose moment about Q has no component along n or z. So for each
    ball L_Q = I w + (C - Q) x m v keeps its n and z components, with friction
    (throw, spin transfer) on."""
    _, c = _hit(25.0, mu_bb=0.08, spin=spin)
    n3 = np.array([c.normal[0], c.normal[1], 0.0])
    I = 0.4 * M * R**2
    for v0, w0, v1, w1, arm in [(c.va_pre, c.wa_pre, c.va_post, c.wa_post, -R * n3),
                                (c.vb_pre, c.wb_pre, c.vb_post, c.wb_post, R * n3)]:
        L0 = I * np.asarray(w0) + np.cross(arm, M * np.array([v0[0], v0[1], 0.0]))
        L1 = I * np.asarray(w1) + np.cross(arm, M * np.array([v1[0], v1[1], 0.0]))
        scale = max(np.abs(L0).max(), np.abs(L1).max())
        assert L1 @ n3 == pytest.approx(L0 @ n3, abs=1e-9 * scale)
        assert L1[2] == pytest.approx(L0[2], abs=1e-9 * scale)


# --------------------------------------------------------------------------
# Cushions
# --------------------------------------------------------------------------
@pytest.mark.parametrize("name, start, vel", [
    ("x0", (400.0, 600.0), (-1500.0, 500.0)),
    ("xL", (2200.0, 600.0), (1500.0, -300.0)),
    ("y0", (1200.0, 300.0), (200.0, -1800.0)),
    ("yW", (1200.0, 900.0), (-700.0, 1600.0)),
])
def test_cushion_frictionless_reverses_normal_times_e(name, start, vel):
    """No cushion friction, no spin: normal velocity reversed times e, the
    tangential component unchanged (Newton's restitution law; rigid cushion
    model, Mathavan et al. 2010 with mu = 0). The contact happens when the
    centre is sqrt(R^2 - (h - R)^2) from the nose line (the nose at height h
    touches the sphere: physics/cushion_geometry.py)."""
    p = SimParams.for_table(TABLES["pool-9ft"], e_cushion=0.8, mu_cushion=0.0, mu_slide=0.0)
    res = simulate([BallInit("cue", *start, *vel)], p, 2.0)
    c = res.contacts[0]
    assert c.cushion == name
    n = c.normal
    assert c.va_post @ n == pytest.approx(-0.8 * (c.va_pre @ n), rel=1e-12)
    t = np.array([-n[1], n[0]])
    assert c.va_post @ t == pytest.approx(c.va_pre @ t, abs=1e-9)
    pos = res.state_at([c.t_s]).pos[0, 0]
    line = {"x0": pos[0], "xL": p.length_mm - pos[0], "y0": pos[1], "yW": p.width_mm - pos[1]}[name]
    assert line == pytest.approx(np.sqrt(R**2 - (p.cushion_height_mm - R) ** 2), abs=1e-9)


def test_cushion_with_friction_loses_energy_and_reports_e():
    """With friction and spin the cushion never adds energy (Coulomb friction
    dissipates) and the reported e_measured is the normal velocity ratio."""
    p = SimParams.for_table(TABLES["pool-9ft"])
    for w in [(0, 0, 0), (0, 0, 40.0), (0, 0, -40.0), (30.0, -20.0, 10.0)]:
        res = simulate([BallInit("cue", 400.0, 600.0, -1500.0, 500.0, *w)], p, 0.5)
        c = next(c for c in res.contacts if c.kind == "ball-cushion")
        ke = lambda v, om: 0.5 * M * (v @ v) * 1e-6 + 0.5 * 0.4 * M * (R * 1e-3) ** 2 * (om @ om)
        assert ke(c.va_post, c.wa_post) <= ke(c.va_pre, c.wa_pre) + 1e-12
        assert c.e_measured == pytest.approx(-(c.va_post @ c.normal) / (c.va_pre @ c.normal), rel=1e-12)
        assert 0.0 < c.e_measured <= 1.0


@pytest.mark.parametrize("w", [(0.0, 0.0, 0.0), (40.0, -70.0, 25.0), (-90.0, 10.0, -60.0)])
@pytest.mark.parametrize("mu_c", [0.14, 0.4])
def test_cushion_impact_angular_momentum_about_contact(w, mu_c):
    """Impulse-momentum theorem (basic mechanics): with no cloth friction the
    only impulses are the cushion's (through the contact point Q at the nose
    height) and the cloth's vertical push at the bottom point, whose moment
    about Q has no component along the cushion normal n or the vertical z.
    So L_Q = I w + (C - Q) x m v keeps its n and z components through the
    impact, whatever the friction or restitution."""
    h = (1 + 7 / 16) * 25.4  # pool nose height, standards.POOL_NOSE_HEIGHT_MM
    p = SimParams(2540.0, 1270.0, e_cushion=0.85, mu_cushion=mu_c, mu_slide=0.0, cushion_height_mm=h)
    res = simulate([BallInit("cue", 400.0, 600.0, -1800.0, 700.0, *w)], p, 0.5)
    c = res.contacts[0]
    assert c.cushion == "x0"
    n3 = np.array([1.0, 0.0, 0.0])
    sin_t = (h - R) / R
    r_c = -R * math.sqrt(1 - sin_t**2) * n3 + np.array([0.0, 0.0, h - R])  # Q - C
    I = 0.4 * M * R**2

    def L(v, om):
        return I * np.asarray(om) + np.cross(-r_c, M * np.array([v[0], v[1], 0.0]))

    before, after = L(c.va_pre, c.wa_pre), L(c.va_post, c.wa_post)
    scale = np.abs(before).max()
    assert after[0] == pytest.approx(before[0], abs=1e-9 * scale)  # along n
    assert after[2] == pytest.approx(before[2], abs=1e-9 * scale)  # along z
    assert abs(after[1] - before[1]) > 1e-6 * scale  # the tangent component does change


# --------------------------------------------------------------------------
# Properties (hypothesis)
# --------------------------------------------------------------------------
@st.composite
def _scenes(draw):
    L, W = 2540.0, 1270.0
    n = draw(st.integers(2, 6))
    radius = draw(st.sampled_from([52.5 / 2, 57.15 / 2, 61.25 / 2]))
    balls: list[BallInit] = []
    for k in range(n):
        for _ in range(30):
            x = draw(st.floats(radius, L - radius))
            y = draw(st.floats(radius, W - radius))
            if all(math.hypot(x - b.x_mm, y - b.y_mm) >= 2 * radius for b in balls):
                break
        else:
            continue
        if k == 0 or draw(st.booleans()):
            sp = draw(st.floats(0.0, 5000.0))
            hd = draw(st.floats(0.0, 360.0))
            spin = [draw(st.floats(-150.0, 150.0)) for _ in range(3)]
        else:
            sp, hd, spin = 0.0, 0.0, [0.0, 0.0, 0.0]
        balls.append(BallInit(f"b{k}", x, y, sp * math.cos(math.radians(hd)),
                              sp * math.sin(math.radians(hd)), *spin, radius_mm=radius,
                              mass_kg=draw(st.floats(0.14, 0.22))))
    params = SimParams(
        length_mm=L, width_mm=W,
        e_ball_ball=draw(st.floats(0.5, 1.0)), mu_ball_ball=draw(st.floats(0.0, 0.1)),
        e_cushion=draw(st.floats(0.5, 1.0)), mu_cushion=draw(st.floats(0.0, 0.3)),
        mu_slide=draw(st.floats(0.1, 0.4)), mu_roll=draw(st.floats(0.005, 0.02)),
        cushion_height_mm=draw(st.floats(1.0, 1.3)) * radius,
    )
    return balls, params


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_scenes())
def test_properties_no_overlap_energy_on_table(scene):
    """Invariants (basic mechanics): balls never overlap, never leave the
    table, and the total kinetic energy never increases (all friction and
    restitution laws dissipate; the only allowance is the documented
    separation floor, < 1e-7 J per contact)."""
    balls, params = scene
    res = simulate(balls, params, 8.0)
    ev_t = [e.t_s for e in res.events]
    times = np.unique(np.concatenate([np.linspace(0.0, 8.0, 801), ev_t]))
    s = res.state_at(times)
    R_ = balls[0].radius_mm
    tol = 1e-6
    dc = contact_distance_mm(R_, params.cushion_height_mm)  # touching the nose (< R_)
    assert np.all(s.pos[..., 0] >= dc - tol) and np.all(s.pos[..., 0] <= params.length_mm - dc + tol)
    assert np.all(s.pos[..., 1] >= dc - tol) and np.all(s.pos[..., 1] <= params.width_mm - dc + tol)
    N = len(balls)
    for i in range(N):
        for j in range(i + 1, N):
            d = np.hypot(*(s.pos[:, i] - s.pos[:, j]).T)
            assert d.min() >= 2 * R_ - tol
    ke = res.kinetic_energy_J(times)
    n_micro = sum(c.micro for c in res.contacts)
    allow = n_micro * 0.5 * 0.11 * (params.min_bounce_mm_s * 1e-3) ** 2 + 1e-12 * ke[0]
    assert np.all(np.diff(ke) <= allow)
    assert ke[-1] <= ke[0] + allow


# --------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------
@pytest.mark.parametrize("balls, kw, t_end", [
    ([BallInit("a", 10.0, 600.0)], {}, 1.0),  # off the table (closer than R to x0)
    ([BallInit("a", 500.0, 600.0), BallInit("b", 530.0, 600.0)], {}, 1.0),  # overlap
    ([BallInit("a", 500.0, 600.0), BallInit("a", 900.0, 600.0)], {}, 1.0),  # duplicate id
    ([BallInit("a", 500.0, 600.0)], {"e_cushion": 1.2}, 1.0),
    ([BallInit("a", 500.0, 600.0)], {"mu_slide": -0.1}, 1.0),
    ([BallInit("a", 500.0, 600.0)], {}, 0.0),
    ([BallInit("a", 500.0, float("nan"))], {}, 1.0),
    ([], {}, 1.0),
])
def test_bad_input_raises(balls, kw, t_end):
    with pytest.raises(FeltlabError):
        simulate(balls, SimParams(2540.0, 1270.0, **kw), t_end)


def test_state_at_outside_span_raises():
    res = simulate([BallInit("a", 500.0, 600.0, 100.0)], SimParams(2540.0, 1270.0), 1.0)
    with pytest.raises(FeltlabError):
        res.state_at([1.5])


def test_to_dict_is_json():
    import json

    p = SimParams.for_table(TABLES["pool-9ft"], mu_ball_ball=0.05)
    res = simulate([BallInit.struck("cue", 500.0, 600.0, 3000.0, 5.0, top_rad_s=40.0),
                    BallInit("red", 1200.0, 650.0)], p, 4.0)
    d = json.loads(json.dumps(res.to_dict()))
    assert len(d["contacts"]) == len(res.contacts) and d["contacts"][0]["kind"] == "ball-ball"
