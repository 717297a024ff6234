"""Which restitution pymunk realises, and which pymunk world our ball-ball e can be held to.

Outside reference: pymunk 7 (PyPI), an independent general-purpose 2-D physics engine. Its
documentation (pymunk.Arbiter.restitution) says a contact's restitution is the product of the
two shapes' elasticities; with frictionless circles its impulse is along the contact normal.

Why this file: the ball-ball e of tests/test_physics_onset_outlier.py read 0.010-0.012 above
the reference in all three noise draws (cue 2500 mm/s, 25 degree cut, 240 fps, 0.4 mm noise).
Measured causes, neither of them in the collision or in our contact time:

1. the reference itself (about 0.0035 of it): the realised e was taken along the line of
   centres at the START of pymunk's step, but pymunk moves the bodies through the step before
   it finds the contact, so that line is a step's travel off the contact normal; its error
   halves with each doubling of the steps per frame. Along the impulse it is the documented
   product to 1e-12 at any step. (pymunk's position correction, collision_slop and
   collision_bias, is not the cause: it leaves e unchanged, and the position step it leaves
   at the contact is at most one step's closing travel, 0.0004 mm in that scene.)
   The impulse itself is along the line of centres at the END of the step, after pymunk has
   let the circles overlap by up to a step's closing travel, so it is turned from the line of
   centres at the touch, which is what positions show: at a cut, e along the touch normal
   differs. That scene's touch falls on a step's end (no overlap); with cloth (the cue ball
   slows, the touch moves) the overlap at 20 steps a frame is 0.25-0.32 mm and e along the
   touch normal 0.0024 (25 degrees) to 0.0086 (45) below pymunk's. The e checks therefore
   use 200 steps a frame (SUB_FINE), where it is at most 0.0013.
2. the world (the rest, +0.006-0.010 where the cloth-slip link holds): on pymunk's frictionless
   plane a ball struck without spin glides on at constant velocity, while on cloth it slides
   and its slide ends within PhysicsSettings.t_roll_max_s (mu_s >= 0.15). Our cloth-slip
   continuity prior (physics.segments.slip_residuals) then makes the fit decelerate each ball
   after the contact by at least |u| / (3.5 t_roll_max_s) (slip u, slide t_roll <= t_roll_max_s,
   u = -(7/2) a t_roll): both balls' velocities just after are read high and e with them. That
   world is outside our physical model, so the e checks use pymunk's contacts with textbook
   cloth motion between its steps (tests/pymunk_scenes.run_frames ``cloth``).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

pymunk = pytest.importorskip("pymunk")

from feltlab.standards import G_MM_S2, table_preset  # noqa: E402
from physics.pipeline import analyze_tracks, tables_from_positions  # noqa: E402
from physics.settings import PhysicsSettings  # noqa: E402
from pymunk_scenes import build_space, first_contact, run_frames  # noqa: E402

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
FPS = 240.0
E_EACH = np.sqrt(0.95)
CUT = 25.0
SPEED = 2500.0
#: cloth of the reference world: sliding 0.2, rolling 0.01 (typical values, Physics of Pool FAQ;
#: feltlab.standards)
CLOTH = (0.2, 0.01, G_MM_S2)
#: pymunk steps per video frame for the e checks: overlap at the touch <= 2500 mm/s / 48 kHz
SUB_FINE = 200


def _space(cut_deg=CUT, slop=None, bias=None):
    """The onset-test scene: cue at SPEED into a resting ball at ``cut_deg``, touch after ~0.40 s."""
    obj = np.array([1500.0, 700.0])
    h = np.radians(20.0)
    d = np.array([np.cos(h), np.sin(h)])
    n = np.array([np.cos(h - np.radians(cut_deg)), np.sin(h - np.radians(cut_deg))])
    cue0 = obj - 2 * R * n - d * SPEED * 0.40
    space, bodies, _ = build_space({"cue": (cue0, SPEED * d), "red": (obj, (0.0, 0.0))}, E_EACH, R, M)
    if slop is not None:
        space.collision_slop = slop
    if bias is not None:
        space.collision_bias = bias
    return space, bodies


def _start_of_step_e(hist):
    """The former reference: e along the line of centres at the start of the contact's step."""
    for before, after in hist:
        (pa, va), (pb, vb) = before["cue"], before["red"]
        if np.hypot(*(after["red"] - vb)) > 1.0:
            n = (pb - pa) / np.hypot(*(pb - pa))
            return float(-((after["red"] - after["cue"]) @ n) / ((vb - va) @ n))
    raise AssertionError("pymunk produced no collision")


def _line(t, p):
    return np.polyfit(t, p, 1)  # (slope, intercept) per column


def test_realised_e_is_the_documented_product_at_any_step():
    errs = {}
    for sub in (10, 20, 40, 80):
        for slop, bias in ((None, None), (0.0, None), (1.0, None), (None, 0.5)):
            space, bodies = _space(slop=slop, bias=bias)
            t, pos, hist = run_frames(space, bodies, FPS, 0.6, sub, history=True)
            t_c, e = first_contact(hist, "cue", "red", FPS, sub, R)
            # pymunk.Arbiter.restitution docs: the product of the shapes' elasticities
            assert e == pytest.approx(E_EACH**2, abs=1e-12), (sub, slop, bias)
            # position correction: the paths before and after, extrapolated to the touch, meet
            # within the overlap pymunk allows, one step's closing travel (kinematics)
            pre, post = t < t_c - 0.02, t > t_c + 0.02
            closing = SPEED * np.cos(np.radians(CUT)) / FPS / sub
            for k in ("cue", "red"):
                a, b = _line(t[pre], pos[k][pre]), _line(t[post], pos[k][post])
                step = (a[0] - b[0]) * t_c + (a[1] - b[1])
                assert np.hypot(*step) <= 1.05 * closing, (sub, k, step, closing)
        errs[sub] = E_EACH**2 - _start_of_step_e(hist)
    # the former reference reads low by a step's turn of the normal: (1 + e) tan(cut) delta, with
    # delta the angle one step's travel turns it (geometry); halves as the steps double
    for sub in (10, 20, 40):
        assert errs[sub] > 0 and 1.8 < errs[sub] / errs[2 * sub] < 2.3, errs
    assert 0.003 < errs[20] < 0.004, errs  # the scene of test_physics_onset_outlier (SUB = 20)


def _touch_normal_e(hist, dt):
    """(e along the line of centres at the touch, impulse vs step-end line angle rad, overlap mm)
    of the cue-red contact: pymunk moves the bodies through the step, then finds the overlap."""
    for before, after in hist:
        (pa, va), (pb, vb) = before["cue"], before["red"]
        if np.hypot(*(after["red"] - vb)) > 1.0:
            break
    jn = (after["red"] - vb) - (after["cue"] - va)
    n_imp = jn / np.hypot(*jn)
    end = (pb + vb * dt) - (pa + va * dt)  # positions after the step's position update
    ang = abs(float(np.arctan2(n_imp[0] * end[1] - n_imp[1] * end[0], n_imp @ end)))
    # touch inside the step: |rel + w s| = 2R (constant velocities within the step)
    rel, w = pb - pa, vb - va
    qa, qb, qc = w @ w, 2 * rel @ w, rel @ rel - 4 * R * R
    s_t = (-qb - np.sqrt(qb * qb - 4 * qa * qc)) / (2 * qa)
    n_t = (rel + w * s_t) / (2 * R)
    e_t = float(-((after["red"] - after["cue"]) @ n_t) / ((vb - va) @ n_t))
    return e_t, ang, 2 * R - np.hypot(*end)


@pytest.mark.parametrize("cut_deg", [25.0, 45.0])
def test_pymunk_impulse_is_along_the_overlapped_line_of_centres(cut_deg):
    dev = {}
    for sub in (20, SUB_FINE):
        space, bodies = _space(cut_deg)
        _, _, hist = run_frames(space, bodies, FPS, 0.6, sub, history=True, cloth=CLOTH)
        e_t, ang, overlap = _touch_normal_e(hist, 1.0 / FPS / sub)
        assert ang < 1e-9  # the impulse is along the line of centres after the position update
        # ... which overlap by at most one step's closing travel (kinematics)
        assert 0.0 <= overlap <= 1.01 * SPEED * np.cos(np.radians(cut_deg)) / FPS / sub
        dev[sub] = E_EACH**2 - e_t
    # this scene's touch at 20 steps a frame: 0.0024 (25 deg) / 0.0086 (45 deg) low along the
    # touch normal; at SUB_FINE within 0.0015 (what the e checks below allow for it)
    assert dev[20] > 0.002 and 0.0 <= dev[SUB_FINE] < 0.0015, dev


def _noisy(pos, t, seed, sigma=0.4):
    return tables_from_positions(t, pos, sigma, np.random.default_rng(seed), FPS)


def test_frictionless_glide_after_a_contact_is_outside_the_cloth_model():
    """pymunk's plane, no cloth: the struck ball keeps its velocity; the cloth-slip prior makes our
    fit decelerate it at the least rate a slide ending within t_roll_max_s allows."""
    space, bodies = _space()
    t, pos, hist = run_frames(space, bodies, FPS, 0.6, 20, history=True)
    t_c, e_real = first_contact(hist, "cue", "red", FPS, 20, R)
    # the engine: the struck ball's velocity after the contact is constant (no cloth)
    after = [h[1]["red"] for h in hist[int(t_c * FPS * 20) + 2:]]
    assert np.ptp(np.array(after), axis=0).max() < 1e-9
    tracks, det = _noisy(pos, t, 3)  # a draw whose slip link holds (seen: the mechanism, not a rate)
    s = PhysicsSettings()
    decel, err = {}, {}
    for scale in (1.0, 0.5, 100.0):
        s2 = replace(s, t_roll_max_s=scale * s.t_roll_max_s)
        out = analyze_tracks(tracks, det, TABLE, R, M, FPS, s2)
        seg = out.segments[(out.segments["ball"] == "red") & (out.segments["t0_s"] > t_c - 0.01)].iloc[0]
        bb = out.contacts[out.contacts["kind"] == "ball-ball"].iloc[0]
        v = np.hypot(seg.vx0_mm_s, seg.vy0_mm_s)
        decel[scale] = (np.hypot(seg.ax_mm_s2, seg.ay_mm_s2), v / (3.5 * s2.t_roll_max_s))
        err[scale] = (bb.e - e_real, bb.e_sigma)
    # at the bound |a| = |u| / (3.5 t_roll_max) (slip u = v for a ball struck at rest; slide law
    # u(t) = -(7/2) a (t_roll - t) of a uniform solid sphere, physics.segments.slip_velocity)
    a1, bound1 = decel[1.0]
    assert bound1 * 0.9 < a1 < bound1 * 1.3, decel
    # the pull is the bound's: half the bound, twice the deceleration; 100x, 100x less (and the
    # engine has none)
    assert 1.6 * a1 < decel[0.5][0] < 2.4 * a1, decel
    assert decel[100.0][0] < 0.05 * a1, decel
    # and it is what moved e: beyond 2 sigma above pymunk's at the bound, about twice that at half
    # the bound, within 1 sigma without it
    assert err[1.0][0] > 2 * err[1.0][1], err
    assert 1.6 * err[1.0][0] < err[0.5][0] < 2.4 * err[1.0][0], err
    assert abs(err[100.0][0]) < err[100.0][1], err


def test_cloth_reference_slide_and_roll_closed_form():
    """The reference world's cloth motion: a ball set moving without spin rolls after
    t = 2 v0 / (7 mu_s g) at 5/7 v0 (uniform solid sphere, Coulomb friction; textbook, from memory)."""
    space, bodies, _ = build_space({"cue": ((500.0, 500.0), (1500.0, 0.0))}, E_EACH, R, M)
    mu_s, mu_r, g = CLOTH
    slip = {"cue": (1500.0, 0.0)}
    t, pos, hist = run_frames(space, bodies, FPS, 0.5, 20, history=True, cloth=CLOTH, slip=slip)
    v = np.array([h[0]["cue"][1][0] for h in hist])
    ts = np.arange(len(hist)) / FPS / 20
    t_roll = 2 * 1500.0 / (7 * mu_s * g)
    k = np.searchsorted(ts, t_roll)
    assert v[k - 1] == pytest.approx(1500.0 * 5 / 7, abs=1.0)
    # rolling after: deceleration mu_r g (rolling resistance as force / weight)
    a_roll = -(v[-1] - v[k + 20]) / (ts[-1] - ts[k + 20])
    assert a_roll == pytest.approx(mu_r * g, rel=1e-6)


@pytest.mark.parametrize("cut_deg", [25.0, 45.0])
def test_e_against_pymunk_contacts_on_cloth_nearly_noiseless(cut_deg):
    """0.01 mm noise: what is left is the fit's own bias (the reference's touch-normal offset at
    SUB_FINE is below 0.0015, test above)."""
    space, bodies = _space(cut_deg)
    t, pos, hist = run_frames(space, bodies, FPS, 0.6, SUB_FINE, history=True, cloth=CLOTH)
    t_c, e_real = first_contact(hist, "cue", "red", FPS, SUB_FINE, R)
    tracks, det = _noisy(pos, t, 1, sigma=0.01)
    r = analyze_tracks(tracks, det, TABLE, R, M, FPS).contacts.iloc[0]
    assert abs(r.t_s - t_c) < 0.01 / FPS  # pymunk's step is 0.005 frame
    assert abs(r.e - e_real) < 0.0015, (r.e, e_real, r.e_sigma)


# noise draws chosen before running (session 14); e within 3 sigma of pymunk's, no floor
@pytest.mark.parametrize("cut_deg,seed", [(25.0, s) for s in (301, 302, 303, 304, 305, 306)]
                         + [(45.0, s) for s in (311, 312, 313)])
def test_e_against_pymunk_contacts_on_cloth(cut_deg, seed):
    space, bodies = _space(cut_deg)
    t, pos, hist = run_frames(space, bodies, FPS, 0.6, SUB_FINE, history=True, cloth=CLOTH)
    t_c, e_real = first_contact(hist, "cue", "red", FPS, SUB_FINE, R)
    assert e_real == pytest.approx(E_EACH**2, abs=1e-12)  # pymunk.Arbiter.restitution docs
    tracks, det = _noisy(pos, t, seed)
    out = analyze_tracks(tracks, det, TABLE, R, M, FPS)
    bb = out.contacts[out.contacts["kind"] == "ball-ball"]
    assert len(bb) == 1, out.contacts
    r = bb.iloc[0]
    assert abs(r.t_s - t_c) < 0.25 / FPS
    assert abs(r.e - e_real) < 3 * r.e_sigma, (r.e, e_real, r.e_sigma)
