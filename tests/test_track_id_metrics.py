"""The identity counter of scripts/id_metrics.py on hand-made cases.

Definition checked: CLEAR-MOT matching and mismatch count (Bernardin & Stiefelhagen, EURASIP JIVP
2008, sec. 2.1): a ball keeps its last track while that track stays within the gate; a new pair whose
ball was last matched to another track is one identity switch. Fragmentation as in Li, Huang &
Nevatia (CVPR 2009). Every expected number below is counted by hand from that definition.
The counter also agrees scene by scene with py-motmetrics, a general-purpose MOT evaluation library,
on 300 random scenes (scripts/xcheck_id_metrics.py; run in a scratch venv, not a dependency).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "scripts"))

from id_metrics import clear_mot_identity, cluster_own_tracks, clusters_at  # noqa: E402

R = 28.575  # pool ball radius, mm (WPA: 2.25 in diameter)


def _line(n: int, y: float, x0: float = 0.0, vx: float = 10.0) -> np.ndarray:
    return np.column_stack([x0 + vx * np.arange(n), np.full(n, y)])


def test_two_balls_swapping_tracks_count_two_switches():
    """Two balls 200 mm apart; the tracker swaps its two names at frame 6: each ball switches once."""
    n = 12
    a, b = _line(n, 100.0), _line(n, 300.0)
    t1 = a.copy()
    t2 = b.copy()
    t1[6:], t2[6:] = b[6:], a[6:]
    rep = clear_mot_identity({"A": a, "B": b}, {"t1": t1, "t2": t2}, gate_mm=R)
    assert rep.switches == 2
    assert rep.balls["A"].switch_frames == [6] and rep.balls["B"].switch_frames == [6]
    assert rep.balls["A"].tracks == {"t1": 6, "t2": 6}
    assert rep.coverage == 1.0 and rep.frag == 0


def test_close_pass_keeps_last_match_inside_gate():
    """Balls pass 10 mm apart; both tracks lie within the gate of both balls at the pass and the nearer
    one is the 'wrong' one for two frames. CLEAR-MOT keeps the last valid match: no switch."""
    n = 10
    a = _line(n, 100.0)
    b = _line(n, 110.0)
    t1, t2 = a.copy(), b.copy()
    t1[4:6, 1] += 8.0   # t1 drifts to 108 (nearer B at 110)
    t2[4:6, 1] -= 8.0   # t2 drifts to 102 (nearer A)
    rep = clear_mot_identity({"A": a, "B": b}, {"t1": t1, "t2": t2}, gate_mm=R)
    assert rep.switches == 0
    # a nearest-track rule would have counted 2 switches in and 2 back out
    nearest = sum(int(np.argmin([np.hypot(*(t1[k] - P[k])), np.hypot(*(t2[k] - P[k]))]) != i)
                  for k in range(n) for i, P in enumerate((a, b)))
    assert nearest == 4


def test_dropout_then_new_name_is_one_switch_and_one_fragment():
    """A ball's track ends at frame 4, nothing for 3 frames, a new track picks it up: 1 switch, 1 frag,
    coverage (12 - 3) / 12, two tracks for the ball."""
    n = 12
    a = _line(n, 100.0)
    t1 = a.copy()
    t1[4:] = np.nan
    t2 = a.copy()
    t2[:7] = np.nan
    rep = clear_mot_identity({"A": a}, {"t1": t1, "t2": t2}, gate_mm=R)
    ba = rep.balls["A"]
    assert (rep.switches, rep.frag, len(ba.tracks)) == (1, 1, 2)
    assert ba.missed_frames == [4, 5, 6]
    assert abs(rep.coverage - 9 / 12) < 1e-12


def test_same_track_back_after_gap_is_fragment_not_switch():
    n = 10
    a = _line(n, 100.0)
    t1 = a.copy()
    t1[3:5] = np.nan
    rep = clear_mot_identity({"A": a}, {"t1": t1}, gate_mm=R)
    assert (rep.switches, rep.frag) == (0, 1)


def test_out_of_gate_is_a_miss_and_out_of_view_is_not_counted():
    n = 6
    a = _line(n, 100.0)
    t1 = a.copy()
    t1[2, 1] += R + 1.0          # beyond the gate: missed
    view = np.ones(n, bool)
    view[5] = False              # not counted at all
    rep = clear_mot_identity({"A": a}, {"t1": t1}, gate_mm=R, view={"A": view})
    assert rep.balls["A"].n_view == 5 and rep.balls["A"].missed_frames == [2]


def test_cluster_and_own_tracks():
    """Three touching balls and one far away; one track serves two cluster balls alternately."""
    P0 = {"a": np.array([0.0, 0.0]), "b": np.array([2 * R, 0.0]), "c": np.array([4 * R + 1, 0.0]),
          "far": np.array([900.0, 0.0])}
    assert clusters_at(P0, link_mm=2 * R + 5) == [["a", "b", "c"]]
    n = 10
    truth = {k: np.tile(v, (n, 1)) for k, v in P0.items()}
    tr = {"ta": truth["a"].copy(), "tb": truth["b"].copy(), "tf": truth["far"].copy()}
    tr["tb"][::2] = truth["c"][::2]   # tb hops between b and c
    rep = clear_mot_identity(truth, tr, gate_mm=R)
    own = cluster_own_tracks(rep, ["a", "b", "c"], np.arange(n))
    assert own == {"a": "ta", "b": None, "c": None}
