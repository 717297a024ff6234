"""A lens field of view given by the user, where the picture does not fix the camera height.

A near-overhead view without visible cushion faces fixes only focal / height
(a plane seen square-on), so calibrate_auto falls back on an assumed field of
view; a lens data sheet's horizontal field of view replaces it. References,
outside the calibration code:

* a ray-cast plain table (tests/test_calibrate.render_table, rays from
  OpenCV's undistortPoints) seen by a known camera; truth corners projected
  with OpenCV's own ``cv2.projectPoints``;
* the pinhole relation between focal length and horizontal field of view,
  hfov = 2 atan(w / 2f) (Hartley & Zisserman, Multiple View Geometry, ch. 6;
  from memory).

Scenario (a 45 deg lens over a pool-9ft table, our own) and seeds chosen
before running.
"""
from __future__ import annotations

import math
import tomllib

import cv2
import numpy as np
import pytest

from feltlab.errors import FeltlabError
from feltlab.standards import table_preset
from test_calibrate import render_table
from tracking.calibrate import calibrate_auto, calibration_from_file, check_hfov_deg, save_calibration
from tracking.camera import CameraModel

POOL9 = table_preset("pool-9ft")
SIZE = (1000, 600)
HFOV = 45.0  # far from the assumed 60 deg


def _focal(hfov_deg: float, w: int) -> float:
    return w / 2.0 / math.tan(math.radians(hfov_deg) / 2.0)


def _cv_corners(cam: CameraModel, z: float) -> np.ndarray:
    L, W = POOL9.length_mm, POOL9.width_mm
    obj = np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]], np.float64)
    rvec, _ = cv2.Rodrigues(cam.R)
    px, _ = cv2.projectPoints(obj, rvec, cam.t.astype(np.float64), cam.K, cam.dist)
    return px.reshape(-1, 2)


@pytest.fixture(scope="module")
def narrow_view():
    f = _focal(HFOV, SIZE[0])
    L, W = POOL9.length_mm, POOL9.width_mm
    cam = CameraModel.looking_down((L / 2, W / 2), f * L / (0.85 * SIZE[0]), f, SIZE, roll_deg=0.6,
                                   pitch_deg=-1.5, yaw_deg=0.8, k1=-0.03)
    balls = [(0.3 * L, 0.4 * W, (235, 235, 235)), (0.65 * L, 0.7 * W, (30, 200, 230))]
    frames = [render_table(cam, POOL9, (150, 80, 25), face="none", balls=balls, seed=71 + i) for i in range(2)]
    return cam, frames


def test_given_field_of_view_sets_the_cloth_plane(narrow_view):
    cam, frames = narrow_view
    truth = _cv_corners(cam, 0.0)
    assumed = calibrate_auto(frames, POOL9)
    given = calibrate_auto(frames, POOL9, hfov_deg=HFOV)
    assert assumed.camera.meta["hfov_source"] == "assumed"
    assert any("assumed" in n and "--hfov" in n for n in assumed.notes), assumed.notes
    assert given.camera.meta["hfov_source"] == "given"
    assert any("from the given 45 deg" in n for n in given.notes), given.notes
    assert not any("assumed" in n for n in given.notes)
    hfov_fit = math.degrees(2 * math.atan(SIZE[0] / 2 / given.camera.K[0, 0]))
    assert hfov_fit == pytest.approx(HFOV, abs=1.0)
    err_assumed = np.linalg.norm(assumed.camera.project(_cv_corners_obj(0.0)) - truth, axis=1).max()
    err_given = np.linalg.norm(given.camera.project(_cv_corners_obj(0.0)) - truth, axis=1).max()
    # the assumed 60 deg puts the cloth corners off by over a pixel; the lens's own value within 0.6 px
    assert err_assumed > 1.0, err_assumed
    assert err_given < 0.6, err_given


def _cv_corners_obj(z: float) -> np.ndarray:
    L, W = POOL9.length_mm, POOL9.width_mm
    return np.array([[0, 0, z], [L, 0, z], [L, W, z], [0, W, z]], float)


@pytest.mark.parametrize("value", [0, -30, 179.9, 400, float("nan"), float("inf"), "wide", 1.05])
def test_nonsense_field_of_view_is_one_clear_line(value):
    with pytest.raises(FeltlabError, match="in degrees") as exc:
        check_hfov_deg(value)
    assert "\n" not in str(exc.value)
    with pytest.raises(FeltlabError, match="in degrees"):
        calibrate_auto([np.zeros((64, 64, 3), np.uint8)], POOL9, hfov_deg=value)


def test_plausible_field_of_view_passes():
    assert check_hfov_deg("62") == 62.0 and check_hfov_deg(5) == 5.0


def _manual(tmp_path, extra: str):
    cam = CameraModel.looking_down((1270, 635), 3000, _focal(58.0, 1280), (1280, 720), roll_deg=-0.8,
                                   pitch_deg=2.5, yaw_deg=1.0)
    px = cam.project(_cv_corners_obj(0.0))
    rows = ", ".join("[%.4f, %.4f]" % tuple(r) for r in px)
    p = tmp_path / "cal.toml"
    p.write_text(f'table = "pool-9ft"\nimage_size = [1280, 720]\ncorners_px = [{rows}]\n'
                 f'corners_plane = "cloth"\n{extra}')
    return cam, p


def test_manual_corners_take_hfov_deg_as_the_focal(tmp_path):
    cam, p = _manual(tmp_path, "hfov_deg = 58.0\n")
    cal = calibration_from_file(p)
    # pinhole: f = (w / 2) / tan(hfov / 2)
    assert cal.camera.K[0, 0] == pytest.approx(1280 / 2 / math.tan(math.radians(29.0)), rel=1e-9)
    assert cal.camera.meta["hfov_source"] == "given"
    assert cal.camera.centre_mm == pytest.approx(cam.centre_mm, abs=1.0)
    # the same from the caller (the command line's option)
    _, p2 = _manual(tmp_path, "")
    assert calibration_from_file(p2, hfov_deg=58.0).camera.K[0, 0] == pytest.approx(cal.camera.K[0, 0], rel=1e-9)


@pytest.mark.parametrize("extra,given,match", [
    ("hfov_deg = 0.9\n", None, "hfov_deg: .*in degrees"),
    ("hfov_deg = 58.0\nfocal_px = 900\n", None, "disagree"),
    ("hfov_deg = 58.0\n", 70.0, "differs from the given"),
])
def test_manual_field_of_view_errors(tmp_path, extra, given, match):
    _, p = _manual(tmp_path, extra)
    with pytest.raises(FeltlabError, match=match) as exc:
        calibration_from_file(p, hfov_deg=given)
    assert "\n" not in str(exc.value) and str(exc.value).startswith("cal.toml")


def test_saved_file_states_field_of_view_and_source(tmp_path):
    _, p = _manual(tmp_path, "hfov_deg = 58.0\n")
    cal = calibration_from_file(p)
    out = save_calibration(cal, tmp_path / "saved" / "calibration.toml")
    d = tomllib.loads(out.read_text())
    f = d["camera"]["K"][0][0]
    assert d["hfov_deg"] == pytest.approx(math.degrees(2 * math.atan(1280 / 2 / f)), abs=1e-3)
    assert d["hfov_deg"] == pytest.approx(58.0, abs=1e-3)
    assert d["hfov_source"] == "given"
    back = calibration_from_file(out, hfov_deg=58.2)  # a saved camera agreeing to 0.5 deg loads
    assert back.camera.K[0, 0] == pytest.approx(f)
    with pytest.raises(FeltlabError, match="drop the field of view or calibrate again"):
        calibration_from_file(out, hfov_deg=64.0)


def test_cli_hfov_option(narrow_view, tmp_path):
    """`feltlab calibrate --hfov`: a nonsense value is one line and exit 2 with nothing written; a good one
    is used and stated in calibration.toml."""
    from click.testing import CliRunner

    from feltlab.cli import main

    _, frames = narrow_view
    clip = tmp_path / "shot"
    clip.mkdir()
    for i, im in enumerate(frames):
        cv2.imwrite(str(clip / f"{i:04d}.png"), im)
    r = CliRunner().invoke(main, ["calibrate", str(clip), "--hfov", "0.8", "--out", str(tmp_path / "bad")])
    assert r.exit_code == 2 and "--hfov" in r.output and "in degrees" in r.output
    assert not (tmp_path / "bad").exists()
    r = CliRunner().invoke(main, ["calibrate", str(clip), "--table", "pool-9ft", "--hfov", "45",
                                  "--out", str(tmp_path / "ok"), "--frames", "2"])
    assert r.exit_code == 0, r.output
    d = tomllib.loads((tmp_path / "ok" / "calibration.toml").read_text())
    assert d["hfov_source"] == "given" and d["hfov_deg"] == pytest.approx(HFOV, abs=1.0)
    r = CliRunner().invoke(main, ["analyze", str(clip), "--hfov", "200", "--out", str(tmp_path / "an")])
    assert r.exit_code == 2 and "--hfov" in r.output
    assert not (tmp_path / "an").exists()


def test_cli_hfov_refused_by_track_and_batch(narrow_view, tmp_path):
    """`feltlab track` and `feltlab batch` take the same --hfov: a nonsense value is one line, exit 2, nothing
    written (the check is the same closed range as calibrate's)."""
    from click.testing import CliRunner

    from feltlab.cli import main

    _, frames = narrow_view
    clip = tmp_path / "clips" / "shot"
    clip.mkdir(parents=True)
    for i, im in enumerate(frames[:2]):
        cv2.imwrite(str(clip / f"{i:04d}.png"), im)
    for args in (["track", str(clip), "--hfov", "nan", "--out", str(tmp_path / "tr")],
                 ["batch", str(tmp_path / "clips"), "--hfov", "-5", "--fps", "60", "--out", str(tmp_path / "ba")]):
        r = CliRunner().invoke(main, args)
        assert r.exit_code == 2, (args[0], r.output)
        assert "--hfov" in r.output and "in degrees" in r.output
        assert len(r.output.strip().splitlines()) == 1, r.output
        assert not (tmp_path / args[-1].rsplit("/", 1)[-1]).exists()
