#!/usr/bin/env python3
"""Cross-check scripts/id_metrics.py against py-motmetrics (a general-purpose MOT evaluation library)
on 300 random scenes: identity switches, matches and fragmentations must agree scene by scene.

motmetrics is not a feltlab dependency: run in a scratch venv with motmetrics, numpy, scipy, pandas
(1.4.0 needs integer ids with pandas 3). Measured 2026-12-02: 0 of 300 scenes differ
(372 switches, 1720 fragmentations; motmetrics counts a switching pair under SWITCH, not MATCH).
"""
import sys
from pathlib import Path

import motmetrics as mm
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from id_metrics import clear_mot_identity
tot = dict(sw=0, sw_mm=0, m=0, m_mm=0, fr=0, fr_mm=0)
diff = 0
for seed in range(300):
    rng = np.random.default_rng(seed)
    n, nb = 40, rng.integers(2, 6)
    truth = {f"b{i}": np.cumsum(rng.normal(0, 6, (n, 2)), axis=0) + rng.uniform(0, 150, 2) for i in range(nb)}
    for b in truth:
        if rng.random() < 0.3:
            truth[b][rng.integers(0, n):] = np.nan
    tracks = {}
    for i, b in enumerate(truth):
        a = truth[b] + rng.normal(0, 8, (n, 2))
        k = rng.integers(0, n)
        if rng.random() < 0.5:  # dropout
            a[k:k + rng.integers(1, 6)] = np.nan
        if rng.random() < 0.4:  # track ends, new name continues
            tracks[f"t{i}x"] = a.copy(); tracks[f"t{i}x"][:k] = np.nan; a[k:] = np.nan
        tracks[f"t{i}"] = a
    gate = 20.0
    rep = clear_mot_identity(truth, tracks, gate)
    acc = mm.MOTAccumulator(auto_id=True)
    bids, names = sorted(truth), sorted(tracks)
    for k in range(n):
        o = [b for b in bids if np.isfinite(truth[b][k, 0])]
        h = [t for t in names if np.isfinite(tracks[t][k, 0])]
        D = np.array([[np.hypot(*(truth[b][k] - tracks[t][k])) for t in h] for b in o]).reshape(len(o), len(h))
        D[D > gate] = np.nan
        acc.update([bids.index(x) for x in o], [names.index(x) for x in h], D)
    s = mm.metrics.create().compute(acc, metrics=["num_switches", "num_matches", "num_fragmentations"], name="x")
    a, b_, c = int(s.num_switches.iloc[0]), int(s.num_matches.iloc[0]), int(s.num_fragmentations.iloc[0])
    tot["sw"] += rep.switches; tot["sw_mm"] += a
    m = sum(x.n_matched for x in rep.balls.values()); tot["m"] += m; tot["m_mm"] += b_
    tot["fr"] += rep.frag; tot["fr_mm"] += c
    diff += (rep.switches != a) or (m != b_ + a) or (rep.frag != c)
print(tot, "scenes differing in switches, matches or fragmentations:", diff, "of 300")
