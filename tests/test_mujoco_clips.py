"""The independent MuJoCo footage generator (scripts/make_mujoco_clips.py) writes self-consistent truth.

MuJoCo is optional: the script runs under the interpreter named by FELTLAB_MUJOCO_PYTHON (default:
this one); the tests skip when that interpreter cannot import mujoco + cv2 or cannot open an
offscreen GL context (MUJOCO_GL=egl by default).

Checks, each against something outside the generator:
* the truth pixels are OpenCV's own ``cv2.projectPoints`` of the truth positions with the truth
  camera (independent re-projection), and they land on the rendered balls (blob centroid in the
  decoded video within a quarter ball radius);
* a ball-ball contact conserves table-plane linear momentum (Newton's third law; handbook closed
  form) to within the cloth-friction impulse during ~0.3 ms, and e lies in 0 < e < 1.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

cv2 = pytest.importorskip("cv2")

ROOT = Path(__file__).resolve().parents[1]
SCRIPT = ROOT / "scripts" / "make_mujoco_clips.py"
PY = os.environ.get("FELTLAB_MUJOCO_PYTHON", sys.executable)
ENV = {**os.environ, "MUJOCO_GL": os.environ.get("MUJOCO_GL", "egl")}
PROBE = ("import mujoco, cv2\n"
         "m = mujoco.MjModel.from_xml_string('<mujoco><worldbody><geom type=\"sphere\" size=\"1\"/></worldbody></mujoco>')\n"
         "r = mujoco.Renderer(m, 32, 32); r.update_scene(mujoco.MjData(m)); r.render()\n")


@pytest.fixture(scope="module")
def mujoco_python():
    try:
        p = subprocess.run([PY, "-c", PROBE], env=ENV, capture_output=True, text=True, timeout=120)
    except (OSError, subprocess.TimeoutExpired) as exc:
        pytest.skip(f"no MuJoCo interpreter: {exc}")
    if p.returncode != 0:
        pytest.skip("mujoco/cv2 not importable or no offscreen GL: " + (p.stderr.strip().splitlines() or ["?"])[-1])
    return PY


def _run(py, *args):
    p = subprocess.run([py, str(SCRIPT), *args], env=ENV, capture_output=True, text=True, timeout=900)
    assert p.returncode == 0, p.stderr[-2000:]


def test_truth_pixels_land_on_rendered_balls(mujoco_python, tmp_path):
    _run(mujoco_python, str(tmp_path), "--seeds", "4242", "--duration", "0.4", "--fps", "60",
         "--size", "1280x720", "--max-subframes", "3")
    truth = json.loads((tmp_path / "mj4242.truth.json").read_text())
    cam = truth["camera"]
    K, dist = np.array(cam["K"]), np.array(cam["dist_coeffs"])
    R, t = np.array(cam["R_world_to_cam_opencv"]), np.array(cam["t_world_to_cam_m"])
    rvec, _ = cv2.Rodrigues(R)
    r_mm = truth["ball"]["diameter_mm"] / 2
    cap = cv2.VideoCapture(str(tmp_path / "mj4242.mp4"))
    frames = []
    while True:
        ok, im = cap.read()
        if not ok:
            break
        frames.append(im)
    assert len(frames) == truth["n_frames"] == 24
    assert list(frames[0].shape[1::-1]) == truth["resolution"]
    cloth = np.array(truth["table"]["cloth_rgb"][::-1], float)
    checked = 0
    for b in truth["balls"]:
        bid = b["id"]
        P = np.array(truth["frames"]["positions_mm"][bid], float)
        uv_truth = np.array(truth["frames"]["pixels"][bid], float)
        # 1) independent re-projection (z = R: centre height; the sim ball sinks < 0.05 mm)
        Pw = np.column_stack([P, np.full(len(P), r_mm)]) / 1000.0
        uv_cv, _ = cv2.projectPoints(Pw.reshape(-1, 1, 3), rvec, t, K, dist)
        assert np.max(np.abs(uv_cv.reshape(-1, 2) - uv_truth)) < 0.05
        if max(b["rgb"]) < 60:   # a black ball against dark cloth: no reliable colour blob
            continue
        rad_px = K[0, 0] * r_mm / 1000.0 / float(t[2])   # rough ball radius in px
        for k in (0, 12, 23):
            u, v = uv_truth[k]
            x0, y0 = int(u - 2 * rad_px), int(v - 2 * rad_px)
            win = frames[k][y0:y0 + int(4 * rad_px) + 1, x0:x0 + int(4 * rad_px) + 1].astype(float)
            # ball pixels: far from the cloth colour and not darker than it (excludes the cast shadow)
            dist_c = np.linalg.norm(win - cloth, axis=2)
            mask = (dist_c > 45) & (win.sum(axis=2) > cloth.sum() * 0.9)
            n_lab, lab, stats, cents = cv2.connectedComponentsWithStats(mask.astype(np.uint8))
            assert n_lab > 1, f"no ball blob at the truth pixel of {bid} frame {k}"
            j = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
            cu, cvv = cents[j][0] + x0, cents[j][1] + y0
            assert np.hypot(cu - u, cvv - v) < 0.25 * rad_px, (bid, k, cu, cvv, u, v)
            checked += 1
    assert checked >= 6


def test_ball_ball_contact_conserves_momentum(mujoco_python, tmp_path):
    _run(mujoco_python, str(tmp_path), "--seeds", "4243", "--duration", "1.6", "--fps", "120", "--truth-only")
    truth = json.loads((tmp_path / "mj4243.sim.json").read_text())
    bb = [c for c in truth["contacts"] if c["kind"] == "ball-ball" and c["required"]]
    assert bb, "the shot check guarantees a cue-object contact"
    for c in bb:
        a, b = c["ball_a"], c["ball_b"]
        p_pre = np.add(c["pre"][a]["v_mm_s"][:2], c["pre"][b]["v_mm_s"][:2])
        p_post = np.add(c["post"][a]["v_mm_s"][:2], c["post"][b]["v_mm_s"][:2])
        # cloth friction mu g t on each ball over the contact: 0.2 * 9807 mm/s^2 * <1 ms < 2 mm/s per ball
        assert np.linalg.norm(p_post - p_pre) < 5.0 + 0.002 * np.linalg.norm(p_pre)
        assert 0.0 < c["e"] < 1.0
        assert abs(c["vn_rel_pre_mm_s"]) > 0 and c["vn_rel_pre_mm_s"] < 0 < c["vn_rel_post_mm_s"]
    assert any(c["kind"] == "ball-cushion" and c["required"] for c in truth["contacts"])
