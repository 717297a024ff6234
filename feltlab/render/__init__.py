"""Synthetic overhead footage with exact truth: scenario TOML -> clip + ``CLIP.truth.json``.

Python use::

    from feltlab.render import load_scenario, render_scenario
    sc = load_scenario("clips/bench_restitution.toml")
    render_scenario(sc, "out/bench.mp4")          # also writes out/bench.truth.json

Stages: :mod:`scenario` (schema) -> physics.simulate (motion, contacts) ->
:mod:`scene` (static table, once) + :mod:`balls` (ball patches per sub-frame)
-> :mod:`frames` (motion blur, camera effects) -> :mod:`video` + :mod:`truth`.
"""
from __future__ import annotations

import math
import time
from pathlib import Path
from typing import Callable

import numpy as np

from feltlab.errors import FeltlabError
from feltlab.render.balls import BallLook
from feltlab.render.frames import FrameRenderer, LinearMotion, Look, Motion, SimMotion, render_frames
from feltlab.render.scenario import Scenario, load_scenario, scenario_from_dict
from feltlab.render.scene import TableGeometry
from feltlab.render.truth import build_truth, truth_path_for, write_truth
from feltlab.render.video import ClipWriter, codec_for
from tracking.camera import CameraModel

__all__ = ["Scenario", "load_scenario", "scenario_from_dict", "render_scenario", "camera_for", "renderer_for",
           "simulate_scenario", "render_to_arrays", "LinearMotion", "SimMotion", "truth_path_for"]


def camera_for(sc: Scenario) -> CameraModel:
    """The scenario's camera (focal from fov_deg when focal_px is 0)."""
    c = sc.camera
    w, h = sc.resolution
    f = c.focal_px if c.focal_px > 0 else (w / 2.0) / math.tan(math.radians(c.fov_deg) / 2.0)
    p = sc.preset
    aim = tuple(c.aim_mm) if c.aim_mm else (p.length_mm / 2.0, p.width_mm / 2.0)
    return CameraModel.looking_down(aim, c.height_mm, f, (w, h), roll_deg=c.roll_deg, pitch_deg=c.pitch_deg,
                                    yaw_deg=c.yaw_deg, k1=c.k1, k2=c.k2, offset_mm=tuple(c.offset_mm))


def renderer_for(sc: Scenario, camera: CameraModel | None = None, supersample: int | None = None) -> FrameRenderer:
    """Build the frame renderer (renders the static background once)."""
    cam = camera or camera_for(sc)
    lit, eff = sc.lighting, sc.effects
    look = Look(
        cloth_rgb=lit.cloth_rgb, rail_rgb=lit.rail_rgb, floor_rgb=lit.floor_rgb, ambient=lit.ambient,
        lamps_pos=np.array([lp.position_mm for lp in lit.lamps], float),
        lamps_radius=np.array([lp.radius_mm for lp in lit.lamps], float),
        lamps_rgb=np.array([lp.rgb for lp in lit.lamps], float),
        lamps_intensity=np.array([lp.intensity for lp in lit.lamps], float),
        read_noise=eff.read_noise, shot_noise=eff.shot_noise, vignetting=eff.vignetting, blur_px=eff.blur_px,
        white_balance=tuple(eff.white_balance), brightness=eff.brightness, flicker=lit.flicker,
        flicker_hz=lit.flicker_hz, max_subframes=eff.max_subframes,
    )
    if supersample is not None:
        look.supersample = supersample
    looks = [BallLook.from_rgb(b.rgb, b.pattern, b.number) for b in sc.balls]
    return FrameRenderer(cam, TableGeometry.from_preset(sc.preset), sc.preset.ball.radius_mm, looks, look, seed=sc.seed)


def sim_end_time(sc: Scenario) -> float:
    """Last instant (s) a clip needs states for: last frame's mid-exposure + half an exposure."""
    return float(sc.t0_s + (sc.n_frames - 1) / sc.fps + sc.exposure / sc.fps / 2.0 + 1e-6)


def simulate_scenario(sc: Scenario):
    """Run physics.simulate for the scenario's balls; returns the SimResult."""
    from physics.simulate import BallInit, SimParams, simulate

    ball = sc.preset.ball
    inits = [BallInit(b.label, b.position_mm[0], b.position_mm[1], b.velocity_mm_s[0], b.velocity_mm_s[1],
                      *b.spin_rad_s, radius_mm=ball.radius_mm, mass_kg=ball.mass_kg) for b in sc.balls]
    params = SimParams.for_table(sc.preset, **sc.physics)
    return simulate(inits, params, sim_end_time(sc))


def render_to_arrays(sc: Scenario, times_s=None, motion: Motion | None = None,
                     supersample: int | None = None) -> np.ndarray:
    """Render frames in memory: uint8 BGR (T, H, W, 3) at mid-exposure times (default: the clip's frames).

    For tests that need pixels but no files. motion defaults to the simulated scenario.
    """
    if motion is None:
        motion = SimMotion(simulate_scenario(sc))
    times = sc.frame_times() if times_s is None else np.asarray(times_s, float)
    renderer = renderer_for(sc, supersample=supersample)
    frames = [f for _, f in render_frames(renderer, motion, times, sc.exposure / sc.fps, sim_end_time(sc))]
    return np.stack(frames) if frames else np.zeros((0, sc.resolution[1], sc.resolution[0], 3), np.uint8)


def render_scenario(sc: Scenario, out_path: str | Path, *, motion: Motion | None = None, contacts: list | None = None,
                    overwrite: bool = False, supersample: int | None = None,
                    progress: Callable[[int, int], None] | None = None) -> dict:
    """Render ``sc`` to ``out_path`` (+ ``.truth.json``); returns a summary dict.

    motion: ball states to draw (default: simulate the scenario). contacts:
    true contacts for the truth file when ``motion`` is given. Refuses to
    replace existing outputs unless ``overwrite``.
    """
    out = Path(out_path)
    codec = codec_for(out)
    tpath = truth_path_for(out)
    for p in (out, tpath):
        if p.exists() and not overwrite:
            raise FeltlabError(f"{p} already exists; choose another --out or pass --force to replace it")
    writer = ClipWriter(out, sc.fps, sc.resolution)  # validates the format before any work
    if motion is None:
        sim = simulate_scenario(sc)
        motion = SimMotion(sim)
        contacts = [c.to_dict() for c in sim.contacts]
    contacts = list(contacts or [])
    t_start = time.perf_counter()
    renderer = renderer_for(sc, supersample=supersample)
    t_bg = time.perf_counter() - t_start
    times = sc.frame_times()
    exposure_s = sc.exposure / sc.fps
    t_end = sim_end_time(sc)
    t1 = time.perf_counter()
    with writer as wr:
        for k, frame in render_frames(renderer, motion, times, exposure_s, t_end):
            wr.write(frame)
            if progress:
                progress(k + 1, len(times))
    t_frames = time.perf_counter() - t1
    pos, vel, _, on = motion.states(times)
    preset = sc.preset
    geo = renderer.geo
    truth = build_truth(
        clip_name=out.name, codec=codec, seed=sc.seed, fps=sc.fps, t0_s=sc.t0_s, exposure=sc.exposure,
        camera=renderer.camera,
        table={"preset": preset.name, "name": preset.name, "length_mm": preset.length_mm, "width_mm": preset.width_mm,
               "nose_height_mm": geo.nose_height_mm, "pockets": preset.pockets},
        ball={"diameter_mm": preset.ball.diameter_mm, "mass_kg": preset.ball.mass_kg},
        balls=[{"label": b.label, "rgb": list(b.rgb), "pattern": b.pattern, "number": b.number} for b in sc.balls],
        times_s=times, pos=pos, vel=vel, on_table=on,
        corners_mm={"cloth": geo.corners(0.0), "ball_centre": geo.corners(preset.ball.radius_mm),
                    "nose": geo.corners(geo.nose_height_mm)},
        contacts=contacts, scenario=sc.to_dict(),
    )
    try:
        write_truth(truth, tpath)
    except Exception:
        out.unlink(missing_ok=True) if out.is_file() else None
        raise
    return {"clip": str(out), "truth": str(tpath), "frames": len(times), "background_s": t_bg,
            "frames_s": t_frames, "fps_rendered": len(times) / max(t_frames, 1e-9)}
