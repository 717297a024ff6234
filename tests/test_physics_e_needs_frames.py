"""A contact in the clip's last frames: e needs a velocity on each side of the contact.

A ball rolls into cushion y0 at 1.2 m/s at 30 degrees and comes off with the normal speed
scaled by e = 0.8 (cushion e = -v'.n / v.n, the definition), the tangential speed kept; both
phases decelerate at the rolling rate. With the clip cut 2 frames after the contact the
segment after it cannot give a velocity and its deceleration (three positions are the least for
that): e's sigma can come out above 1/2, a one-sigma interval wider than 0 <= e <= 1, and then e
is left empty with a note; with 12 frames after it e is measured near 0.8.
Closed-form kinematics; the cushion contact distance from physics.cushion_geometry.
"""
from __future__ import annotations

import numpy as np
import pytest

from feltlab.standards import table_preset
from physics.cushion_geometry import contact_distance_mm
from physics.pipeline import analyze_tracks, tables_from_positions

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
FPS = 60.0
G = 9806.65
MU_R = 0.01


def _bounce(frames_after: int, seed: int):
    d = contact_distance_mm(R, TABLE.cushion_nose_height_mm)
    v, ang, e = 1200.0, np.radians(30.0), 0.8
    u_in = np.array([np.sin(ang), -np.cos(ang)])           # towards y = 0
    y0 = d + 400.0 * np.cos(ang)                           # 400 mm of travel to the cushion
    p0 = np.array([900.0, y0])
    # rolling: s(t) = v t - a t^2 / 2; time to cover 400 mm
    a = MU_R * G
    t_c = (v - np.sqrt(v * v - 2 * a * 400.0)) / a
    t_c = (np.floor(t_c * FPS) + 0.4) / FPS               # a contact 0.4 frame after a frame
    t = np.arange(0, t_c + (frames_after + 0.5) / FPS, 1 / FPS)[: int(np.floor(t_c * FPS)) + 1 + frames_after]
    s_c = v * t_c - a * t_c**2 / 2
    pc = p0 + s_c * u_in
    vc = (v - a * t_c) * u_in
    v_out = np.array([vc[0], -e * vc[1]])
    u_out = v_out / np.hypot(*v_out)
    pos = np.empty((len(t), 2))
    for k, tk in enumerate(t):
        if tk <= t_c:
            pos[k] = p0 + (v * tk - a * tk**2 / 2) * u_in
        else:
            dt = tk - t_c
            pos[k] = pc + (np.hypot(*v_out) * dt - a * dt**2 / 2) * u_out
    return tables_from_positions(t, {"cue": pos}, 0.2, np.random.default_rng(seed), FPS)


def test_two_frames_after_a_cushion_contact_give_e_only_with_a_useful_sigma():
    """Each noise draw: the contact is found; its e is either reported with a sigma under
    1/2 and within 3 sigma of 0.8, or left empty with a note naming the 2 frames after it.
    (Until the fit's covariance gave directions the data cannot fix the variance of their allowed
    range, physics.segments.bounded_cov, seed 5 here had sigma ~ 900 and was left empty; now every
    draw reports e with sigma 0.07-0.10, within 0.4 sigma. Either outcome is honest; a wrong e with
    a small sigma is not.)"""
    for seed in range(3, 9):
        tracks, det = _bounce(2, seed=seed)
        out = analyze_tracks(tracks, det, TABLE, R, M, FPS)
        cu = out.contacts[out.contacts.kind == "ball-cushion"]
        assert len(cu) == 1, seed
        r = cu.iloc[0]
        if np.isfinite(r.e):
            assert r.e_sigma <= 0.5 and abs(r.e - 0.8) < 3 * r.e_sigma + 0.02, (seed, r.e, r.e_sigma)
        else:
            assert np.isnan(r.e_sigma) and "e not measured" in str(r.note)
            assert "(cue has 2 frames after the contact)" in str(r.note)


def test_enough_frames_after_a_cushion_contact_give_e():
    tracks, det = _bounce(12, seed=3)
    out = analyze_tracks(tracks, det, TABLE, R, M, FPS)
    cu = out.contacts[out.contacts.kind == "ball-cushion"]
    assert len(cu) == 1
    r = cu.iloc[0]
    assert np.isfinite(r.e) and r.e == pytest.approx(0.8, abs=max(0.03, 3 * r.e_sigma))
    assert "e not measured" not in str(r.note)
