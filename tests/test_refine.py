"""The model-based contact refit (physics/refine.py) against closed forms.

The shot is built from textbook closed forms, not from our simulator (shared REFERENCES.md):
a cue ball rolls straight into a resting object ball; equal masses, head-on, restitution e:
``v_a' = (1 - e) v / 2``, ``v_b' = (1 + e) v / 2``; a frictionless contact leaves the spins alone,
so after it each ball slides on the cloth (Coulomb friction ``mu_s g`` against the slip velocity
``u = v + w x (-R z)``, which decays at ``(7/2) mu_s g``) until it rolls, then decelerates at
``mu_r g`` (the "force / weight" rolling-resistance definition, R. Cross, Am. J. Phys. 90(9):648,
2022). Slide to roll with initial spin: final velocity ``(5 v0 + 2 R w0 x z) / 7``.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from feltlab.standards import table_preset
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.refine import REFINED_COLUMNS, RefineSettings, refine_contacts

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
M = TABLE.ball.mass_kg
G = 9806.65  # mm/s^2, CGPM standard gravity


def _line(t, s0, v0, a, t_end=np.inf):
    """Distance along a line under constant acceleration a from speed v0, frozen after t_end."""
    tt = np.minimum(t, t_end)
    return s0 + v0 * tt + 0.5 * a * tt * tt


def _ball_motion(t, v0, u0, mu_s, mu_r):
    """Distance (mm) along the line of motion after a contact at t=0: speed v0, slip u0 (both along
    the line, mm/s); slide at -sign(u0) mu_s g until the slip is gone, then roll at -mu_r g."""
    t = np.asarray(t, float)
    if abs(u0) > 0:
        a = -math.copysign(mu_s * G, u0)
        ts = 2.0 * abs(u0) / (7.0 * mu_s * G)  # |u| decays at (7/2) mu_s g
    else:
        a, ts = 0.0, 0.0
    s_slide = _line(t, 0.0, v0, a, ts)
    vr = v0 + a * ts  # = (5 v0 + 2 (v0 - u0)) / 7, the closed form above
    t_stop = ts + vr / (mu_r * G)
    s_roll = _line(np.clip(t - ts, 0, None), 0.0, vr, -mu_r * G, t_stop - ts)
    return np.where(t < ts, s_slide, _line(ts, 0.0, v0, a) + s_roll)


def head_on_shot(e, v_start=1600.0, heading_deg=17.0, fps=120.0, sigma=0.3, seed=3, mu_s=0.2, mu_r=0.01):
    """Samples of a rolling cue ball hitting a resting object ball full in the face."""
    d = np.array([math.cos(math.radians(heading_deg)), math.sin(math.radians(heading_deg))])
    cue0 = np.array([700.0, 400.0])
    gap = 600.0  # centre travel to the touch (mm)
    obj0 = cue0 + (gap + 2 * R) * d
    # rolling in: gap = v t - mu_r g t^2 / 2
    a_r = mu_r * G
    tc = (v_start - math.sqrt(v_start**2 - 2 * a_r * gap)) / a_r
    vc = v_start - a_r * tc
    va, vb = (1 - e) * vc / 2, (1 + e) * vc / 2
    rng = np.random.default_rng(seed)
    t = np.arange(rng.uniform(0, 1 / fps), 1.6, 1 / fps)
    before = t < tc
    s_cue = np.where(before, _line(t, 0.0, v_start, -a_r),
                     gap + _ball_motion(t - tc, va, va - vc, mu_s, mu_r))  # rolling: slip v - vc
    s_obj = np.where(before, 0.0, _ball_motion(t - tc, vb, vb, mu_s, mu_r))  # no spin: slip = v
    pos = {"cue": cue0 + s_cue[:, None] * d, "red": obj0 + s_obj[:, None] * d}
    tracks, det = tables_from_positions(t, pos, sigma, rng, fps)
    return tracks, det, tc, fps


@pytest.mark.slow  # ~10-25 s: a few hundred simulations per case
@pytest.mark.parametrize("e", [0.93, 0.96])
def test_refit_recovers_head_on_restitution(e):
    """Refit e within 0.01 and 3 of its sigmas of the closed-form e (frictionless contact model,
    as in the closed form; sigma 0.3 mm at 120 frames/s)."""
    tracks, det, tc, fps = head_on_shot(e)
    ph = analyze_tracks(tracks, det, TABLE, R, M, fps)
    bb = ph.contacts[ph.contacts.kind == "ball-ball"]
    assert len(bb) == 1
    ref = refine_contacts(ph, tracks, det, TABLE, R, M, fps, refine=RefineSettings(mu_ball_ball=0.0))
    assert list(ref.columns) == REFINED_COLUMNS
    r = ref.set_index("contact").loc[int(bb.contact.iloc[0])]
    assert r.converged, r.note
    # Newton restitution for equal masses, head-on (closed form in the module docstring)
    assert abs(r.e_refined - e) < 0.01
    assert abs(r.e_refined - e) < 3 * r.e_refined_sigma + 1e-4
    assert 0 < r.e_refined_sigma < 0.02
    # the contact time comes from the geometry: within a tenth of a frame of the closed form
    assert abs(r.t_refined_s - tc) < 0.1 / fps
    # cost guard: a few hundred simulations per contact at most (design limit, physics/refine.py)
    assert r.n_sim <= 600


def test_refit_reports_too_few_samples_instead_of_guessing():
    """A contact seen in too few frames after it: no number, converged False and a reason."""
    tracks, det, tc, fps = head_on_shot(0.95)
    ph = analyze_tracks(tracks, det, TABLE, R, M, fps)
    ref = refine_contacts(ph, tracks, det, TABLE, R, M, fps,
                          refine=RefineSettings(min_side_samples=10_000))
    assert len(ref) == len(ph.contacts)
    assert not ref.converged.any()
    assert ref.e_refined.isna().all()
    assert ref.note.str.contains("too few samples").all()
