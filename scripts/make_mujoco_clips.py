#!/usr/bin/env python3
"""Render overhead pool clips with exact truth using MuJoCo (an independent second renderer).

usage: MUJOCO_GL=egl PY make_mujoco_clips.py OUT_DIR --seeds 9101 9102 [--duration S] [--fps N]
       [--size WxH] [--max-subframes S] [--cloth green|blue|red|grey] [--ball-set pool|snooker|carom]
       [--k1 K] [--lamps N] [--light F] [--cushion-shade F] [--suffix S]

PY is a Python with ``mujoco``, ``numpy`` and ``opencv-python-headless`` (optional extra
``feltlab[mujoco]``; not a project dependency). Per seed: a cut shot on a pool-9ft table simulated
with MuJoCo's own contacts and friction, rendered with MuJoCo's OpenGL renderer, each frame the
mean of S subframes over a 50 % exposure, then k1 lens distortion (cv2.remap with the camera's
K), optical blur, vignette, brightness gradient, white balance, lamp flicker and sensor noise;
written as MPEG-4 Part 2 (cv2.VideoWriter 'mp4v'). Beside each ``mjSEED.mp4`` goes
``mjSEED.truth.json`` in the same layout as ../shared/footage/*.truth.json, so
``../shared/score_footage.py --clips OUT_DIR`` and ``scripts/bench_tracking.py`` read it.
The sweep options override one drawn condition each (mujoco_scene.apply_overrides), after the
draw, so a seed keeps the rest of its scene; ``--suffix`` keeps such variants apart (mjSEED_SUFFIX).
Finished clips are never overwritten (the seed is skipped); files are written under a temporary
name and renamed when complete.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import mujoco_scene as ms  # noqa: E402
import mujoco_truth as mt  # noqa: E402

MAX_ATTEMPTS = 40   # shot redraws per seed before giving up


def _fail(msg: str) -> None:
    print(f"make_mujoco_clips: {msg}", file=sys.stderr)
    raise SystemExit(2)


def project(cam: ms.Camera, P_mm: np.ndarray) -> np.ndarray:
    """(N, 3) table mm -> (N, 2) distorted pixels (OpenCV convention)."""
    import cv2

    rvec, _ = cv2.Rodrigues(cam.R)
    uv, _ = cv2.projectPoints(np.asarray(P_mm, float).reshape(-1, 1, 3) / 1000.0, rvec, cam.t_m,
                              cam.K, np.array([cam.k1, 0, 0, 0, 0.0]))
    return uv.reshape(-1, 2)


def canvas_and_maps(cam: ms.Camera):
    """Undistorted render canvas (w, h) covering the distorted output, and cv2.remap maps."""
    import cv2

    w, h = cam.size
    f = cam.K[0, 0]
    uu, vv = np.meshgrid(np.arange(w, dtype=np.float32), np.arange(h, dtype=np.float32))
    pts = np.stack([uu.ravel(), vv.ravel()], 1).reshape(-1, 1, 2)
    und = cv2.undistortPoints(pts, cam.K, np.array([cam.k1, 0, 0, 0, 0.0]),
                              criteria=(cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, 40, 1e-9)).reshape(-1, 2)
    half_w = float(np.max(np.abs(und[:, 0]))) * f + 4
    half_h = float(np.max(np.abs(und[:, 1]))) * f + 4
    cw, ch = 2 * int(math.ceil(half_w + 0.5)), 2 * int(math.ceil(half_h + 0.5))
    mx = ((cw - 1) / 2.0 + f * und[:, 0]).reshape(h, w).astype(np.float32)
    my = ((ch - 1) / 2.0 + f * und[:, 1]).reshape(h, w).astype(np.float32)
    return (cw, ch), mx, my


def apply_effects(img: np.ndarray, sc: ms.Scene, t_s: float, rng: np.random.Generator, fields: dict) -> np.ndarray:
    """Lens/sensor effects on a float RGB image (0-255) already in output geometry; returns uint8 BGR."""
    import cv2

    ef = sc.effects
    img = cv2.GaussianBlur(img, (0, 0), ef["optical_blur_sigma_px"])
    gain = fields["shade"] * (1.0 + ef["flicker"] * math.sin(2 * math.pi * ef["flicker_hz"] * t_s + ef["flicker_phase"]))
    img = img * gain[..., None] * np.asarray(ef["white_balance"], np.float32)
    var = ef["noise_sigma_dn"] ** 2 + ef["shot_noise_gain"] * np.clip(img, 0, None)
    img = img + rng.standard_normal(img.shape).astype(np.float32) * np.sqrt(var)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)[:, :, ::-1]


def shade_field(sc: ms.Scene) -> np.ndarray:
    """Vignette (1 - v r^2, r = 1 at the corner) times a linear brightness gradient."""
    w, h = sc.camera.size
    x = (np.arange(w, dtype=np.float32) - (w - 1) / 2) / ((w - 1) / 2)
    y = (np.arange(h, dtype=np.float32) - (h - 1) / 2) / ((h - 1) / 2)
    X, Y = np.meshgrid(x, y)
    r2 = (X ** 2 * w ** 2 + Y ** 2 * h ** 2) / (w ** 2 + h ** 2)
    g = sc.effects["gradient"]
    return ((1.0 - sc.effects["vignette"] * r2) * (1.0 + g[0] * X + g[1] * Y)).astype(np.float32)


def choose_shot(seed: int, args) -> tuple[ms.Scene, object, mt.SimRun, np.ndarray, list[dict]]:
    import mujoco

    for attempt in range(MAX_ATTEMPTS):
        sc = ms.draw_scene(seed, attempt, duration_s=args.duration)
        if args.fps:
            sc.fps = args.fps
        if args.size:
            w, h = (int(v) for v in args.size.lower().split("x"))
            f = sc.camera.K[0, 0] * w / sc.camera.size[0]
            sc.camera.K = np.array([[f, 0, (w - 1) / 2], [0, f, (h - 1) / 2], [0, 0, 1.0]])
            sc.camera.size = (w, h)
        if args.max_subframes:
            sc.subframes = min(sc.subframes, args.max_subframes)
        ms.apply_overrides(sc, cloth=args.cloth, ball_set=args.ball_set, k1=args.k1, lamps=args.lamps,
                           light=args.light, cushion_shade=args.cushion_shade)
        n = int(round(sc.duration_s * sc.fps))
        sc.duration_s = n / sc.fps
        canvas, mx, my = canvas_and_maps(sc.camera)
        xml = ms.build_mjcf(sc, Path(args.tex_dir), canvas)
        model = mujoco.MjModel.from_xml_string(xml)
        run, Q = mt.simulate(model, sc)
        contacts = mt.contacts_truth(run, sc)
        why = mt.check_shot(run, sc, contacts)
        if why is None:
            sc.extra.update(canvas=canvas, maps=(mx, my))
            return sc, model, run, Q, contacts
        print(f"  seed {seed} attempt {attempt}: {why}; redrawing the shot", file=sys.stderr)
    _fail(f"seed {seed}: no usable shot in {MAX_ATTEMPTS} draws; try another seed")


def truth_json(sc: ms.Scene, run: mt.SimRun, contacts: list[dict], name: str, render_s: float) -> dict:
    """Truth in the layout of ../shared/footage/*.truth.json."""
    cam = sc.camera
    n = int(round(sc.duration_s * sc.fps))
    t_v = np.arange(n) / sc.fps
    pos, vel, pix = {}, {}, {}
    for j, bid in enumerate(run.ids):
        P = np.array([mt.interp(run, run.pos[:, j], sc.t_video0_s + t) for t in t_v])
        Vv = np.array([mt.interp(run, run.vel[:, j], sc.t_video0_s + t) for t in t_v])
        pos[bid] = [[round(float(a), 3), round(float(b), 3)] for a, b in P[:, :2]]
        vel[bid] = [[round(float(a), 2), round(float(b), 2)] for a, b in Vv[:, :2]]
        pix[bid] = [[round(float(a), 2), round(float(b), 2)] for a, b in project(cam, P)]
    balls = []
    for j, b in enumerate(sc.balls):
        moved = float(np.max(np.linalg.norm(np.array(pos[b.id]) - np.array(pos[b.id][0]), axis=1)))
        balls.append(dict(id=b.id, colour=b.colour, rgb=list(b.rgb), pattern=b.pattern, moves=moved > 1.0,
                          initial_pos_mm=[round(v, 3) for v in b.pos_mm], initial_vel_mm_s=[round(v, 3) for v in b.vel_mm_s]))
    L, W = ms.L_MM, ms.W_MM

    def corners(z):
        return [[round(float(a), 2), round(float(b), 2)] for a, b in
                project(cam, np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]], float))]

    z_c = ms.R_MM / 1000.0
    Hm = cam.K @ np.column_stack([cam.R[:, 0] / 1000.0, cam.R[:, 1] / 1000.0, cam.R[:, 2] * z_c + cam.t_m])
    Hm = Hm / Hm[2, 2]
    ang = math.degrees(math.asin((ms.NOSE_MM - ms.R_MM) / ms.R_MM))
    return dict(
        clip=name, description=f"independent MuJoCo render, seed {sc.seed}: {sc.extra['cut_deg']:.0f} deg cut, "
                               f"{sc.fps} fps, {cam.size[0]}x{cam.size[1]}, {sc.cloth} cloth, {len(sc.lamps)} lamp(s), "
                               f"k1 {cam.k1:.3f}, cushion shade {sc.extra.get('cushion_shade', ms.CUSHION_SHADE):.2f}",
        video=f"{name}.mp4", fps=sc.fps, n_frames=n, resolution=list(cam.size), duration_s=sc.duration_s,
        time_convention="frame k (0-based) is centred on t_s = k/fps (mid-exposure); exposure_s long; "
                        "contact t_s = first-touch time on the same clock",
        exposure_s=sc.exposure_frac / sc.fps,
        table=dict(name="pool-9ft", length_mm=L, width_mm=W, cushion_nose_height_mm=round(ms.NOSE_MM, 3),
                   cloth=sc.cloth, cloth_rgb=list(sc.cloth_rgb),
                   origin="playing-surface corner (cushion-nose lines) at pixel corners_px.cloth_z0[0]; x along the "
                          "long side, y along the short side, z up from the cloth",
                   cushion_contact_normal_tilt_deg=round(ang, 3),
                   pockets_mm=[[round(x, 1), round(y, 1), r] for x, y, r in ms.pockets_mm()]),
        ball=dict(diameter_mm=ms.D_MM, mass_kg=ms.BALL_KG),
        balls=balls,
        frames=dict(t_s=[round(float(t), 6) for t in t_v], positions_mm=pos, velocities_mm_s=vel, pixels=pix),
        contacts=contacts, contact_definitions=mt.CONTACT_DEFINITIONS,
        physics=dict(engine=f"MuJoCo {__import__('mujoco').__version__}", timestep_s=ms.TIMESTEP_S, integrator="Euler",
                     cone="elliptic", note="nominal parameters only; ground truth comes from the simulated state",
                     solref_ball_ball=list(ms.SOLREF_BALL_BALL), solref_cushion=list(ms.SOLREF_CUSHION),
                     solref_cloth=list(ms.SOLREF_CLOTH), solimp=list(ms.SOLIMP),
                     mu_slide_cloth=ms.MU_CLOTH[0], rolling_friction_length_m=ms.MU_CLOTH[2],
                     torsional_friction_length_m=ms.MU_CLOTH[1], mu_ball_ball=ms.MU_BALL[0],
                     mu_ball_cushion=ms.MU_CUSHION[0], t_video0_in_sim_s=sc.t_video0_s,
                     shot_attempt=sc.extra["attempt"]),
        camera=dict(model="pinhole + OpenCV radial distortion (k1) applied with cv2.remap",
                    K=[[round(float(v), 4) for v in row] for row in cam.K], dist_coeffs=[round(cam.k1, 5), 0.0, 0.0, 0.0, 0.0],
                    R_world_to_cam_opencv=[[round(float(v), 8) for v in row] for row in cam.R],
                    t_world_to_cam_m=[round(float(v), 6) for v in cam.t_m],
                    camera_pos_mm=[round(float(v) * 1000, 2) for v in cam.pos_m],
                    roll_deg=round(cam.roll_deg, 3), pitch_deg=round(cam.pitch_deg, 3), yaw_deg=round(cam.yaw_deg, 3),
                    height_above_cloth_mm=round(cam.height_mm, 1), focal_px=round(float(cam.K[0, 0]), 4),
                    render_canvas=list(sc.extra["canvas"]),
                    homography_tablemm_to_undistorted_px_at_ball_centre_height=[[float(f"{v:.8g}") for v in row] for row in Hm],
                    pixel_convention="OpenCV: pixel centres at integer coordinates, (0,0) = top-left pixel centre",
                    world_units="table mm = world m * 1000"),
        corners_px=dict(cloth_z0=corners(0.0), ball_centre_plane=corners(ms.R_MM), nose_height=corners(ms.NOSE_MM)),
        corners_order="(0,0), (L,0), (L,W), (0,W) in table coordinates",
        render=dict(renderer="MuJoCo OpenGL offscreen (" + os.environ.get("MUJOCO_GL", "default") + ")",
                    subframes=sc.subframes, exposure_frac=sc.exposure_frac,
                    lamps=[dict(pos_mm=[round(v, 1) for v in lp["pos_mm"]], intensity=round(lp["intensity"], 3))
                           for lp in sc.lamps],
                    **{k: v for k, v in sc.effects.items()},
                    codec="mp4v (MPEG-4 part 2) via cv2.VideoWriter, default quality",
                    render_seconds=round(render_s, 1)),
    )


def render_clip(seed: int, out_dir: Path, args) -> Path:
    import cv2
    import mujoco

    name = f"mj{seed}{'_' + args.suffix if args.suffix else ''}"
    video, tpath = out_dir / f"{name}.mp4", out_dir / f"{name}.truth.json"
    if not args.truth_only and (video.exists() or tpath.exists()):
        print(f"{video} exists: kept (delete it to re-render)")
        return video
    sc, model, run, Q, contacts = choose_shot(seed, args)
    if args.truth_only:   # simulation truth only (no video), under a name the scorer does not read
        sim = out_dir / f"{name}.sim.json"
        sim.write_text(json.dumps(truth_json(sc, run, contacts, name, 0.0), indent=1))
        print(sim)
        return sim
    w, h = sc.camera.size
    cw, ch = sc.extra["canvas"]
    mx, my = sc.extra["maps"]
    shade = shade_field(sc)
    noise_rng = np.random.default_rng([seed, 7])
    n = int(round(sc.duration_s * sc.fps))
    tmp_video = out_dir / f".{name}.partial.mp4"
    wr = cv2.VideoWriter(str(tmp_video), cv2.VideoWriter_fourcc(*"mp4v"), float(sc.fps), (w, h))
    if not wr.isOpened():
        _fail(f"cannot open a video writer for {tmp_video}; check OpenCV's ffmpeg/mp4v support")
    d = mujoco.MjData(model)
    t_start = time.time()
    S = sc.subframes
    exp = sc.exposure_frac / sc.fps
    with mujoco.Renderer(model, height=ch, width=cw) as rnd:
        for k in range(n):
            acc = np.zeros((ch, cw, 3), np.float32)
            for j in range(S):
                t_sim = sc.t_video0_s + k / sc.fps + exp * ((j + 0.5) / S - 0.5)
                q = mt.interp(run, Q, t_sim)
                for bid in run.ids:   # renormalise the interpolated quaternions
                    a = model.jnt_qposadr[mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, f"j_{bid}")]
                    q[a + 3:a + 7] /= np.linalg.norm(q[a + 3:a + 7])
                d.qpos[:] = q
                mujoco.mj_forward(model, d)
                rnd.update_scene(d, camera="overhead")
                acc += rnd.render()
            img = cv2.remap(acc / S, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
            wr.write(apply_effects(img, sc, k / sc.fps, noise_rng, dict(shade=shade)))
            if args.png_frame is not None and k == args.png_frame:
                cv2.imwrite(str(out_dir / f"{name}_frame{k}.png"), apply_effects(img, sc, k / sc.fps, noise_rng,
                                                                                  dict(shade=shade)))
    wr.release()
    render_s = time.time() - t_start
    truth = truth_json(sc, run, contacts, name, render_s)
    tmp_truth = out_dir / f".{name}.partial.truth.json"
    tmp_truth.write_text(json.dumps(truth, indent=1))
    os.replace(tmp_video, video)
    os.replace(tmp_truth, tpath)
    nreq = sum(c["required"] for c in contacts)
    print(f"{video}  ({sc.fps} fps, {w}x{h}, {n} frames x {S} subframes, {nreq} required contacts, "
          f"render {render_s:.0f} s)")
    return video


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", type=Path)
    ap.add_argument("--seeds", type=int, nargs="+", required=True)
    ap.add_argument("--duration", type=float, default=None, help="clip length s (default: drawn in 1.5-2.5)")
    ap.add_argument("--fps", type=int, default=None, help="override the drawn frame rate (30-240)")
    ap.add_argument("--size", default=None, help="override the drawn resolution, e.g. 1280x720")
    ap.add_argument("--max-subframes", type=int, default=None, help="cap the drawn subframes (3-5) to save time")
    ap.add_argument("--truth-only", action="store_true", help="simulate and write mjSEED.sim.json only (no video)")
    ap.add_argument("--cloth", default=None, help="cloth colour: " + ", ".join({**ms.CLOTHS, **ms.SWEEP_CLOTHS}))
    ap.add_argument("--ball-set", choices=("pool", "snooker", "carom"), default=None, help="recolour the balls")
    ap.add_argument("--k1", type=float, default=None, help="lens radial distortion k1")
    ap.add_argument("--lamps", type=int, default=None, help="number of lamps (spread along the table)")
    ap.add_argument("--light", type=float, default=None, help="scale lamp intensities (e.g. 0.5 = dim)")
    ap.add_argument("--cushion-shade", type=float, default=None,
                    help="cushion-top colour = this factor x cloth colour (drawn default 0.8)")
    ap.add_argument("--suffix", default="", help="clip name mjSEED_SUFFIX (keeps sweep variants apart)")
    ap.add_argument("--png-frame", type=int, default=None, help="also save this frame as PNG (for a look)")
    args = ap.parse_args(argv)
    try:
        import cv2  # noqa: F401
        import mujoco  # noqa: F401
    except ImportError as exc:
        _fail(f"{exc.name} is not importable; use a Python with mujoco and opencv (pip install 'feltlab[mujoco]')")
    if args.duration is not None and not 0.3 <= args.duration <= 10:
        _fail(f"--duration {args.duration} s is out of range; use 0.3-10 s")
    if args.fps is not None and not 30 <= args.fps <= 240:
        _fail(f"--fps {args.fps} is out of range; use 30-240")
    if args.cloth is not None and args.cloth not in {**ms.CLOTHS, **ms.SWEEP_CLOTHS}:
        _fail(f"--cloth {args.cloth!r} is not one of {', '.join({**ms.CLOTHS, **ms.SWEEP_CLOTHS})}")
    args.out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="mjtex_") as tex:
        args.tex_dir = tex
        for s in args.seeds:
            render_clip(s, args.out, args)
    return 0


if __name__ == "__main__":
    sys.exit(main())
