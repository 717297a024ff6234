"""Renderer: geometry of what it draws, truth file, camera effects, CLI.

Every check compares with something outside the renderer: closed-form
projective geometry of a sphere, the camera model (tracking.camera, itself
checked against OpenCV in its own tests), OpenCV's image moments, SciPy's
rotations, statistics of the noise model. Small images and few frames keep
this file fast.
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import cv2
import numpy as np
import pytest
from click.testing import CliRunner

from feltlab.errors import FeltlabError
from feltlab.render import LinearMotion, load_scenario, render_scenario, renderer_for, scenario_from_dict
from feltlab.render.balls import BallLook, LampSet, integrate_orientations, shade_ball
from feltlab.render.effects import add_sensor_noise, srgb_to_linear
from feltlab.render.frames import render_frames
from feltlab.render.scene import RayField
from feltlab.render.truth import read_truth
from feltlab.standards import POOL_BALL
from tracking.camera import CameraModel

R = POOL_BALL.radius_mm
CLIPS = Path(__file__).resolve().parents[1] / "clips"


def _clean_effects() -> dict:
    return {"read_noise": 0.0, "shot_noise": 0.0, "vignetting": 0.0, "blur_px": 0.0}


class _Static:
    """Balls at fixed places; ``show`` False keeps them off the table (background only)."""

    def __init__(self, ids, pos, show=True):
        self.ball_ids = list(ids)
        self.pos = np.asarray(pos, float).reshape(-1, 2)
        self.show = show

    def states(self, t):
        t = np.asarray(t, float)
        T, N = len(t), len(self.ball_ids)
        pos = np.broadcast_to(self.pos[None], (T, N, 2)).copy()
        return pos, np.zeros((T, N, 2)), np.zeros((T, N, 3)), np.full((T, N), self.show)


def _one_frame(sc, motion, t=0.05, exposure_s=0.0):
    r = renderer_for(sc)
    (_, frame), = list(render_frames(r, motion, np.array([t]), exposure_s, 1.0))
    return r, frame


def _linear(frame_bgr: np.ndarray) -> np.ndarray:
    return srgb_to_linear(frame_bgr[..., ::-1].astype(float))


# ----------------------------------------------------------------- silhouettes
def test_silhouette_centre_matches_closed_form_ellipse_off_axis():
    """A sphere's image under a pinhole camera is an ellipse whose major axis lies on the
    line through the principal point; its end points are at f tan(theta -/+ alpha) from the
    principal point, theta = angle of the centre off the optical axis, alpha = asin(R / D)
    (closed-form projective geometry). So the silhouette centre is f (tan(theta+alpha) +
    tan(theta-alpha)) / 2, NOT the projected centre f tan(theta). The renderer's anti-aliased
    coverage must put its centroid (OpenCV moments) there within 0.02 px."""
    w, h, f = 400, 300, 500.0
    cam = CameraModel.looking_down((1000.0, 600.0), 800.0, f, (w, h))
    c = np.array([1230.0, 700.0, R])  # well off-axis: theta ~ 17 deg
    q0 = cam.project([c])[0]
    x0, y0 = int(q0[0]) - 40, int(q0[1]) - 40
    ys, xs = np.mgrid[y0:y0 + 80, x0:x0 + 80].astype(float)
    field = RayField(cam)
    dirs = field.rays(xs.ravel(), ys.ravel())
    pitch = 1.0 / f
    lamps = LampSet(np.array([[1000.0, 600.0, 1000.0]]), np.array([100.0]), np.array([[1e6, 1e6, 1e6]]))
    cov, _ = shade_ball(cam.centre_mm, dirs, pitch, c, R, np.eye(3), BallLook.from_rgb((200, 0, 0)), lamps, 0.2,
                        np.zeros(3))
    m = cv2.moments(cov.reshape(80, 80).astype(np.float32))
    got = np.array([x0 + m["m10"] / m["m00"], y0 + m["m01"] / m["m00"]])
    # closed form
    pc = cam.to_camera([c])[0]
    D = np.linalg.norm(pc)
    theta = math.acos(pc[2] / D)
    alpha = math.asin(R / D)
    rho = f * (math.tan(theta + alpha) + math.tan(theta - alpha)) / 2.0
    radial = pc[:2] / np.linalg.norm(pc[:2])
    expect = cam.K[:2, 2] + rho * radial
    assert np.linalg.norm(got - expect) < 0.02
    # ...and the difference from the projected centre is real (so the check can fail)
    assert np.linalg.norm(expect - q0) > 0.1
    # area: pi a b with a = (f tan(theta+alpha) - f tan(theta-alpha)) / 2, b from the cone
    a = f * (math.tan(theta + alpha) - math.tan(theta - alpha)) / 2.0
    b = f * math.tan(alpha) / math.cos(theta) / math.sqrt(1 - (math.tan(alpha) * math.tan(theta)) ** 2)
    assert m["m00"] == pytest.approx(math.pi * a * b, rel=0.01)


def _topdown_scenario(w=240, h=180):
    return scenario_from_dict({
        "clip": {"table": "carom", "fps": 100, "duration_s": 0.05, "resolution": [w, h], "seed": 3},
        # camera straight above the ball (+0.37/-0.29 mm so the centre falls between pixels)
        "camera": {"height_mm": 1500, "focal_px": 900, "aim_mm": [900.37, 500.0 - 0.29]},
        "lighting": {"lamp": [{"position_mm": [900.0, 500.0, 1000.0], "radius_mm": 120.0}]},
        "effects": _clean_effects(),
        "ball": [{"label": "red", "position_mm": [900.0, 500.0]}],
    })


def test_rendered_ball_intensity_centroid_is_projected_centre_topdown():
    """Top-down camera over the ball and the lamp straight above it: the scene is symmetric
    about the vertical through the ball, so the silhouette, shading and shadow all centre on
    the projected ball centre (for this geometry the perspective offset of the silhouette is
    below 1e-4 px by the closed form of the previous test). The intensity centroid of
    (frame - background) (Crocker & Grier 1996 style) must sit within 0.1 px of
    CameraModel.project of the true centre."""
    sc = _topdown_scenario()
    pos = [[900.0, 500.0]]
    _, fr = _one_frame(sc, _Static(["red"], pos))
    _, bg = _one_frame(sc, _Static(["red"], pos, show=False))
    diff = _linear(fr)[..., 0] - _linear(bg)[..., 0]  # signed, linear red channel: weights add linearly
    cam = renderer_for(sc).camera
    q = cam.project([[900.0, 500.0, R]])[0]
    r = 70  # covers the ball's shadow and ambient occlusion (3.5 R ~ 61 px)
    x0, y0 = int(round(q[0])) - r, int(round(q[1])) - r
    win = diff[y0:y0 + 2 * r + 1, x0:x0 + 2 * r + 1].astype(np.float32)
    m = cv2.moments(win)
    got = np.array([x0 + m["m10"] / m["m00"], y0 + m["m01"] / m["m00"]])
    assert np.linalg.norm(got - q) < 0.1
    # sub-pixel position really is off the grid (so rounding would fail this test)
    assert np.linalg.norm(q - np.round(q)) > 0.2


def test_motion_blur_streak_has_uniform_motion_variance():
    """A ball moving at v during an exposure T is smeared by a uniform distribution of
    length L = v T (px); a uniform distribution adds variance L^2 / 12 (standard result),
    sampled here at n equally spaced sub-frames: L^2 (n^2 - 1) / (12 n^2). The streak's
    centroid is the mid-exposure position."""
    sc = _topdown_scenario()
    v = 3000.0  # mm/s along x
    t_mid, exp_s = 0.05, 0.01
    p_mid = np.array([900.0, 500.0])
    motion = LinearMotion(["red"], [p_mid - [v * t_mid, 0.0]], [[v, 0.0]], R)
    r, fr = _one_frame(sc, motion, t=t_mid, exposure_s=exp_s)
    _, still = _one_frame(sc, _Static(["red"], [p_mid]))
    _, bg = _one_frame(sc, _Static(["red"], [p_mid], show=False))
    cam = r.camera
    q = cam.project([[*p_mid, R]])[0]

    def moments(img):
        d = _linear(img)[..., 0] - _linear(bg)[..., 0]  # signed linear red: a blur is a linear mixture
        y0, y1, x0, x1 = int(q[1]) - 40, int(q[1]) + 41, 0, d.shape[1]
        m = cv2.moments(d[y0:y1, x0:x1].astype(np.float32))
        cx = m["m10"] / m["m00"]
        return x0 + cx, m["mu20"] / m["m00"]

    cx_blur, var_blur = moments(fr)
    _, var_still = moments(still)
    L = v * exp_s * (cam.project([[p_mid[0] + 1, p_mid[1], R]])[0][0] - q[0])  # px
    n = len(r.subframe_times(np.array([t_mid]), exp_s, np.array([v]))[0])
    expect = L ** 2 * (n * n - 1) / (12 * n * n)
    assert abs(cx_blur - q[0]) < 0.1
    assert var_blur - var_still == pytest.approx(expect, rel=0.08)


# ----------------------------------------------------------------- distortion
def test_k1_render_puts_rail_edge_where_camera_model_projects_it():
    """With strong barrel distortion (k1 = -0.12) the cushion/rail boundary (a rectangle
    CUSHION_WIDTH_MM outside the nose lines at the nose height) must appear where
    CameraModel.project puts it: the 50 % crossing of the linear red channel across the
    edge within 0.3 px, at points along all four sides. The same points without distortion
    are several px away, so the check can fail."""
    from feltlab.render import settings as S

    sc = scenario_from_dict({
        "clip": {"table": "carom", "resolution": [480, 270], "seed": 2},
        "camera": {"height_mm": 3000, "fov_deg": 70, "k1": -0.12, "roll_deg": 1.0, "pitch_deg": 2.0},
        "effects": _clean_effects(),
        "ball": [{"label": "cue", "position_mm": [300.0, 300.0]}],
    })
    r = renderer_for(sc, supersample=4)
    img = r.bg[..., 0].astype(float)  # linear red: cloth is dark in red, the rail bright
    cam = r.camera
    L, W, h = r.geo.length_mm, r.geo.width_mm, r.geo.nose_height_mm
    cw = S.CUSHION_WIDTH_MM
    undist = CameraModel(cam.K, np.zeros(5), cam.R, cam.t, cam.image_size)
    errs, shifts = [], []
    sides = [((lambda s: (s, -cw)), (0, -1)), ((lambda s: (s, W + cw)), (0, 1)),
             ((lambda s: (-cw, s)), (-1, 0)), ((lambda s: (L + cw, s)), (1, 0))]
    for edge, out in sides:
        # sample between the sights (sights every 1/8 of the length: WPA) so only the edge is in view
        fr = [0.1875, 0.3125, 0.6875, 0.8125] if out[1] else [0.125, 0.375, 0.625, 0.875]
        span = L if out[1] else W
        for s in np.array(fr) * span:
            p_in = np.array([*edge(s), h])
            q = cam.project([p_in])[0]
            # image direction of "outwards" at this point
            q2 = cam.project([p_in + [out[0] * 20.0, out[1] * 20.0, 0]])[0]
            n = (q2 - q) / np.linalg.norm(q2 - q)
            ts = np.arange(-4.0, 4.01, 0.25)
            pts = q[None, :] + ts[:, None] * n[None, :]
            prof = cv2.remap(img.astype(np.float32), pts[:, 0].astype(np.float32).reshape(1, -1),
                             pts[:, 1].astype(np.float32).reshape(1, -1), cv2.INTER_LINEAR)[0]
            lo, hi = np.median(prof[:6]), np.median(prof[-6:])
            half = (lo + hi) / 2
            k = np.nonzero((prof[:-1] - half) * (prof[1:] - half) <= 0)[0]
            assert len(k) >= 1, "no edge found"
            k = k[np.argmin(np.abs(ts[k]))]
            t_cross = ts[k] + (half - prof[k]) / (prof[k + 1] - prof[k]) * (ts[k + 1] - ts[k])
            errs.append(abs(t_cross))
            shifts.append(np.linalg.norm(undist.project([p_in])[0] - q))
    assert max(errs) < 0.3, errs
    assert max(shifts) > 3.0


def test_ray_field_interpolation_matches_exact_undistortion():
    """The cubic-spline ray lookup must agree with CameraModel.undistort_pixels to 1e-3 px."""
    cam = CameraModel.looking_down((1270, 635), 2500, 900, (640, 360), k1=-0.1, k2=0.02, pitch_deg=3)
    rf = RayField(cam)
    rng = np.random.default_rng(0)
    px = rng.uniform([0, 0], [639, 359], size=(500, 2))
    got = rf.normalised(px[:, 0], px[:, 1])
    exact = cam.undistort_pixels(px)
    assert np.max(np.abs(got - exact)) * 900 < 1e-3


# ----------------------------------------------------------------- orientation, noise
def test_orientation_integration_matches_scipy_rotation():
    """A constant spin omega for time t turns the ball by the rotation vector omega t
    (SciPy's Rotation.from_rotvec as the independent reference)."""
    from scipy.spatial.transform import Rotation

    w = np.array([[30.0, -12.0, 55.0], [0.0, 0.0, 0.0]])
    times = np.array([0.0, 0.013, 0.2, 0.5])
    Q = integrate_orientations(times, lambda t: np.broadcast_to(w[None], (len(t), 2, 3)), 2, 0.5)
    for k, t in enumerate(times):
        ref = Rotation.from_rotvec(w[0] * t).as_matrix()
        assert np.allclose(Q[k, 0], ref, atol=1e-9)
        assert np.allclose(Q[k, 1], np.eye(3), atol=1e-12)
    # continuing from an intermediate time gives the same rotation (block-wise rendering relies on it)
    Qa = integrate_orientations(np.array([0.2]), lambda t: np.broadcast_to(w[None], (len(t), 2, 3)), 2, 0.5)
    Qb = integrate_orientations(np.array([0.5]), lambda t: np.broadcast_to(w[None], (len(t), 2, 3)), 2, 0.5,
                                initial=Qa[0], t_start=0.2)
    assert np.allclose(Qb[0, 0], Rotation.from_rotvec(w[0] * 0.5).as_matrix(), atol=1e-9)


def test_frame_blocks_do_not_change_frames(monkeypatch):
    """Rendering in blocks of frames (memory bound) must give the same pixels as one block."""
    from feltlab.render import frames as F
    from feltlab.render import render_to_arrays

    sc = scenario_from_dict({
        "clip": {"fps": 100, "duration_s": 0.06, "resolution": [128, 72], "seed": 8},
        "camera": {"height_mm": 900, "fov_deg": 40, "aim_mm": [1000, 600]},
        "ball": [{"label": "yellow-stripe", "number": 9, "position_mm": [950, 600],
                  "strike": {"speed_mm_s": 800, "direction_deg": 10, "follow": 1.0, "side": 0.5}}],
    })
    whole = render_to_arrays(sc)
    monkeypatch.setattr(F, "FRAME_BLOCK", 2)
    parts = render_to_arrays(sc)
    assert whole.shape == parts.shape == (6, 72, 128, 3)
    assert np.abs(whole.astype(int) - parts).max() <= 1


def test_sensor_noise_matches_its_model():
    """Shot + read noise: sigma^2 = shot^2 * signal + read^2 (Poisson-Gaussian sensor model,
    e.g. Foi et al., IEEE TIP 17(10), 2008); sample std within 3 % for 60k samples per level."""
    cv2.setRNGSeed(5)
    for level in (0.05, 0.3, 0.8):
        img = np.full((100, 200, 3), level, np.float32)
        add_sensor_noise(img, 0.004, 0.02)
        assert img.std() == pytest.approx(math.sqrt(0.02 ** 2 * level + 0.004 ** 2), rel=0.03)
        assert abs(img.mean() - level) < 0.001


def test_strike_follow_one_is_rolling_without_slip():
    """follow = 1 must give natural roll: contact-point velocity v + omega x (-R z) = 0
    (rolling condition, classical rigid-body kinematics)."""
    sc = scenario_from_dict({"ball": [{"label": "cue", "position_mm": [600, 600],
                                       "strike": {"speed_mm_s": 1500, "direction_deg": 33, "follow": 1.0}}]})
    b = sc.balls[0]
    v = np.array([*b.velocity_mm_s, 0.0])
    w = np.array(b.spin_rad_s)
    slip = v + np.cross(w, [0, 0, -sc.preset.ball.radius_mm])
    assert np.linalg.norm(slip) < 1e-9
    assert np.linalg.norm(v) == pytest.approx(1500)


# ----------------------------------------------------------------- truth file + CLI
_MINI = """
[clip]
table = "pool-9ft"
fps = 120
duration_s = 0.1
resolution = [192, 108]
seed = 4
[camera]
height_mm = 2600
fov_deg = 65
k1 = -0.02
[physics]
e_ball_ball = 0.9
[[ball]]
label = "cue"
position_mm = [1100, 635]
velocity_mm_s = [2000, 0]
[[ball]]
label = "yellow"
number = 9
pattern = "stripe"
position_mm = [1300, 635]
"""


def test_truth_file_schema_and_contacts(tmp_path):
    """Truth file: fields, per-frame columns at t = t0 + k/fps, pixel columns equal to the
    camera's projection of the centre (z = R), contacts from the simulator (head-on, e 0.9:
    equal masses give v_b' = (1 + e) v / 2 -- closed form, REFERENCES.md)."""
    p = tmp_path / "mini.toml"
    p.write_text(_MINI)
    sc = load_scenario(p)
    out = tmp_path / "mini.mp4"
    render_scenario(sc, out)
    t = read_truth(tmp_path / "mini.truth.json")
    for key in ("fps", "n_frames", "t0_s", "exposure_s", "resolution", "table", "ball", "balls", "camera",
                "corners_px", "frames_t_s", "tracks", "contacts", "scenario", "seed", "codec"):
        assert key in t
    assert t["n_frames"] == 12 and len(t["frames_t_s"]) == 12
    assert np.allclose(t["frames_t_s"], np.arange(12) / 120.0)
    assert [b["label"] for b in t["balls"]] == ["cue", "yellow"]
    assert t["balls"][1]["pattern"] == "stripe" and t["balls"][1]["number"] == 9
    cam = CameraModel.from_dict(t["camera"])
    tr = t["tracks"]["cue"]
    px = cam.project(np.column_stack([tr["x_mm"], tr["y_mm"], np.full(12, R)]))
    assert np.allclose(px[:, 0], tr["x_px"], atol=1e-3) and np.allclose(px[:, 1], tr["y_px"], atol=1e-3)
    assert len(t["corners_px"]["cloth"]) == 4 and len(t["corners_px"]["ball_centre"]) == 4
    assert np.allclose(t["corners_px"]["cloth"][0], cam.project([[0, 0, 0]])[0], atol=1e-3)
    bb = [c for c in t["contacts"] if c["kind"] == "ball-ball"]
    assert len(bb) == 1
    vb = np.linalg.norm(bb[0]["vb_post"])
    va_pre = np.linalg.norm(bb[0]["va_pre"])
    assert vb == pytest.approx((1 + 0.9) * va_pre / 2, rel=1e-6)
    cap = cv2.VideoCapture(str(out))
    assert int(cap.get(cv2.CAP_PROP_FRAME_COUNT)) == 12
    assert (int(cap.get(cv2.CAP_PROP_FRAME_WIDTH)), int(cap.get(cv2.CAP_PROP_FRAME_HEIGHT))) == (192, 108)
    # no stray temporary files
    assert sorted(x.name for x in tmp_path.iterdir()) == ["mini.mp4", "mini.toml", "mini.truth.json"]


def test_cli_writes_clip_and_refuses_bad_input(tmp_path):
    from feltlab.cli import main

    p = tmp_path / "mini.toml"
    p.write_text(_MINI.replace("duration_s = 0.1", "duration_s = 0.04"))
    runner = CliRunner()
    out = tmp_path / "c.avi"
    res = runner.invoke(main, ["render", str(p), "--out", str(out), "--seed", "9", "--quiet"])
    assert res.exit_code == 0, res.output
    assert out.is_file() and (tmp_path / "c.truth.json").is_file()
    assert json.loads((tmp_path / "c.truth.json").read_text())["seed"] == 9
    # refuses to overwrite silently
    res = runner.invoke(main, ["render", str(p), "--out", str(out)])
    assert res.exit_code == 2 and "already exists" in res.output
    # missing scenario
    res = runner.invoke(main, ["render", str(tmp_path / "nope.toml"), "--out", str(tmp_path / "x.mp4")])
    assert res.exit_code == 2 and len(res.output.strip().splitlines()) == 1 and "not found" in res.output
    # invalid scenarios: one line each, nothing written
    for bad in (_MINI.replace("fps = 120", "fps = 5000"),
                _MINI.replace("[camera]", "[camera]\nzoom = 3"),
                _MINI.replace('position_mm = [1300, 635]', 'position_mm = [3000, 635]'),
                _MINI.replace("[192, 108]", "[193, 108]"),  # MPEG-4 needs even sizes
                "[clip\nfps=1"):
        p.write_text(bad)
        res = runner.invoke(main, ["render", str(p), "--out", str(tmp_path / "bad.mp4")])
        assert res.exit_code == 2, res.output
        assert len(res.output.strip().splitlines()) == 1
        assert not (tmp_path / "bad.mp4").exists() and not (tmp_path / "bad.truth.json").exists()


def test_bundled_scenarios_load():
    files = [p for p in sorted(CLIPS.glob("bench_*.toml")) + sorted(CLIPS.glob("drill_*.toml"))
             if not p.name.endswith(".calibration.toml")]  # a clip's manual calibration, not a scenario
    assert files, "clips/*.toml missing"
    for f in files:
        sc = load_scenario(f)
        assert sc.balls and 1.0 <= sc.duration_s <= 2.5


def test_scenario_errors_are_feltlab_errors():
    with pytest.raises(FeltlabError, match="label"):
        scenario_from_dict({"ball": [{"label": "cue", "position_mm": [600, 600]},
                                     {"label": "cue", "position_mm": [900, 600]}]})
    with pytest.raises(FeltlabError, match="colour name"):
        scenario_from_dict({"ball": [{"label": "teal", "position_mm": [600, 600]}]})


def test_varied_scenarios_are_valid_and_produce_a_hit():
    """The randomised generator gives scenarios the schema accepts (round trip through
    scenario_from_dict) and shots in which the cue ball reaches the object ball."""
    from feltlab.render import simulate_scenario
    from feltlab.render.variety import varied_scenario

    looks = set()
    for seed in range(6):
        sc = varied_scenario(seed, resolution=(160, 90), duration_s=0.6)
        sim = simulate_scenario(sc)
        assert any(c.kind == "ball-ball" for c in sim.contacts), seed
        looks.add((sc.table, sc.lighting.cloth_rgb, round(sc.camera.k1, 3)))
        d = sc.to_dict()
        doc = {"clip": {k: d[k] for k in ("table", "fps", "duration_s", "resolution", "exposure", "seed")},
               "camera": {k: v for k, v in d["camera"].items() if k != "aim_mm"} | {"aim_mm": list(d["camera"]["aim_mm"])},
               "ball": [{"label": b["label"], "rgb": list(b["rgb"]), "pattern": b["pattern"], "number": b["number"],
                         "position_mm": list(b["position_mm"]), "velocity_mm_s": list(b["velocity_mm_s"]),
                         "spin_rad_s": list(b["spin_rad_s"])} for b in d["balls"]]}
        assert len(scenario_from_dict(doc).balls) == len(sc.balls)
    assert len(looks) == 6


def test_flicker_gain_is_the_mean_light_over_the_exposure():
    """Lamp output 1 - d (1 - cos(2 pi f t)) / 2 averaged over the shutter interval,
    checked against numerical integration (scipy.integrate.quad)."""
    from scipy.integrate import quad

    from feltlab.render.effects import flicker_gain

    d, f = 0.2, 100.0
    for t, e in ((0.0123, 0.004), (0.5, 0.001), (0.031, 0.0)):
        if e > 0:
            ref = quad(lambda s: 1 - d * (1 - math.cos(2 * math.pi * f * s)) / 2, t - e / 2, t + e / 2)[0] / e
        else:
            ref = 1 - d * (1 - math.cos(2 * math.pi * f * t)) / 2
        assert flicker_gain(t, e, d, f) == pytest.approx(ref, rel=1e-9)


def test_rack_scenarios_are_tight_triangles_and_get_broken():
    """rack_scenario: the object balls form a triangle of touching balls (each interior
    neighbour pair exactly 2R + gap apart: plane geometry of a triangular packing,
    3 neighbours per inner ball), none overlapping, and the simulated cue ball hits
    the apex ball within the first half of the clip."""
    from scipy.spatial.distance import pdist

    from feltlab.render import simulate_scenario
    from feltlab.render.variety import rack_scenario

    for seed in (1, 2):
        sc = rack_scenario(seed, resolution=(160, 90), n_balls=12, gap_mm=0.3, duration_s=1.0)
        R = sc.preset.ball.radius_mm
        P = np.array([b.position_mm for b in sc.balls if b.label != "cue"])
        assert len(P) == 12 and len({b.label for b in sc.balls}) == 13
        d = pdist(P)
        assert d.min() == pytest.approx(2 * R + 0.3, abs=1e-6)
        # four full rows: 3 n (n - 1) / 2 = 18 neighbour pairs (triangular lattice of side
        # n = 4); the two balls of row five add 1 + 2 pairs with row four and 1 with each other
        assert int(np.sum(np.abs(d - (2 * R + 0.3)) < 1e-6)) == 22
        sim = simulate_scenario(sc)
        first = min(c.t_s for c in sim.contacts if c.kind == "ball-ball")
        assert first < 0.5 * sc.duration_s
