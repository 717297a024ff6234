"""A contact the finder missed is recovered from its segment's bad fit (physics.pipeline._split_hidden).

The shot is a closed form written in tests/test_events_cushion_margin.py (a ball rolling into the
y = 0 cushion nose, normal velocity reversed with restitution e, tangential part kept, spin
unchanged so it leaves sliding with slip v' - v; slide-then-roll closed form of REFERENCES.md).
The finder's miss is forced by removing its cushion contact (as when a slow touch's change-point
windows are cut short by noise minima), so the test checks the recovery alone.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import physics.pipeline as pipeline
from physics.pipeline import analyze_tracks
from physics.settings import PhysicsSettings
from test_contacts import M, R, TABLE
from test_events_cushion_margin import cushion_bounce


def _finder_without_cushions(orig):
    def find(*a, **k):
        return [c for c in orig(*a, **k) if c.kind != "ball-cushion"]
    return find


@pytest.mark.parametrize("seed", [0, 1])
def test_missed_cushion_contact_is_split_out_of_its_segment(monkeypatch, seed):
    """0.6 m/s into the cushion at 120 fps (closed-form e = 0.8). With the finder's cushion contact
    removed, one segment must hold the bounce and its fit is far worse than the noise: the split
    must restore the contact on y0 within half a frame of the closed-form time, with e within 3
    of its sigmas and 0.05 of 0.8; without the split there is no contact."""
    tracks, det, tc = cushion_bounce(v_in=(150.0, -600.0), e=0.8, fps=120.0, phase=0.3, sigma=0.3,
                                     seed=seed, t_pre=0.5, t_post=0.5)
    monkeypatch.setattr(pipeline, "find_contacts", _finder_without_cushions(pipeline.find_contacts))
    off = analyze_tracks(tracks, det, TABLE, R, M, 120.0, replace(PhysicsSettings(), split_hidden=False))
    assert len(off.contacts) == 0
    c = analyze_tracks(tracks, det, TABLE, R, M, 120.0).contacts
    assert len(c) == 1, c[["t_s", "kind", "cushion", "e", "e_sigma"]]
    r = c.iloc[0]
    assert (r.kind, r.cushion) == ("ball-cushion", "y0")
    assert abs(r.t_s - tc) * 120.0 < 0.5, (r.t_s, tc)
    assert abs(r.e - 0.8) < min(3 * r.e_sigma, 0.05), (r.e, r.e_sigma)


def test_clean_roll_past_a_cushion_is_not_split(monkeypatch):
    """A ball rolling parallel to the y = 0 nose 3 mm off it (closed form: straight roll at
    mu_r g, no contact): its fit matches the noise, so no contact may appear."""
    from feltlab.standards import G_MM_S2
    from physics.pipeline import tables_from_positions

    rng = np.random.default_rng(5)
    t = np.arange(0.0, 1.0, 1 / 120)
    v, a = 800.0, 0.01 * G_MM_S2
    x = 400.0 + v * t - 0.5 * a * t**2
    p = np.column_stack([x, np.full_like(t, R + 3.0)])
    tracks, det = tables_from_positions(t, {"cue": p}, 0.3, rng, 120.0)
    c = analyze_tracks(tracks, det, TABLE, R, M, 120.0).contacts
    assert len(c) == 0, c[["t_s", "kind", "cushion", "e"]]
