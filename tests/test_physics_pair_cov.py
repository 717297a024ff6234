"""Restitution sigma of a ball-ball contact from the two balls' joint covariance (physics.pair_cov).

Oracle: closed-form trajectories (derived here from REFERENCES.md's closed forms) plus Gaussian
position noise of known size, analysed many times; the spread of the measured e over the noise
draws is what the noise part of the propagated sigma must predict (first-order error
propagation, checked by Monte Carlo; a standard check, e.g. JCGM 101:2008 "Propagation of
distributions using a Monte Carlo method").

Scene: a cue ball rolls (deceleration mu_r g along its velocity, rolling resistance as force /
weight, R. Cross, Am. J. Phys. 90(9):648, 2022) into a resting ball of equal mass at a cut angle,
frictionless contact with restitution e. Along the line of centres n the normal velocities
follow the equal-mass closed form (v_a' = (1 - e) v_n / 2, v_b' = (1 + e) v_n / 2, REFERENCES.md);
the tangential part stays with the cue ball. The spins do not change (no friction at the
contact), so the cue ball leaves with slip u = v_a' - v (it rolled in) and the object ball with
slip u = v_b'; each slides at mu_s g against its slip for t = 2 |u| / (7 mu_s g) and then rolls
(slide-to-roll closed form, REFERENCES.md: velocity change (2/7) |u| against u).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from feltlab.standards import G_MM_S2, table_preset
from physics.pipeline import analyze_tracks, ball_ball_values, tables_from_positions
from physics.settings import PhysicsSettings

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
MASS = TABLE.ball.mass_kg
MU_S, MU_R, E = 0.2, 0.01, 0.94  # invented scene values, inside the published ranges (REFERENCES.md)


def _roll(p0, v0, t):
    """Rolling from p0 (mm) at v0 (mm/s): deceleration mu_r g along v0 until it stops."""
    sp = float(np.hypot(*v0))
    a = MU_R * G_MM_S2
    tt = np.clip(t, 0.0, sp / a)
    return p0 + np.outer(sp * tt - 0.5 * a * tt**2, v0 / sp)


def _slide_then_roll(p0, v0, slip, t):
    us = float(np.hypot(*slip))
    if us < 1e-9:
        return _roll(p0, v0, t)
    acc = -MU_S * G_MM_S2 * slip / us
    ts = 2.0 * us / (7.0 * MU_S * G_MM_S2)
    t1 = np.minimum(t, ts)
    p = p0 + np.outer(t1, v0) + 0.5 * np.outer(t1**2, acc)
    late = t > ts
    p[late] = _roll(p0 + v0 * ts + 0.5 * acc * ts**2, v0 + acc * ts, t[late] - ts)
    return p


def cut_scene(speed_mm_s: float, cut_deg: float, t_c: float = 0.3):
    """Centres (mm) at times t (s) of the scene in the module docstring: ball -> (T, 2)."""
    phi = np.radians(cut_deg)
    a0, d = np.array([600.0, 635.0]), np.array([1.0, 0.0])
    pa_c = _roll(a0, speed_mm_s * d, np.array([t_c]))[0]
    v_in = (speed_mm_s - MU_R * G_MM_S2 * t_c) * d
    n = np.array([np.cos(phi), -np.sin(phi)])
    pb = pa_c + 2 * R * n
    vb = 0.5 * (1 + E) * (v_in @ n) * n
    va = v_in - vb

    def pos(t):
        t = np.asarray(t, float)
        before = (t < t_c)[:, None]
        return {"cue": np.where(before, _roll(a0, speed_mm_s * d, t), _slide_then_roll(pa_c, va, va - v_in, t - t_c)),
                "red": np.where(before, pb[None, :], _slide_then_roll(pb, vb, vb, t - t_c))}
    return pos


def _draws(fps, noise_mm, n_draws, speed, cut, seed):
    pos = cut_scene(speed, cut)
    rng = np.random.default_rng(seed)
    times = np.arange(rng.uniform(0, 1 / fps), 1.0, 1 / fps)
    P = pos(times)
    s = PhysicsSettings()
    s_block = replace(s, pair_joint_cov=False)
    e, sd_joint, sd_block, sd_rep = [], [], [], []
    for k in range(n_draws):
        tr, det = tables_from_positions(times, P, noise_mm, np.random.default_rng([seed, k]), fps)
        out = analyze_tracks(tr, det, TABLE, R, MASS, fps, s)
        c = out.contacts[out.contacts.kind == "ball-ball"]
        assert len(c) == 1, out.contacts[["t_s", "kind", "ball_a", "ball_b"]]
        c = c.iloc[0]
        fa, fb = out.fits[c.ball_a], out.fits[c.ball_b]
        ia = int(np.argmin(np.abs(fa.breaks() - c.t_s)))
        ib = int(np.argmin(np.abs(fb.breaks() - c.t_s)))
        e.append(c.e)
        sd_rep.append(c.e_sigma)
        sd_joint.append(np.sqrt(ball_ball_values(fa, ia, fb, ib, R, 1 / fps, s, sampling=True)[1][0]))
        sd_block.append(np.sqrt(ball_ball_values(fa, ia, fb, ib, R, 1 / fps, s_block, sampling=True)[1][0]))
    return np.array(e), np.array(sd_joint), np.array(sd_block), np.array(sd_rep)


def test_noise_sigma_of_e_matches_monte_carlo_on_a_fast_cut():
    """1400 mm/s, 20-degree cut, 60 fps, 0.3 mm noise, 20 draws: the noise part of e's propagated
    sigma (one Jacobian over both balls' parameters, through the touch time and the normal) is
    within 25 % of the spread of e over the draws (JCGM 101 Monte Carlo check)."""
    e, sd_joint, _, _ = _draws(60.0, 0.3, 20, 1400.0, 20.0, seed=5)
    ratio = float(np.median(sd_joint) / np.std(e, ddof=1))
    assert 0.75 < ratio < 1.33, ratio
    assert abs(np.mean(e) - E) < 3 * np.std(e, ddof=1), np.mean(e)


def _post_normal_velocities(out, n):
    c = out.contacts[out.contacts.kind == "ball-ball"].iloc[0]
    va = np.array([c.va_out_x_mm_s, c.va_out_y_mm_s]) @ n
    vb = np.array([c.vb_out_x_mm_s, c.vb_out_y_mm_s]) @ n
    return (va, vb) if c.ball_a == "cue" else (vb, va)


def test_shared_slip_shift_correlates_the_two_balls_as_noise_draws_show():
    """A slow rolling hit (420 mm/s, 15-degree cut, 120 fps, 0.4 mm noise) where both balls'
    fits share the slip shift: over 12 noise draws the two balls' post-contact velocities along
    the true normal err together (correlation > 0.5); the joint covariance predicts a positive
    correlation of that size (within 0.35), the two balls' own blocks alone say 0. The e sigma
    with the joint covariance is smaller than without it."""
    from physics.pair_cov import joint_cov
    from physics.contacts import _jacobian

    fps, noise, seed = 120.0, 0.4, 5
    pos = cut_scene(420.0, 15.0)
    n = np.array([np.cos(np.radians(15.0)), -np.sin(np.radians(15.0))])
    rng = np.random.default_rng(seed)
    times = np.arange(rng.uniform(0, 1 / fps), 1.0, 1 / fps)
    P = pos(times)
    s = PhysicsSettings()
    v, pred, sig_j, sig_b = [], [], [], []
    for k in range(12):
        tr, det = tables_from_positions(times, P, noise, np.random.default_rng([seed, k]), fps)
        out = analyze_tracks(tr, det, TABLE, R, MASS, fps, s)
        v.append(_post_normal_velocities(out, n))
        c = out.contacts[out.contacts.kind == "ball-ball"].iloc[0]
        fa, fb = out.fits["cue"], out.fits["red"]
        ia = int(np.argmin(np.abs(fa.breaks() - c.t_s)))
        ib = int(np.argmin(np.abs(fb.breaks() - c.t_s)))
        na = len(fa.x)
        xz = np.concatenate([fa.x, fb.x])

        def post(z):
            return np.array([fa.at_break(ia, z[:na])[3] @ n, fb.at_break(ib, z[na:])[3] @ n])

        cz = joint_cov(fa, ia, fb, ib, s, sampling=True)
        G = _jacobian(post, xz, cz)
        cv = G @ cz @ G.T
        pred.append(cv[0, 1] / np.sqrt(cv[0, 0] * cv[1, 1]))
        sig_j.append(np.sqrt(ball_ball_values(fa, ia, fb, ib, R, 1 / fps, s)[1][0]))
        sig_b.append(np.sqrt(ball_ball_values(fa, ia, fb, ib, R, 1 / fps, replace(s, pair_joint_cov=False))[1][0]))
    v = np.array(v)
    mc = float(np.corrcoef(v.T)[0, 1])
    assert mc > 0.5, mc
    assert abs(float(np.median(pred)) - mc) < 0.35, (np.median(pred), mc)
    assert np.median(sig_j) < np.median(sig_b), (np.median(sig_j), np.median(sig_b))
