"""Our renders' truth converts to the outside footage layout that the shared scorer reads.

feltlab.render.truth.footage_truth; checked with the shared scorer's own functions
(../shared/score_footage.py: score_positions, score_contacts, independent of this project):
a prediction equal to the truth scores 0 mm and recall 1, and a prediction shifted by 3 mm
scores 3 mm (so the conversion keeps positions in table millimetres, not pixels).
"""
from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from feltlab.render import render_scenario
from feltlab.render.truth import footage_truth, read_truth, truth_path_for
from feltlab.render.variety import varied_scenario

SCORER = Path(__file__).resolve().parents[2] / "shared" / "score_footage.py"


@pytest.fixture(scope="module")
def scorer():
    if not SCORER.exists():
        pytest.skip(f"{SCORER} not found (the shared scorer sits beside the repository)")
    spec = importlib.util.spec_from_file_location("score_footage", SCORER)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_converted_truth_scores_zero_for_a_perfect_prediction(scorer, tmp_path):
    sc = varied_scenario(6201, resolution=(320, 180), fps=30.0, duration_s=1.0, tables=("pool-9ft",), n_balls=3,
                         whole=True)
    clip = tmp_path / "tiny.mp4"
    render_scenario(sc, clip)
    ours = read_truth(truth_path_for(clip))
    ft = footage_truth(ours, "tiny")
    assert ft["clip"] == "tiny" and ft["n_frames"] == ours["n_frames"] and ft["fps"] == 30
    pos = ft["frames"]["positions_mm"]
    pred = [(k, bid, p[0], p[1]) for bid, track in pos.items() for k, p in enumerate(track)]
    res = scorer.score_positions(pred, ft)
    assert res["rmse_mm"] == pytest.approx(0.0, abs=1e-9)
    assert all(b == lab for lab, b in res["label_map"].items())
    shifted = [(k, b, x + 3.0, y) for k, b, x, y in pred]
    assert scorer.score_positions(shifted, ft)["rmse_mm"] == pytest.approx(3.0, abs=1e-6)
    assert any(c["required"] for c in ft["contacts"]), "the drawn shot has a hit"
    cp = [dict(t_s=c["t_s"], kind=c["kind"], a=c["ball_a"], b=c["ball_b"], e=c["e"]) for c in ft["contacts"]]
    cres = scorer.score_contacts(cp, ft, res["label_map"])
    assert cres["recall"] == 1.0 and cres["precision"] == 1.0
    errs = cres["e_err_ball_ball"] + cres["e_err_ball_cushion"]
    assert errs and max(errs) == pytest.approx(0.0, abs=1e-12)
    # the moving balls are the ones that leave their start
    P = {b: np.asarray(v) for b, v in pos.items()}
    for b in ft["balls"]:
        assert b["moves"] == bool(np.max(np.linalg.norm(P[b["id"]] - P[b["id"]][0], axis=1)) > 1.0)
