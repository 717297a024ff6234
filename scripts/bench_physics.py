"""Accuracy of the physics stage on simulated shots (prints figures, asserts nothing).

Shots of mixed kinds (cut shots at 0-70 degrees with follow, draw, stun and side; banks off one or
more cushions; three-ball shots; some with the cue ball resting before the strike) are simulated
with :mod:`physics.simulate`, sampled at a frame rate with a random sub-frame phase, given
Gaussian position noise of 0.2-0.5 mm, and analysed with :func:`physics.pipeline.analyze_tracks`.
Reported: contacts found / missed / false, restitution errors by kind and frame rate, fraction of
truths within 2 reported sigmas, contact-time error in frames, sliding-friction error.

usage: python scripts/bench_physics.py [--n 36] [--fps 60,120,240] [--seed 1] [--kinds bank] [--set slip_prior=false] [--refine]
       [--parts FILE.csv]

``--parts FILE.csv`` keeps e's variance split into its parts (PhysicsSettings.e_sigma_parts: the fit's
propagated covariance and its samples-only part, the lack-of-fit widening, the model-time, hop,
hidden-slide, shared-cushion and model-choice terms; for the hop also the slip shift X and its sigma)
per matched contact, writes them with the error to CSV and prints per kind the median |err|/sigma
with the whole sigma, the fit alone, its noise part and with each added part left out: which part
makes a sigma too wide or too narrow.

Physics stage alone on a clip with exact truth (is an error the physics stage's or the tracker's?):
``--truth-clip CLIP.truth.json --noise 0.8 --n 20 --seed 1`` feeds the truth's per-frame centres
(scorer layout ``frames.positions_mm``, or our renderer's ``.render.json`` ``tracks``) plus Gaussian
noise of ``--noise`` mm per coordinate through the physics stage, once per seed, and prints each
required contact's e error against the truth's e and the fraction within 2 reported sigmas.
"""
from __future__ import annotations

import argparse
import math
import time
from dataclasses import replace

import numpy as np

from feltlab.standards import table_preset
from physics.pipeline import analyze_tracks, tables_from_positions
from physics.settings import PhysicsSettings
from physics.simulate import BallInit, SimParams, simulate

TABLE = table_preset("pool-9ft")
R = TABLE.ball.radius_mm
MASS = TABLE.ball.mass_kg
#: True contacts whose normal velocity change is below this (mm/s) are optional (not counted as
#: missed, not false if found). Same convention as the outside footage's truth files.
SIGNIFICANT_MM_S = 30.0


def _inside(p, margin=R + 40):
    return margin < p[0] < TABLE.length_mm - margin and margin < p[1] < TABLE.width_mm - margin


KINDS = ("cut", "cut", "bank", "three", "cut-rest")


def make_shot(rng: np.random.Generator, i: int, kinds=KINDS):
    """(balls, params, t_end, label) for shot i (kind cycles through ``kinds``)."""
    kind = kinds[i % len(kinds)]
    params = SimParams.for_table(
        TABLE,
        e_ball_ball=rng.uniform(0.90, 0.98),
        e_cushion=rng.uniform(0.6, 0.9),
        mu_slide=rng.uniform(0.15, 0.3),
        mu_roll=rng.uniform(0.006, 0.014),
        mu_ball_ball=rng.choice([0.0, rng.uniform(0.03, 0.07)]),
    )
    for _ in range(200):
        speed = rng.uniform(700, 3500)
        top = rng.uniform(-1.2, 1.2) * speed / R
        side = rng.uniform(-0.6, 0.6) * speed / R
        if kind == "bank":
            p = np.array([rng.uniform(300, 2240), rng.uniform(250, 1020)])
            h = rng.uniform(0, 360)
            balls = [BallInit.struck("cue", *p, speed, h, top_rad_s=top, side_rad_s=side)]
            if _inside(p):
                return balls, params, 3.0, kind
            continue
        obj = np.array([rng.uniform(400, 2140), rng.uniform(300, 970)])
        th = rng.uniform(0, 2 * math.pi)
        phi = math.radians(rng.uniform(0, 70)) * rng.choice([-1, 1])
        ghost = obj - 2 * R * np.array([math.cos(th), math.sin(th)])
        h = th + phi
        dist = rng.uniform(250, 900)
        cue = ghost - dist * np.array([math.cos(h), math.sin(h)])
        if not (_inside(cue) and _inside(obj)):
            continue
        balls = [BallInit.struck("cue", *cue, speed, math.degrees(h), top_rad_s=top, side_rad_s=side),
                 BallInit("red", *obj)]
        if kind == "three":
            third = np.array([rng.uniform(200, 2340), rng.uniform(200, 1070)])
            if min(np.hypot(*(third - cue)), np.hypot(*(third - obj))) < 4 * R or not _inside(third):
                continue
            balls.append(BallInit("yellow", *third))
        return balls, params, 3.0, kind
    raise RuntimeError("could not place a shot")


def run_shot(balls, params, t_end, fps, sigma, rng, rest_before_s=0.0, settings=None, with_tables=False):
    res = simulate(balls, params, t_end)
    dt = 1.0 / fps
    t0 = rng.uniform(0, dt)
    times = np.arange(t0 - rest_before_s, t_end, dt)
    st = res.state_at(np.clip(times, 0, t_end))
    pos = {}
    for k, bid in enumerate(res.ball_ids):
        p = st.pos[:, k].copy()
        if rest_before_s > 0:
            p[times < 0] = [balls[k].x_mm, balls[k].y_mm]
        pos[bid] = p
    tracks, det = tables_from_positions(times, pos, sigma, rng, fps)
    out = analyze_tracks(tracks, det, TABLE, R, MASS, fps, settings or PhysicsSettings())
    if with_tables:
        return res, out, (tracks, det)
    return res, out


def _settings(items: list[str]) -> PhysicsSettings:
    """PhysicsSettings with ``name=value`` overrides (bool, int, float)."""
    kw = {}
    base = PhysicsSettings()
    for it in items:
        k, _, v = it.partition("=")
        cur = getattr(base, k)
        if isinstance(cur, bool):
            kw[k] = v.lower() in ("1", "true", "yes", "on")
        else:
            kw[k] = type(cur)(v)
    return replace(base, **kw)


def significant(c) -> bool:
    if c.micro:
        return False
    if c.kind == "ball-ball":
        dv = (c.vb_post - c.vb_pre) @ c.normal
    else:
        dv = (c.va_post - c.va_pre) @ c.normal
    return abs(dv) >= SIGNIFICANT_MM_S


def match(res, out, fps):
    """Pairs (true contact, found row) within 2 frame periods; missed; false."""
    found = out.contacts
    used = set()
    pairs, missed = [], []
    for c in res.contacts:
        best, bd = None, 2.0 / fps
        for j, r in found.iterrows():
            if j in used or r.kind != c.kind:
                continue
            if c.kind == "ball-ball":
                if {r.ball_a, r.ball_b} != {c.ball_a, c.ball_b}:
                    continue
            elif r.ball_a != c.ball_a or r.cushion != c.cushion:
                continue
            d = abs(r.t_s - c.t_s)
            if d < bd:
                best, bd = j, d
        if best is not None:
            used.add(best)
            pairs.append((c, found.loc[best]))
        elif significant(c) and c.t_s < res.t_end_s - 2.0 / fps:
            missed.append(c)  # (a contact in the clip's last two frames cannot be resolved)
    # a found contact matching an optional (insignificant) truth is not false
    false = [found.loc[j] for j in found.index if j not in used]
    return pairs, missed, false


def _details(res, out) -> None:
    import pandas as pd

    pd.set_option("display.width", 250)
    pd.set_option("display.max_columns", 40)
    for c in res.contacts:
        print(f"TRUE {c.t_s:.5f} {c.kind} {c.ball_a} {c.ball_b or c.cushion} e={c.e_measured:.4f} "
              f"vin={c.speed_in_mm_s:.0f} va {c.va_pre.round(1)} -> {c.va_post.round(1)}"
              + (f" vb {c.vb_pre.round(1)} -> {c.vb_post.round(1)}" if c.vb_pre is not None else ""))
    print(out.contacts[["t_s", "kind", "ball_a", "ball_b", "cushion", "e", "e_sigma", "va_in_x_mm_s",
                        "va_in_y_mm_s", "va_out_x_mm_s", "va_out_y_mm_s", "vb_out_x_mm_s",
                        "vb_out_y_mm_s", "a_phase_in"]])
    print(out.segments[["ball", "segment", "phase", "t0_s", "t1_s", "mu", "mu_sigma", "n_points", "rms_mm"]])
    print([(round(e.t_s, 4), e.kind, e.balls) for e in res.events])


def _truth_layout(path: str):
    """(fps, times (T,) s, centres ball -> (T,2) mm, table preset, R mm, mass kg, contacts) of a
    truth file: the scorer's layout (``frames``) or our renderer's (``tracks``). Contacts: dicts
    with kind, ball_a, other (ball or cushion), t_s, e; only the scored ones (required, e_valid /
    not micro)."""
    import json

    d = json.load(open(path))
    fps = float(d["fps"])
    tab = d["table"].get("preset") or d["table"].get("name") or "pool-9ft"
    if "frames" in d and isinstance(d["frames"], dict):
        t = np.asarray(d["frames"]["t_s"], float)
        pos = {k: np.asarray(v, float) for k, v in d["frames"]["positions_mm"].items()}
        cons = [dict(kind=c["kind"], ball_a=c["ball_a"], other=c.get("ball_b") or c.get("cushion"),
                     t_s=c["t_s"], e=c["e"]) for c in d["contacts"] if c.get("required") and c.get("e_valid")]
    else:
        t = np.asarray(d["frames_t_s"], float)
        pos = {k: np.column_stack([v["x_mm"], v["y_mm"]]) for k, v in d["tracks"].items()}
        cons = [dict(kind=c["kind"], ball_a=c["ball_a"], other=c.get("ball_b") or c.get("cushion"),
                     t_s=c["t_s"], e=c["e_measured"]) for c in d["contacts"] if not c.get("micro")]
    return fps, t, pos, table_preset(tab), d["ball"]["diameter_mm"] / 2, d["ball"]["mass_kg"], cons


def truth_feed(path: str, noise_mm: float, seeds, settings: PhysicsSettings, verbose: bool = False) -> None:
    """Print e errors of the physics stage on a truth file's centres + noise (one run per seed)."""
    fps, t, pos, table, r_mm, m_kg, cons = _truth_layout(path)
    errs: dict[str, list] = {"ball-ball": [], "ball-cushion": []}
    z, missed = [], 0
    for sd in seeds:
        tracks, det = tables_from_positions(t, pos, noise_mm, np.random.default_rng(sd), fps)
        c = analyze_tracks(tracks, det, table, r_mm, m_kg, fps, settings).contacts
        for tc in cons:
            if tc["kind"] == "ball-ball":
                pair = {tc["ball_a"], tc["other"]}
                same = np.array([{x, y} == pair for x, y in zip(c["ball_a"], c["ball_b"])], dtype=bool)
                hit = c[(c["kind"] == "ball-ball").to_numpy() & same]
            else:
                hit = c[(c["kind"] == "ball-cushion") & (c["ball_a"] == tc["ball_a"]) & (c["cushion"] == tc["other"])]
            hit = hit[(hit["t_s"] - tc["t_s"]).abs() < 2.0 / fps]
            if not len(hit):
                missed += 1
                print(f"seed {sd}: MISSED {tc['kind']} {tc['ball_a']}-{tc['other']} t={tc['t_s']:.4f}")
                continue
            r = hit.iloc[0]
            if not np.isfinite(float(r["e"])):  # left empty: its sigma said nothing (PhysicsSettings)
                print(f"seed {sd}: {tc['kind']} {tc['ball_a']}-{tc['other']} t={tc['t_s']:.4f}: e left empty")
                continue
            err = float(r["e"] - tc["e"])
            errs[tc["kind"]].append(err)
            z.append(abs(err) / r["e_sigma"] if r["e_sigma"] > 0 else np.inf)
            if verbose:
                print(f"seed {sd}: {tc['kind']} {tc['ball_a']}-{tc['other']} e {r['e']:.4f} +- {r['e_sigma']:.4f} "
                      f"true {tc['e']:.4f} err {err:+.4f}")
    print(f"{path}: {len(list(seeds))} noise draws of {noise_mm} mm at {fps:.0f} fps; {missed} contacts missed")
    for k, v in errs.items():
        if v:
            a = np.abs(v)
            print(f"  {k:12s} n {len(v):3d}  median |err| {np.median(a):.4f}  p90 {np.percentile(a, 90):.4f}  "
                  f"mean err {np.mean(v):+.4f}")
    if z:
        print(f"  within 2 sigma: {np.mean(np.array(z) < 2):.3f} of {len(z)}, median |err|/sigma "
              f"{np.median(z):.2f} (Gaussian 0.67), worst {np.max(z):.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=36)
    ap.add_argument("--fps", default="60,120,240")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--verbose", action="store_true")
    ap.add_argument("--only", type=int, default=None, help="run one shot index and print details")
    ap.add_argument("--start", type=int, default=0, help="first shot index (to split a run)")
    ap.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                    help="override a PhysicsSettings field (repeatable), e.g. slip_prior=false")
    ap.add_argument("--truth-clip", default=None, help="truth JSON of a clip: feed its centres + noise instead")
    ap.add_argument("--noise", type=float, default=0.5, help="with --truth-clip: noise (mm) per coordinate")
    ap.add_argument("--parts", default=None, metavar="CSV",
                    help="write each matched contact's e error, sigma and sigma's parts (fit, noise-only, "
                         "lack-of-fit widening, model-time, hop, ...) to CSV, and print their summary")
    ap.add_argument("--kinds", default=None, metavar="LIST",
                    help="comma list of shot kinds to cycle through (cut, bank, three, cut-rest), e.g. "
                         "bank for a bank-only set (default: cut,cut,bank,three,cut-rest)")
    ap.add_argument("--refine", action="store_true",
                    help="also refit each matched contact with physics.refine (circular here: its model is "
                         "the simulator; an upper bound, see scripts/bench_refine.py)")
    a = ap.parse_args()
    settings = _settings(a.set)
    if a.parts:
        settings = replace(settings, e_sigma_parts=True)
    part_rows: list[dict] = []
    if a.truth_clip:
        truth_feed(a.truth_clip, a.noise, range(a.seed, a.seed + a.n), settings, a.verbose)
        return
    fps_list = [float(f) for f in a.fps.split(",")]
    kinds = tuple(a.kinds.split(",")) if a.kinds else KINDS
    bad = [k for k in kinds if k not in KINDS]
    if bad:
        raise SystemExit(f"unknown shot kind(s) {', '.join(bad)}: use some of {', '.join(sorted(set(KINDS)))}")
    stats = {f: dict(bb=[], bc=[], z=[], zk=[], dt=[], mu=[], mur=[], ref=[], missed=0, false=0, n=0, found=0,
                     matched=0, time=0.0) for f in fps_list}
    for i in range(a.start, a.n) if a.only is None else [a.only]:
        balls, params, t_end, kind = make_shot(np.random.default_rng([a.seed, i]), i, kinds)
        for fps in fps_list:
            rng = np.random.default_rng([a.seed, i, int(fps)])
            sigma = rng.uniform(0.2, 0.5)
            rest = 0.1 if kind == "cut-rest" else 0.0
            t0 = time.perf_counter()
            res, out, tabs = run_shot(balls, params, t_end, fps, sigma, rng, rest, settings, with_tables=True)
            s = stats[fps]
            s["time"] += time.perf_counter() - t0
            pairs, missed, false = match(res, out, fps)
            s["missed"] += len(missed)
            s["false"] += len(false)
            s["found"] += len(out.contacts)
            s["matched"] += len(pairs)
            s["n"] += sum(significant(c) and c.t_s < t_end - 2.0 / fps for c in res.contacts)
            ref = None
            if a.refine and len(out.contacts):
                from physics.refine import refine_contacts

                ref = refine_contacts(out, tabs[0], tabs[1], TABLE, R, MASS, fps, settings).set_index("contact")
            for c, r in pairs:
                if not significant(c) or abs(c.speed_in_mm_s) < 150:
                    continue
                if not np.isfinite(r.e):  # left empty: its sigma said nothing (PhysicsSettings)
                    s["blank"] = s.get("blank", 0) + 1
                    continue
                err = r.e - c.e_measured
                (s["bb"] if c.kind == "ball-ball" else s["bc"]).append(err)
                z = abs(err) / r.e_sigma if r.e_sigma > 0 else np.inf
                s["z"].append(z)
                s["zk"].append((c.kind, z, i, float(c.t_s), float(err), float(r.e_sigma)))
                s["dt"].append((r.t_s - c.t_s) * fps)
                if a.parts:
                    part_rows.append(_part_row(a.seed, fps, i, c, r, err))
                if ref is not None and r.contact in ref.index:
                    q = ref.loc[r.contact]
                    s["ref"].append((c.kind, abs(err), abs(q.e_refined - c.e_measured)))
            if np.isfinite(out.mu_s):
                s["mu"].append(out.mu_s / params.mu_slide - 1)
            if np.isfinite(out.mu_r):
                s["mur"].append(out.mu_r / params.mu_roll - 1)
            if a.only is not None:
                _details(res, out)
            if a.verbose:
                print(f"shot {i:2d} {kind:8s} fps {fps:5.0f} sigma {sigma:.2f}: "
                      f"{len(pairs)} matched, {len(missed)} missed, {len(false)} false; "
                      + " ".join(f"{c.kind[5:7]}:{r.e - c.e_measured:+.4f}({r.e_sigma:.4f})" for c, r in pairs)
                      + " dt_frames " + " ".join(f"{(r.t_s - c.t_s) * fps:+.3f}" for c, r in pairs)
                      + (f" mu_s_rel {out.mu_s / params.mu_slide - 1:+.3f}" if np.isfinite(out.mu_s) else ""))
                for c in missed:
                    print(f"    MISSED {c.kind} {c.ball_a} {c.ball_b or c.cushion} t={c.t_s:.4f} vin={c.speed_in_mm_s:.0f}")
                for r in false:
                    print(f"    FALSE {r.kind} {r.ball_a} {r.ball_b or r.cushion} t={r.t_s:.4f} e={r.e:.3f}")
    print(f"{a.n - a.start if a.only is None else 1} simulated shots per frame rate; noise 0.2-0.5 mm; pool ball R = {R} mm")
    print("fps   true  missed false | bb e: n  med|err|  p90    | cushion e: n  med|err|  p90  "
          "| within 2 sigma | |dt| med/p90 (frames) | mu_s med|rel err| | s/shot")
    for fps, s in stats.items():
        bb, bc = np.abs(s["bb"]), np.abs(s["bc"])
        z = np.array(s["z"])
        dtf = np.abs(s["dt"])
        mu = np.abs(s["mu"])
        q = lambda v, p: float(np.percentile(v, p)) if len(v) else float("nan")
        print(f"{fps:4.0f} {s['n']:6d} {s['missed']:6d} {s['false']:5d} | {len(bb):8d} {q(bb,50):8.4f} {q(bb,90):7.4f} "
              f"| {len(bc):11d} {q(bc,50):8.4f} {q(bc,90):6.4f} | {np.mean(z < 2) if len(z) else float('nan'):14.3f} "
              f"| {q(dtf,50):6.3f} / {q(dtf,90):6.3f}        | {q(mu,50):17.3f} | {s['time'] / max(a.n - a.start, 1):6.2f}")
    _issue_figures(stats, settings)
    if a.parts:
        _parts_summary(part_rows, a.parts)


PARTS = ("noise", "fit", "widen", "model", "hop", "hidden", "shared", "alt")


def _part_row(seed: int, fps: float, shot: int, c, r, err: float) -> dict:
    """One matched contact: its e error, sigma and sigma's variance parts (PhysicsSettings.e_sigma_parts)."""
    p = r.get("_e_var_parts") if hasattr(r, "get") else None
    p = p if isinstance(p, dict) else {}
    row = dict(seed=seed, fps=fps, shot=shot, kind=c.kind, t_s=float(c.t_s), speed_mm_s=abs(float(c.speed_in_mm_s)),
               e_true=float(c.e_measured), err=float(err), e_sigma=float(r.e_sigma),
               phase_a_out=r.a_phase_out, phase_b_out=r.b_phase_out)
    row.update({f"var_{k}": float(p.get(k, 0.0)) for k in PARTS})
    row.update(hop_X=float(p.get("X", np.nan)), hop_X_sd=float(p.get("X_sd", np.nan)),
               var_hop_old=float(p.get("hop_old", 0.0)))
    return row


def _parts_summary(rows: list[dict], path: str) -> None:
    """Write the per-contact rows to CSV and print, per kind, the median |err|/sigma with the whole
    sigma, with the fit's part alone and its noise-only part, and with each added part left out
    (0.67 for a calibrated Gaussian sigma), and each part's median share of the variance."""
    import pandas as pd

    df = pd.DataFrame(rows)
    df.to_csv(path, index=False)
    if not len(df):
        return
    print(f"\nsigma parts ({path}): median |err|/sigma with everything, the fit alone (unwidened), its "
          "noise-only part, and without one part (0.67 calibrated); median share of the variance")
    tot = df["e_sigma"] ** 2
    for kind, g in df.groupby("kind"):
        t = tot[g.index]
        z = lambda v: float(np.median(np.abs(g["err"]) / np.sqrt(np.maximum(v, 1e-30))))
        line = f"  {kind:12s} n {len(g):3d}  all {z(t):.2f}  fit {z(g['var_fit']):.2f}  noise {z(g['var_noise']):.2f}"
        line += "  without: " + " ".join(f"{k} {z(t - g['var_' + k]):.2f}" for k in PARTS[2:])
        line += "  share: " + " ".join(f"{k} {float(np.median(g['var_' + k] / t)):.2f}" for k in PARTS)
        print(line)


def _issue_figures(stats, settings: PhysicsSettings) -> None:
    """The physics figures the targets name, per frame rate and pooled: contact recall and
    precision, contact-time error in frames (target |dt| <= 0.25 frame), restitution error by
    kind, 2-sigma coverage of e (target 80-99.5 %) with |err|/sigma median and worst, mu_s and
    mu_r recovery (target within 20 %), and the --refine comparison when run."""
    q = lambda v, p: float(np.percentile(v, p)) if len(v) else float("nan")
    print("\nissue figures (significant contacts; e figures for approach speed >= 150 mm/s):")
    pooled = {k: [] for k in ("dt", "z", "mu", "mur")}
    n_true = n_missed = n_found = n_false = 0
    for fps, s in stats.items():
        n_true += s["n"]; n_missed += s["missed"]; n_found += s["found"]; n_false += s["false"]
        rec = (s["n"] - s["missed"]) / s["n"] if s["n"] else float("nan")
        prec = (s["found"] - s["false"]) / s["found"] if s["found"] else float("nan")
        dtf, z = np.abs(s["dt"]), np.array(s["z"])
        mu, mur = np.abs(s["mu"]), np.abs(s["mur"])
        for k, v in (("dt", dtf), ("z", z), ("mu", mu), ("mur", mur)):
            pooled[k] += list(v)
        print(f"  {fps:4.0f} fps: recall {rec:.3f} ({s['n'] - s['missed']}/{s['n']}), precision {prec:.3f} "
              f"({s['found'] - s['false']}/{s['found']}); e left empty (sigma > "
              f"{settings.e_sigma_no_information:.2f}) on {s.get('blank', 0)} matched contacts")
        print(f"      contact time |dt| frames: median {q(dtf, 50):.3f}, p95 {q(dtf, 95):.3f}, "
              f"within 0.25 frame {np.mean(dtf <= 0.25) if len(dtf) else float('nan'):.3f} (n {len(dtf)})")
        for kind, key in (("ball-ball", "bb"), ("cushion", "bc")):
            v = np.abs(s[key])
            print(f"      {kind:9s} e: n {len(v):3d}, median |err| {q(v, 50):.4f}, p90 {q(v, 90):.4f}, max {q(v, 100):.4f}")
        for kind in ("ball-ball", "ball-cushion"):
            zz = np.array([r[1] for r in s["zk"] if r[0] == kind])
            if len(zz):
                print(f"      {kind:12s} within 2 sigma {np.mean(zz < 2):.3f}, median |err|/sigma {np.median(zz):.2f}, "
                      f"> 3 sigma {int(np.sum(zz > 3))}")
        if len(z):
            w = max(s["zk"], key=lambda r: r[1])
            print(f"      all: within 2 sigma {np.mean(z < 2):.3f} of {len(z)}, median |err|/sigma {np.median(z):.2f} "
                  f"(Gaussian 0.67), worst {w[1]:.2f} sigma (shot {w[2]} {w[0]} t {w[3]:.3f} s, "
                  f"err {w[4]:+.4f} +- {w[5]:.4f})")
        out2 = sorted((r for r in s["zk"] if r[1] >= 2), key=lambda r: -r[1])
        if out2:
            print("      beyond 2 sigma: " + "; ".join(f"shot {r[2]} {r[0][5:]} t {r[3]:.3f} {r[4]:+.4f} +- {r[5]:.4f}"
                                               for r in out2))
        print(f"      mu_s within 20 %: {np.mean(mu <= 0.2) if len(mu) else float('nan'):.3f} of {len(mu)} shots "
              f"(median |rel err| {q(mu, 50):.3f}); mu_r within 20 %: "
              f"{np.mean(mur <= 0.2) if len(mur) else float('nan'):.3f} of {len(mur)} (median {q(mur, 50):.3f})")
        if s["ref"]:
            for kind in ("ball-ball", "ball-cushion"):
                rr = [r for r in s["ref"] if r[0] == kind]
                if rr:
                    an, rf = np.array([r[1] for r in rr]), np.array([r[2] for r in rr])
                    print(f"      refine {kind:12s}: median |err| chain fit {np.median(an):.4f} -> refit "
                          f"{np.nanmedian(rf):.4f} (n {len(rr)}; circular, upper bound)")
    if len(stats) > 1:
        dt, z = np.array(pooled["dt"]), np.array(pooled["z"])
        print(f"  pooled: recall {(n_true - n_missed) / max(n_true, 1):.3f}, precision "
              f"{(n_found - n_false) / max(n_found, 1):.3f}, |dt| median {q(dt, 50):.3f} p95 {q(dt, 95):.3f} frames, "
              f"within 2 sigma {np.mean(z < 2) if len(z) else float('nan'):.3f}, "
              f"mu_s within 20 % {np.mean(np.array(pooled['mu']) <= 0.2):.3f}, "
              f"mu_r within 20 % {np.mean(np.array(pooled['mur']) <= 0.2):.3f}")


if __name__ == "__main__":
    main()
