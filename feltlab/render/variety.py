"""Randomised scenarios: many tables, cameras, lights and sensors from one seed.

Tracking and physics must work on footage made by other tools, so tests should
not lean on one look. :func:`varied_scenario` draws a plausible overhead
setup (ranges below are our own, chosen to span common rigs) and a shot in
which a struck cue ball meets an object ball. Same seed -> same scenario.

>>> sc = varied_scenario(3, resolution=(320, 180))
>>> sc.resolution, len(sc.balls) >= 2
((320, 180), True)
"""
from __future__ import annotations

import math

import numpy as np

from feltlab.render import settings as S
from feltlab.render.scenario import BallSetup, CameraSpec, EffectsSpec, Lamp, LightingSpec, Scenario
from feltlab.standards import table_preset

#: Cloth colours seen on tables (sRGB): greens, blues, teal, red, grey, purple; common practice.
CLOTHS = [(32, 112, 62), (20, 95, 50), (40, 130, 80), (30, 85, 150), (25, 65, 125), (24, 104, 96),
          (130, 30, 35), (95, 95, 100), (80, 50, 110)]
OBJECT_COLOURS = ["yellow", "blue", "red", "purple", "orange", "green", "maroon", "black"]


def varied_scenario(seed: int, *, resolution: tuple[int, int] = (640, 360), fps: float | None = None,
                    duration_s: float = 1.0, tables: tuple[str, ...] = ("pool-9ft", "pool-8ft", "pool-7ft", "carom"),
                    n_balls: int | None = None, whole: bool | None = None) -> Scenario:
    """A random but plausible scenario (see the module docstring).

    whole: True = the whole table in view with the camera aimed at its centre (offset
    adjusted for the drawn tilt), False = a closer crop, None = drawn (70 % whole, not re-aimed).
    """
    rng = np.random.default_rng(seed)
    preset = table_preset(str(rng.choice(tables)))
    L, W, R = preset.length_mm, preset.width_mm, preset.ball.radius_mm
    w, h = resolution
    fps = float(fps if fps is not None else rng.choice([30.0, 50.0, 60.0, 120.0, 240.0]))
    # camera: whole table in view (with margin) or a closer crop
    fov = float(rng.uniform(45, 75))
    drawn_whole = rng.random() < 0.7   # drawn even when overridden, so the seed's other draws stay put
    whole_arg = whole is True          # explicit: also aim the camera at the table centre (_centre_table)
    whole = drawn_whole if whole is None else bool(whole)
    need = (L + 2 * (S.CUSHION_WIDTH_MM + S.RAIL_WIDTH_MM)) * (1.05 if whole else 0.55)
    need = max(need, (W + 400) * (w / h) * (1.05 if whole else 0.55))
    height = need / 2 / math.tan(math.radians(fov) / 2)
    cam = CameraSpec(height_mm=float(height), fov_deg=fov,
                     aim_mm=(float(L / 2 + rng.uniform(-0.2, 0.2) * L * (not whole)),
                             float(W / 2 + rng.uniform(-0.1, 0.1) * W * (not whole))),
                     offset_mm=(float(rng.normal(0, 40)), float(rng.normal(0, 40))),
                     roll_deg=float(rng.normal(0, 1.5)), pitch_deg=float(rng.normal(0, 2.5)),
                     yaw_deg=float(rng.normal(0, 1.0)), k1=float(rng.uniform(-0.12, 0.02)),
                     k2=float(rng.uniform(-0.01, 0.03)))
    # lamps: 1-4 over the table, warm to cool
    n_l = int(rng.integers(1, 5))
    temp = rng.uniform(0, 1)
    lamp_rgb = (255.0, 235 + 20 * temp, 200 + 55 * temp)
    lamps = [Lamp((float(L * (k + 0.5) / n_l + rng.normal(0, 60)), float(W / 2 + rng.normal(0, 80)),
                   float(rng.uniform(800, 1600))), float(rng.uniform(60, 350)), float(rng.uniform(0.7, 1.2)), lamp_rgb)
             for k in range(n_l)]
    lit = LightingSpec(ambient=float(rng.uniform(0.1, 0.6)), cloth_rgb=CLOTHS[int(rng.integers(len(CLOTHS)))],
                       rail_rgb=_wood(rng),
                       floor_rgb=tuple(float(x) for x in rng.uniform(20, 90, 3)),
                       flicker=float(rng.choice([0.0, 0.0, rng.uniform(0.02, 0.15)])), flicker_hz=float(rng.choice([100.0, 120.0])),
                       lamps=lamps)
    eff = EffectsSpec(read_noise=float(rng.uniform(0.0, 0.01)), shot_noise=float(rng.uniform(0.0, 0.02)),
                      vignetting=float(rng.uniform(0, 1.5)), blur_px=float(rng.uniform(0, 1.2)),
                      white_balance=tuple(float(x) for x in rng.uniform(0.9, 1.1, 3)),
                      brightness=float(rng.uniform(0.75, 1.3)))
    # balls: an object ball ahead of the cue ball, plus bystanders, none overlapping
    n = int(n_balls if n_balls is not None else rng.integers(2, 6))
    margin = 3 * R
    cue = np.array([rng.uniform(margin, L * 0.45), rng.uniform(margin, W - margin)])
    obj = np.array([rng.uniform(L * 0.5, L - margin), rng.uniform(margin, W - margin)])
    # aim for a cut of up to ~50 degrees: the ghost-ball point offset sideways
    d = obj - cue
    u = d / np.linalg.norm(d)
    cut = math.radians(rng.uniform(-50, 50))
    ghost = obj - 2 * R * (math.cos(cut) * u + math.sin(cut) * np.array([-u[1], u[0]]))
    aim = ghost - cue
    heading = math.degrees(math.atan2(aim[1], aim[0]))
    # fast enough that the hit happens in the first half of the clip
    speed = float(min(max(rng.uniform(600, 3500), np.linalg.norm(aim) / (0.45 * duration_s)), 6000.0))
    follow = float(rng.choice([0.0, 0.5, 1.0, -0.5]))
    vel = (speed * math.cos(math.radians(heading)), speed * math.sin(math.radians(heading)))
    ux, uy = math.cos(math.radians(heading)), math.sin(math.radians(heading))
    spin = (-uy * follow * speed / R, ux * follow * speed / R, float(rng.normal(0, 0.2)) * speed / R)
    balls = [BallSetup("cue", S.BALL_COLOURS["cue"], "solid", 0, tuple(cue), vel, spin)]
    colours = list(rng.permutation(OBJECT_COLOURS))
    placed = [cue, obj]
    for k in range(n - 1):
        if k == 0:
            p = obj
        else:
            for _ in range(200):
                p = np.array([rng.uniform(margin, L - margin), rng.uniform(margin, W - margin)])
                if all(np.linalg.norm(p - q) > 3 * R for q in placed) and _clear_of_path(p, cue, ghost, R):
                    break
            else:
                continue
            placed.append(p)
        name = str(colours[k % len(colours)])
        stripe = bool(rng.random() < 0.4) and name != "black"
        label = name + ("-stripe" if stripe else "")
        if any(b.label == label for b in balls):
            label += "-2"
        balls.append(BallSetup(label, S.BALL_COLOURS[name], "stripe" if stripe else "solid",
                               int(rng.integers(1, 16)), (float(p[0]), float(p[1]))))
    if not whole:  # a crop follows the action
        mid = (cue + obj) / 2
        cam.aim_mm = (float(mid[0]), float(mid[1]))
    sc = Scenario(table=preset.name, fps=fps, duration_s=duration_s, resolution=(int(w), int(h)),
                  exposure=float(rng.uniform(0.1, 0.9)), codec="mp4v", seed=int(seed), camera=cam,
                  lighting=lit, effects=eff, physics={}, balls=balls, name=f"varied-{seed}")
    if whole_arg:
        _centre_table(sc)
    return sc


def _centre_table(sc: Scenario) -> None:
    """Shift the camera (offset_mm) so the table centre lands on the image centre.

    A drawn pitch of a few degrees swings a camera 2-3 m up by 100-300 mm, enough to
    cut a cushion off a whole-table view; a rig is aimed at the table instead.
    """
    from feltlab.render import camera_for

    L, W = sc.preset.length_mm, sc.preset.width_mm
    target = np.array([(sc.resolution[0] - 1) / 2, (sc.resolution[1] - 1) / 2])

    def centre_px(off):
        sc.camera.offset_mm = (float(off[0]), float(off[1]))
        return camera_for(sc).project(np.array([[L / 2, W / 2, 0.0]]))[0, :2]

    off = np.array(sc.camera.offset_mm, float)
    for _ in range(3):
        p0 = centre_px(off)
        J = np.column_stack([(centre_px(off + d) - p0) / 10.0 for d in (np.array([10.0, 0]), np.array([0, 10.0]))])
        off = off - np.linalg.solve(J, p0 - target)
    centre_px(off)


def _wood(rng: np.random.Generator) -> tuple[float, float, float]:
    """A wood-brown rail colour (sRGB)."""
    r = rng.uniform(60, 150)
    return (float(r), float(r * rng.uniform(0.5, 0.65)), float(r * rng.uniform(0.3, 0.45)))


def _clear_of_path(p: np.ndarray, a: np.ndarray, b: np.ndarray, R: float) -> bool:
    """True if p is more than 2.5 R from the segment a-b (keeps bystanders off the cue ball's line)."""
    ab = b - a
    t = np.clip(np.dot(p - a, ab) / max(np.dot(ab, ab), 1e-9), 0, 1)
    return float(np.linalg.norm(p - (a + t * ab))) > 2.5 * R


def rack_scenario(seed: int, *, resolution: tuple[int, int] = (1280, 720), fps: float = 60.0,
                  n_balls: int = 12, gap_mm: float = 0.3, duration_s: float = 1.2,
                  strike_speed_mm_s: float | None = None, whole: bool | None = None) -> Scenario:
    """A varied setup (camera, lamps, cloth, sensor as :func:`varied_scenario`) with a tight rack.

    ``n_balls`` object balls sit in a triangle (rows of 1, 2, 3, ...; apex
    towards the cue ball) with ``gap_mm`` between neighbours, so the
    tracker must separate touching balls; the cue ball is struck straight at
    the apex at ``strike_speed_mm_s`` (random 2.5-5 m/s when None) and
    reaches it within the first quarter of the clip. Colours cycle through the
    object-ball set, the later ones as stripes. whole: as :func:`varied_scenario`.

    >>> sc = rack_scenario(5, resolution=(320, 180), n_balls=12)
    >>> len(sc.balls)
    13
    """
    base = varied_scenario(seed, resolution=resolution, fps=fps, duration_s=duration_s,
                           tables=("pool-9ft", "pool-8ft", "pool-7ft"), n_balls=2, whole=whole)
    rng = np.random.default_rng(seed + 7919)
    preset = table_preset(base.table)
    L, W, R = preset.length_mm, preset.width_mm, preset.ball.radius_mm
    d = 2 * R + gap_mm
    apex = np.array([0.72 * L, W / 2 + rng.uniform(-0.08, 0.08) * W])
    speed = float(strike_speed_mm_s if strike_speed_mm_s is not None else rng.uniform(2500, 5000))
    cue = apex - np.array([min(0.22 * duration_s * speed, 0.4 * L), 0.0])
    balls = [BallSetup("cue", S.BALL_COLOURS["cue"], "solid", 0, (float(cue[0]), float(cue[1])), (speed, 0.0),
                       (0.0, 0.0, 0.0))]
    k, row = 0, 0
    while k < n_balls:
        for j in range(row + 1):
            if k >= n_balls:
                break
            p = apex + np.array([row * d * math.sqrt(3) / 2, (j - row / 2) * d])
            name = OBJECT_COLOURS[k % len(OBJECT_COLOURS)]
            stripe = k >= len(OBJECT_COLOURS) and name != "black"
            label = name + ("-stripe" if stripe else "")
            if any(b.label == label for b in balls):
                label += "-2"
            balls.append(BallSetup(label, S.BALL_COLOURS[name], "stripe" if stripe else "solid", k + 1,
                                   (float(p[0]), float(p[1]))))
            k += 1
        row += 1
    whole = np.allclose(base.camera.aim_mm, (L / 2, W / 2))
    if not whole:  # a crop: keep the cue ball's run and the rack in view
        mid = (cue + apex + np.array([2 * R * math.sqrt(3), 0.0])) / 2
        base.camera.aim_mm = (float(mid[0]), float(mid[1]))
    base.balls = balls
    base.name = f"rack-{seed}"
    return base


#: Sweep cloth colours (sRGB): a plain name -> colour; common practice.
CLOTH_NAMES = {"green": (32, 112, 62), "blue": (30, 85, 150), "red": (130, 30, 35), "grey": (95, 95, 100)}
#: Snooker object colours in the order bystanders get them (reds first, as on a table mid-frame).
SNOOKER_COLOURS = ["red", "red", "yellow", "red", "green", "brown", "blue", "pink", "black", "red"]


def apply_overrides(sc: Scenario, *, ball_set: str | None = None, cloth: str | None = None, lamps: int | None = None,
                    light: float | None = None, uneven: bool = False, k1: float | None = None,
                    tilt_deg: float | None = None, noise: float | None = None) -> Scenario:
    """Override single conditions of a drawn scenario in place (a robustness sweep; None = keep).

    ball_set: "pool" (keep), "snooker" (reds and colours, all solid, no numbers) or
    "carom" (white cue, a second white and a red; further balls dropped).
    cloth: a :data:`CLOTH_NAMES` word or "R,G,B". lamps: number of lamps spread
    along the table (the first lamp's size and colour). light: exposure gain
    factor (< 1 = dim room; sensor noise stays the same, so relatively larger).
    uneven: a single bright lamp 700 mm above one end and little ambient.
    k1: lens distortion (k2 = 0). tilt_deg: camera pitch. noise: read and shot
    noise factor.

    >>> sc = apply_overrides(varied_scenario(3, resolution=(320, 180), n_balls=3), ball_set="carom", cloth="grey")
    >>> [b.label for b in sc.balls], sc.lighting.cloth_rgb
    (['cue', 'red', 'white'], (95, 95, 100))
    """
    L, W = sc.preset.length_mm, sc.preset.width_mm
    if ball_set == "snooker":
        out, seen = [sc.balls[0]], {}
        for k, b in enumerate(sc.balls[1:]):
            name = SNOOKER_COLOURS[k % len(SNOOKER_COLOURS)]
            seen[name] = seen.get(name, 0) + 1
            label = name if seen[name] == 1 else f"{name}-{seen[name]}"
            out.append(BallSetup(label, S.BALL_COLOURS[name], "solid", 0, b.position_mm, b.velocity_mm_s, b.spin_rad_s))
        sc.balls = out
    elif ball_set == "carom":
        cols = [("red", "red"), ("white", "white")]
        sc.balls = [sc.balls[0]] + [BallSetup(lab, S.BALL_COLOURS[c], "solid", 0, b.position_mm, b.velocity_mm_s,
                                              b.spin_rad_s) for (lab, c), b in zip(cols, sc.balls[1:])]
    elif ball_set not in (None, "pool"):
        raise ValueError(f"unknown ball set {ball_set!r}; use pool, snooker or carom")
    if cloth is not None:
        rgb = CLOTH_NAMES.get(cloth) or tuple(int(v) for v in cloth.split(","))
        sc.lighting.cloth_rgb = tuple(rgb)  # type: ignore[assignment]
    if lamps is not None and lamps > 0:
        first = sc.lighting.lamps[0] if sc.lighting.lamps else Lamp((L / 2, W / 2, S.LAMP_HEIGHT_MM))
        sc.lighting.lamps = [Lamp((L * (k + 0.5) / lamps, W / 2, first.position_mm[2]), first.radius_mm,
                                  first.intensity, first.rgb) for k in range(lamps)]
    if uneven:
        first = sc.lighting.lamps[0] if sc.lighting.lamps else Lamp((0.0, 0.0, 0.0))
        sc.lighting.lamps = [Lamp((0.12 * L, 0.35 * W, 700.0), 120.0, 1.0, first.rgb)]
        sc.lighting.ambient = 0.05
    if light is not None:
        sc.effects.brightness *= float(light)
    if k1 is not None:
        sc.camera.k1, sc.camera.k2 = float(k1), 0.0
    if tilt_deg is not None:
        sc.camera.pitch_deg = float(tilt_deg)
    if noise is not None:
        sc.effects.read_noise *= float(noise)
        sc.effects.shot_noise *= float(noise)
    return sc
