"""Scenario files: a shot, a table, a camera and lights, described in TOML.

A scenario is everything the renderer needs to make one clip with exact truth.
Units: mm, s, mm/s, rad/s, kg; positions in the table frame (DEVELOPERS.md).
Colours are sRGB 0-255 (as a colour picker shows them).

Schema (every key except ``[[ball]]`` entries is optional; defaults shown)::

    [clip]
    table = "pool-9ft"        # preset name from feltlab.standards.TABLES
    fps = 60.0                # 25..1000
    duration_s = 1.5          # clip length
    t0_s = 0.0                # simulation time at the middle of frame 0's exposure
    resolution = [1280, 720]  # width, height (px), at most 1920 x 1080
    exposure = 0.5            # shutter open for this fraction of the frame interval
    codec = "mp4v"            # "mp4v" (.mp4), "ffv1" (lossless .avi) or "png" (folder of frames);
                              # scripts/make_clips.py picks the suffix from it, `--out` suffix wins
    seed = 1                  # noise, cloth texture; --seed overrides

    [camera]
    height_mm = 2500.0        # camera centre above the cloth
    focal_px = 0.0            # focal length in px; 0 -> derived from fov_deg
    fov_deg = 60.0            # horizontal field of view (used when focal_px is 0)
    aim_mm = []               # table point under the untilted camera; [] -> table centre
    offset_mm = [0.0, 0.0]    # shift of the camera from aim_mm
    roll_deg = 0.0            # see tracking.camera.rotation_from_euler
    pitch_deg = 0.0
    yaw_deg = 0.0
    k1 = 0.0                  # OpenCV radial distortion
    k2 = 0.0

    [lighting]
    ambient = 0.25            # sky/room light, relative to the lamps at the table centre
    cloth_rgb = [30, 110, 60]
    rail_rgb = [110, 62, 32]
    floor_rgb = [45, 42, 40]
    flicker = 0.0             # mains flicker depth (0..1), seen at high fps
    flicker_hz = 100.0        # twice the mains frequency
    [[lighting.lamp]]         # area lamps (discs facing down); default: two over the table
    position_mm = [1270.0, 635.0, 1000.0]
    radius_mm = 150.0
    intensity = 1.0
    rgb = [255, 246, 235]

    [effects]
    read_noise = 0.004        # Gaussian noise sigma, fraction of full scale
    shot_noise = 0.01         # photon noise: sigma = shot_noise * sqrt(signal)
    vignetting = 1.0          # 1 = natural cos^4 falloff, 0 = none
    blur_px = 0.5             # Gaussian optical blur sigma (px), 0 = none
    white_balance = [1.0, 1.0, 1.0]   # per-channel gains (r, g, b)
    brightness = 1.0          # overall exposure gain
    max_subframes = 24        # cap on motion-blur samples per frame

    [physics]                 # passed to physics.simulate.SimParams
    e_ball_ball = 0.95
    e_cushion = 0.8
    mu_slide = 0.2
    mu_roll = 0.01
    mu_ball_ball = 0.05
    mu_cushion = 0.14

    [[ball]]                  # one table per ball
    label = "cue"             # DEVELOPERS.md labels: cue, yellow, red, blue-stripe, red-2 ...
    rgb = []                  # [] -> from the label's colour name
    pattern = "solid"         # "solid" or "stripe"
    number = 0                # printed number (0 -> none)
    position_mm = [600.0, 635.0]
    velocity_mm_s = [0.0, 0.0]
    spin_rad_s = [0.0, 0.0, 0.0]   # table frame
    # or, for a struck ball, instead of velocity/spin:
    # strike = { speed_mm_s = 1500, direction_deg = 0, follow = 0.0, side = 0.0 }
    #   follow: R*omega_roll / v (1 = natural roll, 0 = stun, <0 = draw); side: R*wz / v

Safety: scenarios only describe motion. A real rig that launches balls
(pendulum, spring, air) can hurt people: follow your local safety rules.
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from feltlab.errors import FeltlabError
from feltlab.render import settings as S
from feltlab.standards import TablePreset, table_preset


@dataclass
class Lamp:
    """A disc area light facing down. position_mm: centre (table frame); rgb sRGB 0-255."""

    position_mm: tuple[float, float, float]
    radius_mm: float = S.LAMP_RADIUS_MM
    intensity: float = 1.0
    rgb: tuple[float, float, float] = S.LAMP_RGB


@dataclass
class CameraSpec:
    """Camera placement (mm, degrees, px); see tracking.camera.CameraModel.looking_down."""

    height_mm: float = 2500.0
    focal_px: float = 0.0
    fov_deg: float = 60.0
    aim_mm: tuple[float, ...] = ()
    offset_mm: tuple[float, float] = (0.0, 0.0)
    roll_deg: float = 0.0
    pitch_deg: float = 0.0
    yaw_deg: float = 0.0
    k1: float = 0.0
    k2: float = 0.0


@dataclass
class LightingSpec:
    """Lamps and surface colours (sRGB 0-255)."""

    ambient: float = S.AMBIENT
    cloth_rgb: tuple[float, float, float] = S.CLOTH_RGB
    rail_rgb: tuple[float, float, float] = S.RAIL_RGB
    floor_rgb: tuple[float, float, float] = S.FLOOR_RGB
    flicker: float = 0.0
    flicker_hz: float = 100.0
    lamps: list[Lamp] = field(default_factory=list)


@dataclass
class EffectsSpec:
    """Camera effects: noise (fractions of full scale), vignetting, blur (px), colour gains."""

    read_noise: float = S.READ_NOISE
    shot_noise: float = S.SHOT_NOISE
    vignetting: float = 1.0
    blur_px: float = S.BLUR_PX
    white_balance: tuple[float, float, float] = (1.0, 1.0, 1.0)
    brightness: float = 1.0
    max_subframes: int = S.MAX_SUBFRAMES


@dataclass
class BallSetup:
    """One ball at t = 0: table-frame position (mm), velocity (mm/s), spin (rad/s)."""

    label: str
    rgb: tuple[float, float, float]
    pattern: str = "solid"
    number: int = 0
    position_mm: tuple[float, float] = (0.0, 0.0)
    velocity_mm_s: tuple[float, float] = (0.0, 0.0)
    spin_rad_s: tuple[float, float, float] = (0.0, 0.0, 0.0)


@dataclass
class Scenario:
    """A whole clip description (see the module docstring for the TOML schema)."""

    table: str = "pool-9ft"
    fps: float = 60.0
    duration_s: float = 1.5
    t0_s: float = 0.0
    resolution: tuple[int, int] = (1280, 720)
    exposure: float = 0.5
    codec: str = "mp4v"
    seed: int = 1
    camera: CameraSpec = field(default_factory=CameraSpec)
    lighting: LightingSpec = field(default_factory=LightingSpec)
    effects: EffectsSpec = field(default_factory=EffectsSpec)
    physics: dict[str, float] = field(default_factory=dict)
    balls: list[BallSetup] = field(default_factory=list)
    name: str = "scenario"

    @property
    def preset(self) -> TablePreset:
        return table_preset(self.table)

    @property
    def n_frames(self) -> int:
        return max(1, int(round(self.duration_s * self.fps)))

    def frame_times(self):
        """Mid-exposure time (s) of every frame: t0 + k / fps."""
        import numpy as np

        return self.t0_s + np.arange(self.n_frames) / self.fps

    def to_dict(self) -> dict:
        return asdict(self)


# ----------------------------------------------------------------- colours
def _colour_for(label: str) -> tuple[float, float, float]:
    base = label.split("-")[0].lower()
    if base not in S.BALL_COLOURS:
        raise FeltlabError(
            f"ball {label!r} has no rgb and {base!r} is not a known colour name; "
            f"add rgb = [r, g, b] or use one of: {', '.join(S.BALL_COLOURS)}"
        )
    return S.BALL_COLOURS[base]


# ----------------------------------------------------------------- parsing
def _err(where: str, msg: str) -> FeltlabError:
    return FeltlabError(f"scenario {where}: {msg}")


def _num(d: dict, key: str, default: float, where: str, lo: float | None = None, hi: float | None = None) -> float:
    v = d.get(key, default)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise _err(where, f"{key} must be a number, got {v!r}")
    if (lo is not None and v < lo) or (hi is not None and v > hi):
        raise _err(where, f"{key} = {v} is out of range [{lo}, {hi}]; pick a value inside it")
    return float(v)


def _vec(d: dict, key: str, default, n: int, where: str) -> tuple[float, ...]:
    v = d.get(key, default)
    if not isinstance(v, (list, tuple)) or (len(v) != n) or not all(
        isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in v
    ):
        raise _err(where, f"{key} must be a list of {n} numbers, got {v!r}")
    return tuple(float(x) for x in v)


def _rgb(d: dict, key: str, default, where: str) -> tuple[float, float, float]:
    v = _vec(d, key, default, 3, where)
    if any(x < 0 or x > 255 for x in v):
        raise _err(where, f"{key} must be sRGB values 0..255, got {list(v)}")
    return v  # type: ignore[return-value]


def _check_keys(d: dict, allowed: set[str], where: str) -> None:
    extra = set(d) - allowed
    if extra:
        raise _err(where, f"unknown key(s) {sorted(extra)}; allowed: {sorted(allowed)}")


def scenario_from_dict(data: dict[str, Any], name: str = "scenario") -> Scenario:
    """Validate a parsed TOML document and build a :class:`Scenario` (raises FeltlabError)."""
    if not isinstance(data, dict):
        raise _err("", "top level must be a table")
    _check_keys(data, {"clip", "camera", "lighting", "effects", "physics", "ball"}, "top level")
    clip = data.get("clip", {})
    _check_keys(clip, {"table", "fps", "duration_s", "t0_s", "resolution", "exposure", "codec", "seed"}, "[clip]")
    sc = Scenario(name=name)
    sc.table = str(clip.get("table", sc.table))
    try:
        preset = table_preset(sc.table)
    except ValueError as exc:
        raise _err("[clip]", str(exc)) from None
    sc.table = preset.name
    sc.fps = _num(clip, "fps", sc.fps, "[clip]", S.FPS_RANGE[0], S.FPS_RANGE[1])
    sc.duration_s = _num(clip, "duration_s", sc.duration_s, "[clip]", 1.0 / sc.fps, S.MAX_DURATION_S)
    sc.t0_s = _num(clip, "t0_s", sc.t0_s, "[clip]", 0.0)
    res = _vec(clip, "resolution", sc.resolution, 2, "[clip]")
    if not (16 <= res[0] <= S.MAX_RESOLUTION[0] and 16 <= res[1] <= S.MAX_RESOLUTION[1]) or res != tuple(map(int, res)):
        raise _err("[clip]", f"resolution {list(res)} must be whole pixels, 16..{S.MAX_RESOLUTION[0]} x 16..{S.MAX_RESOLUTION[1]}")
    sc.resolution = (int(res[0]), int(res[1]))
    sc.exposure = _num(clip, "exposure", sc.exposure, "[clip]", 0.0, 1.0)
    sc.codec = str(clip.get("codec", sc.codec)).lower()
    if sc.codec not in S.CODECS:
        raise _err("[clip]", f"codec {sc.codec!r} unknown; use one of {list(S.CODECS)}")
    seed = clip.get("seed", sc.seed)
    if not isinstance(seed, int) or isinstance(seed, bool) or seed < 0:
        raise _err("[clip]", f"seed must be a non-negative integer, got {seed!r}")
    sc.seed = seed

    cam = data.get("camera", {})
    cs = CameraSpec()
    _check_keys(cam, set(asdict(cs)), "[camera]")
    cs.height_mm = _num(cam, "height_mm", cs.height_mm, "[camera]", 200.0, 20000.0)
    cs.focal_px = _num(cam, "focal_px", cs.focal_px, "[camera]", 0.0, 1e5)
    cs.fov_deg = _num(cam, "fov_deg", cs.fov_deg, "[camera]", 1.0, 150.0)
    aim = cam.get("aim_mm", [])
    cs.aim_mm = () if aim == [] else _vec(cam, "aim_mm", aim, 2, "[camera]")
    cs.offset_mm = _vec(cam, "offset_mm", cs.offset_mm, 2, "[camera]")  # type: ignore[assignment]
    for k in ("roll_deg", "pitch_deg", "yaw_deg"):
        setattr(cs, k, _num(cam, k, 0.0, "[camera]", -180.0, 180.0))
    cs.k1 = _num(cam, "k1", 0.0, "[camera]", -1.0, 1.0)
    cs.k2 = _num(cam, "k2", 0.0, "[camera]", -1.0, 1.0)
    sc.camera = cs

    lit = data.get("lighting", {})
    ls = LightingSpec()
    _check_keys(lit, {"ambient", "cloth_rgb", "rail_rgb", "floor_rgb", "flicker", "flicker_hz", "lamp"}, "[lighting]")
    ls.ambient = _num(lit, "ambient", ls.ambient, "[lighting]", 0.0, 10.0)
    ls.cloth_rgb = _rgb(lit, "cloth_rgb", ls.cloth_rgb, "[lighting]")
    ls.rail_rgb = _rgb(lit, "rail_rgb", ls.rail_rgb, "[lighting]")
    ls.floor_rgb = _rgb(lit, "floor_rgb", ls.floor_rgb, "[lighting]")
    ls.flicker = _num(lit, "flicker", 0.0, "[lighting]", 0.0, 1.0)
    ls.flicker_hz = _num(lit, "flicker_hz", 100.0, "[lighting]", 0.0, 10000.0)
    lamps = lit.get("lamp", [])
    if not isinstance(lamps, list):
        raise _err("[lighting]", "lamps go in [[lighting.lamp]] tables")
    for i, lp in enumerate(lamps):
        w = f"[[lighting.lamp]] #{i + 1}"
        _check_keys(lp, {"position_mm", "radius_mm", "intensity", "rgb"}, w)
        pos = _vec(lp, "position_mm", None, 3, w)
        if pos[2] <= 100.0:
            raise _err(w, f"lamp height {pos[2]} mm must be above the table (> 100 mm)")
        ls.lamps.append(Lamp(pos, _num(lp, "radius_mm", S.LAMP_RADIUS_MM, w, 1.0, 3000.0),
                             _num(lp, "intensity", 1.0, w, 0.0, 100.0), _rgb(lp, "rgb", S.LAMP_RGB, w)))
    if not ls.lamps:
        L, W = preset.length_mm, preset.width_mm
        ls.lamps = [Lamp((L * f, W / 2, S.LAMP_HEIGHT_MM)) for f in S.DEFAULT_LAMP_FRACTIONS]
    sc.lighting = ls

    eff = data.get("effects", {})
    es = EffectsSpec()
    _check_keys(eff, set(asdict(es)), "[effects]")
    es.read_noise = _num(eff, "read_noise", es.read_noise, "[effects]", 0.0, 0.5)
    es.shot_noise = _num(eff, "shot_noise", es.shot_noise, "[effects]", 0.0, 0.5)
    es.vignetting = _num(eff, "vignetting", es.vignetting, "[effects]", 0.0, 4.0)
    es.blur_px = _num(eff, "blur_px", es.blur_px, "[effects]", 0.0, 20.0)
    es.white_balance = _vec(eff, "white_balance", es.white_balance, 3, "[effects]")  # type: ignore[assignment]
    if any(g <= 0 or g > 4 for g in es.white_balance):
        raise _err("[effects]", "white_balance gains must be in (0, 4]")
    es.brightness = _num(eff, "brightness", es.brightness, "[effects]", 0.01, 20.0)
    es.max_subframes = int(_num(eff, "max_subframes", es.max_subframes, "[effects]", 1, 256))
    sc.effects = es

    phys = data.get("physics", {})
    _check_keys(phys, set(S.PHYSICS_KEYS), "[physics]")
    sc.physics = {k: _num(phys, k, 0.0, "[physics]", 0.0, 10.0) for k in phys}

    balls = data.get("ball", [])
    if not isinstance(balls, list) or not balls:
        raise _err("", "needs at least one [[ball]] table (label, position_mm, ...)")
    R = preset.ball.radius_mm
    seen: set[str] = set()
    for i, b in enumerate(balls):
        w = f"[[ball]] #{i + 1}"
        _check_keys(b, {"label", "rgb", "pattern", "number", "position_mm", "velocity_mm_s", "spin_rad_s", "strike"}, w)
        label = b.get("label")
        if not isinstance(label, str) or not label:
            raise _err(w, "needs a label (e.g. 'cue', 'yellow', 'red-stripe')")
        if label in seen:
            raise _err(w, f"label {label!r} used twice; a second ball of one colour gets '-2'")
        seen.add(label)
        rgb = b.get("rgb", [])
        rgb_t = _colour_for(label) if rgb == [] else _rgb(b, "rgb", rgb, w)
        pattern = str(b.get("pattern", "stripe" if "-stripe" in label else "solid"))
        if pattern not in ("solid", "stripe"):
            raise _err(w, f"pattern {pattern!r} must be 'solid' or 'stripe'")
        number = b.get("number", 0)
        if not isinstance(number, int) or isinstance(number, bool) or not 0 <= number <= 99:
            raise _err(w, f"number must be an integer 0..99, got {number!r}")
        pos = _vec(b, "position_mm", None, 2, w)
        if not (R <= pos[0] <= preset.length_mm - R and R <= pos[1] <= preset.width_mm - R):
            raise _err(w, f"position {list(pos)} mm puts the ball off the {preset.name} playing surface "
                          f"({preset.length_mm:.0f} x {preset.width_mm:.0f} mm, centre at least R = {R:.2f} mm inside)")
        vel = _vec(b, "velocity_mm_s", (0.0, 0.0), 2, w)
        spin = _vec(b, "spin_rad_s", (0.0, 0.0, 0.0), 3, w)
        if "strike" in b:
            if "velocity_mm_s" in b or "spin_rad_s" in b:
                raise _err(w, "give either strike or velocity_mm_s/spin_rad_s, not both")
            st = b["strike"]
            _check_keys(st, {"speed_mm_s", "direction_deg", "follow", "side"}, w + " strike")
            v = _num(st, "speed_mm_s", None, w + " strike", 0.0, S.MAX_SPEED_MM_S)
            ang = math.radians(_num(st, "direction_deg", 0.0, w + " strike"))
            f = _num(st, "follow", 0.0, w + " strike", -5.0, 5.0)
            s = _num(st, "side", 0.0, w + " strike", -5.0, 5.0)
            ux, uy = math.cos(ang), math.sin(ang)
            vel = (v * ux, v * uy)
            # rolling without slip: omega = (z x u) v / R  (z x u = (-uy, ux, 0))
            spin = (-uy * f * v / R, ux * f * v / R, s * v / R)
        if math.hypot(*vel) > S.MAX_SPEED_MM_S:
            raise _err(w, f"speed {math.hypot(*vel):.0f} mm/s exceeds {S.MAX_SPEED_MM_S:.0f} mm/s")
        sc.balls.append(BallSetup(label, rgb_t, pattern, number, pos, vel, spin))  # type: ignore[arg-type]
    return sc


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file (raises FeltlabError on any problem)."""
    p = Path(path)
    if not p.is_file():
        raise FeltlabError(f"scenario file {str(p)!r} not found; pass the path of a .toml scenario (see clips/)")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise FeltlabError(f"scenario {p.name} is not valid TOML ({exc}); fix the syntax") from None
    return scenario_from_dict(data, name=p.stem)
