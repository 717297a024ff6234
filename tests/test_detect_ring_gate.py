"""Where the dark-ring search runs (tracking/dark_ring.RingGate) and the window search it relies on.

Outside truth: the closed-form Lambert scenes of tests/test_detect_dark_ring.py
(a sphere of the cloth's own colour lit by a distant lamp and a sky, with its
cast shadow; sRGB encoding and Gaussian noise). The window search must give
the whole-image search's answer (the statistic is a correlation with kernels
of finite reach, so a window grown by that reach holds the same values); the
gate's plan follows the rule stated in DetectionSettings.ring_gate_*.
"""
from __future__ import annotations

import numpy as np

from test_detect_dark_ring import CLOTH, R, S, _lamp, _scene
from tracking.dark_ring import RingGate, ring_search
from tracking.detect import to_lab


def test_window_search_gives_the_whole_image_answer():
    cx, cy = 71.3, 58.6
    for seed in range(4):
        lum = to_lab(_scene([(cx, cy, CLOTH)], _lamp(25, 30), 0.35, 1.5, seed))[..., 0]
        valid = np.ones(lum.shape, bool)
        seeds, info = ring_search(lum, valid, R, np.zeros((0, 2)), np.zeros(0), S)
        assert len(seeds) == 1
        # a window of 2 radii round the ball plus the template's reach (ring_outer)
        m = int(np.ceil(2 * R + 2 * S.ring_outer[1] * R)) + 2
        xa, ya = int(cx) - m, int(cy) - m
        sub = lum[ya:int(cy) + m, xa:int(cx) + m]
        wseeds, _ = ring_search(sub, np.ones(sub.shape, bool), R, np.zeros((0, 2)), np.zeros(0), S, stats=info)
        assert len(wseeds) == 1
        assert (wseeds[0]["x"] + xa, wseeds[0]["y"] + ya) == (seeds[0]["x"], seeds[0]["y"])
        assert abs(wseeds[0]["q"] - seeds[0]["q"]) <= 1e-3 * seeds[0]["q"]


def test_window_search_without_a_ball_finds_nothing():
    lum = to_lab(_scene([(71.3, 58.6, CLOTH)], _lamp(25, 30), 0.35, 1.5, 0))[..., 0]
    _, info = ring_search(lum, np.ones(lum.shape, bool), R, np.zeros((0, 2)), np.zeros(0), S)
    empty = to_lab(_scene([], _lamp(25, 30), 0.35, 1.5, 1))[..., 0]
    seeds, _ = ring_search(empty, np.ones(empty.shape, bool), R, np.zeros((0, 2)), np.zeros(0), S, stats=info)
    assert seeds == []


STATS = {"mu": 0.0, "sd": 1.0, "level": 30.0, "noise_px": 1.0, "n_positions": 100.0}


def test_gate_plan_follows_its_rule():
    g = RingGate(S)
    known = np.zeros((3, 2))
    plans = []
    for k in range(2 * S.ring_gate_period + 2):
        p = g.plan(known)
        plans.append(p)
        # one ball of the cloth's colour found at (50, 40) on every frame searched
        g.record(np.array([[50.0, 40.0]]), STATS if p is None else None)
    full = [k for k, p in enumerate(plans) if p is None]
    # warm-up frames, then one every period
    assert full == list(range(S.ring_gate_warmup)) + list(range(S.ring_gate_warmup - 1 + S.ring_gate_period,
                                                                 len(plans), S.ring_gate_period))
    # in between: a window round the last finds only
    assert all(p == [(50.0, 40.0)] for p in plans if p is not None)


def test_gate_searches_everything_when_a_ball_goes_missing_and_nothing_without_finds():
    g = RingGate(S)
    for _ in range(S.ring_gate_warmup):
        assert g.plan(np.zeros((3, 2))) is None
        g.record(np.zeros((0, 2)), STATS)
    assert g.plan(np.zeros((3, 2))) == []  # no ring finds to follow: nothing to search
    g.record(np.zeros((0, 2)), None)
    assert g.plan(np.zeros((2, 2))) is None  # a colour-detected ball is missing


def test_gate_without_levels_searches_everything():
    g = RingGate(S)
    for _ in range(S.ring_gate_warmup + 2):
        assert g.plan(np.zeros((1, 2))) is None
        g.record(np.zeros((0, 2)), {"level": np.inf})  # too little open cloth: no level measured
