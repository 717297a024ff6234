"""Sweep options of the clip generators change one condition and keep the rest of the seed's scene.

feltlab/render/variety.py (``apply_overrides``, ``whole``) and scripts/mujoco_scene.py
(``apply_overrides``). The framing check projects the table corners with OpenCV's own
``cv2.projectPoints`` (independent of our camera code) from the scenario camera's K, R, t, dist.
Ball-set facts (common practice): snooker balls are plain (no stripes, no numbers) and a
carom set is three balls, two of them white.
"""
from __future__ import annotations

import sys
from pathlib import Path

import cv2
import numpy as np

from feltlab.render import camera_for
from feltlab.render.variety import CLOTH_NAMES, apply_overrides, rack_scenario, varied_scenario

ROOT = Path(__file__).resolve().parents[1]
SEEDS = [6101, 6102, 6103, 6104, 6105, 6106]   # chosen before running


def _corners_px(sc) -> np.ndarray:
    cam = camera_for(sc)
    L, W = sc.preset.length_mm, sc.preset.width_mm
    P = np.array([[0, 0, 0], [L, 0, 0], [L, W, 0], [0, W, 0]], float).reshape(-1, 1, 3)
    rvec, _ = cv2.Rodrigues(np.asarray(cam.R, float))
    uv, _ = cv2.projectPoints(P, rvec, np.asarray(cam.t, float), np.asarray(cam.K, float),
                              np.asarray(cam.dist, float).ravel())
    return uv.reshape(-1, 2)


def test_whole_puts_every_table_corner_in_the_picture_and_keeps_the_shot():
    for s in SEEDS:
        drawn = varied_scenario(s, resolution=(1280, 720))
        whole = varied_scenario(s, resolution=(1280, 720), whole=True)
        uv = _corners_px(whole)
        assert np.all((uv[:, 0] > 0) & (uv[:, 0] < 1279) & (uv[:, 1] > 0) & (uv[:, 1] < 719)), (s, uv)
        assert [(b.label, b.position_mm, b.velocity_mm_s) for b in drawn.balls] == \
               [(b.label, b.position_mm, b.velocity_mm_s) for b in whole.balls]
        assert drawn.table == whole.table and drawn.fps == whole.fps
    rack = rack_scenario(SEEDS[0], resolution=(1280, 720), whole=True)
    uv = _corners_px(rack)
    assert np.all((uv[:, 0] > 0) & (uv[:, 0] < 1279) & (uv[:, 1] > 0) & (uv[:, 1] < 719))


def test_overrides_change_only_what_they_name():
    base = varied_scenario(SEEDS[1], resolution=(640, 360), tables=("pool-9ft",))
    sc = apply_overrides(varied_scenario(SEEDS[1], resolution=(640, 360), tables=("pool-9ft",)),
                         cloth="grey", lamps=3, light=0.5, k1=-0.3, tilt_deg=4.0, noise=2.0)
    assert sc.lighting.cloth_rgb == CLOTH_NAMES["grey"]
    assert len(sc.lighting.lamps) == 3
    assert sc.effects.brightness == base.effects.brightness * 0.5
    assert (sc.camera.k1, sc.camera.k2, sc.camera.pitch_deg) == (-0.3, 0.0, 4.0)
    assert sc.effects.read_noise == 2 * base.effects.read_noise
    assert [(b.label, b.position_mm) for b in sc.balls] == [(b.label, b.position_mm) for b in base.balls]
    assert (sc.camera.height_mm, sc.camera.roll_deg) == (base.camera.height_mm, base.camera.roll_deg)


def test_ball_sets():
    sn = apply_overrides(varied_scenario(SEEDS[2], resolution=(640, 360), tables=("snooker",), n_balls=6),
                         ball_set="snooker")
    assert all(b.pattern == "solid" and b.number == 0 for b in sn.balls)
    assert sn.balls[0].label == "cue" and sn.balls[1].label == "red"
    assert len({b.label for b in sn.balls}) == len(sn.balls)
    ca = apply_overrides(varied_scenario(SEEDS[3], resolution=(640, 360), tables=("carom",), n_balls=3),
                         ball_set="carom")
    assert [b.label for b in ca.balls] == ["cue", "red", "white"]
    assert sum(tuple(b.rgb) == tuple(ca.balls[0].rgb) for b in ca.balls) == 2   # two white balls


def test_mujoco_scene_overrides_keep_the_draw(tmp_path):
    sys.path.insert(0, str(ROOT / "scripts"))
    import mujoco_scene as ms

    a = ms.draw_scene(SEEDS[4])
    b = ms.apply_overrides(ms.draw_scene(SEEDS[4]), cloth="grey", ball_set="carom", k1=-0.2, lamps=2, light=0.5,
                           cushion_shade=0.95)
    assert b.cloth_rgb == ms.SWEEP_CLOTHS["grey"] and b.camera.k1 == -0.2 and len(b.lamps) == 2
    assert [x.colour for x in b.balls[1:]] == [c for c, _ in ms.CAROM][:len(b.balls) - 1]
    assert [x.pos_mm for x in b.balls] == [x.pos_mm for x in a.balls[:3]]
    assert np.allclose(b.camera.R, a.camera.R) and b.fps == a.fps
    xml = ms.build_mjcf(b, tmp_path, (64, 36))
    assert f'name="cushion" rgba="{ms._rgba(tuple(int(v * 0.95) for v in b.cloth_rgb))}"' in xml
