"""Where a ball meets a cushion: the nose is above the ball's centre (physics/cushion_geometry.py).

Checks: the closed form against a direct 3-D computation; the simulator's first touch
against it; and the measured contact time against an outside engine's (MuJoCo truth of the
shared footage, see its README), which a flat-wall "one radius from the nose" rule misses by
0.7-2.9 ms (0.16-0.17 frame on those clips).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from feltlab.standards import POOL_NOSE_HEIGHT_MM, table_preset
from physics.cushion_geometry import contact_distance_mm
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.simulate import BallInit, SimParams, simulate

FOOTAGE = Path(__file__).resolve().parents[2] / "shared" / "footage"
TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm


def _touch_distance_3d(radius: float, h: float) -> float:
    """Bisection on the 3-D distance from the ball centre (d, R) to the nose line (0, h), in the
    vertical plane across the cushion: the first d at which it equals R (independent of the closed form)."""
    lo, hi = 0.0, 2 * radius
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if np.hypot(mid, h - radius) > radius:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


@pytest.mark.parametrize("radius,h", [(R, POOL_NOSE_HEIGHT_MM), (26.25, 0.635 * 52.5), (30.75, 37.0),
                                      (R, 0.625 * 2 * R), (R, 0.645 * 2 * R)])
def test_closed_form_matches_direct_geometry(radius, h):
    # pool: WPA ball 57.15 mm and nose 1 7/16 in (62.5-64.5 % of the ball); snooker 52.5 mm (WPBSA)
    # with the pool fraction; carom 61.5 mm balls with a 37 mm nose (UMB); all secondary copies
    assert contact_distance_mm(radius, h) == pytest.approx(_touch_distance_3d(radius, h), abs=1e-9)
    assert contact_distance_mm(radius, h) < radius


def test_simulated_ball_touches_at_the_nose_distance():
    """A ball rolling straight at the y = 0 cushion: the simulator's contact instant is when its
    centre is contact_distance_mm from the nose line (not R)."""
    p = SimParams.for_table(TABLE)
    v = 900.0
    ball = BallInit("cue", 1000.0, 400.0, 0.0, -v, wx=v / R, wy=0.0, wz=0.0)  # rolling: contact-point slip v + w x (-R z) = 0
    res = simulate([ball], p, 1.0)
    hit = [c for c in res.contacts if c.kind == "ball-cushion"][0]
    y = res.state_at([hit.t_s]).pos[0, 0, 1]
    # state at the event is post-event; the centre has not moved during the instantaneous bounce
    assert y == pytest.approx(contact_distance_mm(R, TABLE.cushion_nose_height_mm), abs=1e-6)


@pytest.mark.footage
@pytest.mark.parametrize("clip", ["D1", "D2"])
def test_cushion_contact_time_matches_outside_engine(clip):
    """MuJoCo truth positions of the shared footage plus 0.2 mm noise: every cushion contact's
    measured first touch within 0.08 frame of the engine's (the flat-wall rule is 0.16 frame early)."""
    path = FOOTAGE / f"{clip}.truth.json"
    if not path.exists():
        pytest.skip("shared footage not present")
    d = json.loads(path.read_text())
    t = np.array(d["frames"]["t_s"], float)
    pos = {b: np.array([[np.nan, np.nan] if q is None or q[0] is None else q for q in p], float)
           for b, p in d["frames"]["positions_mm"].items()}
    tracks, det = tables_from_positions(t, pos, 0.2, np.random.default_rng(5), d["fps"])
    out = analyze_tracks(tracks, det, TABLE, R, TABLE.ball.mass_kg, d["fps"])
    truth = [c for c in d["contacts"] if c["kind"] == "ball-cushion" and c.get("required", True)]
    got = out.contacts[out.contacts.kind == "ball-cushion"]
    assert len(truth) >= 1
    for c in truth:
        dt = np.abs(got.t_s.to_numpy(float) - c["t_s"])
        assert dt.min() * d["fps"] < 0.08, (c, got.t_s.tolist())
