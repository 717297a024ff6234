"""Scene for the independent MuJoCo footage generator: table, balls, lamps, camera (our own design).

World frame = table frame in metres: origin at a playing-surface corner (the cushion-nose lines),
x along the long side, y along the short side, z up from the cloth. Table mm = world m * 1000.

Everything random is drawn from one ``numpy.random.Generator`` (the clip seed) in
:func:`draw_scene`, so a seed fixes the whole clip. Used by ``scripts/make_mujoco_clips.py``;
needs the optional ``mujoco`` package (not a project dependency).
"""
from __future__ import annotations

import math
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from feltlab.standards import TABLES  # noqa: E402

TABLE = TABLES["pool-9ft"]
L_MM, W_MM = TABLE.length_mm, TABLE.width_mm          # playing surface between noses (WPA)
D_MM = TABLE.ball.diameter_mm                          # 57.15 mm (WPA)
R_MM = D_MM / 2.0
NOSE_MM = float(TABLE.cushion_nose_height_mm)          # 36.51 mm (1 7/16 in, secondary copy of WPA)
BALL_KG = 0.17                                         # brief: 0.17 kg (inside the WPA 5.5-6 oz range)

# Table furniture (from memory / common practice; only for looks and for pocket gaps).
CUSHION_DEPTH_MM = 50.0      # nose to rail, plan view (from memory)
CUSHION_FACE_DEG = 25.0      # face leans back below the nose, so only the nose edge is touched
RAIL_WIDTH_MM = 110.0        # wooden rail outside the cushion (from memory)
CORNER_GAP_MM = 70.0         # cushion ends this far from a corner along each rail (from memory)
SIDE_GAP_MM = 70.0           # half-gap of the side pocket mouth (from memory)
POCKET_R_MM = 62.0           # drawn pocket hole radius (visual only)

# Contact parameters (MuJoCo solref = (timeconst s, dampratio)); chosen so the simulated
# restitution lands near typical published ranges (ball-ball ~0.93, cushion ~0.75-0.85,
# from memory); the truth e is measured from the simulated state, not taken from these.
SOLREF_BALL_BALL = (0.004, 0.025)
SOLREF_CUSHION = (0.010, 0.075)
SOLREF_CLOTH = (0.002, 1.0)
SOLIMP = (0.99, 0.99, 0.0001, 0.5, 2)
MU_CLOTH = (0.2, 0.0003, 0.0003)    # slide, torsional (m), rolling (m): c_roll ~ 0.0003/R ~ 0.01
MU_BALL = (0.055, 0.0, 0.0)
MU_CUSHION = (0.2, 0.0, 0.0)
TIMESTEP_S = 2.5e-5

CLOTHS = {"green": (30, 110, 55), "blue": (35, 80, 150), "red": (140, 40, 45)}
#: Extra cloth colours that only the sweep options pick (drawn scenes keep the three above, so seeds
#: render as before).
SWEEP_CLOTHS = {"grey": (95, 95, 100)}
#: Cushion-top colour = this factor x cloth colour (our look; the sweep varies it).
CUSHION_SHADE = 0.8
#: Snooker colours (sRGB, our own palette) and a carom set, for --ball-set.
SNOOKER = [("red", (200, 25, 25)), ("yellow", (240, 190, 20)), ("green", (15, 115, 55)), ("brown", (110, 60, 30)),
           ("blue", (25, 55, 175)), ("pink", (235, 120, 150)), ("black", (18, 18, 20))]
CAROM = [("red", (200, 25, 25)), ("white", (236, 234, 222))]
SOLIDS = {"1": ("yellow", (245, 200, 25)), "2": ("blue", (30, 60, 170)), "3": ("red", (200, 30, 30)),
          "4": ("purple", (90, 40, 140)), "5": ("orange", (245, 120, 20)), "6": ("green", (20, 120, 60)),
          "7": ("maroon", (120, 30, 35)), "8": ("black", (20, 20, 22))}
STRIPES = {str(int(k) + 8): (c + "-stripe", rgb) for k, (c, rgb) in SOLIDS.items() if k != "8"}
CUE_RGB = (242, 240, 230)


@dataclass
class Ball:
    """One ball: id, colour name, rgb (0-255), 'solid'|'stripe', start (x, y) mm, start velocity mm/s, spin rad/s."""

    id: str
    colour: str
    rgb: tuple[int, int, int]
    pattern: str
    pos_mm: tuple[float, float]
    vel_mm_s: tuple[float, float] = (0.0, 0.0)
    w_rad_s: tuple[float, float, float] = (0.0, 0.0, 0.0)


@dataclass
class Camera:
    """Pinhole camera: K (px), k1, OpenCV world->camera R and t (m), output size (w, h) px."""

    K: np.ndarray
    k1: float
    R: np.ndarray
    t_m: np.ndarray
    size: tuple[int, int]
    roll_deg: float
    pitch_deg: float
    yaw_deg: float
    height_mm: float

    @property
    def pos_m(self) -> np.ndarray:
        return -self.R.T @ self.t_m


@dataclass
class Scene:
    """Everything drawn from the seed."""

    seed: int
    fps: int
    duration_s: float
    camera: Camera
    balls: list[Ball]
    cloth: str
    cloth_rgb: tuple[int, int, int]
    lamps: list[dict]
    subframes: int
    exposure_frac: float
    effects: dict
    t_video0_s: float = 0.03
    extra: dict = field(default_factory=dict)


def rot(axis: str, deg: float) -> np.ndarray:
    """Right-handed rotation matrix about a body axis."""
    c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
    if axis == "x":
        return np.array([[1, 0, 0], [0, c, -s], [0, s, c]])
    if axis == "y":
        return np.array([[c, 0, s], [0, 1, 0], [-s, 0, c]])
    return np.array([[c, -s, 0], [s, c, 0], [0, 0, 1]])


def draw_camera(rng: np.random.Generator, size: tuple[int, int]) -> Camera:
    """Overhead camera above the table centre with a small seeded tilt; table spans 70-82 % of the width."""
    w, h = size
    height = float(rng.uniform(2600.0, 3300.0))
    span = float(rng.uniform(0.70, 0.82))
    f = span * w * (height - R_MM) / L_MM
    roll, pitch, yaw = (float(v) for v in rng.uniform(-2.5, 2.5, 3))
    # nadir view: image x = +X table, image y (down) = -Y table, optical axis = -Z
    R0 = np.array([[1.0, 0, 0], [0, -1.0, 0], [0, 0, -1.0]])
    R = rot("z", roll) @ rot("x", pitch) @ rot("y", yaw) @ R0
    centre = np.array([L_MM / 2 + rng.uniform(-30, 30), W_MM / 2 + rng.uniform(-20, 20), 0.0]) / 1000.0
    # place the camera so that its optical axis passes near the table centre
    pos = centre - R[2] * (height / 1000.0) / abs(R[2, 2])
    t = -R @ pos
    K = np.array([[f, 0, (w - 1) / 2.0], [0, f, (h - 1) / 2.0], [0, 0, 1.0]])
    return Camera(K=K, k1=float(rng.uniform(-0.08, 0.0)), R=R, t_m=t, size=size,
                  roll_deg=roll, pitch_deg=pitch, yaw_deg=yaw, height_mm=float(pos[2] * 1000.0))


def draw_shot(rng: np.random.Generator) -> tuple[Ball, Ball, float]:
    """Cue ball and object ball for a cut shot; returns (cue, object, cut angle deg)."""
    while True:
        ob = np.array([rng.uniform(650, L_MM - 650), rng.uniform(380, W_MM - 380)])
        target = np.array([rng.uniform(300, L_MM - 300), rng.choice([0.0, W_MM])])  # a long cushion
        d_ob = (target - ob) / np.linalg.norm(target - ob)
        cut = float(rng.uniform(8.0, 40.0)) * float(rng.choice([-1, 1]))
        c, s = math.cos(math.radians(cut)), math.sin(math.radians(cut))
        u = np.array([c * d_ob[0] - s * d_ob[1], s * d_ob[0] + c * d_ob[1]])   # cue direction
        ghost = ob - D_MM * d_ob
        cue = ghost - u * rng.uniform(350, 750)
        if 120 < cue[0] < L_MM - 120 and 120 < cue[1] < W_MM - 120:
            break
    speed = float(rng.uniform(1300, 2600))
    v = u * speed
    # spin: between stun and natural roll (rolling: w = z x v / R)
    roll = float(rng.uniform(0.0, 1.0))
    w = np.array([-v[1], v[0], 0.0]) / R_MM * roll
    ob_id = str(rng.choice([k for k in list(SOLIDS) + list(STRIPES) if k != "8"]))
    col, rgb = {**SOLIDS, **STRIPES}[ob_id]
    return (Ball("cue", "white", CUE_RGB, "solid", (float(cue[0]), float(cue[1])), (float(v[0]), float(v[1])),
                 (float(w[0]), float(w[1]), 0.0)),
            Ball(ob_id, col, rgb, "stripe" if "stripe" in col else "solid", (float(ob[0]), float(ob[1]))),
            abs(cut))


def draw_scene(seed: int, attempt: int = 0, duration_s: float | None = None) -> Scene:
    """Draw a whole clip's setup from ``seed`` (``attempt`` redraws the shot only)."""
    rng = np.random.default_rng(seed)
    fps = int(rng.choice([60, 120, 240]))
    size = (1280, 720) if rng.random() < 0.6 else (1920, 1080)
    cam = draw_camera(rng, size)
    cloth = str(rng.choice(list(CLOTHS)))
    cloth_rgb = tuple(int(np.clip(v + rng.uniform(-15, 15), 0, 255)) for v in CLOTHS[cloth])
    n_lamps = int(rng.integers(1, 4))
    lamps = []
    for i in range(n_lamps):
        x = L_MM * (i + 0.5) / n_lamps + rng.uniform(-150, 150)
        lamps.append(dict(pos_mm=(x, W_MM / 2 + rng.uniform(-200, 200), rng.uniform(900, 1500)),
                          intensity=float(rng.uniform(0.75, 1.05)) / math.sqrt(n_lamps)))
    effects = dict(noise_sigma_dn=float(rng.uniform(1.0, 4.0)), shot_noise_gain=float(rng.uniform(0.01, 0.05)),
                   vignette=float(rng.uniform(0.1, 0.35)), gradient=[float(v) for v in rng.uniform(-0.06, 0.06, 2)],
                   optical_blur_sigma_px=float(rng.uniform(0.4, 0.9)),
                   flicker=float(rng.choice([0.0, rng.uniform(0.0, 0.08)])), flicker_hz=100.0,
                   flicker_phase=float(rng.uniform(0, 2 * math.pi)),
                   white_balance=[float(v) for v in rng.uniform(0.92, 1.08, 3)])
    subframes = int(rng.integers(3, 6))
    dur = float(duration_s if duration_s is not None else rng.uniform(1.5, 2.5))
    # bystander balls (drawn now so the layout does not depend on the shot retries)
    pool = [k for k in list(SOLIDS) + list(STRIPES)]
    n_by = int(rng.integers(1, 3))
    by_ids = [str(v) for v in rng.choice(pool, size=n_by + 4, replace=False)]
    by_pos = [(float(rng.uniform(150, L_MM - 150)), float(rng.uniform(150, W_MM - 150))) for _ in range(8)]
    srng = np.random.default_rng([seed, attempt])
    cue, ob, cut = draw_shot(srng)
    balls = [cue, ob]
    have_stripe = ob.pattern == "stripe"
    for bid in by_ids:
        if len(balls) >= 2 + n_by:
            break
        if bid == ob.id:
            continue
        if not have_stripe and len(balls) == 1 + n_by:   # last slot: make sure one stripe is in view
            bid = next(k for k in STRIPES if k != ob.id and k not in [b.id for b in balls])
        col, rgb = {**SOLIDS, **STRIPES}[bid]
        for p in by_pos:
            if all(math.dist(p, b.pos_mm) > 250 for b in balls):
                balls.append(Ball(bid, col, rgb, "stripe" if "stripe" in col else "solid", p))
                by_pos.remove(p)
                have_stripe |= "stripe" in col
                break
    return Scene(seed=seed, fps=fps, duration_s=dur, camera=cam, balls=balls, cloth=cloth, cloth_rgb=cloth_rgb,
                 lamps=lamps, subframes=subframes, exposure_frac=0.5, effects=effects,
                 extra=dict(cut_deg=cut, attempt=attempt))


def apply_overrides(sc: Scene, *, cloth: str | None = None, ball_set: str | None = None, k1: float | None = None,
                    lamps: int | None = None, light: float | None = None,
                    cushion_shade: float | None = None) -> Scene:
    """Override single drawn conditions in place for a robustness sweep (None = keep the draw).

    ball_set: "pool" keeps the draw; "snooker" recolours the object balls as reds and colours (all
    solid); "carom" keeps the cue and two more balls, recoloured red and white (a third white-ish ball).
    light scales every lamp's intensity; cushion_shade sets the cushion-top colour factor.
    """
    if cloth is not None:
        rgb = {**CLOTHS, **SWEEP_CLOTHS}[cloth]
        sc.cloth, sc.cloth_rgb = cloth, rgb
    if ball_set == "snooker":
        for k, b in enumerate(sc.balls[1:]):
            b.colour, b.rgb = SNOOKER[k % len(SNOOKER)]
            b.pattern = "solid"
    elif ball_set == "carom":
        sc.balls = sc.balls[:3]
        for b, (col, rgb) in zip(sc.balls[1:], CAROM):
            b.colour, b.rgb, b.pattern = col, rgb, "solid"
    if k1 is not None:
        sc.camera.k1 = float(k1)
    if lamps is not None and lamps > 0:
        first = sc.lamps[0]
        tot = sum(lp["intensity"] ** 2 for lp in sc.lamps) ** 0.5
        sc.lamps = [dict(pos_mm=(L_MM * (i + 0.5) / lamps, W_MM / 2, first["pos_mm"][2]),
                         intensity=tot / math.sqrt(lamps)) for i in range(lamps)]
    if light is not None:
        for lp in sc.lamps:
            lp["intensity"] *= float(light)
    if cushion_shade is not None:
        sc.extra["cushion_shade"] = float(cushion_shade)
    return sc


# ---------------------------------------------------------------- geometry shared with the truth
def pockets_mm() -> list[tuple[float, float, float]]:
    """Pocket hole centres and radius (x, y, r) mm in the table frame (visual only)."""
    o = 30.0
    return [(-o, -o, POCKET_R_MM), (L_MM / 2, -45.0, POCKET_R_MM), (L_MM + o, -o, POCKET_R_MM),
            (-o, W_MM + o, POCKET_R_MM), (L_MM / 2, W_MM + 45.0, POCKET_R_MM), (L_MM + o, W_MM + o, POCKET_R_MM)]


def cushion_segments() -> list[tuple[str, float, float]]:
    """(cushion name, start, end) mm along the rail for each cushion segment between pockets."""
    g, s = CORNER_GAP_MM, SIDE_GAP_MM
    return [("y0", g, L_MM / 2 - s), ("y0", L_MM / 2 + s, L_MM - g),
            ("yW", g, L_MM / 2 - s), ("yW", L_MM / 2 + s, L_MM - g),
            ("x0", g, W_MM - g), ("xL", g, W_MM - g)]


def cushion_normal(name: str) -> np.ndarray:
    """Horizontal inward normal (table plane) of a cushion."""
    return {"y0": np.array([0.0, 1.0]), "yW": np.array([0.0, -1.0]),
            "x0": np.array([1.0, 0.0]), "xL": np.array([-1.0, 0.0])}[name]


def nose_gap_mm(name: str, p_mm: np.ndarray) -> float:
    """Distance (mm) from a ball centre (x, y, z mm) to the cushion's nose line, minus R."""
    off = {"y0": p_mm[1], "yW": W_MM - p_mm[1], "x0": p_mm[0], "xL": L_MM - p_mm[0]}[name]
    return math.hypot(off, p_mm[2] - NOSE_MM) - R_MM


# ---------------------------------------------------------------- MJCF
def _rgba(rgb, a=1.0) -> str:
    return f"{rgb[0] / 255:.4f} {rgb[1] / 255:.4f} {rgb[2] / 255:.4f} {a}"


def _cushion_geom(name: str, a: float, b: float, idx: int) -> str:
    """A box whose upper inner edge is the nose (height NOSE_MM on the nose line); face leans back."""
    ang = math.radians(CUSHION_FACE_DEG)
    depth, hgt = CUSHION_DEPTH_MM / 1000.0, 0.09
    # box in its own frame: local y = outward (away from the table), local z up; the nose edge is
    # at local (y=-depth/2, z=+hgt/2). Rotate about the rail axis by +ang so the face leans back.
    # In the (y_out, z) plane the nose corner after rotation, relative to the box centre:
    cy, cz = -depth / 2, hgt / 2
    ry = cy * math.cos(ang) - cz * math.sin(ang)
    rz = cy * math.sin(ang) + cz * math.cos(ang)
    nose_z = NOSE_MM / 1000.0
    half = (b - a) / 2000.0
    mid = (a + b) / 2000.0
    # centre = nose - rotated offset, in (outward, z)
    c_out, c_z = -ry, nose_z - rz
    Lm, Wm = L_MM / 1000.0, W_MM / 1000.0
    # frame: x along rail, y outward, z up; euler about x by +ang (outward-up tilt)
    if name == "y0":
        pos, euler, size = (mid, -c_out, c_z), f"{-ang} 0 0", (half, depth / 2, hgt / 2)
        # outward is -Y: a rotation -ang about X lifts the outer side ... mirror of yW
    elif name == "yW":
        pos, euler, size = (mid, Wm + c_out, c_z), f"{ang} 0 0", (half, depth / 2, hgt / 2)
    elif name == "x0":
        pos, euler, size = (-c_out, mid, c_z), f"0 {ang} 0", (depth / 2, half, hgt / 2)
    else:
        pos, euler, size = (Lm + c_out, mid, c_z), f"0 {-ang} 0", (depth / 2, half, hgt / 2)
    return (f'<geom name="cushion_{name}_{idx}" type="box" pos="{pos[0]:.6f} {pos[1]:.6f} {pos[2]:.6f}" '
            f'euler="{euler}" size="{size[0]:.6f} {size[1]:.6f} {size[2]:.6f}" material="cushion" '
            f'contype="0" conaffinity="0"/>')


def stripe_textures(tex_dir: Path, rgb: tuple[int, int, int]) -> dict[str, str]:
    """Write cube-map faces for a stripe ball (white caps, coloured band) and return MJCF file attributes."""
    import cv2

    n = 64
    side = np.full((n, n, 3), CUE_RGB, np.uint8)
    side[int(n * 0.25):int(n * 0.75)] = rgb
    cap = np.full((n, n, 3), CUE_RGB, np.uint8)
    name = f"{rgb[0]}_{rgb[1]}_{rgb[2]}"
    ps, pc = tex_dir / f"stripe_side_{name}.png", tex_dir / f"stripe_cap_{name}.png"
    cv2.imwrite(str(ps), side[:, :, ::-1])
    cv2.imwrite(str(pc), cap[:, :, ::-1])
    return dict(fileright=str(ps), fileleft=str(ps), filefront=str(ps), fileback=str(ps),
                fileup=str(pc), filedown=str(pc))


def _contact_pairs(sc: Scene) -> list[str]:
    """Explicit contact pairs (all geoms have contype 0), each with its own solref and friction."""
    imp = " ".join(str(v) for v in SOLIMP)

    def pair(g1, g2, ref, mu, condim):
        fr = f"{mu[0]} {mu[0]} {mu[1]} {mu[2]} {mu[2]}"
        return (f'<pair geom1="{g1}" geom2="{g2}" condim="{condim}" friction="{fr}" '
                f'solref="{ref[0]} {ref[1]}" solimp="{imp}"/>')

    out = []
    ids = [b.id for b in sc.balls]
    cush = [f"cushion_{n}_{i}" for i, (n, _a, _b) in enumerate(cushion_segments())]
    for i, a in enumerate(ids):
        out.append(pair(f"ball_{a}", "cloth", SOLREF_CLOTH, MU_CLOTH, 6))
        for b in ids[i + 1:]:
            out.append(pair(f"ball_{a}", f"ball_{b}", SOLREF_BALL_BALL, MU_BALL, 3))
        for c in cush:
            out.append(pair(f"ball_{a}", c, SOLREF_CUSHION, MU_CUSHION, 3))
    return out


def build_mjcf(sc: Scene, tex_dir: Path, canvas: tuple[int, int]) -> str:
    """MJCF text of the whole scene; the overhead camera is named 'overhead'."""
    Lm, Wm = L_MM / 1000.0, W_MM / 1000.0
    cam = sc.camera
    fovy = 2 * math.degrees(math.atan(canvas[1] / 2.0 / cam.K[1, 1]))
    x_ax, y_ax = cam.R[0], -cam.R[1]
    pos = cam.pos_m
    assets, balls_xml = [], []
    for b in sc.balls:
        if b.pattern == "stripe":
            attrs = " ".join(f'{k}="{v}"' for k, v in stripe_textures(tex_dir, b.rgb).items())
            assets.append(f'<texture name="tex_{b.id}" type="cube" {attrs}/>')
            assets.append(f'<material name="mat_{b.id}" texture="tex_{b.id}" specular="0.6" shininess="0.8" reflectance="0.05"/>')
        else:
            assets.append(f'<material name="mat_{b.id}" rgba="{_rgba(b.rgb)}" specular="0.6" shininess="0.8" reflectance="0.05"/>')
        x, y = b.pos_mm[0] / 1000.0, b.pos_mm[1] / 1000.0
        balls_xml.append(
            f'<body name="ball_{b.id}" pos="{x:.6f} {y:.6f} {R_MM / 1000.0 - 2e-5:.6f}"><freejoint name="j_{b.id}"/>'
            f'<geom name="ball_{b.id}" type="sphere" size="{R_MM / 1000.0:.6f}" mass="{BALL_KG}" '
            f'material="mat_{b.id}" contype="0" conaffinity="0"/></body>')
    lights = []
    for i, lp in enumerate(sc.lamps):
        x, y, z = (v / 1000.0 for v in lp["pos_mm"])
        I = lp["intensity"]
        lights.append(f'<light name="lamp{i}" pos="{x:.4f} {y:.4f} {z:.4f}" dir="0 0 -1" directional="false" '
                      f'castshadow="true" cutoff="75" exponent="2" attenuation="1 0 0" '
                      f'diffuse="{I:.3f} {I:.3f} {I * 0.97:.3f}" specular="0.25 0.25 0.25"/>')
    rail_z = 0.062
    rails = []
    rw = RAIL_WIDTH_MM / 1000.0
    cd = CUSHION_DEPTH_MM / 1000.0
    for nm, (px, py, sx, sy) in {
        "s": (Lm / 2, -cd - rw / 2, Lm / 2 + cd + rw, rw / 2), "n": (Lm / 2, Wm + cd + rw / 2, Lm / 2 + cd + rw, rw / 2),
        "w": (-cd - rw / 2, Wm / 2, rw / 2, Wm / 2 + cd), "e": (Lm + cd + rw / 2, Wm / 2, rw / 2, Wm / 2 + cd)}.items():
        rails.append(f'<geom name="rail_{nm}" type="box" pos="{px:.5f} {py:.5f} {rail_z / 2:.5f}" '
                     f'size="{sx:.5f} {sy:.5f} {rail_z / 2:.5f}" material="rail" contype="0" conaffinity="0"/>')
    cushions = [_cushion_geom(n, a, b, i) for i, (n, a, b) in enumerate(cushion_segments())]
    pockets = [f'<geom name="pocket{i}" type="cylinder" pos="{x / 1000:.5f} {y / 1000:.5f} {0.0635 + 0.0005 * (i % 2)}" '
               f'size="{r / 1000:.5f} 0.0005" rgba="0.03 0.03 0.03 1" contype="0" conaffinity="0"/>'
               for i, (x, y, r) in enumerate(pockets_mm())]
    pairs = _contact_pairs(sc)
    shade = sc.extra.get("cushion_shade", CUSHION_SHADE)
    return f"""<mujoco model="feltlab_mj_table">
  <compiler angle="radian"/>
  <option timestep="{TIMESTEP_S}" integrator="Euler" cone="elliptic" gravity="0 0 -9.80665"/>
  <visual>
    <global offwidth="{canvas[0]}" offheight="{canvas[1]}" fovy="{fovy:.6f}"/>
    <quality shadowsize="4096" offsamples="4"/>
    <headlight ambient="0.25 0.25 0.25" diffuse="0.15 0.15 0.15" specular="0 0 0"/>
    <map znear="0.2" zfar="10"/>
  </visual>
  <asset>
    <material name="cloth" rgba="{_rgba(sc.cloth_rgb)}" specular="0.0" shininess="0.0"/>
    <material name="cushion" rgba="{_rgba(tuple(min(255, int(v * shade)) for v in sc.cloth_rgb))}" specular="0.05"/>
    <material name="rail" rgba="0.36 0.2 0.1 1" specular="0.3" shininess="0.4"/>
    <material name="floor" rgba="0.25 0.24 0.23 1"/>
    {"".join(assets)}
  </asset>
  <worldbody>
    <geom name="floor" type="plane" pos="{Lm / 2} {Wm / 2} -0.8" size="5 5 0.1" material="floor" contype="0" conaffinity="0"/>
    <geom name="cloth" type="box" pos="{Lm / 2} {Wm / 2} -0.01" size="{Lm / 2 + 0.1} {Wm / 2 + 0.1} 0.01" material="cloth"
          contype="0" conaffinity="0"/>
    {"".join(rails)}
    {"".join(cushions)}
    {"".join(pockets)}
    {"".join(lights)}
    <camera name="overhead" pos="{pos[0]:.6f} {pos[1]:.6f} {pos[2]:.6f}"
            xyaxes="{x_ax[0]:.8f} {x_ax[1]:.8f} {x_ax[2]:.8f} {y_ax[0]:.8f} {y_ax[1]:.8f} {y_ax[2]:.8f}" fovy="{fovy:.6f}"/>
    {"".join(balls_xml)}
  </worldbody>
  <contact>
    {"".join(pairs)}
  </contact>
</mujoco>"""
