"""`make demo`: analyse a bundled training-drill clip and compare the measured contacts with its truth.

Uses clips/drill_cut.mp4 (+ drill_cut.truth.json; a CLIP.calibration.toml beside a clip is
used as its manual calibration); if the clip is missing it is
rendered first from clips/drill_cut.toml (our own scenario, takes a few
minutes on a CPU). Results go to results/drill_cut/ (an existing result made
with the same clip and settings is reused). Prints the report's path and a
table of measured vs true contact times and restitution.

usage: python scripts/demo.py [CLIP.mp4] [--out DIR] [--replace]
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from feltlab.errors import FeltlabError  # noqa: E402


def ensure_clip(clip: Path) -> Path:
    """The clip, rendered from its scenario TOML when only the TOML is there."""
    if clip.is_file():
        return clip
    toml = clip.with_suffix(".toml")
    if not toml.is_file():
        raise FeltlabError(f"{clip} is missing and there is no {toml.name} to render it from")
    from feltlab.render import load_scenario, render_scenario

    print(f"rendering {clip.name} from {toml.name} (first run only) ...", flush=True)
    t = time.perf_counter()
    render_scenario(load_scenario(toml), clip)
    print(f"rendered in {time.perf_counter() - t:.0f} s", flush=True)
    return clip


def calibration_from_truth(clip: Path, out: Path) -> Path | None:
    """Write <out>/<stem>.calibration.toml from the clip's truth camera (None without a truth file)."""
    from feltlab.render.truth import truth_path_for
    from feltlab.standards import table_preset
    from tracking.calibrate import save_calibration
    from tracking.calibration import Calibration
    from tracking.camera import CameraModel

    tp = Path(truth_path_for(clip))
    if not tp.is_file():
        return None
    import json

    t = json.loads(tp.read_text(encoding="utf-8"))
    if "camera" not in t or "K" not in t["camera"] or "preset" not in t.get("table", {}):
        return None
    cal = Calibration(camera=CameraModel.from_dict(t["camera"]), table=table_preset(t["table"]["preset"]),
                      ball_diameter_mm=float(t["ball"]["diameter_mm"]), method="manual")
    out.mkdir(parents=True, exist_ok=True)
    return save_calibration(cal, out / f"{clip.stem}.calibration.toml", overwrite=True)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clip", nargs="?", default=str(ROOT / "clips" / "drill_cut.mp4"))
    ap.add_argument("--out", default=str(ROOT / "results"))
    ap.add_argument("--replace", action="store_true", help="redo an existing result")
    a = ap.parse_args(argv)

    import logging

    from feltlab.outputs.atomic import finished_result, sha256_file
    from feltlab.outputs.compare import load_truth, match_contacts, true_contacts, unmatched_measured
    from feltlab.pipeline import AnalyzeSettings, analyze_clip
    from feltlab.render.truth import truth_path_for

    logging.basicConfig(level=logging.INFO, format="feltlab: %(message)s")
    try:
        clip = ensure_clip(Path(a.clip))
        dest = Path(a.out) / clip.stem
        prev = finished_result(dest)
        if prev is not None and prev.get("clip", {}).get("sha256") != sha256_file(clip) and not a.replace:
            print(f"demo: {dest} was made from an earlier render of {clip.name}; replacing it")
            a.replace = True
        own = clip.with_name(clip.stem + ".calibration.toml")  # a bench clip's manual calibration
        settings = AnalyzeSettings(calib=str(own)) if own.is_file() else AnalyzeSettings()
        t0 = time.perf_counter()
        try:
            res = analyze_clip(clip, Path(a.out) / clip.stem, settings, replace=a.replace)
        except FeltlabError as exc:
            # Automatic calibration can fail on a scene it was not built for; a user would then
            # calibrate from a file. The demo does that with the scene's known camera, and says so.
            calib = calibration_from_truth(clip, Path(a.out))
            if calib is None:
                raise
            print(f"demo: automatic analysis failed ({exc});\n"
                  f"demo: retrying with a calibration file written from the scene's known camera: {calib}")
            t0 = time.perf_counter()
            res = analyze_clip(clip, Path(a.out) / clip.stem, AnalyzeSettings(calib=str(calib)), replace=a.replace)
    except FeltlabError as exc:
        print(f"demo: error: {exc}", file=sys.stderr)
        return 2
    wall = time.perf_counter() - t0
    report = res.out_dir / "report.html"
    print()
    print(f"report:  {report}" + ("   (reused: same clip and settings)" if res.reused else f"   ({wall:.1f} s)"))
    print(f"tables:  {res.out_dir / 'contacts.csv'}, tracks.csv, segments.csv")
    truth_p = truth_path_for(clip)
    if not Path(truth_p).is_file():
        print(f"no truth file {truth_p}: nothing to compare")
        return 0
    truth = load_truth(truth_p)
    tc = true_contacts(truth)
    fps = float(truth["fps"])
    m = match_contacts(res.contacts, tc, fps)
    print()
    print("measured vs true contacts (matched by kind, within 2 frame periods):")
    print(f"{'kind':13s} {'t true (s)':>10s} {'t meas (s)':>10s} {'dt (ms)':>8s} {'e true':>7s} "
          f"{'e meas':>7s} {'±σ':>6s} {'e err':>7s}")
    for r in m.itertuples():
        tag = "" if r.required else "  (optional: too small to see)"

        def f(v, spec):
            return format(v, spec) if v == v else "-"

        print(f"{r.kind:13s} {r.t_true_s:10.4f} {f(r.t_meas_s, '10.4f'):>10s} {f(r.dt_s * 1000, '8.2f'):>8s} "
              f"{f(r.e_true, '7.3f'):>7s} {f(r.e_meas, '7.3f'):>7s} {f(r.e_sigma, '6.3f'):>6s} "
              f"{f(r.e_err, '+7.3f'):>7s}{tag}")
    req = m[m["required"]]
    found = int(req["t_meas_s"].notna().sum())
    extra = unmatched_measured(res.contacts, tc, fps)
    print(f"found {found} of {len(req)} true contacts, {extra} extra; "
          f"measured {len(res.contacts)} contacts in all")
    return 0


if __name__ == "__main__":
    sys.exit(main())
