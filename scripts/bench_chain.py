"""Contact finding in cluster breaks, slow touches and near misses (prints figures, asserts nothing).

Scenarios, all simulated with :mod:`physics.simulate` on an 8-ft table, sampled at a frame rate
with a random sub-frame phase and given Gaussian position noise of 0.2-0.5 mm:

* ``rack``: a triangle of 3, 6 or 10 balls with random gaps of 0-0.6 mm, opened by a cue ball at
  1500-4000 mm/s (a training-drill spread);
* ``chain``: a random line or zig-zag of 2-4 nearly touching balls struck end-on;
* ``slow``: a cue ball rolling into a resting ball at 40-250 mm/s approach;
* ``graze``: a cue ball passing a resting ball at 0.3-4 mm gap (no contact allowed).

A true contact is required when it changes a ball's normal velocity by >= 30 mm/s, is not micro,
is not a repeat of the same pair within one frame period and is not in the last two frames (same
rule as the end-to-end tests). 30 mm/s is above the compound-event link floor
(``PhysicsSettings.link_dv_floor_mm_s``, 5 mm/s), so every required link is one the finder could
report; a required link below that floor would be counted under ``below floor`` and not as missed.
Missed contacts are also split by their push: ``missed<150`` counts those below 150 mm/s (slow
touches and the small secondary pushes inside a rack). Found contacts are matched to truth by ball pair within 2 frame
periods; a found contact with no true contact of its pair nearby is false.

Without ``--full`` only the contact finder runs (candidates, fast); ``--full`` runs the whole
physics stage and also reports the groups' momentum balance (|residual| / sigma < 2).

usage: python scripts/bench_chain.py [--n 20] [--fps 60,240] [--seed 7] [--kinds rack,chain,slow,graze] [--full]
"""
from __future__ import annotations

import argparse
import math
import time
import zlib

import numpy as np

from feltlab.standards import table_preset
import pandas as pd

from physics.events import ball_samples, find_contacts
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.settings import PhysicsSettings
from physics.simulate import BallInit, SimParams, simulate

TABLE = table_preset("pool-8ft")
R = TABLE.ball.radius_mm
MASS = TABLE.ball.mass_kg
SIGNIFICANT_MM_S = 30.0
NAMES = ["yellow", "blue", "red", "purple", "orange", "green", "maroon", "black", "yellow-stripe", "blue-stripe"]


def _params(rng):
    return SimParams.for_table(
        TABLE, e_ball_ball=rng.uniform(0.90, 0.98), e_cushion=rng.uniform(0.6, 0.9),
        mu_slide=rng.uniform(0.15, 0.3), mu_roll=rng.uniform(0.006, 0.014),
        mu_ball_ball=rng.choice([0.0, rng.uniform(0.03, 0.07)]))


def make_scene(rng: np.random.Generator, kind: str):
    """(balls, params, t_end) for one scene of ``kind``."""
    params = _params(rng)
    L, W = TABLE.length_mm, TABLE.width_mm
    if kind == "rack":
        rows = int(rng.choice([2, 3, 4]))
        apex = np.array([rng.uniform(0.55, 0.7) * L, rng.uniform(0.4, 0.6) * W])
        ang = math.radians(rng.uniform(-20, 20))
        u = np.array([math.cos(ang), math.sin(ang)])
        v = np.array([-u[1], u[0]])
        balls, k = [], 0
        d = 2 * R + rng.uniform(0.02, 0.6)
        for r in range(rows):
            for j in range(r + 1):
                p = apex + r * d * math.sqrt(3) / 2 * u + (j - r / 2) * d * v
                balls.append(BallInit(NAMES[k], *p))
                k += 1
        dist = rng.uniform(300, 900)
        aim = math.radians(rng.uniform(-3, 3))
        h = ang + aim
        cue = apex - 2 * R * np.array([math.cos(h), math.sin(h)]) * 1.0 - dist * np.array([math.cos(h), math.sin(h)])
        speed = rng.uniform(1500, 4000)
        balls.insert(0, BallInit.struck("cue", *cue, speed, math.degrees(h), top_rad_s=rng.uniform(-0.5, 0.8) * speed / R))
        return balls, params, 1.5
    if kind == "chain":
        n = int(rng.integers(2, 5))
        p = np.array([rng.uniform(0.45, 0.6) * L, rng.uniform(0.35, 0.65) * W])
        h0 = rng.uniform(0, 2 * math.pi)
        balls = []
        h = h0
        for i in range(n):
            balls.append(BallInit(NAMES[i], *p))
            h = h0 + math.radians(rng.uniform(-35, 35))
            p = p + (2 * R + rng.uniform(0.02, 0.5)) * np.array([math.cos(h), math.sin(h)])
        d = np.array([math.cos(h0), math.sin(h0)])
        cue = np.array([balls[0].x_mm, balls[0].y_mm]) - (2 * R + rng.uniform(200, 600)) * d
        speed = rng.uniform(1000, 3500)
        balls.insert(0, BallInit.struck("cue", *cue, speed, math.degrees(h0) + rng.uniform(-4, 4),
                                        top_rad_s=rng.uniform(-0.5, 1.0) * speed / R))
        return balls, params, 1.5
    # slow touch / grazing pass: cue ball rolling (natural roll) towards a resting ball
    obj = np.array([rng.uniform(0.35, 0.65) * L, rng.uniform(0.35, 0.65) * W])
    h = rng.uniform(0, 2 * math.pi)
    d = np.array([math.cos(h), math.sin(h)])
    perp = np.array([-d[1], d[0]])
    dist = rng.uniform(150, 400)
    v_touch = rng.uniform(40, 250)
    if kind == "slow":
        off = rng.uniform(0, 1.6) * R * rng.choice([-1, 1])  # cut up to ~50 degrees
    else:
        off = (2 * R + rng.uniform(0.3, 4.0)) * rng.choice([-1, 1])
    # rolling deceleration mu_roll g: speed at the start that leaves v_touch after dist
    a_r = params.mu_roll * params.g_mm_s2
    along = math.sqrt(max((2 * R) ** 2 - off**2, 0.0)) if abs(off) < 2 * R else 0.0
    travel = dist - along
    v0 = math.sqrt(v_touch**2 + 2 * a_r * travel)
    cue = obj - dist * d + off * perp
    balls = [BallInit.struck("cue", *cue, v0, math.degrees(h), top_rad_s=v0 / R), BallInit("red", *obj)]
    return balls, params, 2.0


def run(balls, params, t_end, fps, sigma, rng, full=False):
    """(simulation, contacts table): the whole physics stage (``full``) or the contact finder
    alone (candidates as rows t_s, kind, ball_a, ball_b, cushion, group; much faster)."""
    res = simulate(balls, params, t_end)
    dt = 1.0 / fps
    times = np.arange(rng.uniform(0, dt), t_end, dt)
    st = res.state_at(times)
    pos = {bid: st.pos[:, k].copy() for k, bid in enumerate(res.ball_ids)}
    tracks, det = tables_from_positions(times, pos, sigma, rng, fps)
    if full:
        return res, analyze_tracks(tracks, det, TABLE, R, MASS, fps).contacts
    s = PhysicsSettings()
    cands = find_contacts(ball_samples(tracks, det, s), TABLE.length_mm, TABLE.width_mm, R, dt, s)
    return res, pd.DataFrame([dict(t_s=c.t_init_s, kind=c.kind, ball_a=c.ball_a, ball_b=c.ball_b,
                                   cushion=c.cushion, group=c.group) for c in cands],
                             columns=["t_s", "kind", "ball_a", "ball_b", "cushion", "group"])


def push_mm_s(c) -> float:
    """Normal velocity change (mm/s) of a true contact."""
    return float(abs(((c.vb_post - c.vb_pre) if c.kind == "ball-ball" else (c.va_post - c.va_pre)) @ c.normal))


def required(res, fps, floor_mm_s: float = PhysicsSettings().link_dv_floor_mm_s):
    """Indices of required true contacts (see module docstring)."""
    out, last = [], {}
    for i, c in enumerate(res.contacts):
        key = (c.kind, frozenset((c.ball_a, c.ball_b or c.cushion)))
        prev = last.get(key)
        last[key] = c.t_s
        if c.micro or c.t_s > res.t_end_s - 2.0 / fps:
            continue
        if prev is not None and c.t_s - prev < 1.0 / fps:
            continue
        if push_mm_s(c) >= max(SIGNIFICANT_MM_S, floor_mm_s):
            out.append(i)
    return out


def below_floor(res, floor_mm_s: float = PhysicsSettings().link_dv_floor_mm_s) -> int:
    """True ball-ball contacts >= 30 mm/s whose push is below the link floor (not visible)."""
    return sum(1 for c in res.contacts if c.kind == "ball-ball" and not c.micro
               and SIGNIFICANT_MM_S <= push_mm_s(c) < floor_mm_s)


def match(res, found, fps):
    win = 2.0 / fps
    req = required(res, fps)
    used = set()
    missed = []
    for i, c in enumerate(res.contacts):
        key = (c.kind, frozenset((c.ball_a, c.ball_b or c.cushion)))
        best, bd = None, win
        for j, r in found.iterrows():
            if j in used or (r.kind, frozenset((r.ball_a, r.ball_b or r.cushion))) != key:
                continue
            if abs(r.t_s - c.t_s) < bd:
                best, bd = j, abs(r.t_s - c.t_s)
        if best is not None:
            used.add(best)
        elif i in req:
            missed.append(c)
    false = [found.loc[j] for j in found.index if j not in used]
    # a found contact next to a repeat of its pair inside the window is not false
    false = [r for r in false if not any(
        (c.kind, frozenset((c.ball_a, c.ball_b or c.cushion))) == (r.kind, frozenset((r.ball_a, r.ball_b or r.cushion)))
        and abs(c.t_s - r.t_s) < win for c in res.contacts)]
    return len(req), missed, false


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=20)
    ap.add_argument("--fps", default="60,240")
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--kinds", default="rack,chain,slow,graze")
    ap.add_argument("--verbose", action="store_true")
    ap.add_argument("--full", action="store_true", help="run the whole physics stage (slow)")
    ap.add_argument("--baseline", action="store_true", help="pairwise contacts only (no compound events)")
    a = ap.parse_args()
    kinds = a.kinds.split(",")
    if a.baseline:
        import physics.compound

        physics.compound.find_groups = lambda *args, **kw: []
    for kind in kinds:
        for fps in [float(f) for f in a.fps.split(",")]:
            tot = dict(req=0, missed=0, false=0, time=0.0, gm=[], slow=0, floor=0)
            for i in range(a.n):
                rng = np.random.default_rng([a.seed, i, zlib.crc32(kind.encode())])
                balls, params, t_end = make_scene(rng, kind)
                rng2 = np.random.default_rng([a.seed, i, int(fps)])
                sigma = rng2.uniform(0.2, 0.5)
                t0 = time.perf_counter()
                try:
                    res, found = run(balls, params, t_end, fps, sigma, rng2, a.full)
                except Exception as exc:  # noqa: BLE001 - a benchmark reports and goes on
                    print(f"  {kind} {i} fps {fps:.0f}: {type(exc).__name__}: {exc}")
                    continue
                tot["time"] += time.perf_counter() - t0
                nreq, missed, false = match(res, found, fps)
                tot["req"] += nreq
                tot["missed"] += len(missed)
                tot["slow"] += sum(push_mm_s(c) < 150.0 for c in missed)
                tot["floor"] += below_floor(res)
                tot["false"] += len(false)
                if "group_momentum_residual_pct" in found.columns:
                    g = found.dropna(subset=["group_momentum_residual_pct"]).drop_duplicates("group")
                    tot["gm"] += list(g["group_momentum_residual_pct"] / g["group_momentum_residual_sigma_pct"])
                if a.verbose and (missed or false):
                    print(f"  {kind} {i} fps {fps:.0f} sigma {sigma:.2f}:")
                    for c in missed:
                        print(f"    MISSED {c.kind} {c.ball_a}-{c.ball_b or c.cushion} t={c.t_s:.5f} "
                              f"vin={c.speed_in_mm_s:.0f} push={push_mm_s(c):.0f}")
                    for r in false:
                        print(f"    FALSE {r.kind} {r.ball_a}-{r.ball_b or r.cushion} t={r.t_s:.5f}")
            gm = np.abs(tot["gm"])
            print(f"{kind:6s} fps {fps:4.0f}: required {tot['req']:4d} missed {tot['missed']:3d} "
                  f"(missed<150 {tot['slow']:3d}, below floor {tot['floor']}) false {tot['false']:3d}  groups {len(gm):3d} |momentum z|<2: "
                  f"{np.mean(gm < 2) if len(gm) else float('nan'):.2f}  {tot['time'] / a.n:.2f} s/scene")


if __name__ == "__main__":
    main()
