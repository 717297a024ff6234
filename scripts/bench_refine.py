"""Does the model-based contact refit (physics/refine.py) measure restitution better? (prints figures)

Per contact: |e - e_true| of the analytic chain fit (physics.pipeline.analyze_tracks) and of the
refit (physics.refine.refine_contacts) on the same samples, |error| / sigma for both, and the
refit's wall time. Sources (--sources, comma-separated):

* ``sim``: our own simulator's shots (the scenario generator of scripts/bench_physics.py) at 60
  frames/s, noise 0.2-0.5 mm. Circular for the refit (its model IS the truth generator): an upper
  bound, not evidence.
* ``footage``: the outside truth in ../shared/footage/D1.truth.json and D2.truth.json (a general
  physics engine's shots): the true centres at the clip rate, and D1 also every second frame
  (60 frames/s, both phases), each with 0.3 mm Gaussian noise over several seeds.
* ``pymunk``: pymunk (general 2-D engine, PyPI) resolves every ball-ball and cushion contact with
  its own impulse solver; the cloth (sliding friction on the slip velocity, rolling resistance)
  is applied as a force each step from the textbook sliding-sphere equations. 60 and 120 frames/s.
* ``video``: D1/D2 video through the full tracker (slow; tracks once, then both fits).

usage: python scripts/bench_refine.py [--sources sim,footage,pymunk] [--n 12] [--seed 11]
       [--mu-bb 0.06 | --fit-mu-bb] [--max-side 0.3] [--verbose]
"""
from __future__ import annotations

import argparse
import importlib.util
import json
import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from feltlab.standards import table_preset
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.refine import RefineSettings, refine_contacts

ROOT = Path(__file__).resolve().parents[1]
FOOTAGE = ROOT.parent / "shared" / "footage"
TABLE = table_preset("pool-9ft")
G = 9806.65


@dataclass
class Truth:
    t_s: float
    kind: str
    a: str
    b: str  # other ball or cushion name
    e: float
    valid: bool


def _bench_physics():
    spec = importlib.util.spec_from_file_location("bench_physics", ROOT / "scripts" / "bench_physics.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def evaluate(source, truths, tracks, det, fps, R, mass, rs, out):
    """Analyse, refine, match to truth within 2 frame periods; append records to ``out``."""
    ph = analyze_tracks(tracks, det, TABLE, R, mass, fps)
    t = time.perf_counter()
    ref = refine_contacts(ph, tracks, det, TABLE, R, mass, fps, refine=rs)
    wall = time.perf_counter() - t
    found = ph.contacts.merge(ref.rename(columns={c: f"ref_{c}" for c in ref.columns if c != "contact"}),
                             on="contact")
    used = set()
    for tr in truths:
        best, bd = None, 2.0 / fps
        for j, r in found.iterrows():
            if j in used or r.kind != tr.kind:
                continue
            if tr.kind == "ball-ball" and {r.ball_a, r.ball_b} != {tr.a, tr.b}:
                continue
            if tr.kind == "ball-cushion" and (r.ball_a != tr.a or r.cushion != tr.b):
                continue
            if abs(r.t_s - tr.t_s) < bd:
                best, bd = j, abs(r.t_s - tr.t_s)
        if best is None or not tr.valid:
            continue
        used.add(best)
        r = found.loc[best]
        out.append(dict(source=source, fps=fps, kind=tr.kind, e_true=tr.e, e_an=r.e, s_an=r.e_sigma,
                        e_ref=r.ref_e_refined, s_ref=r.ref_e_refined_sigma, conv=bool(r.ref_converged),
                        time=r.ref_time_s, n_sim=r.ref_n_sim, note=r.ref_note, dt_an=(r.t_s - tr.t_s) * fps,
                        dt_ref=(r.ref_t_refined_s - tr.t_s) * fps))
    return wall


# --------------------------------------------------------------------------- sources
def run_sim(n, seed, rs, out):
    bp = _bench_physics()
    for i in range(n):
        balls, params, t_end, kind = bp.make_shot(np.random.default_rng([seed, i]), i)
        rng = np.random.default_rng([seed, i, 60])
        sigma = rng.uniform(0.2, 0.5)
        from physics.simulate import simulate

        res = simulate(balls, params, t_end)
        fps = 60.0
        times = np.arange(rng.uniform(0, 1 / fps), t_end, 1 / fps)
        st = res.state_at(times)
        pos = {bid: st.pos[:, k] for k, bid in enumerate(res.ball_ids)}
        tracks, det = tables_from_positions(times, pos, sigma, rng, fps)
        truths = [Truth(c.t_s, c.kind, c.ball_a, c.ball_b or c.cushion, c.e_measured,
                        bp.significant(c) and c.speed_in_mm_s >= 150) for c in res.contacts]
        evaluate("sim", truths, tracks, det, fps, bp.R, bp.MASS, rs, out)


def _footage_truths(d):
    return [Truth(c["t_s"], c["kind"], c["ball_a"], c["ball_b"] or c.get("cushion", ""), c["e"],
                  bool(c.get("e_valid", True))) for c in d["contacts"]]


def run_footage(seeds, rs, out):
    for name in ("D1", "D2"):
        p = FOOTAGE / f"{name}.truth.json"
        if not p.is_file():
            print(f"(no {p}; footage source skipped)")
            return
        d = json.loads(p.read_text())
        t = np.array(d["frames"]["t_s"], float)
        pos = {k: np.array(v, float) for k, v in d["frames"]["positions_mm"].items()}
        R, mass = d["ball"]["diameter_mm"] / 2, d["ball"]["mass_kg"]
        fps = float(d["fps"])
        variants = [(fps, slice(None))]
        if fps >= 120:
            variants += [(fps / 2, slice(0, None, 2)), (fps / 2, slice(1, None, 2))]
        for seed in seeds:
            for f, sl in variants:
                rng = np.random.default_rng([seed, int(f), 0 if sl.start in (None, 0) else 1])
                tracks, det = tables_from_positions(t[sl], {k: v[sl] for k, v in pos.items()}, 0.3, rng, f)
                evaluate(f"footage-{name}", _footage_truths(d), tracks, det, f, R, mass, rs, out)


def pymunk_shot(rng, fps, R=28.575, M=0.163, mu_s=None, mu_r=None, e_bb=None, e_c=None, dur=2.5):
    """One shot in pymunk with cloth forces; returns times, positions, truths."""
    import pymunk

    mu_s = mu_s or rng.uniform(0.15, 0.3)
    mu_r = mu_r or rng.uniform(0.006, 0.014)
    e_bb = e_bb or rng.uniform(0.9, 0.97)
    e_c = e_c or rng.uniform(0.65, 0.9)
    L, W = TABLE.length_mm, TABLE.width_mm
    space = pymunk.Space()
    space.gravity = (0.0, 0.0)
    space.iterations = 50
    space.collision_slop = 1e-4
    for a, b in (((0, 0), (L, 0)), ((L, 0), (L, W)), ((L, W), (0, W)), ((0, W), (0, 0))):
        seg = pymunk.Segment(space.static_body, a, b, 0.0)
        seg.elasticity = 1.0  # pymunk multiplies the two shapes' elasticities
        seg.friction = 0.0
        space.add(seg)
    # object ball somewhere, cue aimed at a cut angle; or a bank shot
    while True:
        obj = np.array([rng.uniform(500, L - 500), rng.uniform(300, W - 300)])
        th = rng.uniform(0, 2 * math.pi)
        cut = math.radians(rng.uniform(0, 60)) * rng.choice([-1, 1])
        ghost = obj - 2 * R * np.array([math.cos(th), math.sin(th)])
        h = th + cut
        cue = ghost - rng.uniform(250, 800) * np.array([math.cos(h), math.sin(h)])
        if 100 < cue[0] < L - 100 and 100 < cue[1] < W - 100:
            break
    speed = rng.uniform(900, 3000)
    top = rng.uniform(-1.0, 1.0) * speed / R  # top (+) / back (-) spin about the horizontal axis
    d = np.array([math.cos(h), math.sin(h)])
    state = {}
    for name, p, v, w in (("cue", cue, speed * d, top * np.array([-d[1], d[0]])),
                          ("red", obj, np.zeros(2), np.zeros(2))):
        body = pymunk.Body(M, 0.4 * M * R * R)
        body.position = tuple(p)
        body.velocity = tuple(v)
        shape = pymunk.Circle(body, R)
        shape.elasticity = e_bb if name == "cue" else 1.0
        shape.friction = 0.0
        space.add(body, shape)
        state[name] = [body, shape, w.astype(float)]
    # ball-ball contacts use the product e_bb * 1.0; cushions the ball's own elasticity: set per
    # collision type below
    state["cue"][1].collision_type = 1
    state["red"][1].collision_type = 2
    for ct in (1, 2):
        def pre(arbiter, space_, data, ct=ct):
            shapes = arbiter.shapes
            if any(isinstance(s, pymunk.Segment) for s in shapes):
                arbiter.restitution = e_c
            else:
                arbiter.restitution = e_bb
            return True
        try:
            space.on_collision(ct, None, pre_solve=pre)
        except AttributeError:  # pymunk < 7
            hnd = space.add_wildcard_collision_handler(ct)
            hnd.pre_solve = pre
    sub = 40
    dt = 1.0 / fps / sub
    n = int(dur * fps)
    times, pos = [], {k: [] for k in state}
    truths: list[Truth] = []
    t0 = rng.uniform(0, 1.0 / fps)
    t = 0.0
    # advance to the first sample time
    k_step = 0
    next_sample = t0
    while len(times) < n:
        if t >= next_sample - 1e-12:
            times.append(next_sample)
            for k, (b, _, _) in state.items():
                pos[k].append(tuple(b.position))
            next_sample = t0 + len(times) / fps
        before = {k: np.array(b.velocity) for k, (b, _, _) in state.items()}
        bpos = {k: np.array(b.position) for k, (b, _, _) in state.items()}
        # cloth: sliding friction on the slip (textbook sliding sphere), else rolling resistance
        for k, st in state.items():
            b, _, w = st
            v = np.array(b.velocity)
            u = np.array([v[0] - R * w[1], v[1] + R * w[0]])
            su = float(np.hypot(*u))
            if su > 3.5 * mu_s * G * dt:
                f = -mu_s * M * G * u / su  # force (kg mm/s^2)
                b.velocity = tuple(v + f / M * dt)
                # torque of the cloth force at the bottom point (0,0,-R): (R fy, -R fx)
                w += np.array([R * f[1], -R * f[0]]) / (0.4 * M * R * R) * dt
            else:
                sp = float(np.hypot(*v))
                if sp > mu_r * G * dt:
                    v = v - mu_r * G * dt * v / sp
                else:
                    v = np.zeros(2)
                b.velocity = tuple(v)
                st[2] = np.array([-v[1] / R, v[0] / R])
        space.step(dt)
        t += dt
        k_step += 1
        after = {k: np.array(b.velocity) for k, (b, _, _) in state.items()}
        jumps = {k: float(np.hypot(*(after[k] - before[k]))) for k in state}
        if max(jumps.values()) > 20.0:
            pa, pb = np.array(state["cue"][0].position), np.array(state["red"][0].position)
            if np.hypot(*(pa - pb)) < 2 * R + 1.0 and jumps["cue"] > 20 and jumps["red"] > 20:
                nrm = (bpos["red"] - bpos["cue"]) / np.hypot(*(bpos["red"] - bpos["cue"]))
                app = float((before["cue"] - before["red"]) @ nrm)
                sep = float((after["red"] - after["cue"]) @ nrm)
                truths.append(Truth(t, "ball-ball", "cue", "red", sep / app, app >= 150))
            for k in state:
                if jumps[k] <= 20:
                    continue
                p = np.array(state[k][0].position)
                for cname, nrm, dist in (("x0", (1, 0), p[0]), ("xL", (-1, 0), L - p[0]),
                                         ("y0", (0, 1), p[1]), ("yW", (0, -1), W - p[1])):
                    if dist < R + 1.0:
                        nrm = np.array(nrm, float)
                        vin = -float(before[k] @ nrm)
                        if vin > 0:
                            truths.append(Truth(t, "ball-cushion", k, cname, float(after[k] @ nrm) / vin,
                                                vin >= 150))
    # merge repeats (solver iterations over two steps) -> keep the first of a contact within 2 ms
    merged: list[Truth] = []
    for tr in truths:
        if merged and any(m.kind == tr.kind and m.a == tr.a and m.b == tr.b and tr.t_s - m.t_s < 2e-3
                          for m in merged):
            continue
        merged.append(tr)
    return np.array(times), {k: np.array(v) for k, v in pos.items()}, merged


def run_pymunk(n, seed, rs, out):
    for i in range(n):
        for fps in (60.0, 120.0):
            rng = np.random.default_rng([seed, i, int(fps), 7])
            t, pos, truths = pymunk_shot(np.random.default_rng([seed, i]), fps)
            tracks, det = tables_from_positions(t, pos, 0.3, rng, fps)
            evaluate("pymunk", truths, tracks, det, fps, 28.575, 0.163, rs, out)


def run_video(rs, out):
    from tracking.pipeline import track_clip

    for name in ("D1", "D2"):
        p = FOOTAGE / f"{name}.mp4"
        if not p.is_file():
            return
        d = json.loads((FOOTAGE / f"{name}.truth.json").read_text())
        tr = track_clip(p, TABLE)
        # label-free: map tracked labels to truth ids by nearest mean distance
        pos = {k: np.array(v, float) for k, v in d["frames"]["positions_mm"].items()}
        tt = np.array(d["frames"]["t_s"])
        names = {}
        for lab, g in tr.tracks.groupby("ball"):
            idx = np.clip(np.round(g.t_s.to_numpy() * d["fps"]).astype(int), 0, len(tt) - 1)
            xy = g[["x_mm", "y_mm"]].to_numpy()
            dists = {k: float(np.nanmedian(np.hypot(*(v[idx] - xy).T))) for k, v in pos.items()}
            names[lab] = min(dists, key=dists.get)
        tracks = tr.tracks.assign(ball=tr.tracks.ball.map(names))
        det = tr.detections.assign(ball=tr.detections.ball.map(names))
        evaluate(f"video-{name}", _footage_truths(d), tracks, det, tr.fps, tr.calibration.ball_radius_mm,
                 d["ball"]["mass_kg"], rs, out)


def summary(recs) -> None:
    import pandas as pd

    df = pd.DataFrame(recs)
    if df.empty:
        print("no matched contacts")
        return
    df["err_an"] = (df.e_an - df.e_true).abs()
    df["err_ref"] = (df.e_ref - df.e_true).abs()
    df["z_an"] = df.err_an / df.s_an
    df["z_ref"] = df.err_ref / df.s_ref
    print("source         kind      n  conv | med|err| analytic  refit | p90 analytic  refit "
          "| within 2 sigma analytic refit | refit s/contact sims")
    for (src, kind), g in df.groupby(["source", "kind"]):
        c = g[g.conv]
        q = lambda v, p: float(np.nanpercentile(v, p)) if len(v) else float("nan")
        print(f"{src:13s} {kind[5:]:8s} {len(g):4d} {len(c):4d} | {q(g.err_an, 50):17.4f} {q(c.err_ref, 50):6.4f} "
              f"| {q(g.err_an, 90):12.4f} {q(c.err_ref, 90):6.4f} | {np.mean(g.z_an < 2):23.2f} "
              f"{np.mean(c.z_ref < 2) if len(c) else float('nan'):5.2f} | {g.time.mean():6.2f} {g.n_sim.mean():5.0f}")
    out = df[~df.source.str.startswith("sim")]
    c = out[out.conv]
    if len(out):
        print(f"OUTSIDE (not our simulator), all kinds: n {len(out)}, refit converged {len(c)}; "
              f"median |e err| analytic {out.err_an.median():.4f} (same contacts {c.err_an.median():.4f}) "
              f"refit {c.err_ref.median():.4f}; within 2 sigma analytic {np.mean(out.z_an < 2):.2f} "
              f"refit {np.mean(c.z_ref < 2):.2f}; refit {out.time.mean():.2f} s/contact")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sources", default="sim,footage,pymunk")
    ap.add_argument("--n", type=int, default=12, help="sim and pymunk shots")
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--seeds", default="21,22,23", help="noise seeds for the footage truth")
    ap.add_argument("--verbose", action="store_true")
    ap.add_argument("--mu-bb", type=float, default=None, help="fixed ball-ball friction of the refit")
    ap.add_argument("--fit-mu-bb", action="store_true", help="fit the ball-ball friction too")
    ap.add_argument("--max-side", type=float, default=None, help="window half-length, s")
    a = ap.parse_args()
    kw = {}
    if a.mu_bb is not None:
        kw["mu_ball_ball"] = a.mu_bb
    if a.max_side is not None:
        kw["max_side_s"] = a.max_side
    rs = RefineSettings(fit_mu_ball_ball=a.fit_mu_bb, **kw)
    print(f"refit settings: {rs}")
    recs: list[dict] = []
    src = a.sources.split(",")
    if "sim" in src:
        run_sim(a.n, a.seed, rs, recs)
    if "footage" in src:
        run_footage([int(s) for s in a.seeds.split(",")], rs, recs)
    if "pymunk" in src:
        run_pymunk(a.n, a.seed, rs, recs)
    if "video" in src:
        run_video(rs, recs)
    if a.verbose:
        for r in recs:
            print(f"{r['source']:12s} {r['fps']:4.0f} {r['kind']:12s} true {r['e_true']:.4f} "
                  f"an {r['e_an']:.4f}±{r['s_an']:.4f} ref {r['e_ref']:.4f}±{r['s_ref']:.4f} "
                  f"conv {r['conv']!s:5s} dt an/ref {r['dt_an']:+.2f}/{r['dt_ref']:+.2f} fr "
                  f"{r['time']:.2f}s {r['n_sim']} sims {r['note']}")
    summary(recs)


if __name__ == "__main__":
    main()
