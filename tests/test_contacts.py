"""Contact quantities against closed forms (shared REFERENCES.md, "Closed forms usable as oracles").

The end-to-end cases build a shot from closed forms written here in the test (not from the
project's simulator): a cue ball rolling into a resting object ball, an instantaneous frictionless
collision with restitution e (equal masses: normal parts v_a' = (1 - e) v / 2, v_b' = (1 + e) v / 2),
then each ball slides with constant slip direction (deceleration mu_s g along -slip, slip decaying at
7/2 mu_s g) until it rolls with velocity (5 v + 2 R omega x z) / 7, then rolls at deceleration mu_r g.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from feltlab.standards import G_MM_S2, table_preset
from physics.contacts import ball_ball_e, cushion_e, derived
from physics.pipeline import analyze_tracks, tables_from_positions

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg


def _motion(p0, v0, slip0, mu_s, mu_r, tau):
    """Closed-form slide-then-roll positions (T,2) for tau >= 0 (see module docstring)."""
    g = G_MM_S2
    tau = np.asarray(tau, float)[:, None]
    us = float(np.hypot(*slip0))
    t_s = 2 * us / (7 * mu_s * g) if us > 0 else 0.0
    a = -mu_s * g * slip0 / us if us > 0 else np.zeros(2)
    ts = np.minimum(tau, t_s)
    p = p0 + v0 * ts + 0.5 * a * ts**2
    vr = v0 + a * t_s
    sp = float(np.hypot(*vr))
    u = vr / sp if sp > 0 else np.zeros(2)
    tr = np.clip(tau - t_s, 0, sp / (mu_r * g))
    return p + u * (sp * tr - 0.5 * mu_r * g * tr**2)


def closed_form_cut(phi_deg, e, v_in=1500.0, mu_s=0.2, mu_r=0.01, fps=240.0, sigma=0.25, seed=0,
                    heading_deg=12.0, t_pre=0.3, t_post=0.45):
    """Tracks of a rolling cue ball cutting a resting object ball at ``phi_deg``; returns
    (tracks, detections, truth dict)."""
    rng = np.random.default_rng(seed)
    g = G_MM_S2
    h = math.radians(heading_deg)
    d = np.array([math.cos(h), math.sin(h)])
    ph = math.radians(phi_deg)
    n = np.array([math.cos(h - ph), math.sin(h - ph)])  # line of centres a->b at contact
    obj = np.array([1500.0, 600.0])
    pa_c = obj - 2 * R * n
    tc = t_pre + rng.uniform(0, 1 / fps)
    t = np.arange(0, tc + t_post, 1 / fps)
    va = v_in * d
    vn = va @ n
    va1 = va - vn * n + (1 - e) / 2 * vn * n
    vb1 = (1 + e) / 2 * vn * n
    pre = t < tc
    tau = tc - t[pre]
    cue = np.zeros((len(t), 2))
    cue[pre] = pa_c - d * (v_in * tau + 0.5 * mu_r * g * tau**2)[:, None]
    # rolling before: omega x z = v / R, so the slip after is va1 - va
    cue[~pre] = _motion(pa_c, va1, va1 - va, mu_s, mu_r, t[~pre] - tc)
    ob = np.repeat(obj[None, :], len(t), 0)
    ob[~pre] = _motion(obj, vb1, vb1, mu_s, mu_r, t[~pre] - tc)
    tracks, det = tables_from_positions(t, {"cue": cue, "red": ob}, sigma, rng, fps)
    return tracks, det, dict(tc=tc, n=n, va=va, va1=va1, vb1=vb1, d=d)


def test_restitution_formulas_head_on_closed_form():
    # Equal masses, head-on: v_a' = (1 - e) v / 2, v_b' = (1 + e) v / 2 (REFERENCES.md).
    for e in (0.0, 0.5, 0.93, 1.0):
        v = np.array([1800.0, 0.0])
        got = ball_ball_e(v, (1 - e) / 2 * v, np.zeros(2), (1 + e) / 2 * v, np.array([1.0, 0.0]))
        assert got == pytest.approx(e, abs=1e-12)
    assert cushion_e(np.array([300.0, -900.0]), np.array([280.0, 720.0]), np.array([0.0, 1.0])) == pytest.approx(0.8)


def test_energy_loss_matches_central_collision_formula():
    # KE lost in a central collision: (1 - e^2) (m1 m2 / (m1 + m2)) v_rel^2 / 2 (REFERENCES.md).
    e, v = 0.9, 2000.0
    core = dict(n=np.array([1.0, 0.0]), va0=np.array([v, 0.0]), va1=np.array([(1 - e) / 2 * v, 0.0]),
                vb0=np.zeros(2), vb1=np.array([(1 + e) / 2 * v, 0.0]))
    out = derived(core, M, True, (False, False), (False, False))
    lost = (1 - e**2) * (M * M / (2 * M)) * (v * 1e-3) ** 2 / 2
    assert out["ke_before_J"] - out["ke_after_J"] == pytest.approx(lost, rel=1e-12)
    assert out["momentum_residual_pct"] == pytest.approx(0.0, abs=1e-9)
    # impulse on b: m (1 + e) v / 2 along the normal, N s
    assert out["impulse_n_Ns"] == pytest.approx(M * (1 + e) / 2 * v * 1e-3)


@pytest.mark.parametrize("phi,e", [(30.0, 0.95), (0.0, 0.93), (55.0, 0.96)])
def test_cut_shot_recovers_restitution_and_separation_angle(phi, e):
    tracks, det, truth = closed_form_cut(phi, e, seed=int(phi))
    out = analyze_tracks(tracks, det, TABLE, R, M, 240.0)
    c = out.contacts
    bb = c[c.kind == "ball-ball"]
    assert len(bb) == 1 and len(c) == 1, c[["t_s", "kind", "ball_a", "ball_b", "cushion"]]
    r = bb.iloc[0]
    assert {r.ball_a, r.ball_b} == {"cue", "red"}
    # restitution: within 3 reported sigmas; the sigma itself small (thin cuts see the normal
    # approach speed shrink as cos(phi), so the absolute bound grows with the cut)
    assert abs(r.e - e) < 3 * r.e_sigma + 0.002
    assert r.e_sigma < 0.01 / math.cos(math.radians(phi))
    # contact time within a quarter frame
    assert abs(r.t_s - truth["tc"]) < 0.25 / 240
    if phi > 0:
        # separation angle just after contact, frictionless, stationary target:
        # arctan(2 tan(phi) / (1 - e)) (REFERENCES.md; 87.5 deg for e = 0.95, phi = 30 deg)
        expect = math.degrees(math.atan2(2 * math.tan(math.radians(phi)), 1 - e))
        assert r.separation_deg == pytest.approx(expect, abs=0.6)
        assert r.cut_angle_deg == pytest.approx(phi, abs=0.5)
    else:
        # central hit: KE loss fraction (1 - e^2) / 2 for equal masses, target at rest
        assert r.ke_loss_frac == pytest.approx((1 - e**2) / 2, abs=0.01)
    assert r.a_phase_in == "roll" and r.b_phase_in == "rest"
    # the 5/7 rule: the object ball ends up rolling at 5/7 of its launch speed
    red = out.segments[(out.segments.ball == "red") & (out.segments.phase == "roll")].iloc[0]
    vb1 = np.hypot(*truth["vb1"])
    assert np.hypot(red.vx0_mm_s, red.vy0_mm_s) == pytest.approx(5 * vb1 / 7, rel=0.01)


def test_rolling_cue_ball_deflection_half_ball():
    # Rolling cue ball, e = 1, half-ball hit (phi = 30 deg): final deflection
    # tan(theta) = sin(phi) cos(phi) / (sin^2(phi) + 2/5) -> 33.7 deg (REFERENCES.md).
    tracks, det, truth = closed_form_cut(30.0, 1.0, seed=11, t_post=0.6)
    out = analyze_tracks(tracks, det, TABLE, R, M, 240.0)
    seg = out.segments
    cue_roll = seg[(seg.ball == "cue") & (seg.phase == "roll") & (seg.t0_s > truth["tc"])].iloc[0]
    d = truth["d"]
    v = np.array([cue_roll.vx0_mm_s, cue_roll.vy0_mm_s])
    theta = abs(math.degrees(math.atan2(d[0] * v[1] - d[1] * v[0], d @ v)))
    phi = math.radians(30.0)
    expect = math.degrees(math.atan(math.sin(phi) * math.cos(phi) / (math.sin(phi) ** 2 + 0.4)))
    assert expect == pytest.approx(33.7, abs=0.05)
    assert theta == pytest.approx(expect, abs=0.5)


def test_speed_in_and_impulse_signs():
    tracks, det, truth = closed_form_cut(20.0, 0.94, seed=5)
    r = analyze_tracks(tracks, det, TABLE, R, M, 240.0).contacts.iloc[0]
    # approach speed along the normal: v cos(phi) at contact
    assert r.speed_in_mm_s == pytest.approx(1500.0 * math.cos(math.radians(20.0)), rel=0.01)
    assert r.impulse_n_Ns > 0 and abs(r.impulse_t_Ns) < 0.05 * r.impulse_n_Ns
    assert r.momentum_residual_pct < 2.0


def test_contacts_whose_fit_shows_no_separation_are_dropped():
    # Both kinds of evidence are required (physics.events docstring): published restitution is
    # >= 0.5 for balls and cushions (feltlab.standards, Physics of Pool FAQ ranges), so a fitted
    # e below 0 by more than 2 sigma means the fitted motion still approaches after the break.
    from types import SimpleNamespace

    import pandas as pd

    from physics.pipeline import _drop_non_separating
    from physics.settings import PhysicsSettings

    cands = [SimpleNamespace(group=0), SimpleNamespace(group=0), SimpleNamespace(group=0), SimpleNamespace(group=2)]
    df = pd.DataFrame({"contact": [0, 1, 2, 3], "_cand": [0, 1, 2, 3], "e": [0.93, -1.1, -0.05, -0.9],
                       "e_sigma": [0.01, 0.2, 0.05, 0.1]})
    out = _drop_non_separating(df, cands, PhysicsSettings())
    assert out["_cand"].tolist() == [0, 2, 3]  # -1.1 +- 0.2 dropped; -0.05 +- 0.05 within noise; link kept
    assert out["contact"].tolist() == [0, 1, 2]


def test_touch_time_weights_match_generalised_least_squares():
    """The combined touch time is the generalised-least-squares estimate of one constant from
    three correlated estimates; statsmodels' GLS (independent library) gives the same value, and
    an estimate with zero variance (a break held at its bound) is left out."""
    import statsmodels.api as sm

    from physics.contacts import touch_time_weights

    rng = np.random.default_rng(3)
    for _ in range(5):
        A = rng.normal(size=(3, 3))
        C = A @ A.T + 0.1 * np.eye(3)
        y = rng.normal(size=3)
        w = touch_time_weights(C)
        ref = sm.GLS(y, np.ones((3, 1)), sigma=C).fit().params[0]
        assert float(w @ y) == pytest.approx(ref, rel=1e-9, abs=1e-12)  # statsmodels GLS
        assert w.sum() == pytest.approx(1.0)
    C = np.diag([1.0, 0.0, 4.0])
    w = touch_time_weights(C)
    assert w[1] == 0.0 and w @ np.array([1.0, 9.0, 2.0]) == pytest.approx((1.0 + 2.0 / 4) / 1.25)
