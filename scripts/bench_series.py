"""Restitution-bench series through `feltlab batch` (prints figures, asserts nothing).

Renders N head-on bench shots with the project's renderer, each with its own seed, cue-ball speed
(spread over --speed-min..--speed-max, natural roll) and ball-ball restitution drawn around a known
value (Normal(--e-mean, --e-sd), clipped to the published range 0.92-0.98 of ball-ball restitution:
Physics of Pool FAQ, Colorado State University, /work/shared/REFERENCES.md). The camera, lighting
and ball set are those of clips/bench_restitution.toml, so its manual calibration file applies to
every clip. Each clip runs until ~0.25 s after the contact; the start gap is chosen so both balls
stay in view.

Then runs `feltlab batch CLIPS --out RESULTS --calib clips/bench_restitution.calibration.toml
--spec clips/example_spec.toml --workers 2` and prints, per shot, the true e (the truth file's
e_measured for the ball-ball contact) against the measured e and e_sigma, and for the series:
the mean true e against the reported CI of the mean, the weighted and combined e, the fraction
of shots with |e - e_true| <= 2 e_sigma, the median absolute error, and where series.html is.

Safety: a real bench that launches balls (ramp, pendulum, spring) can hurt people; follow your
local safety rules.

usage: python scripts/bench_series.py [--n 20] [--out /tmp/feltlab_bench_series] [--seed 1] [--keep]
"""
from __future__ import annotations

import argparse
import json
import math
import shutil
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from feltlab.errors import FeltlabError  # noqa: E402
from feltlab.render import render_scenario, scenario_from_dict  # noqa: E402

BENCH_TOML = ROOT / "clips" / "bench_restitution.toml"
CALIB = ROOT / "clips" / "bench_restitution.calibration.toml"
SPEC = ROOT / "clips" / "example_spec.toml"
#: Published range of ball-ball restitution (Physics of Pool FAQ, CSU; /work/shared/REFERENCES.md).
E_RANGE = (0.92, 0.98)
#: Ball centres kept inside this x range (mm) so both balls stay whole in the bench camera's view
#: (the view spans x ~745..2055 mm at ball-centre height; computed from the bench camera).
X_VIEW_MM = (810.0, 1990.0)
#: Time (s) the clip runs on after the contact, and the longest run-up before it.
T_AFTER_S = 0.25
T_BEFORE_MAX_S = 0.25
#: Truth contacts with a smaller normal speed (mm/s) are not counted (same as scripts/bench_physics.py).
SIGNIFICANT_MM_S = 30.0


def shot_scenario(base: dict, i: int, speed_mm_s: float, e_true: float, rng: np.random.Generator) -> dict:
    """Scenario dict for shot i: the bench's camera/lights, a head-on rolling shot at speed_mm_s."""
    d = json.loads(json.dumps(base))  # deep copy of plain TOML data
    two_r = 57.15  # pool ball diameter, mm (standards preset pool-9ft)
    run_after = 0.97 * speed_mm_s * T_AFTER_S  # object ball leaves at ~(1+e)/2 v (REFERENCES.md head-on form)
    room = X_VIEW_MM[1] - X_VIEW_MM[0] - two_r - run_after
    t_before = min(T_BEFORE_MAX_S, room / speed_mm_s)
    gap = speed_mm_s * t_before
    span = gap + two_r + run_after
    x_cue = X_VIEW_MM[0] + (X_VIEW_MM[1] - X_VIEW_MM[0] - span) * rng.uniform(0.2, 0.8)
    y = rng.uniform(330.0, 470.0)
    d["clip"]["seed"] = 1000 + i
    d["clip"]["duration_s"] = round(t_before + T_AFTER_S + 0.02, 3)
    d["physics"]["e_ball_ball"] = float(e_true)
    cue, obj = d["ball"][0], d["ball"][1]
    cue["position_mm"] = [float(x_cue), float(y)]
    cue["strike"] = {"speed_mm_s": float(speed_mm_s), "direction_deg": 0.0, "follow": 1.0}
    obj["position_mm"] = [float(x_cue + gap + two_r), float(y)]
    return d


def true_contact(truth: dict) -> dict | None:
    """The truth file's first significant ball-ball contact."""
    for c in truth.get("contacts", []):
        if c.get("kind") == "ball-ball" and not c.get("micro") and c.get("speed_in_mm_s", 0) >= SIGNIFICANT_MM_S:
            return c
    return None


def render_all(n: int, clips_dir: Path, seed: int, v_range: tuple[float, float], e_mean: float, e_sd: float) -> list[dict]:
    """Render the shots one at a time; returns per-shot plan rows."""
    base = tomllib.loads(BENCH_TOML.read_text(encoding="utf-8"))
    rng = np.random.default_rng(seed)
    # stratified speeds: one draw per equal-width stratum, shuffled, so the range is covered evenly
    edges = np.linspace(v_range[0], v_range[1], n + 1)
    speeds = rng.permutation(rng.uniform(edges[:-1], edges[1:]))
    e_draw = np.clip(rng.normal(e_mean, e_sd, n), *E_RANGE)
    rows = []
    for i in range(n):
        name = f"shot_{i + 1:02d}"
        sc = scenario_from_dict(shot_scenario(base, i, speeds[i], e_draw[i], rng), name=name)
        t = time.perf_counter()
        info = render_scenario(sc, clips_dir / f"{name}.mp4")
        truth = json.loads(Path(info["truth"]).read_text(encoding="utf-8"))
        tc = true_contact(truth)
        rows.append({"shot": name, "clip_rel": f"{name}.mp4", "strike_mm_s": speeds[i], "e_applied": e_draw[i],
                     "e_true": tc["e_measured"] if tc else math.nan, "t_true_s": tc["t_s"] if tc else math.nan,
                     "v_true_mm_s": tc["speed_in_mm_s"] if tc else math.nan, "fps": sc.fps,
                     "frames": info["frames"]})
        print(f"  rendered {name}: {speeds[i]:6.0f} mm/s, e={e_draw[i]:.4f}, {info['frames']} frames "
              f"in {time.perf_counter() - t:.0f} s", flush=True)
    return rows


def run_batch_cli(clips_dir: Path, results_dir: Path, workers: int) -> int:
    """`feltlab batch` as a user runs it; returns its exit code (3 = spec failed, still a full run)."""
    exe = Path(sys.executable).with_name("feltlab")
    cmd = [str(exe) if exe.exists() else "feltlab", "batch", str(clips_dir), "--out", str(results_dir),
           "--calib", str(CALIB), "--spec", str(SPEC), "--workers", str(workers), "--quiet"]
    print("$ " + " ".join(cmd), flush=True)
    return subprocess.run(cmd).returncode


def match(plan: list[dict], contacts: pd.DataFrame) -> pd.DataFrame:
    """Per shot: the measured ball-ball contact nearest the true contact time (within 5 frames)."""
    bb = contacts[contacts["kind"] == "ball-ball"] if len(contacts) else contacts
    out = []
    for p in plan:
        row = dict(p, e=math.nan, e_sigma=math.nan, t_s=math.nan, speed_in_mm_s=math.nan, n_bb=0, outlier=False)
        c = bb[bb["clip"] == p["clip_rel"]] if len(bb) else bb
        row["n_bb"] = int(len(c))
        if len(c) and np.isfinite(p["t_true_s"]):
            k = (c["t_s"] - p["t_true_s"]).abs().idxmin()
            if abs(c.at[k, "t_s"] - p["t_true_s"]) <= 5.0 / p["fps"]:
                for col in ("e", "e_sigma", "t_s", "speed_in_mm_s"):
                    row[col] = float(c.at[k, col])
                row["outlier"] = bool(c.at[k, "outlier"]) if "outlier" in c else False
        out.append(row)
    return pd.DataFrame(out)


def report(m: pd.DataFrame, results_dir: Path) -> None:
    """Print the per-shot table and the series figures."""
    print("\nshot      strike  v_in(true)  e_true   e_meas   e_sigma   err/sigma  dt(frames)")
    for _, r in m.iterrows():
        z = (r.e - r.e_true) / r.e_sigma if r.e_sigma > 0 else math.nan
        dt = (r.t_s - r.t_true_s) * r.fps
        flag = "  outlier" if r.outlier else ""
        flag += f"  ({r.n_bb} ball-ball contacts)" if r.n_bb != 1 else ""
        print(f"{r.shot}  {r.strike_mm_s:6.0f}  {r.v_true_mm_s:9.0f}  {r.e_true:.4f}  {r.e:.4f}  {r.e_sigma:.4f}"
              f"  {z:+8.2f}  {dt:+7.2f}{flag}")
    found = m[np.isfinite(m["e"])]
    print(f"\nball-ball contact found in {len(found)}/{len(m)} shots")
    series = pd.read_csv(results_dir / "series.csv") if (results_dir / "series.csv").is_file() else pd.DataFrame()
    s = series[series["kind"] == "ball-ball"].iloc[0] if len(series) and (series["kind"] == "ball-ball").any() else None
    err = (found["e"] - found["e_true"]).to_numpy(float)
    true_mean = float(m["e_true"].mean())
    true_mean_found = float(found["e_true"].mean()) if len(found) else math.nan
    print(f"true e: mean of all shots {true_mean:.4f} (of the found shots {true_mean_found:.4f}), "
          f"SD {m['e_true'].std(ddof=1):.4f}")
    if s is not None:
        conf = float(s.get("confidence", 0.95))
        covers = s.e_ci_low <= true_mean_found <= s.e_ci_high
        print(f"reported ball-ball (n={int(s.n)}): mean {s.e_mean:.4f}, {conf:.0%} CI [{s.e_ci_low:.4f}, "
              f"{s.e_ci_high:.4f}] -> {'covers' if covers else 'does NOT cover'} the true mean {true_mean_found:.4f}")
        print(f"  weighted {s.e_weighted:.4f} ± {s.e_weighted_se:.4f} (Birge-scaled ± {s.e_weighted_se_birge:.4f},"
              f" Birge ratio {s.birge_ratio:.2f})")
        covers_c = s.e_combined_ci_low <= true_mean_found <= s.e_combined_ci_high
        print(f"  combined (DerSimonian-Laird) {s.e_combined:.4f}, CI [{s.e_combined_ci_low:.4f}, "
              f"{s.e_combined_ci_high:.4f}], tau {s.tau_dl:.4f} -> {'covers' if covers_c else 'does NOT cover'}")
        print(f"  line fit e = {s.fit_e_at_0:.4f} + {s.fit_slope_per_m_s:+.4f}/(m/s) * v "
              f"(slope se {s.fit_slope_per_m_s_se:.4f}); outliers flagged: {int(s.n_outliers)}")
        if len(series) > 1:
            others = ", ".join(f"{k}: n={int(n)}" for k, n in zip(series["kind"], series["n"]) if k != "ball-ball")
            print(f"  other contact kinds found: {others}")
    else:
        print("series.csv has no ball-ball row")
    if len(found):
        within = np.abs(err) <= 2.0 * found["e_sigma"].to_numpy(float)
        print(f"|e - e_true| <= 2 e_sigma: {within.sum()}/{len(found)} = {within.mean():.0%} "
              f"(about 95% expected if the sigmas are right)")
        z = err / found["e_sigma"].to_numpy(float)
        print(f"(e - e_true)/e_sigma: SD {z.std(ddof=1):.2f} (about 1 if the sigmas are right), "
              f"median |.| {np.median(np.abs(z)):.2f} (0.67 expected for a normal)")
        dt = (found["t_s"] - found["t_true_s"]).to_numpy(float) * found["fps"].to_numpy(float)
        print(f"contact time minus truth: mean {dt.mean():+.2f} frames, range {dt.min():+.2f}..{dt.max():+.2f}")
        print(f"median |e - e_true| {np.median(np.abs(err)):.4f}, mean error {err.mean():+.4f}, "
              f"max |error| {np.abs(err).max():.4f}, median e_sigma {found['e_sigma'].median():.4f}")
        print(f"measured-vs-true correlation across shots: r = {np.corrcoef(found['e'], found['e_true'])[0, 1]:.2f}")
    html = results_dir / "series.html"
    print(f"series.html: {html if html.is_file() else '(not written)'}")
    print(f"plots: {results_dir / 'series_plots'}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=20, help="number of shots (default 20)")
    ap.add_argument("--out", type=Path, default=Path("/tmp/feltlab_bench_series"),
                    help="new folder for clips/ and results/ (must not exist yet)")
    ap.add_argument("--seed", type=int, default=1, help="seed of the shot plan (speeds, e, positions)")
    ap.add_argument("--keep", action="store_true", help="keep the rendered clips (default: delete them at the end)")
    ap.add_argument("--workers", type=int, default=2, help="batch worker processes (default 2)")
    ap.add_argument("--speed-min", type=float, default=600.0, help="slowest cue-ball strike, mm/s")
    ap.add_argument("--speed-max", type=float, default=2500.0, help="fastest cue-ball strike, mm/s")
    ap.add_argument("--e-mean", type=float, default=0.94, help="centre of the true ball-ball restitution")
    ap.add_argument("--e-sd", type=float, default=0.008, help="shot-to-shot SD of the true restitution")
    a = ap.parse_args(argv)
    try:
        if a.n < 2:
            raise FeltlabError(f"--n {a.n} is too small; a series needs at least 2 shots")
        if not 0 < a.speed_min < a.speed_max:
            raise FeltlabError("--speed-min must be positive and below --speed-max")
        if a.out.exists():
            raise FeltlabError(f"{a.out} already exists; pick a new --out (this script never overwrites a run)")
        clips_dir, results_dir = a.out / "clips", a.out / "results"
        clips_dir.mkdir(parents=True)
        t0 = time.perf_counter()
        print(f"rendering {a.n} bench shots into {clips_dir} ...", flush=True)
        plan = render_all(a.n, clips_dir, a.seed, (a.speed_min, a.speed_max), a.e_mean, a.e_sd)
        t_render = time.perf_counter() - t0
        (a.out / "plan.json").write_text(json.dumps(plan, indent=1), encoding="utf-8")
        t1 = time.perf_counter()
        rc = run_batch_cli(clips_dir, results_dir, a.workers)
        t_batch = time.perf_counter() - t1
        print(f"feltlab batch exit code {rc} (0 ok, 1 some clips failed, 3 spec failed)")
        ac = results_dir / "all_contacts.csv"
        contacts = pd.read_csv(ac) if ac.is_file() else pd.DataFrame()
        m = match(plan, contacts)
        m.to_csv(a.out / "shots_vs_truth.csv", index=False)
        report(m, results_dir)
        print(f"time: render {t_render:.0f} s ({t_render / a.n:.1f} s/clip), batch {t_batch:.0f} s "
              f"({t_batch / a.n:.1f} s/clip wall with {a.workers} workers)")
        if not a.keep:
            shutil.rmtree(clips_dir)
            print(f"clips deleted (pass --keep to keep them); results stay in {results_dir}")
        return 0
    except FeltlabError as exc:
        print(f"bench_series: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    raise SystemExit(main())
