"""A fit that wanders off the table is refused as a wrong fit, not as a cushion cut by the frame.

The "runs along or off the edge of the picture" refusal (tests/test_calib_frame_edge.py) reads noses lost past
the frame's edge as a cushion that the frame cuts. A later pass follows the previous pass's fitted line, so when
that fit took a wrong line (a rail, or a compression edge for a faint nose) its lines can leave the picture although
the cushion is well inside it: our sweep render f04h (H.264 crf 32, carom table, y0 nose 75-85 px inside a 720 px
frame; the first pass's y0 line was taken 21 px out, on the cushion's outer edge) was refused as "y0 runs along or
off the edge". Only a first pass (across the cloth region's own outline, before any fit) that loses noses off the
picture may say so.

Reference: a ray-cast plain table (tests/test_calibrate.render_table, rays from OpenCV's undistortPoints) seen by
a known camera, its near cushion inside the frame by construction (checked by projecting it). The refinement
passes' profile search is made to report what a fit moved off the picture leaves: no nose points on y0 and 20
profiles whose cushion top runs past the frame. Scenario our own; seeds chosen before running.
"""
from __future__ import annotations

import numpy as np
import pytest

import tracking.calibrate as tcal
from feltlab.errors import FeltlabError
from feltlab.standards import table_preset
from test_calibrate import render_table
from tracking._camera_fit import SIDE_ORDER
from tracking.camera import CameraModel

POOL9 = table_preset("pool-9ft")


def _frames():
    L, W = POOL9.length_mm, POOL9.width_mm
    cam = CameraModel.looking_down((L / 2, W / 2), 2500, 760, (960, 540), roll_deg=0.5, pitch_deg=0.0,
                                   yaw_deg=0.3, k1=-0.05)
    return cam, [render_table(cam, POOL9, (60, 120, 40), face="vertical", seed=71 + i, noise=3.0) for i in range(3)]


def _lose_y0_off_frame(monkeypatch, first_pass_too: bool):
    """The profile search loses y0's noses off the picture in the refinement passes (and in the first, if asked)."""
    orig = tcal.edge_points_along
    calls = {"refine": 0}

    def edges(gray, p0, *args, **kw):
        found, strength, band = orig(gray, p0, *args, **kw)
        first = p0 is not None
        if first:  # y0 is the near side here: its outward normal points down the image
            side = "y0" if np.dot(args[1], [0.0, 1.0]) > 0.7 else None
        else:  # the refinement passes profile the sides in SIDE_ORDER
            side = SIDE_ORDER[calls["refine"] % 4]
            calls["refine"] += 1
        if side == "y0" and (not first or first_pass_too):
            if kw.get("stats") is not None:
                kw["stats"]["off_frame"] = 20
            return found[:0], strength[:0], band[:0]
        return found, strength, band

    monkeypatch.setattr(tcal, "edge_points_along", edges)


def test_near_cushion_inside_the_frame():
    cam, _ = _frames()
    L = POOL9.length_mm
    near = cam.project([[x, -50.0, 36.5] for x in np.linspace(0.2 * L, 0.8 * L, 5)])[:, 1]  # cushion top, 50 mm out
    assert near.max() < 540 - 40, near


def test_noses_lost_off_frame_only_after_a_fit_are_a_wrong_fit(monkeypatch):
    _, frames = _frames()
    _lose_y0_off_frame(monkeypatch, first_pass_too=False)
    with pytest.raises(FeltlabError) as err:
        tcal.calibrate_auto(frames, POOL9)
    msg = str(err.value)
    assert "side(s) y0 moved off the picture although the first look found that cushion inside it" in msg, msg
    assert "runs along or off the edge" not in msg, msg
    assert getattr(err.value, "kind", None) == "fit"


def test_noses_lost_off_frame_from_the_first_look_are_a_cut_cushion(monkeypatch):
    _, frames = _frames()
    _lose_y0_off_frame(monkeypatch, first_pass_too=True)
    with pytest.raises(FeltlabError, match=r"side\(s\) y0 runs along or off the edge of the picture"):
        tcal.calibrate_auto(frames, POOL9)
